//! Reports of a bridge run: the terminal summary, CSV rows, JSON and the SVG plot.
//!
//! The plot has three panels on one time axis: the coil current (true, the period's extremes,
//! the guard's estimate, ± the release, ceiling and trip levels) with every `reversal-hold`
//! interval shaded; the requested and applied signed duty with the same shading, so the
//! interlock reads at a glance; and the rotor speed with, when a bus is described, the bus
//! peak and its maximum.

use crate::bridge::cosim::{BridgeRow, BridgeRun};
use crate::bridge::scenario::BridgeScenario;
use crate::report::plot::{self, Key, Pick, TimeAxis};
use crate::report::si;
use coilward::Condition;
use plotters::prelude::*;
use serde_json::json;
use std::fmt::Write as _;
use std::io::Write;
use std::path::Path;

/// The CSV columns, in order (a contract: columns may be added, none renamed or removed).
pub const COLUMNS: [&str; 12] = [
    "t_s",
    "duty_requested",
    "duty_applied",
    "current_a",
    "peak_current_a",
    "least_current_a",
    "estimated_current_a",
    "speed_rad_s",
    "bus_peak_v",
    "recirculated",
    "conditions",
    "bound_a",
];

/// Writes the rows as CSV.
///
/// # Errors
/// The writer's error.
pub fn csv(rows: &[BridgeRow], out: impl Write) -> Result<(), ::csv::Error> {
    let mut w = ::csv::Writer::from_writer(out);
    w.write_record(COLUMNS)?;
    for r in rows {
        let names: Vec<&str> = r.conditions.iter().map(Condition::name).collect();
        w.write_record([
            r.t_s.to_string(),
            r.duty_requested.to_string(),
            r.duty_applied.to_string(),
            r.current_a.to_string(),
            r.peak_current_a.to_string(),
            r.least_current_a.to_string(),
            r.estimated_current_a.to_string(),
            r.speed_rad_s.to_string(),
            r.bus_peak_v.to_string(),
            r.recirculated.to_string(),
            names.join(" "),
            r.bound_a.to_string(),
        ])?;
    }
    w.flush()?;
    Ok(())
}

/// The JSON report.
pub fn json(s: &BridgeScenario, r: &BridgeRun) -> serde_json::Value {
    json!({
        "schema": crate::report::json::REPORT_SCHEMA,
        "scenario": crate::report::json::scenario(&s.name, &s.file, "full-bridge"),
        "verdict": r.verdict().word(),
        "assumed": s.assumed,
        "warnings": s.warnings,
        "peak_current_a": r.peak_current_a,
        "estimate": { "max_abs_error_a": r.max_estimate_error_a },
        "period_s": s.period,
        "returned_energy_j": r.returned_energy_j,
        "estimated_returned_energy_j": r.estimated_returned_energy_j,
        "peak_bus_v": r.peak_bus_v,
        "held_periods": r.held_periods,
        "reversals": r.reversals,
        "stops": r.stops,
        "events": r.events,
        "findings": r.findings,
    })
}

/// The terminal summary.
pub fn summary(s: &BridgeScenario, r: &BridgeRun) -> String {
    let mut o = String::new();
    let _ = writeln!(o, "{} ({})", s.name, s.file.display());
    let _ = writeln!(
        o,
        "  full bridge, {} decay; {} control periods of {}",
        decay_name(s),
        (s.duration / s.period).round(),
        si(s.period, "s", 3)
    );
    for a in &s.assumed {
        let _ = writeln!(o, "  assumed: {a}");
    }
    for w in &s.warnings {
        let _ = writeln!(o, "  warning: {w}");
    }
    let _ = writeln!(
        o,
        "  peak current {} (trip {}); estimate within {} of the true current",
        si(r.peak_current_a, "A", 3),
        si(f64::from(s.limits.trip_current), "A", 3),
        si(r.max_estimate_error_a, "A", 3)
    );
    let _ = writeln!(
        o,
        "  energy returned to the supply {} (the guard's figure {})",
        si(r.returned_energy_j, "J", 4),
        si(r.estimated_returned_energy_j, "J", 4)
    );
    if s.circuit.bus.is_some() {
        let _ = writeln!(
            o,
            "  bus peak {} (max {})",
            si(r.peak_bus_v, "V", 4),
            si(f64::from(s.params.supply.max), "V", 3)
        );
    }
    if r.reversals.is_empty() {
        let _ = writeln!(o, "  no change of direction");
    }
    for v in &r.reversals {
        let wait = v.driven_s.map(|d| d - v.requested_s);
        let _ = writeln!(
            o,
            "  reversal requested at {}: {}; the true current had stayed within the release level for {}",
            si(v.requested_s, "s", 4),
            match wait {
                Some(w) => format!(
                    "driven {} later with {} flowing",
                    si(w, "s", 3),
                    si(v.current_at_drive_a, "A", 2)
                ),
                None => "not driven before the end".into(),
            },
            match (v.true_release_s, v.driven_s) {
                (Some(a), Some(d)) => si(d - a, "s", 3),
                _ => "—".into(),
            }
        );
    }
    stop_table(&mut o, s, r);
    let _ = writeln!(o, "{}", crate::report::verdict_line(r.verdict()));
    if r.acted_periods > 0 {
        let _ = writeln!(
            o,
            "  the guard changed the request in {} of {} periods",
            r.acted_periods,
            (s.duration / s.period).round()
        );
    }
    {
        for f in &r.findings {
            let _ = writeln!(o, "  - {} at {}: {}", f.kind, si(f.t_s, "s", 4), f.detail);
        }
    }
    o
}

