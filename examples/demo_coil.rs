//! Prints what coilward estimates for a demo drive: a 24 V valve coil (invented for the
//! demo: 40 mH, 18 Ω, diode freewheel, 20 kHz PWM) pulled in at full duty, then held at 35 %,
//! then released. Run with `cargo run --example demo_coil`.

use coilward::{
    ClampPath, CoilParams, CoilState, ControlParams, Params, SupplyParams, SwitchParams, Volts,
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
    let model = match params.validate() {
        Ok(m) => m,
        Err(e) => {
            eprintln!("demo parameters refused: {e}");
            std::process::exit(2);
        }
    };
    let d = model.derived();
    println!("demo valve: 24 V, 40 mH, 18 Ω at 20 °C, diode freewheel 0.7 V, 20 kHz PWM");
    println!(
        "  τ on {:.3} ms, τ off {:.3} ms, steady on-current {:.3} A, full scale {:.1} A",
        d.tau_on * 1e3,
        d.tau_off * 1e3,
        d.on_current_nominal,
        d.full_scale
    );

    let vs = Volts::from_num(24);
    let hold = 1120; // 35 % of 3200 counts
    let ss = model.steady_state(hold, vs);
    println!(
        "  hold at 35 %: mean {:.4} A, ripple {:.2} mA, continuous: {}",
        model.amps(ss.mean),
        model.amps(ss.ripple()) * 1e3,
        ss.continuous
    );

    println!();
    println!(
        "{:>8}  {:>6}  {:>9}  {:>9}",
        "t (ms)", "duty", "peak (A)", "valley (A)"
    );
    let mut coil = CoilState::idle();
    let mut t_us = 0u32;
    for k in 0..600u32 {
        let duty = match k {
            0..200 => 3200, // pull-in: 10 ms at full duty
            200..500 => hold,
            _ => 0, // released
        };
        if k == 500 {
            let i = coil.current();
            let decay = model.decay_time_us(i, coilward::Current::ZERO, vs);
            let energy = model.turn_off_energy(i, vs);
            println!(
                "  -- release from {:.4} A: decay to zero {} µs, {:.3} mJ into the diode, drain peak {:.2} V",
                model.amps(i),
                decay.map_or_else(|| "never".to_string(), |t| t.to_string()),
                model.joules(energy) * 1e3,
                model.peak_drain_voltage(i, vs).to_num::<f32>()
            );
        }
        let e = model.step(&mut coil, duty, vs);
        if k % 50 == 49 {
            println!(
                "{:>8.2}  {:>5.1}%  {:>9.4}  {:>9.4}",
                f64::from(t_us + 50) / 1000.0,
                f64::from(duty) / 32.0,
                model.amps(e.peak),
                model.amps(e.valley)
            );
        }
        t_us += 50;
    }
}
