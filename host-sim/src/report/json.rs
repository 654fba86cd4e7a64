//! The JSON report, the same frame for both topologies (see [`REPORT_SCHEMA`]). Keys kept
//! stable for scripts: `schema`, `scenario {name, file, topology}`, `verdict`, `peak_current_a`,
//! `peak_drain_voltage_v`, `turn_offs[] {t_s, current_a, decay_time_s, clamp_energy_j,
//! peak_drain_voltage_v}`, `events[] {t_s, condition, detail}`, `estimate {max_abs_error_a,
//! rms_error_a}`; everything else is additional.

use crate::cosim::Run;
use crate::scenario::Scenario;
use serde_json::{Value, json};

/// The version of the JSON reports' layout (run, sweep and fault reports, both topologies):
/// raised when a key is renamed or removed, not when one is added.
pub const REPORT_SCHEMA: u32 = 1;

/// The `scenario` object every JSON report starts with.
pub fn scenario(name: &str, file: &std::path::Path, topology: &str) -> Value {
    json!({ "name": name, "file": file.display().to_string(), "topology": topology })
}

/// The report as a JSON value.
pub fn report(s: &Scenario, r: &Run) -> Value {
    json!({
        "schema": REPORT_SCHEMA,
        "scenario": scenario(&s.name, &s.file, "low-side"),
        "verdict": r.verdict().word(),
        "findings": r.findings,
        "peak_current_a": r.peak_current_a,
        "ceiling_a": r.ceiling_a,
        "peak_drain_voltage_v": r.peak_drain_voltage_v,
        "max_pulse_energy_j": r.max_pulse_energy_j,
        "clamp_energy_total_j": r.clamp_energy_total_j,
        "turn_offs": r.turn_offs,
        "events": r.events,
        "estimate": r.estimate,
        "periods": r.periods,
        "period_s": s.period,
        "guard_calls": r.calls,
        "simulated_s": r.simulated_s,
        "plant_events": r.plant_events,
        "acted_periods": r.acted_periods,
        "missed_ticks": r.missed_ticks,
        "late_ticks": r.late_ticks,
        "assumed": s.assumed,
        "warnings": s.warnings,
    })
}
