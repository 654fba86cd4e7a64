//! The JSON report. Keys kept stable for scripts: `verdict`, `peak_current_a`,
//! `peak_drain_voltage_v`, `turn_offs[] {t_s, current_a, decay_time_s, clamp_energy_j,
//! peak_drain_voltage_v}`, `events[] {t_s, condition, detail}`, `estimate {max_abs_error_a,
//! rms_error_a}`; everything else is additional.

use crate::cosim::Run;
use crate::scenario::Scenario;
use serde_json::{Value, json};

/// The report as a JSON value.
pub fn report(s: &Scenario, r: &Run) -> Value {
    json!({
        "scenario": { "name": s.name, "file": s.file.display().to_string() },
        "verdict": r.verdict().word(),
        "findings": r.findings,
        "peak_current_a": r.peak_current_a,
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
    })
}