/// The ends of drive, one line each (the low side's turn-off table, with the energy returned to
/// the supply in place of the clamp's).
fn stop_table(o: &mut String, s: &BridgeScenario, r: &BridgeRun) {
    if r.stops.is_empty() {
        return;
    }
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "  drive ends  {:>9}  {:>9}  {:>16}  {:>11}",
        "at",
        "current",
        format!("to {}", si(f64::from(s.limits.release_current), "A", 3)),
        "returned"
    );
    for t in &r.stops {
        let _ = writeln!(
            o,
            "              {:>9}  {:>9}  {:>16}  {:>11}",
            si(t.t_s, "s", 5),
            si(t.current_a, "A", 4),
            t.decay_time_s
                .map_or("not reached".to_string(), |d| si(d, "s", 4)),
            si(t.returned_energy_j, "J", 3),
        );
    }
    let _ = writeln!(o);
}

fn decay_name(s: &BridgeScenario) -> String {
    match s.params.decay {
        coilward::bridge::DecayMode::Fast => "fast".into(),
        coilward::bridge::DecayMode::Slow => "slow".into(),
        coilward::bridge::DecayMode::Mixed { fast_share } => {
            format!("mixed ({:.0} % fast)", fast_share * 100.0)
        }
        _ => "other".into(),
    }
}

use crate::report::plot::{ESTIMATE, TRUE};
const SPAN: RGBColor = RGBColor(150, 175, 220);
const LIMIT: RGBColor = RGBColor(170, 30, 30);
const RELEASE: RGBColor = RGBColor(40, 120, 70);
const HOLD: RGBColor = RGBColor(255, 214, 102);
const REQUESTED: RGBColor = RGBColor(140, 140, 140);
const BOUND: RGBColor = RGBColor(130, 50, 160);
const CEILING: RGBColor = RGBColor(235, 110, 30);

/// Writes the plot of the whole run.
///
/// # Errors
/// No rows, or the drawing's error.
pub fn svg(
    s: &BridgeScenario,
    r: &BridgeRun,
    path: &Path,
) -> Result<(), Box<dyn std::error::Error>> {
    svg_window(s, r, path, None)
}

fn at(x: &BridgeRow) -> f64 {
    x.t_s
}

/// Writes the plot of the window `from ..= to` (s; the whole run without one): the current
/// with its levels and the interlock's holds shaded (each with its length), the estimate's error
/// and the bound's margin, the signed duty, the rotor's speed, and the bus against its maximum
/// when there is one; each quantity on its own axis, each legend beside its panel.
///
/// # Errors
/// No rows in the window, or the drawing's error.
pub fn svg_window(
    s: &BridgeScenario,
    r: &BridgeRun,
    path: &Path,
    window: Option<(f64, f64)>,
) -> Result<(), Box<dyn std::error::Error>> {
    let (t, rows) = plot::window(&r.rows, at, s.period, window)?;
    let n_panels = if s.circuit.bus.is_some() { 6 } else { 5 };
    let title = format!(
        "{} — full bridge, {} decay — verdict: {}",
        s.name,
        decay_name(s),
        r.verdict().word()
    );
    let (root, panels) = plot::page(path, n_panels, &title)?;
    let held = plot::spans(&rows, s.period, at, |x| {
        x.conditions.contains(Condition::ReversalHold)
    });
    current_panel(&panels[0], s, &rows, &t, &held)?;
    error_panels(&panels[1], &panels[2], &rows, &t)?;
    duty_panel(&panels[3], &rows, &t, &held)?;
    speed_panel(&panels[4], &rows, &t)?;
    if s.circuit.bus.is_some() {
        bus_panel(&panels[5], s, &rows, &t)?;
    }
    root.present()?;
    Ok(())
}

