//! What both topologies' plots share: a time axis in the unit that fits the window, panels whose
//! legend sits in a column of its own beside the traces (never over them), shaded spans, level
//! lines, and the reduction of long runs to a drawable number of points.

use plotters::coord::Shift;
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;
use std::ops::Range;

/// Most points drawn per line; longer windows are reduced by buckets (extremes keep theirs).
pub const MAX_POINTS: usize = 2400;
/// Width of the legend column beside each panel, px.
const LEGEND_WIDTH: u32 = 250;
/// Width of the whole plot, px.
pub const WIDTH: u32 = 1400;

/// The true current's colour, in every plot.
pub const TRUE: RGBColor = RGBColor(20, 60, 140);
/// The guard's estimate's colour.
pub const ESTIMATE: RGBColor = RGBColor(220, 110, 20);

/// A drawing area of the SVG backend.
pub type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;
/// A panel's chart: time across, one quantity up.
pub type Chart<'a, 'b> =
    ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// The time window shown and the unit its axis is labelled in.
#[derive(Debug, Clone, Copy)]
pub struct TimeAxis {
    /// Display units per second (1, 10³ or 10⁶).
    scale: f64,
    unit: &'static str,
    /// The window, s.
    pub from_s: f64,
    /// The window's end, s.
    pub to_s: f64,
}

impl TimeAxis {
    /// The window `from_s ..= to_s` (s), labelled in s from 2 s up, in ms from 2 ms, else µs.
    pub fn new(from_s: f64, to_s: f64) -> Self {
        let span = (to_s - from_s).max(1e-12);
        let (scale, unit) = if span >= 2.0 {
            (1.0, "s")
        } else if span >= 2e-3 {
            (1e3, "ms")
        } else {
            (1e6, "µs")
        };
        Self {
            scale,
            unit,
            from_s,
            to_s,
        }
    }

    /// A time in the axis's unit.
    pub fn x(&self, t_s: f64) -> f64 {
        t_s * self.scale
    }

    /// The axis's range in its unit.
    pub fn range(&self) -> Range<f64> {
        self.x(self.from_s)..self.x(self.to_s)
    }

    /// Whether a time falls in the window.
    pub fn shows(&self, t_s: f64) -> bool {
        (self.from_s..=self.to_s).contains(&t_s)
    }

    /// The axis title.
    pub fn title(&self) -> String {
        format!("time ({})", self.unit)
    }
}

/// The window `window` (s; the whole run without one) of a run's `rows` of `period` s each:
/// its time axis and the rows that overlap it.
///
/// # Errors
/// No row in the window.
pub fn window<R: Copy>(
    rows: &[R],
    t_of: impl Fn(&R) -> f64,
    period: f64,
    window: Option<(f64, f64)>,
) -> Result<(TimeAxis, Vec<R>), Box<dyn std::error::Error>> {
    let end = rows.last().map_or(0.0, &t_of) + period;
    let (from, to) = window.unwrap_or((0.0, end));
    let t = TimeAxis::new(from, to.min(end));
    let shown: Vec<R> = rows
        .iter()
        .filter(|x| t_of(x) + period > t.from_s && t_of(x) <= t.to_s)
        .copied()
        .collect();
    if shown.is_empty() {
        return Err("no control period in the window to plot".into());
    }
    Ok((t, shown))
}

/// A page of `n` panels of equal height under `title`: the root (to present when drawn) and
/// the panels.
///
/// # Errors
/// The drawing's error.
pub fn page<'a>(
    path: &'a std::path::Path,
    n: u32,
    title: &str,
) -> Result<(Area<'a>, Vec<Area<'a>>), Box<dyn std::error::Error>> {
    let root = SVGBackend::new(path, (WIDTH, 40 + 220 * n)).into_drawing_area();
    root.fill(&WHITE)?;
    let (head, body) = root.split_vertically(40);
    head.draw(&Text::new(
        title.to_string(),
        (20, 12),
        ("sans-serif", 20).into_font(),
    ))?;
    let panels = body.split_evenly((n as usize, 1));
    Ok((root, panels))
}

