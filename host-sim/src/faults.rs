//! The fault suite: the plant departs from what the guard believes, and the real guard runs
//! against it, on any scenario.
//!
//! # The declared tolerance is the box
//! A scenario's `[tolerance]` section is what the guard is told to cover
//! ([`crate::scenario::declared`]): its bound is at or above the true current for every circuit
//! inside the box, so inside it nothing may be exceeded. The suite runs
//!
//! - the nominal circuit;
//! - the box's corners: every spread at its low or high end (the first [`CORNER_KNOBS`] spreads
//!   vary, any further ones stay nominal), with the supply reading at either end of
//!   `supply_reading`;
//! - [`RANDOM_POINTS`] seeded random points inside the box;
//! - named faults outside it: parameters beyond their spreads, a supply outside its window, a
//!   stuck or noisy reading, missed and late control ticks (the library's bound does not cover
//!   ticks: a missed tick's period is not advanced) or, for on-events calls, a housekeeping poll
//!   100 × slower, a winding far hotter than the model.
//!
//! A case *exceeds* when the true current passes the guard's effective ceiling
//! (`peak_over_ceiling > 1`), a clamp pulse passes its rating (`pulse_over_rating > 1`), or the
//! load is switched on before its true current fell below the release current. It is *flagged*
//! when the guard raised a fault condition (not `release-hold` or `current-limit`, which are its
//! normal work). Without a current sensor a parameter outside the box cannot be seen, only
//! covered by a wider box; supply and reading faults outside the supply window are flagged within
//! one control period by `supply-range`.

use crate::cosim::{self, Options, Run};
use crate::scenario::{Calls, Knob, Scenario};
use rand::{Rng, SeedableRng};
use serde::Serialize;

/// How many spreads vary at the corners (2^k corners, times two reading ends).
pub const CORNER_KNOBS: usize = 6;
/// Random points drawn inside the box.
pub const RANDOM_POINTS: u64 = 16;

/// One case of the suite: a transformed scenario.
#[derive(Debug, Clone)]
pub struct Case {
    /// What it is.
    pub name: String,
    /// Whether it lies inside the declared tolerance.
    pub inside: bool,
    /// When the fault starts, s (for "flagged within one period").
    pub starts: f64,
    /// Whether a guard without a current sensor can detect it at all.
    pub detectable: bool,
    /// The scenario with the fault applied.
    pub scenario: Scenario,
}

