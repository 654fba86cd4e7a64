//! A 24 V irrigation valve (a scenario invented for the demo): pull in at full duty to 1.0 A,
//! hold at 0.45 A by PWM, release, and try to re-energise too early. Everything goes through
//! the guard. Run with `cargo run --example valve`.

use coilward::thermal::{ClampThermal, CoilThermal, FosterStage};
use coilward::{
    ClampPath, CoilParams, ControlParams, EventLog, Guard, GuardLimits, HoldPhase, Input, Params,
    PullInHold, SupplyParams, SwitchParams, Volts,
};

fn main() {
    let params = Params::new(
        SupplyParams::new(24.0, 18.0, 30.0),
        CoilParams::new(0.040, 18.0),
        SwitchParams::new(0.1, 60.0),
        ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05,
        },
        ControlParams::new(50e-6, 3200, 2.0),
    );
    let mut limits = GuardLimits::new(1.2, 1.4, 0.05);
    limits.clamp_pulse_energy = Some(0.05);
    limits.clamp_thermal = Some(ClampThermal::new(
        [
            FosterStage::new(2.0, 0.01),
            FosterStage::new(40.0, 5.0),
            FosterStage::UNUSED,
        ],
        40.0,
        150.0,
    ));
    limits.coil_thermal = Some(CoilThermal::new(120.0, 0.6, 1.05, 40.0, 70.0));
    let guard = match Guard::new(&params, &limits) {
        Ok(g) => g,
        Err(e) => {
            eprintln!("refused: {e}");
            std::process::exit(2);
        }
    };
    let model = guard.model();
    let plan = PullInHold::new(model, 1.0, 0.03, 0.45).expect("valid plan");
    let mut phase = HoldPhase::default();
    let mut state = guard.start_idle();
    let mut log = EventLog::<16>::new();
    let vs = Volts::from_num(24);

    println!("valve: 40 mH / 18 Ω, 24 V, diode freewheel, 20 kHz; pull-in 1.0 A, hold 0.45 A");
    println!(
        "{:>7}  {:>6}  {:>7}  {:>8}  conditions",
        "t (ms)", "duty", "i (A)", "T coil"
    );
    for k in 0..1400u32 {
        let t_us = u64::from(k) * 50;
        let request = match k {
            0..1000 => plan.duty(model, &mut phase, state.current(), vs),
            1000..1010 => 0, // released for 0.5 ms...
            _ => 3200,       // ...and asked to pull in again at once
        };
        let out = guard.tick(&mut state, Input::new(request, vs));
        log.record(t_us, out.raised, out.cleared);
        if k % 100 == 0 || !out.raised.is_empty() {
            println!(
                "{:>7.2}  {:>5.1}%  {:>7.4}  {:>6.1}°C  {}{}",
                t_us as f64 / 1000.0,
                f64::from(out.duty) / 32.0,
                model.amps(state.current()),
                guard.winding_temperature(&state).unwrap().to_num::<f32>(),
                out.active,
                out.release_in_us
                    .map_or(String::new(), |t| format!(" (release in {t} µs)"))
            );
        }
    }
    println!("\nevent log ({} dropped):", log.dropped());
    for e in log.iter() {
        println!("  {e}");
    }
}
