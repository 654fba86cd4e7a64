//! The CSV report: one row per control period, a header row, and the columns `t_s,
//! duty_requested, duty_applied, supply_v, current_a, mean_current_a, peak_current_a,
//! estimated_current_a, estimated_peak_a, drain_peak_v, conditions` (the active condition names
//! separated by spaces), then `supply_read_v, clamp_energy_j, bound_a`.

use crate::cosim::Row;
use std::io::Write;

/// The header, in column order.
pub const COLUMNS: [&str; 14] = [
    "t_s",
    "duty_requested",
    "duty_applied",
    "supply_v",
    "current_a",
    "mean_current_a",
    "peak_current_a",
    "estimated_current_a",
    "estimated_peak_a",
    "drain_peak_v",
    "conditions",
    "supply_read_v",
    "clamp_energy_j",
    "bound_a",
];

/// Writes the rows.
pub fn write(rows: &[Row], out: impl Write) -> Result<(), ::csv::Error> {
    let mut w = ::csv::Writer::from_writer(out);
    w.write_record(COLUMNS)?;
    for r in rows {
        let names: Vec<&str> = r.conditions.iter().map(coilward::Condition::name).collect();
        w.write_record([
            r.t_s.to_string(),
            r.duty_requested.to_string(),
            r.duty_applied.to_string(),
            r.supply_v.to_string(),
            r.current_a.to_string(),
            r.mean_current_a.to_string(),
            r.peak_current_a.to_string(),
            r.estimated_current_a.to_string(),
            r.estimated_peak_a.to_string(),
            r.drain_peak_v.to_string(),
            names.join(" "),
            r.supply_read_v.to_string(),
            r.clamp_energy_j.to_string(),
            r.bound_a.to_string(),
        ])?;
    }
    w.flush()?;
    Ok(())
}