/// What one case did (the JSON record of `coilward-sim faults`).
#[derive(Debug, Clone, Serialize)]
pub struct Outcome {
    /// The case.
    pub name: String,
    /// Whether it lies inside the declared tolerance.
    pub inside_tolerance: bool,
    /// True peak current over the guard's effective ceiling.
    pub peak_over_ceiling: f64,
    /// Largest true clamp pulse over the pulse rating (0 without a rating; the low side).
    pub pulse_over_rating: f64,
    /// Highest true bus voltage over the supply's maximum (0 on the low side).
    pub bus_over_maximum: f64,
    /// The load was switched on before its true current fell below the release current.
    pub early_turn_on: bool,
    /// Any of the three above.
    pub exceeded: bool,
    /// The guard raised a fault condition.
    pub flagged: bool,
    /// The first fault condition raised and when, s.
    pub first_flag: Option<(&'static str, f64)>,
    /// When the fault starts, s.
    #[serde(skip)]
    pub starts: f64,
    /// Whether the fault is detectable without a current sensor.
    pub detectable: bool,
    /// The bound's smallest margin over the true current at a tick, A (negative: the bound was
    /// below the true current).
    pub bound_margin_a: f64,
}

fn case(
    base: &Scenario,
    name: impl Into<String>,
    inside: bool,
    f: impl FnOnce(&mut Scenario),
) -> Case {
    let mut s = base.clone();
    f(&mut s);
    Case {
        name: name.into(),
        inside,
        starts: 0.0,
        detectable: false,
        scenario: s,
    }
}

/// Sets the supply reading's error to `e` (a fraction of the nominal supply, as an offset).
fn read_off(s: &mut Scenario, e: f64) {
    s.adc.offset = e * s.plant.voltage;
}

/// The suite for `base`: nominal, corners, random points, named faults outside the box.
pub fn suite(base: &Scenario) -> Vec<Case> {
    let mut out = vec![case(
        base,
        "nominal (the plant is what the guard believes)",
        true,
        |_| {},
    )];
    let spreads: Vec<_> = base.tolerance.iter().take(CORNER_KNOBS).copied().collect();
    // A reading within ±f of the true supply: at a nominal supply an offset of ∓f·V reads low
    // or high by exactly f (the worst the box allows).
    let reading = base.supply_reading;
    let ends: &[f64] = if reading > 0.0 { &[-1.0, 1.0] } else { &[0.0] };
    for mask in 0u32..(1 << spreads.len()) {
        for &end in ends {
            let mut label = Vec::new();
            let c = case(base, String::new(), true, |s| {
                for (j, &(knob, spread)) in spreads.iter().enumerate() {
                    let (lo, hi) = spread.bounds(base.plant.get(knob));
                    let high = mask & (1 << j) != 0;
                    s.plant.set(knob, if high { hi } else { lo });
                    label.push(format!(
                        "{} {}",
                        knob.name(),
                        if high { "high" } else { "low" }
                    ));
                }
                if end != 0.0 {
                    read_off(s, end * reading);
                    label.push(format!("reads {}", if end < 0.0 { "low" } else { "high" }));
                }
            });
            if !label.is_empty() {
                out.push(Case {
                    name: format!("corner: {}", label.join(", ")),
                    ..c
                });
            }
        }
    }
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2026);
    if !base.tolerance.is_empty() || reading > 0.0 {
        for n in 0..RANDOM_POINTS {
            let c = case(base, format!("random point {}", n + 1), true, |s| {
                for &(knob, spread) in &base.tolerance {
                    let (lo, hi) = spread.bounds(base.plant.get(knob));
                    s.plant.set(knob, rng.random_range(lo..=hi));
                }
                read_off(s, rng.random_range(-reading..=reading));
            });
            out.push(c);
        }
    }
    out.extend(outside(base));
    out
}

/// How far a knob's declared spread reaches below its nominal, as a fraction.
fn spread_below(base: &Scenario, knob: Knob) -> f64 {
    base.tolerance
        .iter()
        .find(|(k, _)| *k == knob)
        .map_or(0.0, |&(_, sp)| {
            let v = base.plant.get(knob);
            (v - sp.bounds(v).0) / v
        })
}

