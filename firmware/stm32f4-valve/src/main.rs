//! Example firmware for an STM32F401 (for instance a "Black Pill" board with its 25 MHz crystal):
//! a 24 V valve coil on a low-side MOSFET driven by TIM1 channel 1 (PA8) at 20 kHz, the supply
//! sensed on PA0 through an 11:1 divider by ADC1, everything routed through coilward's guard from
//! TIM1's update interrupt. The valve is pulled in, held at its hold current, and released, over
//! and over (two seconds on, one off).
//!
//! It cannot run here; the test command builds it for `thumbv7em-none-eabihf`.
//!
//! # How it keeps time
//! - The core runs at 84 MHz from the PLL. TIM1 counts 4200 clocks per 50 µs period; its
//!   compare registers are preloaded, so a duty written in the update interrupt applies to the
//!   whole of the next period, which is the period the guard's output is for.
//! - The update interrupt is the guard's tick: once per period, at the period's start. The
//!   guard advances over the period just ended with the duty it applied to it (which the timer
//!   really ran, thanks to the preload) and returns the duty for the period now starting.
//! - TIM1 channel 2 (PA9, a test point showing the sampling instant) fires the ADC at 1/8 of
//!   each period; the conversion is done long before the next update, where the tick reads it.
//!   The supply used for a period is therefore the one sampled in it.
//! - A tick must end within its period. The settled drive's tick costs about 1 100 instructions
//!   here (`cargo xtask target-bench`, M4F), a new duty about 2 700, the limiting path about
//!   57 000: more than a period. A late tick leaves the timer running the duty already
//!   written, and the next tick advances the guard by one period although two have passed, so
//!   the guard's picture falls behind: keep the request out of limiting (here the hold plan asks
//!   for less than the ceiling allows) or lower the PWM rate where limiting is expected.
//!
//! # Why RTIC
//! The whole program is one hardware task (the tick) and the idle loop (the retune); RTIC 2
//! gives the task its resources as plain `&mut` locals without a lock, checks the priorities at
//! compile time, and adds no executor: the tick runs directly from the interrupt vector, as the
//! guard's timing contract needs. An async executor (embassy) would put a wake-up and a poll
//! between the timer's event and the tick for nothing here.
//!
//! # The retune
//! The guard's model is built for one winding temperature. The idle loop watches the
//! temperature the tick suggests from the winding image, builds a guard for it in the spare of
//! two static slots (a slow call in f64), and hands it to the tick through a single-producer
//! queue of references; the tick swaps it in between two periods and hands the old one back
//! through a second queue. The tick never sees a guard half written, and never waits.
#![no_std]
#![no_main]

use panic_halt as _;

#[path = "../../demo/valve.rs"]
mod valve;

#[rtic::app(device = stm32f4xx_hal::pac, peripherals = true)]
mod app {
    use crate::valve::{self, Channel, halt};
    use coilward::{Guard, Params};
    use core::sync::atomic::{AtomicI32, Ordering};
    use heapless::spsc::{Consumer, Producer, Queue};
    use stm32f4xx_hal::adc::Adc;
    use stm32f4xx_hal::adc::config::{
        AdcConfig, ExternalTrigger, SampleTime, Sequence, TriggerMode,
    };
    use stm32f4xx_hal::gpio::{Analog, PA0};
    use stm32f4xx_hal::pac::{ADC1, TIM1};
    use stm32f4xx_hal::rcc::Config;
    use stm32f4xx_hal::timer::{Event, Flag, PwmChannel, PwmHzManager};
    use stm32f4xx_hal::{ClearFlags, Listen, prelude::*};

    /// A guard in one of the two static slots.
    type Slot = &'static mut Guard;

    /// PWM periods a second.
    const RATE: u32 = 20_000;
    /// Retune when the winding's suggested model temperature moves by this much, K.
    const RETUNE_STEP: u32 = 5;

    /// The winding temperature the tick suggests for the model, °C (idle reads it).
    static SUGGESTED: AtomicI32 = AtomicI32::new(i32::MIN);

    #[shared]
    struct Shared {}

    #[local]
    struct Local {
        timer: PwmHzManager<TIM1>,
        coil: PwmChannel<TIM1, 0>,
        adc: Adc<ADC1>,
        guard: Slot,
        channel: Channel,
        new_guards: Consumer<'static, Slot>,
        old_guards: Producer<'static, Slot>,
        spare: Option<Slot>,
        to_tick: Producer<'static, Slot>,
        from_tick: Consumer<'static, Slot>,
        params: Params,
        model_temperature: i32,
    }

