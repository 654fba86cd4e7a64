//! Cross-checks against ngspice (a general-purpose SPICE; Debian package `ngspice`, run as
//! `ngspice -b`). The test writes a netlist of the same circuit for each clamp path — supply,
//! RL coil, a voltage-controlled switch with the on-resistance, and the path built from DC
//! sources, resistors and a near-ideal diode (`IS=1e-14 N=0.002`: under 2 mV at these
//! currents), which behaves as the piecewise-linear drop V_p + R_p·i (shared/REFERENCES.md §9).
//! The switch's own avalanche is represented by such a clamp at the breakdown voltage.
//!
//! Agreement required: 1 % on the peak current, the mean current under PWM and the decay time.
//!
//! Without ngspice on the `PATH` the checks are skipped with a message, unless
//! `COILWARD_REQUIRE_TOOLS` is set (the test command sets it, so there they always run).

mod common;

use coilward::{ClampPath, CoilState, Current, Model, Params, Volts};
use std::collections::HashMap;
use std::fmt::Write as _;
use std::process::Command;

const TOL: f64 = 0.01;

/// Whether the checks can run: ngspice answers, or its absence is an error when the test
/// command asked for every tool (`COILWARD_REQUIRE_TOOLS`).
fn ngspice_present() -> bool {
    let present = Command::new("ngspice").arg("--version").output().is_ok();
    assert!(
        present || std::env::var_os("COILWARD_REQUIRE_TOOLS").is_none(),
        "ngspice must be installed (the README's test command installs it: apt-get install ngspice)"
    );
    if !present {
        eprintln!("ngspice is not installed: the cross-checks against it are skipped");
    }
    present
}

