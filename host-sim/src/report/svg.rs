//! The low side's plot, panels sharing the time axis (its unit fits the window; `run --from/--to`
//! zooms), each quantity against its own axis and each legend in a column beside its panel:
//! - coil current: true (at each period start and its peak in the period), the guard's estimate
//!   and bound, the trip, the ceiling the guard applies (and the configured one when the clamp's
//!   rating lowers it), the release level with the end of each decay marked on it, the
//!   release holds shaded, and a mark for every condition the guard raised;
//! - the estimate's error against the true current (the two overlap in the first panel), and
//!   the bound's margin over it, each on its own axis in the unit that fits;
//! - the switch node's highest voltage in each period (the envelope of the PWM wave) against the
//!   breakdown;
//! - the supply and the guard's reading of it, when the supply moves;
//! - the requested and the applied duty.

use super::plot::{self, Key, Pick, TimeAxis};
use crate::cosim::{Row, Run, WavePoint};
use crate::scenario::Scenario;
use coilward::Condition;
use plotters::prelude::*;
use std::path::Path;

use plot::{ESTIMATE, TRUE};
const PEAK: RGBColor = RGBColor(150, 175, 220);
const BOUND: RGBColor = RGBColor(130, 50, 160);
const LIMIT: RGBColor = RGBColor(170, 30, 30);
const CEILING: RGBColor = RGBColor(235, 110, 30);
const CONFIGURED: RGBColor = RGBColor(230, 170, 150);
const RELEASE: RGBColor = RGBColor(40, 140, 60);
const NODE: RGBColor = RGBColor(40, 120, 70);
const REQUESTED: RGBColor = RGBColor(140, 140, 140);
const HOLD: RGBColor = RGBColor(120, 150, 230);
const READING: RGBColor = RGBColor(220, 110, 20);

fn marker_colour(c: &str) -> RGBColor {
    match c {
        "release-hold" => RGBColor(90, 90, 200),
        "current-limit" => RGBColor(200, 150, 0),
        "overcurrent" => RGBColor(200, 0, 0),
        "clamp-pulse" => RGBColor(160, 0, 160),
        "clamp-overheat" => RGBColor(230, 80, 120),
        "coil-overheat" => RGBColor(120, 60, 0),
        _ => RGBColor(0, 130, 130),
    }
}

/// Writes the plot of the whole run to `path`.
///
/// # Errors
/// No rows, or the drawing's error.
pub fn write(s: &Scenario, r: &Run, path: &Path) -> Result<(), Box<dyn std::error::Error>> {
    write_window(s, r, path, None, &[])
}

/// Writes the plot of the window `from ..= to` (s; the whole run without one) to `path`, with
/// the plant's full wave when `wave` holds it (a run sampled over the window, see
/// [`crate::cosim::Options::wave`]).
///
/// # Errors
/// No rows in the window, or the drawing's error.
pub fn write_window(
    s: &Scenario,
    r: &Run,
    path: &Path,
    window: Option<(f64, f64)>,
    wave: &[WavePoint],
) -> Result<(), Box<dyn std::error::Error>> {
    let (t, rows) = plot::window(&r.rows, at, s.period, window)?;
    let supply_moves = rows
        .iter()
        .any(|x| (x.supply_v - rows[0].supply_v).abs() > 1e-3 * rows[0].supply_v.abs());
    let n_panels = if supply_moves { 6 } else { 5 };
    let title = format!("{} — verdict: {}", s.name, r.verdict().word());
    let (root, panels) = plot::page(path, n_panels, &title)?;
    let wave: Vec<WavePoint> = wave.iter().filter(|w| t.shows(w.t_s)).copied().collect();
    current_panel(&panels[0], s, r, (&rows, &wave), &t)?;
    error_panels(&panels[1], &panels[2], &rows, &t)?;
    node_panel(&panels[3], s, (&rows, &wave), &t)?;
    if supply_moves {
        supply_panel(&panels[4], s, &rows, &t)?;
    }
    duty_panel(&panels[n_panels as usize - 1], &rows, &t)?;
    root.present()?;
    Ok(())
}

fn at(x: &Row) -> f64 {
    x.t_s
}

