//! Reports of a run: the terminal summary ([`summary`]), JSON ([`json`]), CSV ([`csv`]) and an
//! SVG plot ([`svg`]). The JSON keys and CSV columns are a contract scripts rely on (listed in
//! the contributor guide): fields may be added, none renamed or removed.

pub mod csv;
pub mod fit;
pub mod json;
pub mod plot;
pub mod svg;
pub mod sweep;

use crate::cosim::Run;
use crate::scenario::{Calls, Scenario};
use std::fmt::Write as _;

/// `value` with an SI prefix and `unit`, to `digits` significant digits: `32.3 µJ`.
pub fn si(value: f64, unit: &str, digits: usize) -> String {
    if value == 0.0 || !value.is_finite() {
        return format!("{value} {unit}");
    }
    let prefixes = [
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
        (1e-12, "p"),
    ];
    let a = value.abs();
    let (scale, p) = prefixes
        .iter()
        .copied()
        .find(|(s, _)| a >= *s * 0.999_5)
        .unwrap_or((1e-12, "p"));
    let x = value / scale;
    let int_digits = if x.abs() >= 100.0 {
        3
    } else if x.abs() >= 10.0 {
        2
    } else {
        1
    };
    let decimals = digits.saturating_sub(int_digits);
    format!("{x:.decimals$} {p}{unit}")
}

/// The summary's verdict line, the same for both topologies.
pub fn verdict_line(v: crate::cosim::Verdict) -> &'static str {
    match v {
        crate::cosim::Verdict::Pass => {
            "  verdict: PASS — no limit exceeded and the guard never changed the request"
        }
        crate::cosim::Verdict::Limited => {
            "  verdict: LIMITED — no limit exceeded; the guard changed the request (findings below)"
        }
        crate::cosim::Verdict::Fail => {
            "  verdict: FAIL — a limit exceeded or the run not carried out (findings below)"
        }
    }
}

/// The terminal summary of a run.
pub fn summary(s: &Scenario, r: &Run) -> String {
    let mut o = heading(s, r);
    let l = &s.limits;
    let _ = writeln!(o);
    let configured = f64::from(l.current_ceiling);
    let lowered = if r.ceiling_a < configured * (1.0 - 1e-6) {
        format!(
            " (configured {}, lowered for the single-pulse energy rating)",
            si(configured, "A", 4)
        )
    } else {
        String::new()
    };
    let _ = writeln!(
        o,
        "  coil current   peak {:>10}   trip at {}, ceiling {}{lowered}",
        si(r.peak_current_a, "A", 4),
        si(f64::from(l.trip_current), "A", 4),
        si(r.ceiling_a, "A", 4)
    );
    let _ = writeln!(
        o,
        "  switch node    peak {:>10}   breakdown {}",
        si(r.peak_drain_voltage_v, "V", 4),
        si(s.plant.breakdown, "V", 4)
    );
    let rating = l
        .clamp_pulse_energy
        .map_or("no rating given".to_string(), |e| {
            format!("rating {}", si(f64::from(e), "J", 3))
        });
    let _ = writeln!(
        o,
        "  clamp pulses   most {:>10}   {rating}; {} in all",
        si(r.max_pulse_energy_j, "J", 3),
        si(r.clamp_energy_total_j, "J", 3)
    );
    let _ = writeln!(
        o,
        "  estimate       worst {:>9}   off the true current, rms {}; at worst {} below it",
        si(r.estimate.max_abs_error_a, "A", 3),
        si(r.estimate.rms_error_a, "A", 3),
        si(r.estimate.max_underestimate_a, "A", 3)
    );
    turn_off_table(&mut o, s, r);
    let raised: Vec<_> = r.events.iter().filter(|e| e.detail != "cleared").collect();
    let _ = writeln!(o);
    if raised.is_empty() {
        let _ = writeln!(o, "  guard: no condition raised");
    } else {
        let _ = writeln!(
            o,
            "  guard raised {} condition(s); the first ones:",
            raised.len()
        );
        for e in raised.iter().take(8) {
            let _ = writeln!(
                o,
                "    {:>9}  {:<15} {}",
                si(e.t_s, "s", 5),
                e.condition,
                e.detail
            );
        }
        if r.acted_periods > 0 {
            let of = match s.calls {
                Calls::EveryPeriod => (r.periods, "periods"),
                Calls::OnEvents { .. } => (r.calls, "calls"),
            };
            let _ = writeln!(
                o,
                "  the guard changed the request in {} of {} {}",
                r.acted_periods, of.0, of.1
            );
        }
    }
    let _ = writeln!(o);
    let _ = writeln!(o, "{}", verdict_line(r.verdict()));
    {
        for f in &r.findings {
            let _ = writeln!(o, "    {:>9}  {}: {}", si(f.t_s, "s", 5), f.kind, f.detail);
        }
    }
    o
}

