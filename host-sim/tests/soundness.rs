//! The guard's bound on three circuits of our own where a single-inductance, no-capacitance model
//! errs on the unsafe side, each checked against ngspice (a general-purpose SPICE, Debian
//! package `ngspice`, run as `ngspice -b`) and a closed form:
//!
//! 1. a pull-in coil whose inductance falls to a quarter above its saturation current: the
//!    guard, told the saturation, limits before the trip; told none, it lets the current pass;
//! 2. a large coil held at 4 % duty with 1 nF at the switch node: the bound stays at or above
//!    the true current where the nominal estimate runs low;
//! 3. a high-resistance coil with nothing across the switch and 22 nF at the node, whose
//!    turn-off rings under the breakdown (shared/REFERENCES.md §10): the load is not switched on
//!    again until the ring has died.
//!
//! The circuits are invented for these tests; the reference values are computed here from the
//! named formulas or by ngspice.

use coilward_sim::cosim::{self, Options};
use coilward_sim::plant::{Circuit, ClampKind};
use coilward_sim::scenario::Scenario;
use coilward_sim::spice::{self, Case};
use std::fmt::Write as _;
use std::path::Path;

fn scenario(text: &str) -> Scenario {
    Scenario::parse(Path::new("test.toml"), text).unwrap_or_else(|e| panic!("{e}"))
}

fn trace(name: &str, netlist: &str) -> Vec<(f64, f64)> {
    spice::ngspice_trace(name, netlist).unwrap_or_else(|e| panic!("{e}"))
}

/// Current at time `t` from a trace, linearly interpolated.
fn at(tr: &[(f64, f64)], t: f64) -> f64 {
    let k = tr.partition_point(|p| p.0 < t).clamp(1, tr.len() - 1);
    let ((t0, a), (t1, b)) = (tr[k - 1], tr[k]);
    a + (b - a) * (t - t0) / (t1 - t0).max(1e-18)
}

// ---------------------------------------------------------------------------------------------
// 1. Saturation.

const SATURATING: &str = r#"
name = "plunger coil that saturates at pull-in (invented for the test)"
[supply]
voltage = "24 V"
min = "20 V"
max = "26 V"
[coil]
inductance = "100 mH"
resistance = "12 Ω"
saturation_current = "0.6 A"
saturated_inductance = "25 mH"
[switch]
on_resistance = "0.05 Ω"
capacitance = "470 pF"
breakdown = "60 V"
[clamp]
path = "freewheel"
forward_voltage = "0.7 V"
resistance = "0.05 Ω"
[control]
period = "50 us"
duty_resolution = 1000
current_full_scale = "4 A"
[guard]
current_ceiling = "1.5 A"
trip_current = "1.7 A"
release_current = "50 mA"
[[drive]]
at = "0 ms"
duty = "100 %"
[[drive]]
at = "30 ms"
duty = "0 %"
[run]
duration = "40 ms"
[tolerance]
inductance = "±10 %"
resistance = "±5 %"
saturation_current = "±10 %"
saturated_inductance = "±20 %"
"#;

/// Two-slope rise from rest at a constant drive: the RL step (shared/REFERENCES.md §2) with
/// L until the saturation current, then with L_sat toward the same asymptote.
fn two_slope(t: f64, a: f64, r_t: f64, l: f64, at_sat: f64, l_sat: f64) -> f64 {
    let t_cross = l / r_t * (a / (a - at_sat)).ln();
    if t <= t_cross {
        a * (1.0 - (-t * r_t / l).exp())
    } else {
        a - (a - at_sat) * (-(t - t_cross) * r_t / l_sat).exp()
    }
}