/// The current, its levels, holds, decay ends and the conditions raised.
fn current_panel(
    area: &plot::Area,
    s: &Scenario,
    r: &Run,
    (rows, wave): (&[Row], &[WavePoint]),
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    let trip = f64::from(s.limits.trip_current);
    let configured = f64::from(s.limits.current_ceiling);
    let ceiling = r.ceiling_a;
    let release = f64::from(s.limits.release_current);
    // Zoomed to a full wave, the axis fits the traces (the ripple shows); else it spans zero to
    // the trip.
    let whole = [0.0, trip];
    let y = plot::span_of(
        rows.iter()
            .flat_map(|x| [x.current_a, x.peak_current_a, x.bound_a])
            .chain(wave.iter().map(|w| w.current_a)),
        if wave.is_empty() { &whole } else { &[] },
    );
    let holds = plot::spans(rows, s.period, at, |x| {
        x.conditions.contains(Condition::ReleaseHold)
    });
    let decay_ends: Vec<f64> = r
        .turn_offs
        .iter()
        .filter_map(|o| o.decay_time_s.map(|d| o.t_s + d))
        .filter(|&e| t.shows(e))
        .collect();
    let raised: Vec<(&str, Vec<f64>)> = Condition::ALL
        .iter()
        .map(|c| {
            let times = r
                .events
                .iter()
                .filter(|e| e.condition == c.name() && e.detail != "cleared" && t.shows(e.t_s))
                .map(|e| e.t_s)
                .collect::<Vec<_>>();
            (c.name(), times)
        })
        .filter(|(_, v)| !v.is_empty())
        .collect();
    let legend = current_legend(
        wave.is_empty(),
        (trip, ceiling, configured, release),
        !holds.is_empty(),
        &raised,
    );
    let mut c = plot::panel(area, t, y.clone(), "coil current (A)", &legend)?;
    plot::shade(&mut c, t, &holds, y.clone(), HOLD)?;
    plot::level(&mut c, t, trip, LIMIT)?;
    plot::level(&mut c, t, ceiling, CEILING)?;
    if (ceiling - configured).abs() > 1e-6 * configured {
        plot::level(&mut c, t, configured, CONFIGURED)?;
    }
    plot::level(&mut c, t, release, RELEASE)?;
    if wave.is_empty() {
        c.draw_series(LineSeries::new(
            plot::series(rows, t, at, |x| x.peak_current_a, Pick::High),
            PEAK.stroke_width(1),
        ))?;
    } else {
        c.draw_series(LineSeries::new(
            wave.iter().map(|w| (t.x(w.t_s), w.current_a)),
            PEAK.stroke_width(1),
        ))?;
    }
    plot::true_and_estimate(
        &mut c,
        t,
        (rows, at),
        |x| x.current_a,
        |x| x.estimated_current_a,
    )?;
    c.draw_series(LineSeries::new(
        plot::series(rows, t, at, |x| x.bound_a, Pick::High),
        BOUND.stroke_width(1),
    ))?;
    c.draw_series(
        decay_ends
            .iter()
            .map(|&e| Circle::new((t.x(e), release), 4, RELEASE.filled())),
    )?;
    let top = y.end - (y.end - y.start) * 0.03;
    for (name, times) in raised {
        let col = marker_colour(name);
        c.draw_series(
            times
                .into_iter()
                .map(|e| TriangleMarker::new((t.x(e), top), 6, col.filled())),
        )?;
    }
    Ok(())
}

/// The current panel's legend: the traces, the levels (the configured ceiling when the clamp's
/// rating lowers it), the holds when there are any, and each condition raised.
fn current_legend(
    envelope: bool,
    (trip, ceiling, configured, release): (f64, f64, f64, f64),
    holds: bool,
    raised: &[(&str, Vec<f64>)],
) -> Vec<(Key, String)> {
    let mut legend = vec![
        (Key::Line(TRUE, 2), "true, at each period start".to_string()),
        if envelope {
            (Key::Line(PEAK, 1), "true, highest in the period".into())
        } else {
            (Key::Line(PEAK, 1), "true, full wave".into())
        },
        (Key::Dashed(ESTIMATE), "guard's estimate".into()),
        (Key::Line(BOUND, 1), "guard's bound (its tolerance)".into()),
        (
            Key::Dashed(LIMIT),
            format!("trip {}", super::si(trip, "A", 3)),
        ),
        (
            Key::Dashed(CEILING),
            format!("ceiling applied {}", super::si(ceiling, "A", 3)),
        ),
    ];
    if (ceiling - configured).abs() > 1e-6 * configured {
        legend.push((
            Key::Dashed(CONFIGURED),
            format!("ceiling configured {}", super::si(configured, "A", 3)),
        ));
    }
    legend.push((
        Key::Dashed(RELEASE),
        format!("release {}; ● decay ends", super::si(release, "A", 3)),
    ));
    if holds {
        legend.push((Key::Band(HOLD), "release-hold".into()));
    }
    for (name, _) in raised {
        legend.push((Key::Marker(marker_colour(name)), format!("raised: {name}")));
    }
    legend
}

