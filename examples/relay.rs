//! A 12 V relay (a scenario invented for the demo) switched on events by a free-running
//! microsecond timer, with a diode + 18 V zener for fast release, through the guard's pin
//! adapter. Run with `cargo run --example relay`.

use coilward::{
    ClampPath, CoilParams, ControlParams, Guard, GuardLimits, GuardedSwitch, Params, SupplyParams,
    SwitchParams, Volts,
};
use core::convert::Infallible;

/// A stand-in gate pin that prints its changes.
struct Gate(bool);

impl embedded_hal::digital::ErrorType for Gate {
    type Error = Infallible;
}

impl embedded_hal::digital::OutputPin for Gate {
    fn set_low(&mut self) -> Result<(), Infallible> {
        self.0 = false;
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Infallible> {
        self.0 = true;
        Ok(())
    }
}

fn main() {
    // 400 Ω, 0.6 H coil (τ 1.5 ms), 30 mA on; 1 ms control tick (event mode ignores the duty).
    let params = Params::new(
        SupplyParams::new(12.0, 9.0, 15.0),
        CoilParams::new(0.6, 400.0),
        SwitchParams::new(1.0, 60.0),
        ClampPath::FreewheelZener {
            forward_drop: 0.7,
            zener_voltage: 18.0,
            resistance: 0.0,
        },
        ControlParams::new(1e-3, 1, 0.05),
    );
    let mut limits = GuardLimits::new(0.045, 0.05, 0.002);
    limits.clamp_pulse_energy = Some(1e-3);
    let guard = Guard::new(&params, &limits).expect("valid demo");
    let model = guard.model();
    let mut relay = GuardedSwitch::new(&guard, guard.start_after_reset(), Gate(false));
    let vs = Volts::from_num(12);

    // Timer readings (µs) near the wrap of a 32-bit free-running counter, and the wanted state.
    let start = u32::MAX - 20_000;
    let plan: [(u32, bool); 6] = [
        (0, true),       // straight after reset: held until the assumed current has decayed
        (20_000, true),  // 20 ms later: allowed
        (70_000, false), // 50 ms on, then release
        (70_300, true),  // 0.3 ms later: too early
        (75_000, true),  // after the zener-fast decay: on again
        (90_000, false),
    ];
    let mut last = start;
    println!("relay: 0.6 H / 400 Ω, 12 V, diode + 18 V zener; timer wraps during the run");
    for (at, want) in plan {
        let now = start.wrapping_add(at);
        let out = relay
            .update(want, now.wrapping_sub(last), vs)
            .unwrap_or_else(|e: Infallible| match e {});
        last = now;
        let i = relay.state().current();
        println!(
            "t={:>6} µs  want {:<5}  gate {:<5}  i {:>6.2} mA  {}{}",
            at,
            want,
            out.duty > 0,
            model.amps(i) * 1e3,
            out.active,
            out.release_in_us
                .map_or(String::new(), |t| format!(" (release in {t} µs)"))
        );
        if !want {
            println!(
                "             turn-off: {:.1} µJ into the zener path, drain peak {:.1} V, decay {:?} µs",
                model.joules(model.turn_off_energy(i, vs)) * 1e6,
                model.peak_drain_voltage(i, vs).to_num::<f32>(),
                model.decay_time_us(i, coilward::Current::ZERO, vs)
            );
        }
    }
}
