//! Example firmware for an STM32F401 (for instance a "Black Pill" board): a 24 V valve coil on a
//! low-side MOSFET driven by TIM1 channel 1 (PA8) at 20 kHz, the supply sensed on PA0 through an
//! 11:1 divider by ADC1, everything routed through coilward's guard. The valve is pulled in, held
//! at its hold current, and released every two seconds.
//!
//! It cannot run here; the test command builds it for `thumbv7em-none-eabihf`. On a board, the
//! period loop belongs in TIM1's update interrupt; it is a paced loop here to stay short.
#![no_std]
#![no_main]

use coilward::{
    ClampPath, CoilParams, ControlParams, Guard, GuardLimits, GuardedPwm, HoldPhase, Params,
    PullInHold, SupplyParams, SupplySense, SwitchParams,
};
use cortex_m_rt::entry;
use panic_halt as _;
use stm32f4xx_hal::adc::Adc;
use stm32f4xx_hal::adc::config::{AdcConfig, SampleTime};
use stm32f4xx_hal::{pac, prelude::*};

/// The HSI clock the timer and CPU run from after reset, Hz.
const CLOCK_HZ: u32 = 16_000_000;
/// Control period: 20 kHz.
const PERIOD_CYCLES: u32 = CLOCK_HZ / 20_000;

#[entry]
fn main() -> ! {
    let Some(dp) = pac::Peripherals::take() else {
        loop {
            cortex_m::asm::nop();
        }
    };
    let mut rcc = dp.RCC.constrain();
    let gpioa = dp.GPIOA.split(&mut rcc);

    // TIM1 CH1 on PA8, 20 kHz; its counts are the duty resolution the model is told about.
    let (_manager, (ch1, ..)) = dp.TIM1.pwm_hz(20.kHz(), &mut rcc);
    let mut ch1 = ch1.with(gpioa.pa8);
    let counts = u32::from(ch1.get_max_duty()).max(1);
    ch1.set_duty(0);
    ch1.enable();

    // Supply: PA0 through an 11:1 divider, 12-bit ADC on 3.3 V.
    let supply_pin = gpioa.pa0.into_analog();
    let mut adc = Adc::new(dp.ADC1, true, AdcConfig::default(), &mut rcc);

    let params = Params::new(
        SupplyParams::new(24.0, 18.0, 30.0),
        CoilParams::new(0.040, 18.0),
        SwitchParams::new(0.05, 60.0),
        ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05,
        },
        ControlParams::new(50e-6, counts, 2.0),
    );
    let mut limits = GuardLimits::new(1.2, 1.4, 0.05);
    limits.clamp_pulse_energy = Some(0.05);
    let (Ok(guard), Ok(sense)) = (
        Guard::new(&params, &limits),
        SupplySense::new(3.3 * 11.0 / 4095.0, 0.0),
    ) else {
        // A configuration the library refuses: leave the output off.
        loop {
            cortex_m::asm::nop();
        }
    };
    let Ok(plan) = PullInHold::new(guard.model(), 1.0, 0.03, 0.45) else {
        loop {
            cortex_m::asm::nop();
        }
    };
    let mut pwm = GuardedPwm::new(&guard, guard.start_after_reset(), ch1);
    let mut phase = HoldPhase::default();

    let mut period: u32 = 0;
    loop {
        let supply = sense.volts(adc.convert(&supply_pin, SampleTime::Cycles_28));
        // Two seconds on, one off.
        let on = period % 60_000 < 40_000;
        if period.is_multiple_of(60_000) {
            phase = HoldPhase::default();
        }
        let wanted = if on {
            plan.duty(guard.model(), &mut phase, pwm.state().current(), supply)
        } else {
            0
        };
        // The write cannot fail on this HAL (its error type is Infallible).
        let _ = pwm.period(wanted, supply);
        period = period.wrapping_add(1);
        cortex_m::asm::delay(PERIOD_CYCLES);
    }
}
