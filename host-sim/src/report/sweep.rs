//! A sweep's summary as text and as JSON, the same for a sweep run whole, a shard, a resumed
//! sweep and merged shards. JSON keys kept for scripts: `schema`, `scenario {name, file,
//! topology}`, `seed`, `plan`, `sweep_size`, `samples`, `passed`, `limited`, `failed`, `verdict`,
//! `failure_upper_95` (null for the corners plan), `findings {kind: {samples, upper_95}}`, `worst {figure: {value, sample,
//! verdict, parameters}}` (low side: peak_current, switch_node_peak, clamp_pulse, decay_time,
//! estimate_error; full bridge: peak_current, bus_peak, returned_energy, decay_time,
//! estimate_error), `failed_samples`.

use super::si;
use crate::scenario::Topology;
use crate::sweep::records::Header;
use crate::sweep::summary::{CONFIDENCE, Summary, figures, samples_for};
use serde_json::{Value, json};
use std::fmt::Write as _;

/// A drawn value with its unit (from the records' header).
fn param(h: &Header, key: &str, v: f64) -> String {
    match h.units.get(key).map(String::as_str) {
        Some("°C") => format!("{v:.1} °C"),
        Some(unit) => si(v, unit, 4),
        None => format!("{v}"),
    }
}

/// The topology the header names.
fn topology(h: &Header) -> Topology {
    if h.topology == Topology::FullBridge.word() {
        Topology::FullBridge
    } else {
        Topology::LowSide
    }
}

/// A worst value as printed.
fn shown(value: Option<f64>, unit: &str) -> String {
    value.map_or_else(|| "not reached".into(), |v| si(v, unit, 4))
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
pub fn text(h: &Header, s: &Summary, target: f64) -> String {
    let plan = h.plan;
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
    for figure in figures(topology(h)) {
        let Some(w) = s.worst.get(figure.key) else {
            continue;
        };
        let params: Vec<String> = w
            .parameters
            .iter()
            .map(|(k, v)| format!("{k} {}", param(h, k, *v)))
            .collect();
        let _ = writeln!(
            out,
            "  {:<17} {:>11}  sample {} ({}): {}",
            figure.name,
            shown(w.value, figure.unit),
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
    for figure in figures(topology(h)) {
        let Some(w) = s.worst.get(figure.key) else {
            continue;
        };
        let parameters: serde_json::Map<String, Value> = w
            .parameters
            .iter()
            .map(|(k, v)| (k.clone(), json!(v)))
            .collect();
        worst.insert(
            figure.worst_key.into(),
            json!({
                "value": w.value,
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
        "scenario": super::json::scenario(&h.scenario, std::path::Path::new(&h.file), &h.topology),
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
