//! The SVG plot: three panels sharing the time axis — coil current (true at each period start,
//! true period peak, the guard's estimate, the trip and ceiling levels, and a mark for every
//! condition the guard raised), the switch-node peak per period with the breakdown, and the
//! requested and applied duty.

use crate::cosim::Run;
use crate::scenario::Scenario;
use coilward::Condition;
use plotters::prelude::*;
use std::path::Path;

/// Most points drawn per line; longer runs are reduced by buckets (peaks keep their maximum).
const MAX_POINTS: usize = 2400;

const TRUE: RGBColor = RGBColor(20, 60, 140);
const PEAK: RGBColor = RGBColor(150, 175, 220);
const ESTIMATE: RGBColor = RGBColor(220, 110, 20);
const LIMIT: RGBColor = RGBColor(170, 30, 30);
const NODE: RGBColor = RGBColor(40, 120, 70);
const REQUESTED: RGBColor = RGBColor(140, 140, 140);

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

/// Writes the plot to `path`.
pub fn write(s: &Scenario, r: &Run, path: &Path) -> Result<(), Box<dyn std::error::Error>> {
    let rows = &r.rows;
    if rows.is_empty() {
        return Err("no rows to plot".into());
    }
    let bucket = rows.len().div_ceil(MAX_POINTS).max(1);
    let ms = |t: f64| t * 1e3;
    let t_end = ms(rows.last().map_or(0.0, |x| x.t_s) + s.period);
    let reduce = |f: &dyn Fn(&crate::cosim::Row) -> f64, peak: bool| -> Vec<(f64, f64)> {
        rows.chunks(bucket)
            .map(|c| {
                let v = if peak {
                    c.iter().map(f).fold(f64::MIN, f64::max)
                } else {
                    f(&c[0])
                };
                (ms(c[0].t_s), v)
            })
            .collect()
    };
    let i_true = reduce(&|x| x.current_a, false);
    let i_peak = reduce(&|x| x.peak_current_a, true);
    let i_est = reduce(&|x| x.estimated_current_a, false);
    let v_node = reduce(&|x| x.drain_peak_v, true);
    let d_req = reduce(&|x| x.duty_requested * 100.0, false);
    let d_app = reduce(&|x| x.duty_applied * 100.0, false);

    let root = SVGBackend::new(path, (1200, 960)).into_drawing_area();
    root.fill(&WHITE)?;
    let (title, body) = root.split_vertically(40);
    title.draw(&Text::new(
        format!("{} — verdict: {}", s.name, r.verdict().word()),
        (20, 12),
        ("sans-serif", 20).into_font(),
    ))?;
    let panels = body.split_evenly((3, 1));

    // Current.
    let trip = f64::from(s.limits.trip_current);
    let i_max = r.peak_current_a.max(trip) * 1.12;
    let i_min = rows.iter().map(|x| x.current_a).fold(0.0, f64::min);
    let mut c = ChartBuilder::on(&panels[0])
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..t_end, i_min..i_max)?;
    c.configure_mesh()
        .y_desc("current (A)")
        .x_desc("time (ms)")
        .light_line_style(WHITE.mix(0.0))
        .draw()?;
    c.draw_series(LineSeries::new(i_peak, PEAK.stroke_width(1)))?
        .label("true, period peak")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], PEAK));
    c.draw_series(LineSeries::new(i_true, TRUE.stroke_width(2)))?
        .label("true, period start")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], TRUE));
    c.draw_series(DashedLineSeries::new(i_est, 6, 4, ESTIMATE.stroke_width(2)))?
        .label(match s.calls {
            crate::scenario::Calls::EveryPeriod => "guard's estimate",
            // Between calls the guard knows nothing new: the line holds its last figure.
            crate::scenario::Calls::OnEvents { .. } => "guard's estimate, at its calls",
        })
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], ESTIMATE));
    for (level, name) in [
        (trip, "trip"),
        (f64::from(s.limits.current_ceiling), "ceiling"),
    ] {
        c.draw_series(DashedLineSeries::new(
            [(0.0, level), (t_end, level)],
            3,
            3,
            LIMIT.stroke_width(1),
        ))?;
        c.draw_series(std::iter::once(Text::new(
            name,
            (t_end * 0.005, level),
            ("sans-serif", 12).into_font().color(&LIMIT),
        )))?;
    }
    let mut shown: Vec<&str> = Vec::new();
    for cond in Condition::ALL {
        let name = cond.name();
        let marks: Vec<(f64, f64)> = r
            .events
            .iter()
            .filter(|e| e.condition == name && e.detail != "cleared")
            .map(|e| (ms(e.t_s), i_max * 0.97))
            .collect();
        if marks.is_empty() {
            continue;
        }
        let col = marker_colour(name);
        c.draw_series(
            marks
                .into_iter()
                .map(|p| TriangleMarker::new(p, 6, col.filled())),
        )?
        .label(format!("raised: {name}"))
        .legend(move |(x, y)| TriangleMarker::new((x + 9, y), 5, col.filled()));
        shown.push(name);
    }
    c.configure_series_labels()
        .border_style(BLACK.mix(0.3))
        .background_style(WHITE.mix(0.9))
        .position(SeriesLabelPosition::UpperRight)
        .draw()?;

    node_panel(&panels[1], s, r, v_node, t_end)?;
    duty_panel(&panels[2], d_req, d_app, t_end)?;
    root.present()?;
    Ok(())
}