#[test]
fn a_saturating_coil_is_limited_before_the_trip() {
    // Open loop, full duty from rest: ngspice with a flux-integrator coil against the closed
    // form, and the library's own (nominal, saturating) model against both.
    let (vs, r, r_on, l, at_sat, l_sat) = (24.0, 12.0, 0.05, 0.1, 0.6, 0.025);
    let r_t = r + r_on;
    let a = vs / r_t;
    let mut n = String::new();
    writeln!(n, "saturating coil, full duty from rest").unwrap();
    writeln!(n, "V1 vs 0 DC {vs}").unwrap();
    // Flux linkage ψ on a 1 F capacitor: C·dψ/dt = v_coil; the coil's current from ψ by the
    // two-slope magnetisation curve ψ = L·i (i ≤ I_sat), L·I_sat + L_sat·(i − I_sat) above.
    writeln!(n, "Bflux 0 psi I=V(vs)-V(n1)").unwrap();
    writeln!(n, "Cpsi psi 0 1 IC=0").unwrap();
    let psi_sat = l * at_sat;
    writeln!(
        n,
        "Bcoil vs n1 I=(V(psi) < {psi_sat}) ? V(psi)/{l} : {at_sat} + (V(psi)-{psi_sat})/{l_sat}"
    )
    .unwrap();
    writeln!(n, "Vsense n1 n2 DC 0").unwrap();
    writeln!(n, "Rcoil n2 0 {r_t}").unwrap();
    writeln!(n, ".options reltol=1e-6 abstol=1e-10").unwrap();
    writeln!(n, ".tran 1u 12m 0 1u uic").unwrap();
    writeln!(n, ".control\nrun\nwrdata {{out}} i(Vsense)\n.endc\n.end").unwrap();
    let tr = trace("saturating", &n);
    let s = scenario(SATURATING);
    let model = s.params().validate().unwrap();
    let mut coil = coilward::CoilState::idle();
    let mut worst_spice: f64 = 0.0;
    let mut worst_model: f64 = 0.0;
    for k in 1..=240u32 {
        let t = f64::from(k) * 50e-6;
        model.step(&mut coil, 1000, coilward::Volts::from_num(24));
        let want = two_slope(t, a, r_t, l, at_sat, l_sat);
        worst_spice = worst_spice.max((at(&tr, t) - want).abs() / want);
        worst_model = worst_model.max((f64::from(model.amps(coil.current())) - want).abs() / 4.0);
    }
    eprintln!(
        "CHECK saturating rise: ngspice vs two-slope closed form {:.4} % (worst, relative); \
         library model vs closed form {:.2e} of full scale",
        worst_spice * 100.0,
        worst_model
    );
    assert!(worst_spice < 0.01, "{worst_spice}");
    assert!(worst_model < 1e-3, "{worst_model}");

    // Closed loop: the guard, told the saturation and the box, against the saturating plant.
    let r = cosim::run(&s, Options::default());
    let ceiling = f64::from(
        s.guard()
            .unwrap()
            .model()
            .amps(s.guard().unwrap().ceiling()),
    );
    eprintln!(
        "CHECK saturating, guard told: true peak {:.4} A, ceiling {ceiling:.4} A, trip 1.7 A",
        r.peak_current_a
    );
    assert!(r.peak_current_a <= ceiling, "{}", r.peak_current_a);
    assert!(!r.findings.iter().any(|f| f.kind == "current-above-trip"));
    assert!(r.events.iter().any(|e| e.condition == "current-limit"));
    assert!(r.estimate.min_bound_margin_a >= 0.0, "{:?}", r.estimate);
    // The same guard believing the coil does not saturate below 10 A lets the current through.
    let blind = scenario(&format!(
        "{SATURATING}\n[model]\nsaturation_current = \"10 A\"\n"
    ));
    let r = cosim::run(&blind, Options::default());
    eprintln!(
        "CHECK saturating, guard not told: true peak {:.4} A",
        r.peak_current_a
    );
    assert!(r.findings.iter().any(|f| f.kind == "current-above-trip"));
}

// ---------------------------------------------------------------------------------------------
// 2. Switch-node capacitance at low duty.

fn low_duty_text(cap: &str) -> String {
    format!(
        r#"
name = "large coil held at 4 % duty (invented for the test)"
[supply]
voltage = "24 V"
min = "20 V"
max = "26 V"
[coil]
inductance = "1 H"
resistance = "60 Ω"
[switch]
on_resistance = "0.05 Ω"
capacitance = "{cap}"
breakdown = "100 V"
[clamp]
path = "freewheel"
forward_voltage = "0.7 V"
resistance = "0 Ω"
[control]
period = "50 us"
duty_resolution = 1000
current_full_scale = "0.5 A"
[guard]
current_ceiling = "0.45 A"
trip_current = "0.48 A"
release_current = "5 mA"
[[drive]]
at = "0 ms"
duty = "4 %"
[run]
duration = "40 ms"
[tolerance]
capacitance = "±20 %"
"#
    )
}

