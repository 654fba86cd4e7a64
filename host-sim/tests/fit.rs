//! Fitting coils to captures. Captures with known L and R come from ngspice (the RL circuit with
//! its switch and freewheel diode, solved by a general-purpose SPICE); the test adds seeded
//! Gaussian noise and 12-bit quantisation, as a current probe into a scope would. Required:
//! L and R within 1 % at a realistic signal-to-noise ratio (noise 0.3–1 % of the step). The
//! synthetic edge cases use the RL step's closed form (any circuits text).

use coilward_sim::capture::{Capture, ReadOptions};
use coilward_sim::fit::{self, FitOptions, Problem};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::fmt::Write as _;
use std::path::Path;

struct Coil {
    name: &'static str,
    v: f64,
    l: f64,
    r: f64,
    r_on: f64,
    on: f64,
    off: f64,
    end: f64,
    dt: f64,
}

/// ngspice's coil current for a switch-on at `on` and switch-off at `off`, freewheel diode 0.7 V.
fn ngspice_capture(c: &Coil) -> Vec<(f64, f64)> {
    let mut n = String::new();
    writeln!(n, "fit capture {}", c.name).unwrap();
    writeln!(n, "V1 vs 0 DC {}", c.v).unwrap();
    writeln!(n, "L1 vs n1 {} IC=0", c.l).unwrap();
    writeln!(n, "Vsense n1 n2 DC 0\nR1 n2 drain {}", c.r).unwrap();
    writeln!(
        n,
        "S1 drain 0 gate 0 swmod\n.model swmod SW(VT=0.5 VH=0 RON={} ROFF=1e9)",
        c.r_on
    )
    .unwrap();
    writeln!(
        n,
        "Vg gate 0 PULSE(0 1 {} 10n 10n {} 1)",
        c.on,
        c.off - c.on
    )
    .unwrap();
    writeln!(
        n,
        "Vp drain pa DC 0.7\nRp pa pb 0.05\nDp pb vs dideal\n.model dideal D(IS=1e-14 N=0.002)"
    )
    .unwrap();
    writeln!(
        n,
        "C1 drain 0 1n IC={}\n.options reltol=1e-5 abstol=1e-10 vntol=1e-7",
        c.v
    )
    .unwrap();
    writeln!(n, ".tran {} {} 0 {} uic", c.dt / 4.0, c.end, c.dt / 4.0).unwrap();
    writeln!(
        n,
        ".control\nrun\nlinearize i(Vsense)\nwrdata {{out}} i(Vsense)\n.endc\n.end"
    )
    .unwrap();
    let raw = coilward_sim::spice::ngspice_trace(c.name, &n).unwrap_or_else(|e| panic!("{e}"));
    // Resample at dt (ngspice's linearized grid is dt/4).
    raw.into_iter().step_by(4).collect()
}

/// Noise (rms, A), 12-bit quantisation over ±`fs` A, seeded; written as a scope would.
fn as_csv(points: &[(f64, f64)], noise: f64, fs: f64, seed: u64) -> String {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let normal = Normal::new(0.0, noise).unwrap();
    let lsb = 2.0 * fs / 4096.0;
    let mut s = String::from("time (s),current (A)\n");
    for &(t, i) in points {
        let code = ((i + normal.sample(&mut rng)) / lsb)
            .round()
            .clamp(-2048.0, 2047.0);
        writeln!(s, "{t:.9e},{:.6e}", code * lsb).unwrap();
    }
    s
}

fn capture(text: &str) -> Capture {
    Capture::parse(Path::new("capture.csv"), text, &ReadOptions::default()).unwrap()
}

fn coils() -> Vec<Coil> {
    vec![
        Coil {
            name: "valve",
            v: 24.0,
            l: 0.040,
            r: 18.0,
            r_on: 0.1,
            on: 1e-3,
            off: 16e-3,
            end: 26e-3,
            dt: 5e-6,
        },
        Coil {
            name: "relay",
            v: 12.0,
            l: 0.150,
            r: 90.0,
            r_on: 0.5,
            on: 0.5e-3,
            off: 9e-3,
            end: 12e-3,
            dt: 2e-6,
        },
        Coil {
            name: "actuator",
            v: 12.0,
            l: 2e-3,
            r: 1.5,
            r_on: 0.05,
            on: 0.2e-3,
            off: 8e-3,
            end: 12e-3,
            dt: 1e-6,
        },
    ]
}