type Area<'a> = DrawingArea<SVGBackend<'a>, plotters::coord::Shift>;

/// The switch node's peak per period against the breakdown.
fn node_panel(
    area: &Area,
    s: &Scenario,
    r: &Run,
    v_node: Vec<(f64, f64)>,
    t_end: f64,
) -> Result<(), Box<dyn std::error::Error>> {
    let v_max = r.peak_drain_voltage_v.max(s.plant.breakdown) * 1.1;
    let mut c = ChartBuilder::on(area)
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..t_end, 0.0..v_max)?;
    c.configure_mesh()
        .y_desc("switch node, period peak (V)")
        .x_desc("time (ms)")
        .light_line_style(WHITE.mix(0.0))
        .draw()?;
    c.draw_series(LineSeries::new(v_node, NODE.stroke_width(1)))?
        .label("switch-node peak")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], NODE));
    let bd = s.plant.breakdown;
    c.draw_series(DashedLineSeries::new(
        [(0.0, bd), (t_end, bd)],
        3,
        3,
        LIMIT.stroke_width(1),
    ))?
    .label("switch breakdown")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], LIMIT));
    c.configure_series_labels()
        .border_style(BLACK.mix(0.3))
        .background_style(WHITE.mix(0.9))
        .position(SeriesLabelPosition::UpperRight)
        .draw()?;

    Ok(())
}

/// The requested and the applied duty.
fn duty_panel(
    area: &Area,
    d_req: Vec<(f64, f64)>,
    d_app: Vec<(f64, f64)>,
    t_end: f64,
) -> Result<(), Box<dyn std::error::Error>> {
    let mut c = ChartBuilder::on(area)
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..t_end, 0.0..110.0)?;
    c.configure_mesh()
        .y_desc("duty (%)")
        .x_desc("time (ms)")
        .light_line_style(WHITE.mix(0.0))
        .draw()?;
    c.draw_series(LineSeries::new(d_req, REQUESTED.stroke_width(3)))?
        .label("requested")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], REQUESTED));
    c.draw_series(LineSeries::new(d_app, TRUE.stroke_width(1)))?
        .label("applied by the guard")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], TRUE));
    c.configure_series_labels()
        .border_style(BLACK.mix(0.3))
        .background_style(WHITE.mix(0.9))
        .position(SeriesLabelPosition::UpperRight)
        .draw()?;
    Ok(())
}