#[test]
fn at_low_duty_the_bound_covers_the_node_charge() {
    let s = scenario(&low_duty_text("1 nF"));
    // The plant against ngspice on this drive (the truth the bound is judged against).
    let case = Case {
        name: "low-duty-1nF",
        c: Circuit {
            supply: 24.0,
            source_resistance: 0.0,
            inductance: 1.0,
            saturation: None,
            resistance: 60.0,
            on_resistance: 0.05,
            capacitance: 1e-9,
            breakdown: 100.0,
            avalanche_resistance: 0.0,
            body_diode_drop: 0.8,
            clamp: ClampKind::Freewheel {
                drop: 0.7,
                resistance: 0.0,
            },
        },
        period: 50e-6,
        on: 2e-6,
        periods: 800,
        rest: 1e-3,
        release: 5e-3,
    };
    let m = spice::ngspice(case.name, &spice::netlist(&case)).unwrap_or_else(|e| panic!("{e}"));
    let (_, plant_mean, ..) = spice::plant(&case).unwrap();
    let rel = (plant_mean - m["imean"]).abs() / m["imean"];
    eprintln!(
        "CHECK low duty, mean current: plant {plant_mean:.6e} A, ngspice {:.6e} A ({:.3} %)",
        m["imean"],
        rel * 100.0
    );
    assert!(rel < 0.02);
    // Without the node's charge the mean would be D·Vs/R − (1 − D)·Vf/R
    // (shared/REFERENCES.md §6, continuous conduction) or less: the capacitance adds current.
    let naive = (0.04 * 24.0 - 0.96 * 0.7) / 60.0;
    assert!(m["imean"] > 1.2 * naive, "{} vs {naive}", m["imean"]);

    let r = cosim::run(
        &s,
        Options {
            rows: true,
            wave: None,
        },
    );
    let last = r.rows.last().unwrap();
    eprintln!(
        "CHECK low duty, 1 nF: true {:.4e} A, nominal estimate {:.4e} A, bound margin at worst \
         {:.3e} A, largest shortfall of the nominal estimate {:.3e} A",
        last.current_a,
        last.estimated_current_a,
        r.estimate.min_bound_margin_a,
        r.estimate.max_underestimate_a
    );
    assert!(r.estimate.min_bound_margin_a >= 0.0, "{:?}", r.estimate);
    // The nominal estimate (no node charge) runs low here: the effect the bound covers is real.
    assert!(last.estimated_current_a < 0.9 * last.current_a);
}

// ---------------------------------------------------------------------------------------------
// 3. Nothing across the switch: a ring under the breakdown.

const RINGING: &str = r#"
name = "high-resistance coil, nothing across the switch (invented for the test)"
[supply]
voltage = "24 V"
min = "20 V"
max = "26 V"
[coil]
inductance = "50 mH"
resistance = "100 Ω"
[switch]
on_resistance = "0.05 Ω"
capacitance = "22 nF"
breakdown = "400 V"
[clamp]
path = "none"
[control]
period = "50 us"
duty_resolution = 1000
current_full_scale = "0.5 A"
[guard]
current_ceiling = "0.3 A"
trip_current = "0.35 A"
release_current = "10 mA"
[[drive]]
at = "0 ms"
duty = "100 %"
[[drive]]
at = "5 ms"
duty = "0 %"
[[drive]]
at = "5.05 ms"
duty = "100 %"
[run]
duration = "12 ms"
"#;

