//! A sweep's summary as text and as JSON, the same for a sweep run whole, a shard, a resumed
//! sweep and merged shards. JSON keys kept for scripts: `schema`, `scenario {name, file,
//! topology}`, `seed`, `plan`, `sweep_size`, `samples`, `passed`, `limited`, `failed`, `verdict`,
//! `failure_upper_95` (null for the corners plan), `findings {kind: {samples, upper_95}}`, `worst {figure: {value, sample,
//! verdict, parameters}}`, `failed_samples`.

use super::si;
use crate::sweep::Plan;
use crate::sweep::records::Header;
use crate::sweep::summary::{CONFIDENCE, FIGURES, Summary, samples_for};
use serde_json::{Value, json};
use std::fmt::Write as _;

/// A drawn value with its unit, as the scenario writes it.
pub fn param(key: &str, v: f64) -> String {
    let unit = crate::scenario::Knob::ALL
        .iter()
        .find(|k| k.name() == key)
        .map_or("", |k| k.unit().symbol());
    if unit == "°C" {
        format!("{v:.1} °C")
    } else {
        si(v, unit, 4)
    }
}

/// A probability as a percentage with three significant digits.
fn percent(p: f64) -> String {
    let x = p * 100.0;
    if x.is_nan() || x <= 0.0 {
        return format!("{x} %");
    }
    let decimals = if x >= 10.0 {
        1
    } else if x >= 1.0 {
        2
    } else {
        (2 - x.log10().floor() as i32).clamp(2, 8) as usize
    };
    format!("{x:.decimals$} %")
}

/// The printed summary; `target` is the failure probability a designer wants to show (the
/// samples it needs are printed).
pub fn text(s: &Summary, plan: Plan, target: f64) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "  pass {}, limited {}, fail {}",
        s.passed, s.limited, s.failed
    );
    if !plan.is_random() {
        let _ = writeln!(
            out,
            "  (the corners are chosen, not drawn: they bound no probability; sweep with another plan for that)"
        );
    } else if let Some(n) = samples_for(target, CONFIDENCE) {
        let _ = writeln!(
            out,
            "  failure probability at most {} ({:.0} % confidence, {} failed of {})",
            percent(s.failure_upper()),
            CONFIDENCE * 100.0,
            s.failed,
            s.samples
        );
        let _ = writeln!(
            out,
            "  to show at most {} with none failing: {n} samples",
            percent(target)
        );
    }
    for (index, findings) in &s.first_failed {
        let _ = writeln!(out, "  failed: sample {index} ({})", findings.join(", "));
    }
    let more = s.failed.saturating_sub(s.first_failed.len() as u64);
    if more > 0 {
        let _ = writeln!(out, "  failed: {more} more samples (all in the records)");
    }
    let _ = writeln!(out, "\n  worst cases:");
    for (w, figure) in s.worst.iter().zip(&FIGURES) {
        let Some(w) = w else { continue };
        let params: Vec<String> = w
            .parameters
            .iter()
            .map(|(k, v)| format!("{k} {}", param(k, *v)))
            .collect();
        let shown = if w.value.is_finite() {
            si(w.value, figure.unit, 4)
        } else {
            "not reached".into()
        };
        let _ = writeln!(
            out,
            "  {:<17} {shown:>11}  sample {} ({}): {}",
            figure.name,
            w.index,
            w.verdict.word(),
            params.join(", ")
        );
    }
    if !s.kinds.is_empty() {
        let _ = writeln!(
            out,
            "\n  findings among the samples (the limited ones: the guard acted):"
        );
        for (k, n) in &s.kinds {
            let bound = crate::sweep::summary::upper_bound(*n, s.samples, CONFIDENCE);
            let bound = if plan.is_random() {
                format!("  at most {}", percent(bound))
            } else {
                String::new()
            };
            let _ = writeln!(out, "  {k:<26} {n:>7} samples{bound}");
        }
    }
    out
}

/// The JSON summary.
pub fn json(h: &Header, s: &Summary) -> Value {
    let mut worst = serde_json::Map::new();
    for (w, figure) in s.worst.iter().zip(&FIGURES) {
        let Some(w) = w else { continue };
        let parameters: serde_json::Map<String, Value> = w
            .parameters
            .iter()
            .map(|(k, v)| (k.clone(), json!(v)))
            .collect();
        worst.insert(
            figure.key.into(),
            json!({
                "value": w.value.is_finite().then_some(w.value),
                "sample": w.index,
                "verdict": w.verdict.word(),
                "parameters": parameters,
            }),
        );
    }
    let findings: serde_json::Map<String, Value> = s
        .kinds
        .iter()
        .map(|(k, n)| {
            let upper = crate::sweep::summary::upper_bound(*n, s.samples, CONFIDENCE);
            let upper = h.plan.is_random().then_some(upper);
            (k.clone(), json!({"samples": n, "upper_95": upper}))
        })
        .collect();
    json!({
        "schema": super::json::REPORT_SCHEMA,
        "scenario": super::json::scenario(&h.scenario, std::path::Path::new(&h.file), "low-side"),
        "seed": h.seed,
        "plan": h.plan.word(),
        "sweep_size": h.sweep_size,
        "samples": s.samples,
        "passed": s.passed,
        "limited": s.limited,
        "failed": s.failed,
        "verdict": s.verdict().word(),
        "failure_upper_95": h.plan.is_random().then(|| s.failure_upper()),
        "findings": findings,
        "worst": worst,
        "failed_samples": s.first_failed.iter().map(|f| f.0).collect::<Vec<_>>(),
    })
}