/// The current with its levels (both signs) and the holds.
fn current_panel(
    area: &plot::Area,
    s: &BridgeScenario,
    rows: &[BridgeRow],
    t: &TimeAxis,
    held: &[(f64, f64)],
) -> Result<(), Box<dyn std::error::Error>> {
    let trip = f64::from(s.limits.trip_current);
    let ceiling = f64::from(s.limits.current_ceiling);
    let release = f64::from(s.limits.release_current);
    let top = rows
        .iter()
        .map(|x| {
            x.peak_current_a
                .abs()
                .max(x.least_current_a.abs())
                .max(x.bound_a)
        })
        .fold(trip, f64::max)
        * 1.1;
    let y = -top..top;
    let legend = [
        (Key::Line(TRUE, 2), "true, at each period start".to_string()),
        (Key::Line(SPAN, 1), "true, extremes in the period".into()),
        (Key::Dashed(ESTIMATE), "guard's estimate".into()),
        (
            Key::Line(BOUND, 1),
            "± guard's bound (its tolerance)".into(),
        ),
        (Key::Dashed(LIMIT), format!("± trip {}", si(trip, "A", 3))),
        (
            Key::Dashed(CEILING),
            format!("± ceiling {}", si(ceiling, "A", 3)),
        ),
        (
            Key::Dashed(RELEASE),
            format!("± release {}", si(release, "A", 3)),
        ),
        (Key::Band(HOLD), "reversal-hold (output held off)".into()),
    ];
    let mut c = plot::panel(area, t, y.clone(), "coil current (A)", &legend)?;
    plot::shade(&mut c, t, held, y.clone(), HOLD)?;
    // Each hold's length, written beside it.
    c.draw_series(held.iter().map(|&(a, b)| {
        Text::new(
            format!("held {}", si(b - a, "s", 3)),
            (t.x(b), top * 0.8),
            ("sans-serif", 12).into_font().color(&RGBColor(150, 100, 0)),
        )
    }))?;
    for (level, colour) in [(trip, LIMIT), (ceiling, CEILING), (release, RELEASE)] {
        plot::level(&mut c, t, level, colour)?;
        plot::level(&mut c, t, -level, colour)?;
    }
    c.draw_series(LineSeries::new(
        plot::series(rows, t, at, |x| x.peak_current_a, Pick::High),
        SPAN.stroke_width(1),
    ))?;
    c.draw_series(LineSeries::new(
        plot::series(rows, t, at, |x| x.least_current_a, Pick::Low),
        SPAN.stroke_width(1),
    ))?;
    for sign in [1.0, -1.0] {
        c.draw_series(LineSeries::new(
            plot::series(rows, t, at, |x| sign * x.bound_a, Pick::First),
            BOUND.stroke_width(1),
        ))?;
    }
    plot::true_and_estimate(
        &mut c,
        t,
        (rows, at),
        |x| x.current_a,
        |x| x.estimated_current_a,
    )
}

/// The estimate's error, and the bound's margin over the true magnitude, each in the unit that
/// fits.
fn error_panels(
    error: &plot::Area,
    margin: &plot::Area,
    rows: &[BridgeRow],
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    plot::difference_panel(
        error,
        t,
        (rows, at),
        |x| x.estimated_current_a - x.current_a,
        ("estimate's error", "estimate − true", ESTIMATE, Pick::First),
    )?;
    plot::difference_panel(
        margin,
        t,
        (rows, at),
        |x| x.bound_a - x.current_a.abs(),
        (
            "bound's margin",
            "bound − |true| (least per point)",
            BOUND,
            Pick::Low,
        ),
    )
}

/// The signed duty, requested and applied, with the holds.
fn duty_panel(
    area: &plot::Area,
    rows: &[BridgeRow],
    t: &TimeAxis,
    held: &[(f64, f64)],
) -> Result<(), Box<dyn std::error::Error>> {
    let legend = [
        (Key::Line(REQUESTED, 3), "requested".to_string()),
        (Key::Line(TRUE, 1), "applied by the guard".into()),
        (Key::Band(HOLD), "reversal-hold".into()),
    ];
    let y = -105.0..105.0;
    let mut c = plot::panel(area, t, y.clone(), "duty (%), + is A to B", &legend)?;
    plot::shade(&mut c, t, held, y, HOLD)?;
    plot::requested_and_applied(
        &mut c,
        t,
        (rows, at),
        |x| x.duty_requested,
        |x| x.duty_applied,
    )
}

/// The rotor's speed.
fn speed_panel(
    area: &plot::Area,
    rows: &[BridgeRow],
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    let y = plot::span_of(rows.iter().map(|x| x.speed_rad_s), &[0.0]);
    let legend = [(Key::Line(TRUE, 2), "rotor speed".to_string())];
    let mut c = plot::panel(area, t, y, "speed (rad/s)", &legend)?;
    c.draw_series(LineSeries::new(
        plot::series(rows, t, at, |x| x.speed_rad_s, Pick::First),
        TRUE.stroke_width(2),
    ))?;
    Ok(())
}

/// The bus's highest voltage in each period against the supply's maximum.
fn bus_panel(
    area: &plot::Area,
    s: &BridgeScenario,
    rows: &[BridgeRow],
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    let v_max = f64::from(s.params.supply.max);
    let y = plot::span_of(rows.iter().map(|x| x.bus_peak_v), &[v_max]);
    let legend = [
        (
            Key::Line(RELEASE, 1),
            "bus, highest in each period".to_string(),
        ),
        (
            Key::Dashed(LIMIT),
            format!("supply max {}", si(v_max, "V", 3)),
        ),
    ];
    let mut c = plot::panel(area, t, y, "bus (V)", &legend)?;
    plot::level(&mut c, t, v_max, LIMIT)?;
    c.draw_series(LineSeries::new(
        plot::series(rows, t, at, |x| x.bus_peak_v, Pick::High),
        RELEASE.stroke_width(1),
    ))?;
    Ok(())
}