#[test]
fn a_ring_under_the_breakdown_is_waited_out() {
    // ngspice: the turn-off of the settled 0.24 A; the node peak against the series-RLC closed
    // form (shared/REFERENCES.md §10: 367.06 V for this circuit, Vs + I0·√(L/C) = 385.81 V
    // undamped), and the last instant the current's magnitude is above the release current.
    // The body diode is a plain silicon diode (IS = 10⁻¹⁴ A, N = 1: about 0.80 V at 0.24 A; the
    // near-ideal element of the other cross-checks is too stiff for ngspice in this ring).
    let t_off = 1e-6;
    let mut n = String::new();
    writeln!(n, "ring under breakdown").unwrap();
    writeln!(n, "V1 vs 0 DC 24").unwrap();
    writeln!(n, "L1 vs n1 0.05 IC={}", 24.0 / 100.05).unwrap();
    writeln!(n, "Vsense n1 n2 DC 0").unwrap();
    writeln!(n, "Rcoil n2 drain 100").unwrap();
    writeln!(n, "C1 drain 0 22n IC={}", 24.0 * 0.05 / 100.05).unwrap();
    writeln!(n, "S1 drain 0 gate 0 swmod").unwrap();
    writeln!(n, ".model swmod SW(VT=0.5 VH=0 RON=0.05 ROFF=1e12)").unwrap();
    writeln!(n, "Vg gate 0 PWL(0 1 {t_off} 1 {} 0)", t_off + 1e-9).unwrap();
    writeln!(n, "Dbody 0 drain dsil").unwrap();
    writeln!(n, "Vav drain aa DC 400").unwrap();
    writeln!(n, "Dav aa 0 dideal").unwrap();
    writeln!(n, ".model dideal D(IS=1e-14 N=0.002)").unwrap();
    writeln!(n, ".model dsil D(IS=1e-14 N=1)").unwrap();
    writeln!(n, ".options reltol=1e-5 abstol=1e-10 vntol=1e-7").unwrap();
    writeln!(n, ".tran 20n 6m 0 20n uic").unwrap();
    writeln!(n, ".meas tran vpk MAX v(drain) from={t_off} to=6m").unwrap();
    writeln!(n, ".control\nrun\nwrdata {{out}} i(Vsense)\n.endc\n.end").unwrap();
    let tr = trace("ring-under-breakdown", &n);
    let last_above = tr
        .iter()
        .filter(|p| p.0 > t_off && p.1.abs() > 10e-3)
        .map(|p| p.0)
        .fold(t_off, f64::max);
    let m = spice::ngspice("ring-under-breakdown-peak", &n).unwrap_or_else(|e| panic!("{e}"));
    let rel = (m["vpk"] - 367.06).abs() / 367.06;
    eprintln!(
        "CHECK ring: node peak ngspice {:.2} V vs 367.06 V ({:.3} %); |i| last above 10 mA at \
         {:.3} ms after the turn-off",
        m["vpk"],
        rel * 100.0,
        (last_above - t_off) * 1e3
    );
    assert!(rel < 0.005);
    assert!(m["vpk"] < 400.0); // under the breakdown: nothing avalanches
    assert!(last_above - t_off > 0.5e-3); // the ring outlasts an avalanche's 31 µs by far
    // The guard: the request to switch on again comes one period after the turn-off.
    let s = scenario(RINGING);
    let r = cosim::run(
        &s,
        Options {
            rows: true,
            wave: None,
        },
    );
    let on_again = r
        .rows
        .iter()
        .find(|x| x.t_s > 5.001e-3 && x.duty_applied > 0.0)
        .map(|x| x.t_s)
        .unwrap();
    eprintln!(
        "CHECK ring: the guard switched on again {:.3} ms after the turn-off (ring over after \
         {:.3} ms)",
        (on_again - 5e-3) * 1e3,
        (last_above - t_off) * 1e3
    );
    assert!(on_again - 5e-3 >= last_above - t_off);
    assert!(!r.findings.iter().any(|f| f.kind == "on-before-release"));
    assert!(!r.findings.iter().any(|f| f.kind == "on-into-ringing-node"));
    // A guard that believes a 1 kΩ winding (its ring would die within 0.1 ms) switches on into
    // the real ring, and the simulator says so.
    let blind = scenario(&format!("{RINGING}\n[model]\nresistance = \"1 kΩ\"\n"));
    let r = cosim::run(&blind, Options::default());
    let kinds: Vec<_> = r.findings.iter().map(|f| f.kind).collect();
    eprintln!("CHECK ring, guard misinformed: {kinds:?}");
    assert!(kinds.contains(&"on-before-release") || kinds.contains(&"on-into-ringing-node"));
    // A release current above the coil's own current lets the guard switch on one period after
    // the turn-off, with the node near its 366 V peak: a hard turn-on the simulator flags.
    let early =
        scenario(&RINGING.replace("release_current = \"10 mA\"", "release_current = \"0.3 A\""));
    let r = cosim::run(&early, Options::default());
    let f = r
        .findings
        .iter()
        .find(|f| f.kind == "on-into-ringing-node")
        .expect("flagged");
    eprintln!("CHECK ring, release above the current: {}", f.detail);
    assert!((f.t_s - 5.05e-3).abs() < 1e-6);
}