#[test]
fn ngspice_captures_fit_back_within_one_percent() {
    for c in coils() {
        let pts = ngspice_capture(&c);
        let step = c.v / (c.r + c.r_on);
        for (k, snr) in [0.003, 0.01].into_iter().enumerate() {
            let cap = capture(&as_csv(&pts, snr * step, 1.6 * step, 7 + k as u64));
            let f = fit::fit(
                &cap,
                &FitOptions {
                    supply: c.v,
                    series_resistance: c.r_on,
                    inductance: None,
                },
            );
            assert!(f.problems.is_empty(), "{}: {:?}", c.name, f.problems);
            let r = f.rise.as_ref().unwrap();
            let (el, er) = (
                (r.inductance.value - c.l) / c.l,
                (r.resistance.value - c.r) / c.r,
            );
            eprintln!(
                "CHECK {} noise {:.1} %: L {:.5e} ± {:.1e} ({:+.3} %), R {:.5} ± {:.1e} ({:+.3} %)",
                c.name,
                snr * 100.0,
                r.inductance.value,
                r.inductance.sigma,
                el * 100.0,
                r.resistance.value,
                r.resistance.sigma,
                er * 100.0
            );
            assert!(
                el.abs() < 0.01 && er.abs() < 0.01,
                "{}: L {el:+.4}, R {er:+.4}",
                c.name
            );
            // The stated uncertainty is honest: the error is within four of it.
            assert!(
                el.abs() * c.l < 4.0 * r.inductance.sigma + 1e-4 * c.l,
                "{}: L error beyond its σ",
                c.name
            );
            assert!(
                er.abs() * c.r < 4.0 * r.resistance.sigma + 1e-4 * c.r,
                "{}: R error beyond its σ",
                c.name
            );
            // The switch-off: the path's drop is the diode's 0.7 V (ngspice's near-ideal diode
            // adds about 1.5 mV; the 0.05 Ω path resistance goes into the off resistance). The
            // drop is a small asymptote of the decay (a few % of the start current), so its
            // uncertainty is larger: required within 4 σ, and σ under 5 % of it.
            let d = f.fall.as_ref().expect("the capture has the switch-off");
            let drop = d.path_drop.unwrap();
            eprintln!(
                "CHECK {} path drop {:.4} ± {:.4} V",
                c.name, drop.value, drop.sigma
            );
            assert!(
                (drop.value - 0.7015).abs() < 4.0 * drop.sigma,
                "{}: drop {drop:?}",
                c.name
            );
            assert!(drop.sigma < 0.05 * 0.7, "{}: drop {drop:?}", c.name);
        }
    }
}

/// The RL step with noise, sampled every `dt` for `n` samples, edge at `t0`.
fn synthetic(n: usize, dt: f64, t0: f64, f: impl Fn(f64) -> f64, noise: f64, seed: u64) -> String {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let normal = Normal::new(0.0, noise.max(1e-300)).unwrap();
    let mut s = String::from("t (s),i (A)\n");
    for k in 0..n {
        let t = k as f64 * dt;
        let i = if t < t0 { 0.0 } else { f(t - t0) }
            + if noise > 0.0 {
                normal.sample(&mut rng)
            } else {
                0.0
            };
        writeln!(s, "{t:.9e},{i:.7e}").unwrap();
    }
    s
}

/// The same, recorded by an instrument whose range ends at `top` (noise included, then clipped).
fn clipped(text: &str, top: f64) -> String {
    let mut lines = text.lines();
    let mut s = format!("{}\n", lines.next().unwrap());
    for l in lines {
        let (t, i) = l.split_once(',').unwrap();
        writeln!(s, "{t},{:.7e}", i.parse::<f64>().unwrap().min(top)).unwrap();
    }
    s
}

const OPTS: FitOptions = FitOptions {
    supply: 24.0,
    series_resistance: 0.0,
    inductance: None,
};

fn rl(t: f64) -> f64 {
    24.0 / 18.0 * (1.0 - (-t / (0.040 / 18.0)).exp())
}

#[test]
fn no_edge_is_said() {
    let f = fit::fit(&capture(&synthetic(2000, 5e-6, 1.0, rl, 2e-3, 1)), &OPTS);
    assert!(
        matches!(f.problems.as_slice(), [Problem::NoEdge { .. }]),
        "{:?}",
        f.problems
    );
    assert!(f.problems[0].to_string().contains("no edge"));
}

#[test]
fn a_capture_starting_after_the_edge_is_said() {
    let f = fit::fit(&capture(&synthetic(2000, 5e-6, 0.0, rl, 2e-3, 1)), &OPTS);
    assert!(
        matches!(f.problems.as_slice(), [Problem::StartsLate]),
        "{:?}",
        f.problems
    );
}