/// Named faults outside the declared box.
fn outside(base: &Scenario) -> Vec<Case> {
    let l_out = (spread_below(base, Knob::Inductance) + 0.2).min(0.9);
    let r_out = (spread_below(base, Knob::Resistance) + 0.1).min(0.9);
    let read_out = base.supply_reading + 0.03;
    let len = base.duration;
    let (v, v_min, v_max) = (
        base.plant.voltage,
        base.plant.supply_min,
        base.plant.supply_max,
    );
    let mut out = vec![
        case(
            base,
            format!("inductance {:.0} % below nominal", l_out * 100.0),
            false,
            |s| s.plant.inductance *= 1.0 - l_out,
        ),
        case(
            base,
            format!("resistance {:.0} % below nominal", r_out * 100.0),
            false,
            |s| s.plant.resistance *= 1.0 - r_out,
        ),
        case(base, "shorted turns (L and R halved)", false, |s| {
            s.plant.inductance *= 0.5;
            s.plant.resistance *= 0.5;
        }),
        case(base, "open coil (1 MΩ)", false, |s| {
            s.plant.resistance = 1e6
        }),
        case(
            base,
            format!("supply reads {:.0} % low", read_out * 100.0),
            false,
            |s| read_off(s, -read_out),
        ),
        case(base, "ADC noise 1 % rms (unbounded)", false, |s| {
            s.adc.noise = 0.01 * s.plant.voltage;
        }),
        case(base, "winding 100 K hotter than the model", false, |s| {
            s.plant.temperature += 100.0;
        }),
        case(
            base,
            "reset with current flowing (the guard starts not knowing)",
            true,
            |s| {
                // Where the guard held it before the reset: 0.9 × its effective ceiling (the
                // configured one, or lower where the clamp's pulse rating sets it).
                let ceiling = s.guard().map_or(f64::from(s.limits.current_ceiling), |g| {
                    f64::from(g.model().amps(g.ceiling()))
                });
                s.start.current = 0.9 * ceiling;
                s.start.guard_told = false;
            },
        ),
    ];
    // Interrupt latency: a PWM timer's update missed or late; on events, a housekeeping poll far
    // slower than configured (the guard's `next_check_us` still honoured, per its contract).
    let late = match base.calls {
        Calls::EveryPeriod => vec![
            case(base, "5 % of ticks missed", false, |s| {
                s.ticks.missed = 0.05
            }),
            case(base, "5 % of ticks late", false, |s| s.ticks.late = 0.05),
        ],
        Calls::OnEvents { poll_us } => vec![case(
            base,
            "housekeeping poll 100 x slower",
            false,
            move |s| {
                s.calls = Calls::OnEvents {
                    poll_us: poll_us.saturating_mul(100).min(4_294_000_000),
                }
            },
        )],
    };
    out.splice(6..6, late);
    let mut detectable = |name: String, f: &dyn Fn(&mut Scenario), starts: f64| {
        let mut c = case(base, name, false, f);
        c.detectable = true;
        c.starts = starts;
        out.push(c);
    };
    let t0 = (0.2 * len / base.period).round() * base.period;
    let t1 = (0.35 * len / base.period).round() * base.period;
    let sag = 0.9 * v_min;
    detectable(
        format!("supply sags to {sag:.3} V (minimum {v_min} V)"),
        &|s| s.supply_profile.changes = vec![(t0, sag), (t1, v)],
        t0,
    );
    let surge = 1.07 * v_max;
    detectable(
        format!("supply surges to {surge:.3} V (maximum {v_max} V)"),
        &|s| s.supply_profile.changes = vec![(t0, surge), (t1, v)],
        t0,
    );
    detectable(
        "ADC stuck at zero".to_string(),
        &|s| s.adc.stuck = Some(0.0),
        0.0,
    );
    detectable(
        format!("ADC stuck at {:.3} V", 1.2 * v_max),
        &|s| s.adc.stuck = Some(1.2 * v_max),
        0.0,
    );
    out
}

/// Runs one case.
pub fn run(case: &Case) -> (Outcome, Run) {
    let s = &case.scenario;
    let r = cosim::run(
        s,
        Options {
            rows: true,
            wave: None,
        },
    );
    let ceiling = s.guard().map_or(f64::from(s.limits.current_ceiling), |g| {
        f64::from(g.model().amps(g.ceiling()))
    });
    let pulse_over_rating = s
        .limits
        .clamp_pulse_energy
        .map_or(0.0, |rating| r.max_pulse_energy_j / f64::from(rating));
    let peak_over_ceiling = r.peak_current_a / ceiling;
    let early_turn_on = r.findings.iter().any(|f| f.kind == "on-before-release");
    let first_flag = r
        .events
        .iter()
        .find(|e| {
            e.detail != "cleared" && e.condition != "release-hold" && e.condition != "current-limit"
        })
        .map(|e| (e.condition, e.t_s));
    // 10⁻⁹ relative: the plant's own event-location tolerance.
    let over = |x: f64| x > 1.0 + 1e-9;
    let o = Outcome {
        name: case.name.clone(),
        inside_tolerance: case.inside,
        peak_over_ceiling,
        pulse_over_rating,
        bus_over_maximum: 0.0,
        early_turn_on,
        exceeded: over(peak_over_ceiling) || over(pulse_over_rating) || early_turn_on,
        flagged: first_flag.is_some(),
        first_flag,
        starts: case.starts,
        detectable: case.detectable,
        bound_margin_a: r.estimate.min_bound_margin_a,
    };
    (o, r)
}

