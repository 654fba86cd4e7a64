//! Example firmware for an RP2040 (Cortex-M0+, for instance a Raspberry Pi Pico): a 24 V valve
//! coil on a low-side MOSFET driven by PWM slice 0, channel A (GPIO0), the supply sensed on
//! GPIO26 (ADC0) through an 11:1 divider, everything routed through coilward's guard from the
//! slice's wrap interrupt on core 0 (core 1 is left free). The valve is pulled in, held at its
//! hold current and released, over and over (two seconds on, one off).
//!
//! It cannot run here; the test command builds it for `thumbv6m-none-eabi`.
//!
//! # How it keeps time
//! - The system clock is 125 MHz from the 12 MHz crystal. The slice counts 25 000 clocks per
//!   200 µs period (5 kHz); its compare register is double-buffered and latched at the wrap,
//!   so a duty written in the wrap interrupt applies to the whole of the next period, the period
//!   the guard's output is for.
//! - The wrap interrupt is the guard's tick, once per period at the period's start.
//! - The ADC converts GPIO26 free-running (a conversion every 2 µs); the tick reads the latest.
//! - Why 5 kHz and not 20: on a Cortex-M0+ a 64-bit product is a library call, and the tick
//!   costs about 2 200 instructions settled, 4 900 at a new duty and 132 000 when limiting
//!   (`cargo xtask target-bench`, M0). At 5 kHz the first two fit a period with room to spare;
//!   limiting does not fit even here, so the hold plan asks for less than the ceiling allows and
//!   the guard does not limit in normal operation (a late tick lets the guard fall behind the
//!   coil: see the timing contract in the `Guard` documentation).
#![no_std]
#![no_main]

use panic_halt as _;

#[path = "../../demo/valve.rs"]
mod valve;

/// The second-stage bootloader for the board's QSPI flash (a generic one, 03h reads).
#[unsafe(link_section = ".boot2")]
#[used]
pub static BOOT2: [u8; 256] = rp2040_boot2::BOOT_LOADER_GENERIC_03H;

#[rtic::app(device = rp2040_hal::pac, peripherals = true)]
mod app {
    use crate::valve::{self, Channel, halt};
    use coilward::Guard;
    use embedded_hal::pwm::SetDutyCycle;
    use rp2040_hal::adc::{Adc, AdcPin};
    use rp2040_hal::clocks::init_clocks_and_plls;
    use rp2040_hal::gpio::Pins;
    use rp2040_hal::pwm::{FreeRunning, Pwm0, Slice, Slices};
    use rp2040_hal::{Sio, Watchdog};

    /// The Pico's crystal, Hz.
    const XTAL_HZ: u32 = 12_000_000;
    /// Slice clocks per PWM period: 125 MHz / 5 kHz.
    const COUNTS: u16 = 25_000;
    /// PWM periods a second.
    const RATE: u32 = 5_000;

    #[shared]
    struct Shared {}

    #[local]
    struct Local {
        pwm: Slice<Pwm0, FreeRunning>,
        adc: Adc,
        guard: Guard,
        channel: Channel,
    }

    #[init]
    fn init(cx: init::Context) -> (Shared, Local) {
        let mut pac = cx.device;
        let mut watchdog = Watchdog::new(pac.WATCHDOG);
        let Ok(_clocks) = init_clocks_and_plls(
            XTAL_HZ,
            pac.XOSC,
            pac.CLOCKS,
            pac.PLL_SYS,
            pac.PLL_USB,
            &mut pac.RESETS,
            &mut watchdog,
        ) else {
            halt()
        };
        let sio = Sio::new(pac.SIO);
        let pins = Pins::new(
            pac.IO_BANK0,
            pac.PADS_BANK0,
            sio.gpio_bank0,
            &mut pac.RESETS,
        );

        // Slice 0 at 5 kHz, edge-aligned, channel A on GPIO0, off until the first tick.
        let slices = Slices::new(pac.PWM, &mut pac.RESETS);
        let mut pwm = slices.pwm0;
        pwm.set_div_int(1);
        pwm.set_top(COUNTS - 1);
        pwm.channel_a.output_to(pins.gpio0);
        let _ = pwm.channel_a.set_duty_cycle(0);
        let counts = u32::from(pwm.channel_a.max_duty_cycle());

        // ADC0 on GPIO26, converting free-running.
        let mut adc = Adc::new(pac.ADC, &mut pac.RESETS);
        let Ok(supply_pin) = AdcPin::new(pins.gpio26.into_floating_input()) else {
            halt()
        };
        adc.free_running(&supply_pin);

        let params = valve::params(1.0 / RATE as f32, counts, 20.0);
        let Ok(guard) = Guard::new(&params, &valve::limits()) else {
            halt()
        };
        let Ok(channel) = Channel::new(&guard, RATE) else {
            halt()
        };

        pwm.enable_interrupt();
        pwm.enable();
        (
            Shared {},
            Local {
                pwm,
                adc,
                guard,
                channel,
            },
        )
    }

    /// The guard's tick: the slice's wrap, at the start of every period.
    #[task(binds = PWM_IRQ_WRAP, local = [pwm, adc, guard, channel])]
    fn tick(cx: tick::Context) {
        let l = cx.local;
        l.pwm.clear_interrupt();
        let out = l.channel.period(l.guard, l.adc.read_single());
        // Latched at the next wrap: the period this output is for. At most `COUNTS`.
        let _ = l.pwm.channel_a.set_duty_cycle(out.duty as u16);
    }
}