#[test]
fn clipping_is_said() {
    let f = fit::fit(
        &capture(&clipped(&synthetic(4000, 5e-6, 1e-3, rl, 2e-3, 2), 0.9)),
        &OPTS,
    );
    let p = f
        .problems
        .iter()
        .find(|p| matches!(p, Problem::Clipped { .. }))
        .expect("clipped");
    assert!(p.to_string().contains("clipped at 900"), "{p}");
}

#[test]
fn too_short_is_said() {
    // 0.2 τ after the edge.
    let f = fit::fit(
        &capture(&synthetic(1000, 0.5e-6, 0.1e-3, rl, 1e-3, 3)),
        &OPTS,
    );
    assert!(
        f.problems
            .iter()
            .any(|p| matches!(p, Problem::TooShort { .. })),
        "{:?}",
        f.problems
    );
}

#[test]
fn a_fit_that_is_not_a_coil_is_refused() {
    // The 24 V / 18 Ω rise given with a wrong supply sign, or with an on-resistance larger than
    // the coil's own: the fitted L or R comes out negative, and the fit says why instead of
    // proposing a [coil] section.
    let text = synthetic(4000, 5e-6, 1e-3, rl, 2e-3, 5);
    let mut wrong_sign = OPTS;
    wrong_sign.supply = -24.0;
    let mut big_on = OPTS;
    big_on.series_resistance = 30.0;
    for o in [wrong_sign, big_on] {
        let f = fit::fit(&capture(&text), &o);
        let p = f
            .problems
            .iter()
            .find(|p| matches!(p, Problem::NotPhysical { .. }))
            .unwrap_or_else(|| panic!("{:?}", f.problems));
        assert!(p.to_string().starts_with("not a coil"), "{p}");
    }
}

#[test]
fn too_noisy_is_said() {
    // 9 % noise on a 100-sample record: the edge is plain, the parameters are not.
    let f = fit::fit(&capture(&synthetic(100, 100e-6, 1e-3, rl, 0.12, 4)), &OPTS);
    eprintln!("{:?}", f.problems);
    assert!(
        f.problems
            .iter()
            .any(|p| matches!(p, Problem::TooNoisy { .. })),
        "{:?}",
        f.problems
    );
    assert!(
        f.problems
            .iter()
            .any(|p| p.to_string().starts_with("too noisy"))
    );
}

#[test]
fn a_plunger_dip_is_found_and_only_the_part_before_it_fitted() {
    // Invented pull-in: the RL rise of 40 mH / 18 Ω until 2.5 ms after the edge, then the
    // plunger's motion pulls the current down by 0.12 A over 1 ms, then a rise with the closed
    // gap's 60 mH from there.
    let tp = 2.5e-3;
    let at_tp = rl(tp);
    let low = at_tp - 0.12;
    let pull_in = move |t: f64| {
        if t < tp {
            rl(t)
        } else if t < tp + 1e-3 {
            at_tp - 0.12 * (t - tp) / 1e-3
        } else {
            let s = t - tp - 1e-3;
            24.0 / 18.0 - (24.0 / 18.0 - low) * (-s / (0.060 / 18.0)).exp()
        }
    };
    let f = fit::fit(
        &capture(&synthetic(5000, 5e-6, 1e-3, pull_in, 2e-3, 5)),
        &OPTS,
    );
    let r = f.rise.as_ref().expect("a rise");
    let d = r.dip.as_ref().expect("the dip is found");
    assert!(
        (d.peak_t - (1e-3 + tp)).abs() < 0.2e-3,
        "dip at {}",
        d.peak_t
    );
    assert!(
        (r.inductance.value - 0.040).abs() < 0.01 * 0.040,
        "L before the dip {:?}",
        r.inductance
    );
    let (l_after, r_after) = d.after.expect("the part after is fitted");
    assert!(
        (l_after.value - 0.060).abs() < 0.05 * 0.060,
        "L after {:?}",
        l_after
    );
    assert!(
        (r_after.value - 18.0).abs() < 0.02 * 18.0,
        "R after {:?}",
        r_after
    );
}