/// Runs a netlist through ngspice in batch mode and returns its `.meas` results.
fn ngspice(name: &str, netlist: &str) -> HashMap<String, f64> {
    let dir = std::env::temp_dir().join(format!("coilward-ngspice-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join(format!("{name}.cir"));
    std::fs::write(&path, netlist).expect("write netlist");
    let out = Command::new("ngspice")
        .arg("-b")
        .arg(&path)
        .output()
        .expect("ngspice must be installed (the README's test command installs it: apt-get install ngspice)");
    let text =
        String::from_utf8_lossy(&out.stdout).into_owned() + &String::from_utf8_lossy(&out.stderr);
    let mut found = HashMap::new();
    for line in text.lines() {
        let mut parts = line.split_whitespace();
        if let (Some(key), Some("="), Some(value)) = (parts.next(), parts.next(), parts.next())
            && let Ok(v) = value.parse::<f64>()
        {
            found.insert(key.to_string(), v);
        }
    }
    assert!(
        !text.contains("aborted"),
        "ngspice aborted on {name}:\n{text}"
    );
    found
}

/// The netlist lines of the circuit (title first), without analysis or measurements.
fn circuit(title: &str, p: &Params, gate: &str) -> String {
    let r = common::Reference::new(p);
    let mut n = String::new();
    writeln!(n, "coilward cross-check: {title}").unwrap();
    writeln!(n, "V1 vs 0 DC {}", p.supply.nominal).unwrap();
    writeln!(n, "L1 vs n1 {} IC=0", r.l).unwrap();
    writeln!(n, "Vsense n1 n2 DC 0").unwrap();
    writeln!(n, "R1 n2 drain {}", r.r).unwrap();
    writeln!(n, "S1 drain 0 gate 0 swmod").unwrap();
    writeln!(
        n,
        ".model swmod SW(VT=0.5 VH=0 RON={} ROFF=1e9)",
        r.r_on.max(1e-6)
    )
    .unwrap();
    writeln!(n, "Vg gate 0 {gate}").unwrap();
    // The path: a DC source for V_p, a resistor for R_p, and the near-ideal diode.
    let rp = r.r_p.max(1e-6);
    if r.across_switch {
        writeln!(n, "Vp drain pa DC {}", r.v_p).unwrap();
        writeln!(n, "Rp pa pb {rp}").unwrap();
        writeln!(n, "Dp pb 0 dideal").unwrap();
    } else {
        writeln!(n, "Vp drain pa DC {}", r.v_p).unwrap();
        writeln!(n, "Rp pa pb {rp}").unwrap();
        writeln!(n, "Dp pb vs dideal").unwrap();
    }
    writeln!(n, ".model dideal D(IS=1e-14 N=0.002)").unwrap();
    n
}

fn close(what: &str, got: f64, want: f64) {
    let rel = (got - want).abs() / want.abs();
    eprintln!("CHECK {what}: {got} vs {want} ({:.4} %)", rel * 100.0);
    assert!(
        rel <= TOL,
        "{what}: model {got}, ngspice {want} ({:.3} %)",
        rel * 100.0
    );
}

fn paths() -> Vec<(&'static str, ClampPath, u32)> {
    // (name, path, PWM duty in counts of 3200 that keeps the current continuous)
    vec![
        (
            "freewheel",
            ClampPath::Freewheel {
                forward_drop: 0.7,
                resistance: 0.05,
            },
            1280,
        ),
        (
            "freewheel-zener",
            ClampPath::FreewheelZener {
                forward_drop: 0.7,
                zener_voltage: 24.0,
                resistance: 0.2,
            },
            2560,
        ),
        (
            "switch-clamp",
            ClampPath::SwitchClamp {
                clamp_voltage: 45.0,
                resistance: 0.5,
            },
            2560,
        ),
        ("avalanche", ClampPath::None, 2560),
    ]
}

#[test]
fn turn_on_peak_and_decay_time_agree_with_ngspice() {
    if !ngspice_present() {
        return;
    }
    for (name, clamp, _) in paths() {
        let p = common::valve_with(clamp);
        let m: Model = p.validate().unwrap();
        let vs = Volts::from_num(24);
        // On for 10 ms (4.5 τ), then off.
        let mut s = CoilState::idle();
        m.advance(&mut s, true, 10_000, vs);
        let peak = f64::from(m.amps(s.current()));
        // Threshold: 10 % of the peak for the slow diode decay, 1 % for the fast paths.
        let frac = if name == "freewheel" { 0.10 } else { 0.01 };
        let thr = peak * frac;
        let t_dec = f64::from(
            m.decay_time_us(s.current(), m.current_from_amps(thr as f32).unwrap(), vs)
                .unwrap(),
        ) * 1e-6;
        let mut net = circuit(name, &p, "PULSE(0 1 0 1n 1n 10m 1)");
        net += ".tran 0.2u 20m 0 0.2u uic\n";
        net += ".meas tran ipk MAX i(Vsense)\n";
        writeln!(net, ".meas tran tdown WHEN i(Vsense)={thr} FALL=1").unwrap();
        net += ".end\n";
        let r = ngspice(&format!("step-{name}"), &net);
        close(&format!("{name}: peak current"), peak, r["ipk"]);
        // The decay time is quantised to whole µs (rounded up); ngspice's is from the edge.
        close(&format!("{name}: decay time"), t_dec, r["tdown"] - 10e-3);
    }
}

#[test]
fn pwm_mean_and_peak_agree_with_ngspice() {
    if !ngspice_present() {
        return;
    }
    // 500 periods = 25 ms from rest (11 τ, within 2·10⁻⁵ of the periodic state); the estimator
    // runs the same drive, and its steady-state helper gives the periodic mean. The four
    // circuits run two at a time (the machines have two cores).
    let cases = paths();
    std::thread::scope(|scope| {
        for pair in cases.chunks(2) {
            let handles: Vec<_> = pair
                .iter()
                .map(|&(name, clamp, n)| scope.spawn(move || pwm_case(name, clamp, n)))
                .collect();
            for h in handles {
                h.join().expect("case passed");
            }
        }
    });
}

fn pwm_case(name: &str, clamp: ClampPath, n: u32) {
    let p = common::valve_with(clamp);
    let m: Model = p.validate().unwrap();
    let vs = Volts::from_num(24);
    let t = f64::from(p.control.period);
    let t_on = t * f64::from(n) / 3200.0;
    let mut s = CoilState::idle();
    let mut last = None;
    for _ in 0..500 {
        last = Some(m.step(&mut s, n, vs));
    }
    let last = last.unwrap();
    let mean = f64::from(m.amps(m.steady_state(n, vs).mean));
    let gate = format!("PULSE(0 1 0 1n 1n {} {})", t_on - 2e-9, t);
    let mut net = circuit(&format!("pwm-{name}"), &p, &gate);
    net += ".tran 0.5u 25m 0 0.5u uic\n";
    writeln!(
        net,
        ".meas tran iavg AVG i(Vsense) from={} to=25m",
        25e-3 - t
    )
    .unwrap();
    writeln!(
        net,
        ".meas tran imax MAX i(Vsense) from={} to=25m",
        25e-3 - t
    )
    .unwrap();
    net += ".end\n";
    let r = ngspice(&format!("pwm-{name}"), &net);
    close(&format!("{name}: mean current under PWM"), mean, r["iavg"]);
    close(
        &format!("{name}: peak current under PWM"),
        f64::from(m.amps(last.peak)),
        r["imax"],
    );
    assert!(last.valley > Current::ZERO, "{name}: continuous conduction");
}