/// The true current at each period start (solid) and the guard's estimate (dashed).
///
/// # Errors
/// The drawing's error.
pub fn true_and_estimate<R>(
    c: &mut Chart,
    t: &TimeAxis,
    (rows, t_of): (&[R], impl Fn(&R) -> f64 + Copy),
    current: impl Fn(&R) -> f64,
    estimate: impl Fn(&R) -> f64,
) -> Result<(), Box<dyn std::error::Error>> {
    c.draw_series(LineSeries::new(
        series(rows, t, t_of, current, Pick::First),
        TRUE.stroke_width(2),
    ))?;
    c.draw_series(DashedLineSeries::new(
        series(rows, t, t_of, estimate, Pick::First),
        6,
        4,
        ESTIMATE.stroke_width(2),
    ))?;
    Ok(())
}

/// The requested duty (wide, grey) and the applied one (thin), in %.
///
/// # Errors
/// The drawing's error.
pub fn requested_and_applied<R>(
    c: &mut Chart,
    t: &TimeAxis,
    (rows, t_of): (&[R], impl Fn(&R) -> f64 + Copy),
    requested: impl Fn(&R) -> f64,
    applied: impl Fn(&R) -> f64,
) -> Result<(), Box<dyn std::error::Error>> {
    c.draw_series(LineSeries::new(
        series(rows, t, t_of, |x| requested(x) * 100.0, Pick::First),
        RGBColor(140, 140, 140).stroke_width(3),
    ))?;
    c.draw_series(LineSeries::new(
        series(rows, t, t_of, |x| applied(x) * 100.0, Pick::First),
        TRUE.stroke_width(1),
    ))?;
    Ok(())
}

/// How a legend entry is drawn.
#[derive(Debug, Clone, Copy)]
pub enum Key {
    /// A line of this colour and width.
    Line(RGBColor, u32),
    /// A dashed line.
    Dashed(RGBColor),
    /// A filled triangle (a raised condition).
    Marker(RGBColor),
    /// A dot (a sample).
    Dot(RGBColor),
    /// A shaded span.
    Band(RGBColor),
    /// No symbol: a figure written in the legend column.
    Note,
}

/// A panel split into its chart and its legend column; the chart built on `y` with the time
/// axis `t` and the titles given.
pub fn panel<'a, 'b>(
    area: &'a Area<'b>,
    t: &TimeAxis,
    y: Range<f64>,
    y_title: &str,
    legend: &[(Key, String)],
) -> Result<Chart<'a, 'b>, Box<dyn std::error::Error>> {
    let (chart_area, legend_area) = area.split_horizontally(area.dim_in_pixel().0 - LEGEND_WIDTH);
    draw_legend(&legend_area, legend)?;
    let y = if y.end > y.start {
        y
    } else {
        y.start..y.start + 1.0
    };
    let (x_digits, y_digits) = (digits(&t.range()), digits(&y));
    let mut c = ChartBuilder::on(&chart_area)
        .margin(10)
        .margin_right(24)
        .x_label_area_size(38)
        .y_label_area_size(72)
        .build_cartesian_2d(t.range(), y)?;
    c.configure_mesh()
        .y_desc(y_title)
        .x_desc(t.title())
        .x_labels(10)
        .x_label_formatter(&|v| trim(*v, x_digits))
        .y_label_formatter(&|v| trim(*v, y_digits))
        .light_line_style(WHITE.mix(0.0))
        .draw()?;
    Ok(c)
}

/// Decimals that tell a range's labels apart (about three significant digits across it).
fn digits(r: &Range<f64>) -> usize {
    let span = (r.end - r.start).abs().max(1e-300);
    (2.0 - span.log10().floor()).clamp(0.0, 12.0) as usize
}

/// A number with `decimals` decimals, without trailing zeros or a trailing point.
fn trim(v: f64, decimals: usize) -> String {
    let s = format!("{v:.decimals$}");
    let s = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.')
    } else {
        &s
    };
    if s == "-0" { "0".into() } else { s.into() }
}