/// The suite's table in Markdown (host-sim/README.md).
pub fn table(outcomes: &[Outcome], period: f64) -> String {
    use crate::report::si;
    // A bridge's cases report the bus where a low side's report the clamp pulse.
    let bridge = outcomes.iter().any(|o| o.bus_over_maximum > 0.0);
    let (third, early) = if bridge {
        ("true bus peak / maximum", "reversed early")
    } else {
        ("clamp pulse / rating", "switched on early")
    };
    let mut s = format!(
        "| case | inside the declared tolerance | true peak / ceiling | {third} | {early} | exceeded | guard flagged |\n|---|---|---|---|---|---|---|\n",
    );
    // The random points fold into one row, the worst of each column; so do the corners when
    // there are more than eight.
    let corners = outcomes
        .iter()
        .filter(|o| o.name.starts_with("corner:"))
        .count();
    let folds = |o: &Outcome| {
        o.name.starts_with("random point") || (corners > 8 && o.name.starts_with("corner:"))
    };
    let mut rows: Vec<Outcome> = outcomes.iter().filter(|o| !folds(o)).cloned().collect();
    if corners > 8 {
        let group: Vec<&Outcome> = outcomes
            .iter()
            .filter(|o| o.name.starts_with("corner:"))
            .collect();
        rows.push(worst_of(
            &group,
            format!("{corners} corners (worst of each column)"),
        ));
    }
    let random: Vec<&Outcome> = outcomes
        .iter()
        .filter(|o| o.name.starts_with("random point"))
        .collect();
    if !random.is_empty() {
        let name = format!(
            "{} random points inside (worst of each column)",
            random.len()
        );
        rows.push(worst_of(&random, name));
    }
    for o in &rows {
        let flagged = match o.first_flag {
            Some((c, t)) => {
                let late = t - o.starts;
                format!(
                    "`{c}` at {}{}",
                    si(t, "s", 3),
                    if o.detectable && late <= period * 1.000_001 {
                        " (within one period)"
                    } else {
                        ""
                    }
                )
            }
            None if o.detectable => "**not flagged**".to_string(),
            None if o.exceeded => "not flagged (undetectable without a current sensor)".to_string(),
            None => "—".to_string(),
        };
        s.push_str(&format!(
            "| {} | {} | {:.3} | {:.3} | {} | {} | {} |\n",
            o.name,
            if o.inside_tolerance { "yes" } else { "no" },
            o.peak_over_ceiling,
            if bridge {
                o.bus_over_maximum
            } else {
                o.pulse_over_rating
            },
            if o.early_turn_on { "**yes**" } else { "no" },
            if o.exceeded { "**yes**" } else { "no" },
            flagged
        ));
    }
    s
}

/// One row for a group of cases inside the box: the worst of each column.
fn worst_of(group: &[&Outcome], name: String) -> Outcome {
    let max = |f: fn(&Outcome) -> f64| group.iter().map(|o| f(o)).fold(0.0, f64::max);
    Outcome {
        name,
        inside_tolerance: true,
        peak_over_ceiling: max(|o| o.peak_over_ceiling),
        pulse_over_rating: max(|o| o.pulse_over_rating),
        bus_over_maximum: max(|o| o.bus_over_maximum),
        early_turn_on: group.iter().any(|o| o.early_turn_on),
        exceeded: group.iter().any(|o| o.exceeded),
        flagged: group.iter().any(|o| o.flagged),
        first_flag: group.iter().find_map(|o| o.first_flag),
        starts: 0.0,
        detectable: false,
        bound_margin_a: group
            .iter()
            .map(|o| o.bound_margin_a)
            .fold(f64::MAX, f64::min),
    }
}