/// The estimate's error against the true current, and the bound's margin over it (never below
/// zero inside the declared tolerance), each on its own axis in the unit that fits. Between
/// event-mode calls the guard's figures are those of its last call: only the periods it was
/// called at compare like with like.
fn error_panels(
    error: &plot::Area,
    margin: &plot::Area,
    rows: &[Row],
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    let rows: Vec<Row> = rows.iter().filter(|x| x.called).copied().collect();
    plot::difference_panel(
        error,
        t,
        (&rows, at),
        |x| x.estimated_current_a - x.current_a,
        ("estimate's error", "estimate − true", ESTIMATE, Pick::First),
    )?;
    plot::difference_panel(
        margin,
        t,
        (&rows, at),
        |x| x.bound_a - x.current_a,
        (
            "bound's margin",
            "bound − true (least per point)",
            BOUND,
            Pick::Low,
        ),
    )
}

/// The switch node's highest voltage in each period against the breakdown.
fn node_panel(
    area: &plot::Area,
    s: &Scenario,
    (rows, wave): (&[Row], &[WavePoint]),
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    let bd = s.plant.breakdown;
    let y = plot::span_of(
        rows.iter()
            .map(|x| x.drain_peak_v)
            .chain(wave.iter().map(|w| w.node_v)),
        &[0.0, bd],
    );
    let legend = [
        (
            Key::Line(NODE, 1),
            if wave.is_empty() {
                "highest in each period (envelope)".to_string()
            } else {
                format!("full wave, {} samples a period", crate::cosim::WAVE_SAMPLES)
            },
        ),
        (
            Key::Dashed(LIMIT),
            format!("switch breakdown {}", super::si(bd, "V", 3)),
        ),
    ];
    let mut c = plot::panel(area, t, y, "switch node (V)", &legend)?;
    plot::level(&mut c, t, bd, LIMIT)?;
    if wave.is_empty() {
        c.draw_series(LineSeries::new(
            plot::series(rows, t, at, |x| x.drain_peak_v, Pick::High),
            NODE.stroke_width(1),
        ))?;
    } else {
        c.draw_series(LineSeries::new(
            wave.iter().map(|w| (t.x(w.t_s), w.node_v)),
            NODE.stroke_width(1),
        ))?;
    }
    Ok(())
}

/// The supply at each period start and the guard's reading of it, with the window.
fn supply_panel(
    area: &plot::Area,
    s: &Scenario,
    rows: &[Row],
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    let (lo, hi) = (s.plant.supply_min, s.plant.supply_max);
    let y = plot::span_of(
        rows.iter().flat_map(|x| [x.supply_v, x.supply_read_v]),
        &[lo, hi],
    );
    let legend = [
        (
            Key::Line(TRUE, 2),
            "supply at each period start".to_string(),
        ),
        (Key::Dashed(READING), "the guard's reading".into()),
        (
            Key::Dashed(LIMIT),
            format!(
                "window {} ..= {}",
                super::si(lo, "V", 3),
                super::si(hi, "V", 3)
            ),
        ),
    ];
    let mut c = plot::panel(area, t, y, "supply (V)", &legend)?;
    plot::level(&mut c, t, lo, LIMIT)?;
    plot::level(&mut c, t, hi, LIMIT)?;
    c.draw_series(LineSeries::new(
        plot::series(rows, t, at, |x| x.supply_v, Pick::First),
        TRUE.stroke_width(2),
    ))?;
    c.draw_series(DashedLineSeries::new(
        plot::series(rows, t, at, |x| x.supply_read_v, Pick::First),
        6,
        4,
        READING.stroke_width(1),
    ))?;
    Ok(())
}

/// The requested and the applied duty.
fn duty_panel(
    area: &plot::Area,
    rows: &[Row],
    t: &TimeAxis,
) -> Result<(), Box<dyn std::error::Error>> {
    let legend = [
        (Key::Line(REQUESTED, 3), "requested".to_string()),
        (Key::Line(TRUE, 1), "applied by the guard".into()),
    ];
    let mut c = plot::panel(area, t, -2.0..105.0, "duty (%)", &legend)?;
    plot::requested_and_applied(
        &mut c,
        t,
        (rows, at),
        |x| x.duty_requested,
        |x| x.duty_applied,
    )
}
