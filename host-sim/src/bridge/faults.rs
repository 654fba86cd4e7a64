//! The fault suite on a full-bridge scenario: the bridge plant departs from what the guard
//! believes, and the real bridge guard runs against it.
//!
//! # The declared tolerance is the box
//! The scenario's `[tolerance]` section ([`BridgeSpreads`]) is what the guard is told to cover:
//! its bound is at or above the true current for every circuit inside it, so inside it nothing
//! may be exceeded. The suite runs
//!
//! - the nominal circuit;
//! - the box's corners: inductance, resistance, the motor constant and the bus capacitance each
//!   at the low or high end of its spread (those the scenario spreads), with the rail read at
//!   either end of `supply_reading`;
//! - [`RANDOM_POINTS`] seeded random points inside the box;
//! - the bridge's own cases: a rotor held stalled, a rotor already turning against the first
//!   drive (the guard told its speed, so inside), and after a reset with current flowing;
//! - named faults outside it: parameters beyond their spreads, a bus that cannot sink what the
//!   guard was told it can, a rotor turning against the drive that the guard is not told of,
//!   more gate dead time than the guard was told, and a supply outside its window.
//!
//! A case *exceeds* when the true current passes the ceiling (`peak_over_ceiling > 1`), the bus
//! passes the supply's maximum (`bus_over_maximum > 1`), or the bridge drove the other way before
//! the true current fell to the release level and the dead time passed. It is *flagged* when
//! the guard raised a condition other than its normal work (`reversal-hold`, `current-limit`).

use crate::bridge::cosim::{self, BridgeRun};
use crate::bridge::scenario::{BridgeScenario, BridgeSpreads};
use crate::faults::{Outcome, RANDOM_POINTS};
use rand::{Rng, SeedableRng};

/// One case of the suite: a transformed bridge scenario.
#[derive(Debug, Clone)]
pub struct BridgeCase {
    /// What it is.
    pub name: String,
    /// Whether it lies inside the declared tolerance.
    pub inside: bool,
    /// When the fault starts, s.
    pub starts: f64,
    /// Whether a guard without a current sensor can detect it at all.
    pub detectable: bool,
    /// The scenario with the fault applied.
    pub scenario: BridgeScenario,
}

