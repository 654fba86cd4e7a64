//! Reports of a bridge run: the terminal summary, CSV rows, JSON and the SVG plot.
//!
//! The plot has three panels on one time axis: the coil current (true, the period's extremes,
//! the guard's estimate, ± the release, ceiling and trip levels) with every `reversal-hold`
//! interval shaded; the requested and applied signed duty with the same shading, so the
//! interlock reads at a glance; and the rotor speed with, when a bus is described, the bus
//! peak and its maximum.

use crate::bridge::cosim::{BridgeRow, BridgeRun};
use crate::bridge::scenario::BridgeScenario;
use crate::report::si;
use coilward::Condition;
use plotters::prelude::*;
use serde_json::json;
use std::fmt::Write as _;
use std::io::Write;
use std::path::Path;

/// The CSV columns, in order (a contract: columns may be added, none renamed or removed).
pub const COLUMNS: [&str; 11] = [
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

const TRUE: RGBColor = RGBColor(20, 60, 140);
const SPAN: RGBColor = RGBColor(150, 175, 220);
const ESTIMATE: RGBColor = RGBColor(220, 110, 20);
const LIMIT: RGBColor = RGBColor(170, 30, 30);
const RELEASE: RGBColor = RGBColor(40, 120, 70);
const HOLD: RGBColor = RGBColor(255, 214, 102);
const REQUESTED: RGBColor = RGBColor(140, 140, 140);

/// The `reversal-hold` intervals, in ms.
fn holds(rows: &[BridgeRow], period: f64) -> Vec<(f64, f64)> {
    let mut out: Vec<(f64, f64)> = Vec::new();
    for r in rows {
        if r.conditions.contains(Condition::ReversalHold) {
            let (a, b) = (r.t_s * 1e3, (r.t_s + period) * 1e3);
            match out.last_mut() {
                Some(last) if (last.1 - a).abs() < 1e-9 => last.1 = b,
                _ => out.push((a, b)),
            }
        }
    }
    out
}

/// Writes the plot.
///
/// # Errors
/// No rows, or the drawing's error.
pub fn svg(
    s: &BridgeScenario,
    r: &BridgeRun,
    path: &Path,
) -> Result<(), Box<dyn std::error::Error>> {
    let rows = &r.rows;
    if rows.is_empty() {
        return Err("no rows to plot".into());
    }
    let ms = |t: f64| t * 1e3;
    let t_end = ms(rows.last().map_or(0.0, |x| x.t_s) + s.period);
    let bucket = rows.len().div_ceil(2400).max(1);
    let pick = |f: &dyn Fn(&BridgeRow) -> f64| -> Vec<(f64, f64)> {
        rows.chunks(bucket)
            .map(|c| (ms(c[0].t_s), f(&c[0])))
            .collect()
    };
    let hi = |f: &dyn Fn(&BridgeRow) -> f64| -> Vec<(f64, f64)> {
        rows.chunks(bucket)
            .map(|c| (ms(c[0].t_s), c.iter().map(f).fold(f64::MIN, f64::max)))
            .collect()
    };
    let lo = |f: &dyn Fn(&BridgeRow) -> f64| -> Vec<(f64, f64)> {
        rows.chunks(bucket)
            .map(|c| (ms(c[0].t_s), c.iter().map(f).fold(f64::MAX, f64::min)))
            .collect()
    };
    let held = holds(rows, s.period);
    let root = SVGBackend::new(path, (1200, 960)).into_drawing_area();
    root.fill(&WHITE)?;
    let (title, body) = root.split_vertically(40);
    title.draw(&Text::new(
        format!(
            "{} — full bridge, {} decay — verdict: {}",
            s.name,
            decay_name(s),
            r.verdict().word()
        ),
        (20, 12),
        ("sans-serif", 20).into_font(),
    ))?;
    let panels = body.split_evenly((3, 1));

    // Current.
    let trip = f64::from(s.limits.trip_current);
    let ceiling = f64::from(s.limits.current_ceiling);
    let release = f64::from(s.limits.release_current);
    let i_lim = r.peak_current_a.max(trip) * 1.15;
    let mut c = ChartBuilder::on(&panels[0])
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..t_end, -i_lim..i_lim)?;
    c.configure_mesh()
        .y_desc("current (A)")
        .x_desc("time (ms)")
        .light_line_style(WHITE.mix(0.0))
        .draw()?;
    let shade = |c: &mut ChartContext<_, Cartesian2d<_, _>>, lo_y: f64, hi_y: f64| {
        c.draw_series(
            held.iter()
                .map(|&(a, b)| Rectangle::new([(a, lo_y), (b, hi_y)], HOLD.mix(0.45).filled())),
        )
        .map(|_| ())
    };
    shade(&mut c, -i_lim, i_lim)?;
    // Each hold's length, written beside it.
    c.draw_series(held.iter().map(|&(a, b)| {
        Text::new(
            format!("held {}", si((b - a) * 1e-3, "s", 3)),
            (b + t_end * 0.004, i_lim * 0.78),
            ("sans-serif", 12).into_font().color(&RGBColor(150, 100, 0)),
        )
    }))?;
    c.draw_series(std::iter::once(Rectangle::new(
        [(0.0, 0.0), (0.0, 0.0)],
        HOLD.mix(0.45).filled(),
    )))?
    .label("reversal-hold (interlock holding the output off)")
    .legend(|(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], HOLD.mix(0.45).filled()));
    c.draw_series(LineSeries::new(
        hi(&|x| x.peak_current_a),
        SPAN.stroke_width(1),
    ))?
    .label("true, period extremes")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], SPAN));
    c.draw_series(LineSeries::new(
        lo(&|x| x.least_current_a),
        SPAN.stroke_width(1),
    ))?;
    c.draw_series(LineSeries::new(
        pick(&|x| x.current_a),
        TRUE.stroke_width(2),
    ))?
    .label("true, period start")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], TRUE));
    c.draw_series(DashedLineSeries::new(
        pick(&|x| x.estimated_current_a),
        6,
        4,
        ESTIMATE.stroke_width(2),
    ))?
    .label("guard's estimate")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], ESTIMATE));
    for (level, colour, name) in [
        (trip, LIMIT, "± trip"),
        (ceiling, RGBColor(210, 120, 120), "± ceiling"),
        (release, RELEASE, "± release"),
    ] {
        for sign in [1.0, -1.0] {
            c.draw_series(DashedLineSeries::new(
                [(0.0, sign * level), (t_end, sign * level)],
                3,
                3,
                colour.stroke_width(1),
            ))?;
        }
        c.draw_series(std::iter::once(Text::new(
            name,
            (t_end * 0.005, level),
            ("sans-serif", 12).into_font().color(&colour),
        )))?;
    }
    c.configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK.mix(0.3))
        .position(SeriesLabelPosition::LowerRight)
        .draw()?;

    // Duty.
    let mut c = ChartBuilder::on(&panels[1])
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..t_end, -110.0..110.0)?;
    c.configure_mesh()
        .y_desc("duty (%), + is A to B")
        .x_desc("time (ms)")
        .light_line_style(WHITE.mix(0.0))
        .draw()?;
    shade(&mut c, -110.0, 110.0)?;
    c.draw_series(LineSeries::new(
        pick(&|x| x.duty_requested * 100.0),
        REQUESTED.stroke_width(2),
    ))?
    .label("requested")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], REQUESTED));
    c.draw_series(LineSeries::new(
        pick(&|x| x.duty_applied * 100.0),
        TRUE.stroke_width(1),
    ))?
    .label("applied by the guard")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], TRUE));
    c.configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK.mix(0.3))
        .position(SeriesLabelPosition::LowerRight)
        .draw()?;

    // Speed and bus.
    let w_max = rows.iter().map(|x| x.speed_rad_s.abs()).fold(1.0, f64::max) * 1.15;
    let mut c = ChartBuilder::on(&panels[2])
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(64)
        .right_y_label_area_size(64)
        .build_cartesian_2d(0.0..t_end, -w_max..w_max)?
        .set_secondary_coord(
            0.0..t_end,
            0.0..(r.peak_bus_v.max(f64::from(s.params.supply.max)) * 1.1),
        );
    c.configure_mesh()
        .y_desc("speed (rad/s)")
        .x_desc("time (ms)")
        .light_line_style(WHITE.mix(0.0))
        .draw()?;
    c.draw_series(LineSeries::new(
        pick(&|x| x.speed_rad_s),
        TRUE.stroke_width(2),
    ))?
    .label("rotor speed")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], TRUE));
    if s.circuit.bus.is_some() {
        c.configure_secondary_axes().y_desc("bus (V)").draw()?;
        c.draw_secondary_series(LineSeries::new(
            hi(&|x| x.bus_peak_v),
            RELEASE.stroke_width(1),
        ))?
        .label("bus peak")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], RELEASE));
        let v_max = f64::from(s.params.supply.max);
        c.draw_secondary_series(DashedLineSeries::new(
            [(0.0, v_max), (t_end, v_max)],
            3,
            3,
            LIMIT.stroke_width(1),
        ))?
        .label("supply max")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], LIMIT));
    }
    c.configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK.mix(0.3))
        .position(SeriesLabelPosition::LowerRight)
        .draw()?;
    root.present()?;
    Ok(())
}