    #[init(local = [
        slot_a: Option<Guard> = None,
        slot_b: Option<Guard> = None,
        to_tick_queue: Queue<Slot, 2> = Queue::new(),
        from_tick_queue: Queue<Slot, 2> = Queue::new(),
    ])]
    fn init(cx: init::Context) -> (Shared, Local) {
        let dp = cx.device;
        let mut rcc = dp.RCC.freeze(
            Config::hse(25.MHz())
                .sysclk(84.MHz())
                .pclk1(42.MHz())
                .pclk2(84.MHz()),
        );
        let gpioa = dp.GPIOA.split(&mut rcc);

        // TIM1 at 20 kHz: CH1 drives the gate, CH2 only marks the ADC's sampling instant.
        let (mut timer, (ch1, ch2, ..)) = dp.TIM1.pwm_hz(20.kHz(), &mut rcc);
        let mut coil = ch1.with(gpioa.pa8);
        let mut sample = ch2.with(gpioa.pa9);
        let counts = u32::from(coil.get_max_duty()).max(1);
        coil.set_duty(0);
        coil.enable();
        sample.set_duty(coil.get_max_duty() / 8);
        sample.enable();

        // ADC1 converts PA0 on every CH2 compare: once per period, started by TIM1.
        let supply_pin: PA0<Analog> = gpioa.pa0.into_analog();
        let config = AdcConfig::default()
            .external_trigger(TriggerMode::RisingEdge, ExternalTrigger::Tim_1_cc_2);
        let mut adc = Adc::new(dp.ADC1, true, config, &mut rcc);
        adc.configure_channel(&supply_pin, Sequence::One, SampleTime::Cycles_28);
        adc.enable();

        let model_temperature = 20;
        let params = valve::params(1.0 / RATE as f32, counts, model_temperature as f32);
        let Ok(guard) = Guard::new(&params, &valve::limits()) else {
            halt()
        };
        let Ok(channel) = Channel::new(&guard, RATE) else {
            halt()
        };
        let spare = cx.local.slot_b.insert(guard.clone());
        let guard = cx.local.slot_a.insert(guard);
        let (to_tick, new_guards) = cx.local.to_tick_queue.split();
        let (old_guards, from_tick) = cx.local.from_tick_queue.split();

        timer.listen(Event::Update);
        (
            Shared {},
            Local {
                timer,
                coil,
                adc,
                guard,
                channel,
                new_guards,
                old_guards,
                spare: Some(spare),
                to_tick,
                from_tick,
                params,
                model_temperature,
            },
        )
    }

    /// The guard's tick: TIM1's update, at the start of every period.
    #[task(binds = TIM1_UP_TIM10, priority = 2, local = [
        timer, coil, adc, guard, channel, new_guards, old_guards
    ])]
    fn tick(cx: tick::Context) {
        let l = cx.local;
        l.timer.clear_flags(Flag::Update);
        // A retuned guard, if the idle loop has one ready: swapped between two periods. The
        // state carries over; the memo belongs to the old guard and is rebuilt by itself.
        if let Some(new) = l.new_guards.dequeue() {
            let old = core::mem::replace(l.guard, new);
            // Room for it: two slots exist, one is in use here, so at most one is in flight
            // (each queue holds one).
            let _ = l.old_guards.enqueue(old);
        }
        let guard: &Guard = l.guard;
        // The supply sampled at 1/8 of the period just ended.
        let out = l.channel.period(guard, l.adc.current_sample());
        // Preloaded: applies from the next update, the period this output is for. The duty is
        // at most the resolution, which is the timer's 16-bit count.
        l.coil.set_duty(out.duty as u16);
        if let Some(t) = guard.suggested_model_temperature(l.channel.state(), RETUNE_STEP) {
            SUGGESTED.store(t, Ordering::Relaxed);
        }
    }

    /// The retune, in the main loop: slow (f64, table construction), never in the interrupt.
    #[idle(local = [spare, to_tick, from_tick, params, model_temperature])]
    fn idle(cx: idle::Context) -> ! {
        let l = cx.local;
        loop {
            if let Some(back) = l.from_tick.dequeue() {
                *l.spare = Some(back);
            }
            let wanted = SUGGESTED.load(Ordering::Relaxed);
            if wanted != i32::MIN
                && wanted.abs_diff(*l.model_temperature) >= RETUNE_STEP
                && let Some(slot) = l.spare.take()
            {
                l.params.coil.winding_temperature = wanted as f32;
                match Guard::new(l.params, &valve::limits()) {
                    Ok(g) => {
                        *slot = g;
                        *l.model_temperature = wanted;
                        // Room for it: the other slot is in the tick's hands.
                        let _ = l.to_tick.enqueue(slot);
                    }
                    // Out of the validated range: keep the guard in use.
                    Err(_) => *l.spare = Some(slot),
                }
            }
            cortex_m::asm::wfi();
        }
    }
}