/// A knob of the bridge's box: its name, its spread, and how it sets the plant's value to
/// `nominal × (1 + x)`.
pub struct Knob {
    /// The spread's name.
    pub name: &'static str,
    /// ± this fraction of the nominal value.
    pub spread: f64,
    /// Sets the value in the first scenario to the second's nominal × (1 + x).
    pub set: fn(&mut BridgeScenario, &BridgeScenario, f64),
    /// The value in a scenario (SI), and its unit.
    pub get: (fn(&BridgeScenario) -> f64, &'static str),
}

/// The spreads of `t` that are not zero, as knobs.
pub fn knobs(t: &BridgeSpreads) -> Vec<Knob> {
    let all = [
        Knob {
            name: "inductance",
            spread: t.inductance,
            set: |s, b, x| s.circuit.inductance = b.circuit.inductance * (1.0 + x),
            get: (|s| s.circuit.inductance, "H"),
        },
        Knob {
            name: "resistance",
            spread: t.resistance,
            set: |s, b, x| s.circuit.resistance = b.circuit.resistance * (1.0 + x),
            get: (|s| s.circuit.resistance, "Ω"),
        },
        Knob {
            name: "motor constant",
            spread: t.back_emf_constant,
            set: |s, b, x| {
                if let (Some(r), Some(n)) = (s.circuit.rotor.as_mut(), b.circuit.rotor) {
                    r.constant = n.constant * (1.0 + x);
                }
            },
            get: (|s| s.circuit.rotor.map_or(0.0, |r| r.constant), "V·s/rad"),
        },
        Knob {
            name: "bus capacitance",
            spread: t.bus_capacitance,
            set: |s, b, x| {
                if let (Some(c), Some(n)) = (s.circuit.bus.as_mut(), b.circuit.bus) {
                    c.capacitance = n.capacitance * (1.0 + x);
                }
            },
            get: (|s| s.circuit.bus.map_or(0.0, |c| c.capacitance), "F"),
        },
    ];
    all.into_iter().filter(|k| k.spread > 0.0).collect()
}

fn case(
    base: &BridgeScenario,
    name: impl Into<String>,
    inside: bool,
    f: impl FnOnce(&mut BridgeScenario),
) -> BridgeCase {
    let mut s = base.clone();
    f(&mut s);
    BridgeCase {
        name: name.into(),
        inside,
        starts: 0.0,
        detectable: false,
        scenario: s,
    }
}

/// The suite for `base`: nominal, corners, random points, the rotor and reset cases, and named
/// faults outside the box.
pub fn suite(base: &BridgeScenario) -> Vec<BridgeCase> {
    let mut out = vec![case(
        base,
        "nominal (the plant is what the guard believes)",
        true,
        |_| {},
    )];
    let ks = knobs(&base.tolerance);
    let reading = base.tolerance.supply_reading;
    let v = base.circuit.supply;
    let ends: &[f64] = if reading > 0.0 { &[-1.0, 1.0] } else { &[0.0] };
    for mask in 0u32..(1 << ks.len()) {
        for &end in ends {
            if mask == 0 && ks.is_empty() && end == 0.0 {
                continue;
            }
            let mut label = Vec::new();
            let c = case(base, String::new(), true, |s| {
                for (j, k) in ks.iter().enumerate() {
                    let high = mask & (1 << j) != 0;
                    (k.set)(s, base, if high { k.spread } else { -k.spread });
                    label.push(format!("{} {}", k.name, if high { "high" } else { "low" }));
                }
                if end != 0.0 {
                    s.reading_offset = end * reading * v;
                    label.push(format!("reads {}", if end < 0.0 { "low" } else { "high" }));
                }
            });
            out.push(BridgeCase {
                name: format!("corner: {}", label.join(", ")),
                ..c
            });
        }
    }
    if !ks.is_empty() || reading > 0.0 {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2026);
        for n in 0..RANDOM_POINTS {
            out.push(case(base, format!("random point {}", n + 1), true, |s| {
                for k in &ks {
                    (k.set)(s, base, rng.random_range(-k.spread..=k.spread));
                }
                s.reading_offset = rng.random_range(-reading..=reading) * v;
            }));
        }
    }
    out.extend(rotor_and_reset(base));
    out.extend(outside(base));
    out
}

/// The rotor speed whose back-EMF (at the plant's constant) is `share` of the guard's back-EMF
/// limit, turning against the first drive; zero without a rotor.
fn against_first_drive(base: &BridgeScenario, share: f64) -> f64 {
    let first = base
        .drive
        .iter()
        .find(|d| d.duty != 0.0)
        .map_or(1.0, |d| d.duty.signum());
    base.circuit.rotor.map_or(0.0, |r| {
        -first * share * f64::from(base.params.motor.back_emf_limit) / r.constant
    })
}

/// Cases inside the box that only a bridge has: the rotor held or turning, and a reset.
fn rotor_and_reset(base: &BridgeScenario) -> Vec<BridgeCase> {
    let mut out = Vec::new();
    if let Some(rotor) = base.circuit.rotor {
        out.push(case(base, "rotor stalled (held by the load)", true, |s| {
            if let Some(r) = s.circuit.rotor.as_mut() {
                // A million times the inertia: the rotor does not move within the run.
                r.inertia = rotor.inertia * 1e6;
            }
        }));
        if base.speed_feedback {
            out.push(case(
                base,
                "rotor turning against the first drive at 90 % of the back-EMF limit",
                true,
                |s| s.start.speed = against_first_drive(base, 0.9),
            ));
        }
    }
    out.push(case(
        base,
        "reset with current flowing (the guard starts not knowing)",
        true,
        |s| s.start.current = 0.9 * f64::from(base.limits.current_ceiling),
    ));
    out
}

