//! The valve both example firmwares drive (values invented for the examples): 24 V, 40 mH,
//! 18 Ω, a freewheel diode, its limits and declared tolerance, the supply divider, and the demo
//! drive (pulled in, held at its hold current, released: two seconds on, one off). Included by
//! path from `stm32f4-valve` and `rp2040-valve`, which keep only what their chips differ in.

use coilward::{
    ClampPath, CoilParams, ConfigError, ControlParams, Current, Guard, GuardLimits, GuardState,
    HoldPhase, Input, Output, Params, PullInHold, SupplyParams, SupplySense, SwitchParams,
    TickMemo, Tolerance, Volts,
};

/// The valve for a PWM period of `period_s` seconds of `counts` timer counts, its model built
/// for `winding_temperature` (°C).
pub fn params(period_s: f32, counts: u32, winding_temperature: f32) -> Params {
    let mut coil = CoilParams::new(0.040, 18.0);
    coil.winding_temperature = winding_temperature;
    Params::new(
        SupplyParams::new(24.0, 18.0, 30.0),
        coil,
        SwitchParams::new(0.05, 60.0),
        ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05,
        },
        ControlParams::new(period_s, counts, 2.0),
    )
}

/// The limits: ceiling, trip and release current (A), the clamp's pulse rating, and the spread
/// the guard must cover.
pub fn limits() -> GuardLimits {
    let mut l = GuardLimits::new(1.2, 1.4, 0.05).with_tolerance(
        Tolerance::EXACT
            .with_inductance(0.2)
            .with_resistance(0.05)
            .with_supply_reading(0.02),
    );
    l.clamp_pulse_energy = Some(0.05);
    l
}

/// What the tick keeps from one period to the next besides the guard: the guard's state and
/// memo, the supply reading's calibration and the demo drive.
pub struct Channel {
    state: GuardState,
    memo: TickMemo,
    sense: SupplySense,
    drive: Drive,
}

impl Channel {
    /// A channel for `guard` at `periods_per_second`, starting as after a reset (the coil may
    /// still carry current).
    pub fn new(guard: &Guard, periods_per_second: u32) -> Result<Self, ConfigError> {
        Ok(Self {
            state: guard.start_after_reset(),
            memo: TickMemo::EMPTY,
            // A 12-bit ADC on 3.3 V behind an 11:1 divider.
            sense: SupplySense::new(3.3 * 11.0 / 4095.0, 0.0)?,
            drive: Drive::new(guard, periods_per_second)?,
        })
    }

    /// One period, at its start: `reading` is the ADC's count of the supply sampled in the
    /// period just ended; the output's duty is for the period now starting.
    pub fn period(&mut self, guard: &Guard, reading: u16) -> Output {
        let supply = self.sense.volts(reading);
        let wanted = self.drive.request(guard, self.state.current(), supply);
        guard.tick_with(&mut self.state, &mut self.memo, Input::new(wanted, supply))
    }

    /// The guard's state.
    pub fn state(&self) -> &GuardState {
        &self.state
    }
}

/// The demo drive: pull in to 1 A (for at most 30 ms), hold at 0.45 A (well under the 1.2 A
/// ceiling, so the guard does not limit in normal operation), on for two seconds, off for one.
struct Drive {
    plan: PullInHold,
    phase: HoldPhase,
    period: u32,
    cycle: u32,
    on: u32,
}

impl Drive {
    /// The drive for `guard`'s model at `periods_per_second` PWM periods a second.
    fn new(guard: &Guard, periods_per_second: u32) -> Result<Self, ConfigError> {
        Ok(Self {
            plan: PullInHold::new(guard.model(), 1.0, 0.03, 0.45)?,
            phase: HoldPhase::default(),
            period: 0,
            cycle: 3 * periods_per_second,
            on: 2 * periods_per_second,
        })
    }

    /// The duty to request for the period now starting, from the guard's estimate and the
    /// supply just read.
    fn request(&mut self, guard: &Guard, estimate: Current, supply: Volts) -> u32 {
        let at = self.period % self.cycle;
        self.period = self.period.wrapping_add(1);
        if at == 0 {
            self.phase = HoldPhase::default();
        }
        if at < self.on {
            self.plan
                .duty(guard.model(), &mut self.phase, estimate, supply)
        } else {
            0
        }
    }
}

/// Nothing to drive with: a configuration the library refuses leaves the output off.
pub fn halt() -> ! {
    loop {
        cortex_m::asm::wfi();
    }
}