/// The legend column: one entry per line, from the top.
fn draw_legend(area: &Area, entries: &[(Key, String)]) -> Result<(), Box<dyn std::error::Error>> {
    let font = ("sans-serif", 13).into_font();
    for (k, (key, text)) in entries.iter().enumerate() {
        let y = 22 + 20 * i32::try_from(k).unwrap_or(0);
        let x = 8;
        match *key {
            Key::Line(c, w) => {
                area.draw(&PathElement::new([(x, y), (x + 22, y)], c.stroke_width(w)))?
            }
            Key::Dashed(c) => {
                for (a, b) in [(x, x + 6), (x + 9, x + 15), (x + 18, x + 22)] {
                    area.draw(&PathElement::new([(a, y), (b, y)], c.stroke_width(2)))?;
                }
            }
            Key::Marker(c) => area.draw(&TriangleMarker::new((x + 11, y), 5, c.filled()))?,
            Key::Band(c) => area.draw(&Rectangle::new(
                [(x, y - 6), (x + 22, y + 6)],
                c.mix(0.45).filled(),
            ))?,
            Key::Dot(c) => area.draw(&Circle::new((x + 11, y), 3, c.filled()))?,
            Key::Note => {}
        }
        area.draw(&Text::new(text.clone(), (x + 30, y - 7), font.clone()))?;
    }
    Ok(())
}

/// A horizontal level across the window, dashed.
pub fn level(
    c: &mut Chart,
    t: &TimeAxis,
    y: f64,
    colour: RGBColor,
) -> Result<(), Box<dyn std::error::Error>> {
    let r = t.range();
    c.draw_series(DashedLineSeries::new(
        [(r.start, y), (r.end, y)],
        5,
        4,
        colour.stroke_width(1),
    ))?;
    Ok(())
}

/// Shades each span `(from, to)` (s) across the panel's height `y`.
pub fn shade(
    c: &mut Chart,
    t: &TimeAxis,
    spans: &[(f64, f64)],
    y: Range<f64>,
    colour: RGBColor,
) -> Result<(), Box<dyn std::error::Error>> {
    let r = t.range();
    c.draw_series(spans.iter().map(|&(a, b)| {
        let (a, b) = (t.x(a).max(r.start), t.x(b).min(r.end));
        Rectangle::new([(a, y.start), (b, y.end)], colour.mix(0.35).filled())
    }))?;
    Ok(())
}

/// The runs of consecutive periods for which `on` holds, as `(from, to)` spans in s.
pub fn spans<R>(
    rows: &[R],
    period: f64,
    t_of: impl Fn(&R) -> f64,
    on: impl Fn(&R) -> bool,
) -> Vec<(f64, f64)> {
    let mut out: Vec<(f64, f64)> = Vec::new();
    for r in rows.iter().filter(|r| on(r)) {
        let (a, b) = (t_of(r), t_of(r) + period);
        match out.last_mut() {
            Some(last) if (last.1 - a).abs() < period * 1e-6 => last.1 = b,
            _ => out.push((a, b)),
        }
    }
    out
}

/// Reduces `rows` to at most [`MAX_POINTS`] points of `f` against time (in the axis's unit):
/// each bucket's first value, or its largest (`Pick::High`) or smallest (`Pick::Low`).
pub fn series<R>(
    rows: &[R],
    t: &TimeAxis,
    t_of: impl Fn(&R) -> f64,
    f: impl Fn(&R) -> f64,
    pick: Pick,
) -> Vec<(f64, f64)> {
    let bucket = rows.len().div_ceil(MAX_POINTS).max(1);
    rows.chunks(bucket)
        .filter_map(|c| {
            let first = c.first()?;
            let v = match pick {
                Pick::First => f(first),
                Pick::High => c.iter().map(&f).fold(f64::MIN, f64::max),
                Pick::Low => c.iter().map(&f).fold(f64::MAX, f64::min),
            };
            Some((t.x(t_of(first)), v))
        })
        .collect()
}