/// Named faults outside the declared box.
fn outside(base: &BridgeScenario) -> Vec<BridgeCase> {
    let t = &base.tolerance;
    let l_out = (t.inductance + 0.2).min(0.9);
    let r_out = (t.resistance + 0.1).min(0.9);
    let read_out = t.supply_reading + 0.03;
    let v = base.circuit.supply;
    let mut out = vec![
        case(
            base,
            format!("inductance {:.0} % below nominal", l_out * 100.0),
            false,
            |s| s.circuit.inductance *= 1.0 - l_out,
        ),
        case(
            base,
            format!("resistance {:.0} % below nominal", r_out * 100.0),
            false,
            |s| s.circuit.resistance *= 1.0 - r_out,
        ),
        case(
            base,
            format!("supply reads {:.0} % low", read_out * 100.0),
            false,
            |s| s.reading_offset = -read_out * v,
        ),
    ];
    let gate = if base.dead_time > 0.0 {
        (
            format!(
                "gate dead time 4 × the {:.2} µs the guard was told",
                base.dead_time * 1e6
            ),
            4.0 * base.dead_time,
        )
    } else {
        (
            "gate dead time of 1 µs the guard was not told".to_string(),
            1e-6,
        )
    };
    out.push(case(base, gate.0, false, |s| s.dead_time = gate.1));
    if let Some(bus) = base.circuit.bus {
        if bus.sink_current > 0.0 {
            out.push(case(
                base,
                format!(
                    "a supply that cannot sink (the guard was told {:.2} A)",
                    bus.sink_current
                ),
                false,
                |s| {
                    if let Some(b) = s.circuit.bus.as_mut() {
                        b.sink_current = 0.0;
                    }
                },
            ));
        }
        let c_out = (t.bus_capacitance + 0.3).min(0.9);
        out.push(case(
            base,
            format!("bus capacitance {:.0} % below nominal", c_out * 100.0),
            false,
            |s| {
                if let Some(b) = s.circuit.bus.as_mut() {
                    b.capacitance = bus.capacitance * (1.0 - c_out);
                }
            },
        ));
    }
    if let Some(rotor) = base.circuit.rotor {
        let k_out = t.back_emf_constant + 0.3;
        out.push(case(
            base,
            format!("motor constant {:.0} % above nominal", k_out * 100.0),
            false,
            |s| {
                if let Some(r) = s.circuit.rotor.as_mut() {
                    r.constant = rotor.constant * (1.0 + k_out);
                }
            },
        ));
        out.push(case(
            base,
            "rotor turning against the first drive, speed not given to the guard",
            false,
            |s| {
                s.start.speed = against_first_drive(base, 0.9);
                s.speed_feedback = false;
            },
        ));
    }
    let (v_min, v_max) = (
        f64::from(base.params.supply.min),
        f64::from(base.params.supply.max),
    );
    for (name, volts) in [
        (
            format!("supply at {:.3} V (minimum {v_min} V)", 0.9 * v_min),
            0.9 * v_min,
        ),
        (
            format!("supply at {:.3} V (maximum {v_max} V)", 1.07 * v_max),
            1.07 * v_max,
        ),
    ] {
        let mut c = case(base, name, false, |s| s.circuit.supply = volts);
        c.detectable = true;
        // From the run's start: the period before t = 0, which the guard already ticks.
        c.starts = -base.period;
        out.push(c);
    }
    out
}

/// Runs one case.
pub fn run(case: &BridgeCase) -> (Outcome, BridgeRun) {
    let s = &case.scenario;
    let r = cosim::run(s, true);
    let ceiling = f64::from(s.limits.current_ceiling);
    let peak_over_ceiling = r.peak_current_a / ceiling;
    let bus_over_maximum = r.peak_bus_v / f64::from(s.params.supply.max);
    let early_turn_on = r
        .findings
        .iter()
        .any(|f| f.kind == "reversed-before-decay" || f.kind == "reversed-before-dead-time");
    let first_flag = r
        .events
        .iter()
        .find(|e| {
            e.detail != "cleared"
                && e.condition != "reversal-hold"
                && e.condition != "current-limit"
        })
        .map(|e| (e.condition, e.t_s));
    // 10⁻⁹ relative: the plant's own event-location tolerance.
    let over = |x: f64| x > 1.0 + 1e-9;
    let o = Outcome {
        name: case.name.clone(),
        inside_tolerance: case.inside,
        peak_over_ceiling,
        pulse_over_rating: 0.0,
        bus_over_maximum,
        early_turn_on,
        exceeded: over(peak_over_ceiling) || over(bus_over_maximum) || early_turn_on,
        flagged: first_flag.is_some(),
        first_flag,
        starts: case.starts,
        detectable: case.detectable,
        bound_margin_a: r.min_bound_margin_a,
    };
    (o, r)
}