// ---------------------------------------------------------------------------------------------
// What the bound costs.

/// Mean true current over `from ..= to` (s) of a run.
fn mean_current(s: &Scenario, from: f64, to: f64) -> f64 {
    let r = cosim::run(
        s,
        Options {
            rows: true,
            wave: None,
        },
    );
    let rows: Vec<_> = r
        .rows
        .iter()
        .filter(|x| x.t_s >= from && x.t_s < to)
        .collect();
    rows.iter().map(|x| x.mean_current_a).sum::<f64>() / rows.len() as f64
}

/// The scenario's text with its `[tolerance]` section (the last section) removed: the guard is
/// then told the circuit exactly.
fn exact(text: &str) -> String {
    text.split("\n[tolerance]")
        .next()
        .unwrap_or(text)
        .to_string()
}

/// How much mean current a hold at the ceiling loses to the bound, against a guard told the
/// circuit exactly, on the same (nominal) coil: the figure the declared tolerance costs.
fn hold_cost(text: &str, from: f64, to: f64) -> f64 {
    let bounded = mean_current(&scenario(text), from, to);
    let informed = mean_current(&scenario(&exact(text)), from, to);
    1.0 - bounded / informed
}

#[test]
fn what_the_bound_costs_in_a_hold_at_the_ceiling() {
    let valve = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/scenarios/valve-at-ceiling.toml"),
    )
    .unwrap();
    // The demo valve held at its 1.0 A ceiling from 15 to 40 ms; its box: inductance ±30 %,
    // resistance ±10 %, supply reading ±2 %. No sound guard can do better than
    // 1 − 0.9·0.98 = 11.8 % here: at equal duty the box's worst coil (R −10 %, reading 2 % low)
    // draws 1/(0.9·0.98) times the nominal current.
    let valve_cost = hold_cost(&valve, 0.015, 0.040);
    // The saturating coil of the first test, held at its 1.5 A ceiling from 10 to 30 ms.
    let sat_cost = hold_cost(SATURATING, 0.010, 0.030);
    eprintln!(
        "CHECK hold at the ceiling, mean current lost to the bound: demo valve {:.1} %, \
         saturating coil {:.1} %",
        valve_cost * 100.0,
        sat_cost * 100.0
    );
    // The goal is at most 15 %. The valve meets it (14.3 % measured). The saturating coil
    // does not yet (17.2 % measured): the saturated inductance is not sliced, so above the
    // saturation current its rise and fall still take the two ends of the ±20 % spread. This
    // bound keeps it from getting worse until it is.
    assert!(valve_cost > 0.118 && valve_cost <= 0.15, "{valve_cost}");
    assert!(sat_cost > 0.053 && sat_cost <= 0.18, "{sat_cost}");
}

/// The fault suite over a circuit's own box: nothing inside it is exceeded.
fn suite_holds(name: &str, text: &str) {
    let s = scenario(text);
    let cases = coilward_sim::faults::suite(&s);
    let mut worst: f64 = 0.0;
    for c in cases.iter().filter(|c| c.inside) {
        let (o, _) = coilward_sim::faults::run(c);
        assert!(!o.exceeded, "{name}: {}: {o:?}", o.name);
        assert!(o.bound_margin_a >= 0.0, "{name}: {}: {o:?}", o.name);
        worst = worst.max(o.peak_over_ceiling);
    }
    eprintln!(
        "CHECK fault suite, {name}: {} cases inside the box, none exceeded; worst peak {worst:.3} \
         of the ceiling",
        cases.iter().filter(|c| c.inside).count()
    );
}

#[test]
fn inside_their_boxes_the_three_circuits_exceed_nothing() {
    suite_holds("saturating coil", SATURATING);
    suite_holds("4 % duty, 1 nF", &low_duty_text("1 nF"));
    let ringing = format!(
        "{RINGING}\n[tolerance]\ninductance = \"±10 %\"\nresistance = \"±5 %\"\ncapacitance = \"±20 %\"\n"
    );
    suite_holds("ring under breakdown", &ringing);
}