/// Which value of a bucket [`series`] keeps.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pick {
    /// The bucket's first (a sample at a period start).
    First,
    /// The largest (a peak).
    High,
    /// The smallest.
    Low,
}

/// A panel of one current difference against zero (the estimate's error, the bound's margin),
/// in the unit that fits its largest magnitude: `diff` in A, drawn as `what` (its title, the
/// legend's words, colour, and which value of a bucket is kept). With few points (event mode)
/// each is marked.
pub fn difference_panel<R>(
    area: &Area,
    t: &TimeAxis,
    (rows, t_of): (&[R], impl Fn(&R) -> f64),
    diff: impl Fn(&R) -> f64,
    (title, label, colour, pick): (&str, &str, RGBColor, Pick),
) -> Result<(), Box<dyn std::error::Error>> {
    let largest = rows.iter().map(|x| diff(x).abs()).fold(0.0, f64::max);
    let (k, unit) = current_unit(largest);
    let scaled = |x: &R| diff(x) * k;
    let y = span_of(rows.iter().map(scaled), &[0.0]);
    let zero = RGBColor(140, 140, 140);
    let legend = [
        (Key::Line(colour, 2), label.to_string()),
        (Key::Dashed(zero), "zero".into()),
    ];
    let mut c = panel(area, t, y, &format!("{title} ({unit})"), &legend)?;
    level(&mut c, t, 0.0, zero)?;
    let points = series(rows, t, t_of, scaled, pick);
    if points.len() <= 400 {
        c.draw_series(points.iter().map(|&p| Circle::new(p, 3, colour.filled())))?;
    }
    c.draw_series(LineSeries::new(points, colour.stroke_width(2)))?;
    Ok(())
}

/// The scale and unit in which currents whose largest magnitude is `max_a` (A) read as
/// numbers from 1 to 1000: `(1e3, "mA")` for 0.25 A.
pub fn current_unit(max_a: f64) -> (f64, &'static str) {
    [(1.0, "A"), (1e3, "mA"), (1e6, "µA"), (1e9, "nA")]
        .into_iter()
        .find(|(k, _)| max_a * k >= 1.0)
        .unwrap_or((1e12, "pA"))
}

/// The range from the smallest to the largest of `values` and `extra`, widened by a tenth (and
/// never empty).
pub fn span_of(values: impl Iterator<Item = f64>, extra: &[f64]) -> Range<f64> {
    let (lo, hi) = values
        .chain(extra.iter().copied())
        .filter(|v| v.is_finite())
        .fold((f64::MAX, f64::MIN), |(a, b), v| (a.min(v), b.max(v)));
    if lo > hi {
        return 0.0..1.0;
    }
    let pad = ((hi - lo) * 0.1)
        .max(hi.abs().max(lo.abs()) * 1e-3)
        .max(1e-12);
    (lo - pad)..(hi + pad)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_time_axis_takes_the_unit_that_fits() {
        assert_eq!(TimeAxis::new(0.0, 20.0).title(), "time (s)");
        assert_eq!(TimeAxis::new(0.0, 0.12).title(), "time (ms)");
        assert_eq!(TimeAxis::new(0.010, 0.0105).title(), "time (µs)");
        let t = TimeAxis::new(0.0, 0.12);
        assert!((t.x(0.04) - 40.0).abs() < 1e-12);
        assert_eq!(trim(20.0, 3), "20");
        assert_eq!(trim(2.5, 3), "2.5");
        assert_eq!(trim(-0.0001, 3), "0");
        // A range of a few µA in mA keeps its digits.
        let r = -0.004..0.002;
        assert_eq!(trim(-0.003, digits(&r)), "-0.003");
        assert_eq!(digits(&(0.0..200.0)), 0);
        assert_eq!(trim(100.0, 0), "100");
        assert_eq!(current_unit(0.25), (1e3, "mA"));
        assert_eq!(current_unit(1.6e-9).1, "nA");
    }
}