/// The run's first lines: the scenario, its length and calls, the assumed values and beliefs.
fn heading(s: &Scenario, r: &Run) -> String {
    let mut o = String::new();
    let _ = writeln!(o, "{} ({})", s.name, s.file.display());
    match s.calls {
        Calls::EveryPeriod => {
            let _ = writeln!(
                o,
                "  {} control periods of {} ({}); the circuit changed paths {} times",
                r.periods,
                si(s.period, "s", 3),
                si(r.simulated_s, "s", 3),
                r.plant_events
            );
        }
        Calls::OnEvents { poll_us } => {
            let _ = writeln!(
                o,
                "  {} guard calls on events (poll every {}) over {}; the circuit changed paths {} times",
                r.calls,
                si(poll_us as f64 * 1e-6, "s", 3),
                si(r.simulated_s, "s", 3),
                r.plant_events
            );
        }
    }
    for a in &s.assumed {
        let _ = writeln!(o, "  assumed: {a}");
    }
    for w in &s.warnings {
        let _ = writeln!(o, "  warning: {w}");
    }
    if !s.overridden.is_empty() {
        let names: Vec<String> = s
            .overridden
            .iter()
            .map(|k| {
                format!(
                    "{} {}",
                    k.name(),
                    si(s.beliefs.get(*k), k.unit().symbol(), 4)
                )
            })
            .collect();
        let _ = writeln!(o, "  the firmware believes: {}", names.join(", "));
    }
    o
}

/// The turn-offs, one line each.
fn turn_off_table(o: &mut String, s: &Scenario, r: &Run) {
    let l = &s.limits;
    if !r.turn_offs.is_empty() {
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "  turn-offs   {:>9}  {:>9}  {:>16}  {:>11}  {:>10}",
            "at",
            "current",
            format!("to {}", si(f64::from(l.release_current), "A", 3)),
            "clamp energy",
            "node peak"
        );
        for t in &r.turn_offs {
            let _ = writeln!(
                o,
                "              {:>9}  {:>9}  {:>16}  {:>11}  {:>10}{}",
                si(t.t_s, "s", 5),
                si(t.current_a, "A", 4),
                t.decay_time_s
                    .map_or("not reached".to_string(), |d| si(d, "s", 4)),
                si(t.clamp_energy_j, "J", 3),
                si(t.peak_drain_voltage_v, "V", 4),
                if t.forced {
                    "  (forced by the guard)"
                } else {
                    ""
                }
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::si;

    #[test]
    fn si_prefixes() {
        assert_eq!(si(32.3e-6, "J", 3), "32.3 µJ");
        assert_eq!(si(1.3101, "A", 4), "1.310 A");
        assert_eq!(si(0.05, "A", 3), "50.0 mA");
        assert_eq!(si(24.7655, "V", 4), "24.77 V");
        assert_eq!(si(0.2, "s", 3), "200 ms");
    }
}