#[test]
fn saturation_is_reported_where_the_inductance_falls() {
    // Two-slope flux: 40 mH up to 0.8 A, 10 mH above (the piecewise RL solution, as in the
    // plant's saturation check).
    let i_inf: f64 = 24.0 / 18.0;
    let t1 = -(0.040 / 18.0) * (1.0 - 0.8 / i_inf).ln();
    let sat = move |t: f64| {
        if t < t1 {
            rl(t)
        } else {
            i_inf - (i_inf - 0.8) * (-(t - t1) / (0.010 / 18.0)).exp()
        }
    };
    let f = fit::fit(&capture(&synthetic(6000, 2e-6, 1e-3, sat, 5e-4, 6)), &OPTS);
    let r = f.rise.as_ref().expect("a rise");
    let (at, l) = r.saturation.expect("saturation is seen");
    assert!((at - 0.8).abs() < 0.1 * 0.8, "saturation at {at}");
    assert!((l - 0.010).abs() < 0.3 * 0.010, "saturated L {l}");
}

#[test]
fn the_fit_pastes_into_a_scenario_that_runs() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_coilward-sim"))
        .args([
            "fit",
            "examples/captures/valve-pull-in.csv",
            "--supply",
            "24 V",
            "--on-resistance",
            "0.1 Ω",
        ])
        .current_dir(&dir)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8_lossy(&out.stdout);
    let section: String = text
        .lines()
        .skip_while(|l| *l != "[coil]")
        .take_while(|l| !l.starts_with('#'))
        .map(|l| format!("{l}\n"))
        .collect();
    assert!(section.contains("inductance = \"40.0"), "{text}");
    let scenario =
        std::fs::read_to_string(dir.join("examples/scenarios/irrigation-valve.toml")).unwrap();
    let start = scenario.find("[coil]").unwrap();
    let end = start + scenario[start..].find("\n\n").unwrap();
    let pasted = format!(
        "{}{}{}",
        &scenario[..start],
        section.trim_end(),
        &scenario[end..]
    );
    let s = coilward_sim::scenario::Scenario::parse(Path::new("pasted.toml"), &pasted)
        .unwrap_or_else(|e| panic!("{e}\n{pasted}"));
    let r = coilward_sim::cosim::run(&s, coilward_sim::cosim::Options::default());
    assert!(r.passed(), "{:?}", r.findings);
    // Exit statuses: 1 for a capture that cannot give a fit, 2 for bad input.
    let tmp = tempfile::tempdir().unwrap();
    let clipped_file = tmp.path().join("clipped.csv");
    std::fs::write(
        &clipped_file,
        clipped(&synthetic(4000, 5e-6, 1e-3, rl, 2e-3, 2), 0.9),
    )
    .unwrap();
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_coilward-sim"))
        .arg("fit")
        .arg(&clipped_file)
        .args(["--supply", "24 V"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stdout).contains("clipped"));
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_coilward-sim"))
        .arg("fit")
        .arg(&clipped_file)
        .args(["--supply", "24"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn rise_and_switch_off_resistances_that_disagree_are_refused() {
    // A 40 mH, 18 Ω winding behind a 2 Ω switch (24 V, so 1.2 A), switched off at 15 ms into a
    // 0.7 V diode with 50 mΩ: the decay's τ = L/(18 + 0.05). Told the switch has no resistance,
    // the rise's winding comes out at 20 Ω while the switch-off says 18.05 Ω for the winding and
    // the path together: refused. Told the true 2 Ω, both agree and the fit stands.
    let (l, r_w, r_on, r_p, v_p): (f64, f64, f64, f64, f64) = (0.040, 18.0, 2.0, 0.05, 0.7);
    let (tau_on, tau_off) = (l / (r_w + r_on), l / (r_w + r_p));
    let top = 24.0 / (r_w + r_on);
    let t1: f64 = 14e-3;
    let i1 = top * (1.0 - (-t1 / tau_on).exp());
    let a = -v_p / (r_w + r_p);
    let wave = move |t: f64| {
        if t < t1 {
            top * (1.0 - (-t / tau_on).exp())
        } else {
            (a + (i1 - a) * (-(t - t1) / tau_off).exp()).max(0.0)
        }
    };
    let text = synthetic(6000, 5e-6, 1e-3, wave, 2e-3, 11);
    let told = |on: f64| {
        let mut o = OPTS;
        o.series_resistance = on;
        fit::fit(&capture(&text), &o)
    };
    let wrong = told(0.0);
    let p = wrong
        .problems
        .iter()
        .find(|p| matches!(p, Problem::Disagree { .. }))
        .unwrap_or_else(|| panic!("{:?}", wrong.problems));
    assert!(p.to_string().contains("--on-resistance"), "{p}");
    let right = told(r_on);
    assert!(right.problems.is_empty(), "{:?}", right.problems);
    let r = right.rise.as_ref().unwrap().resistance.value;
    assert!((r - r_w).abs() < 0.05, "{r}");
}
