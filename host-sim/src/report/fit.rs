//! The fit's terminal report, the `[coil]` section it proposes, and its SVG plot (capture, fit
//! and residual).

use super::si;
use crate::capture::Capture;
use crate::fit::{FitOptions, Fitted, Value};
use plotters::prelude::*;
use std::fmt::Write as _;
use std::path::Path;

fn pm(v: Value, unit: &str) -> String {
    format!("{} ± {}", si(v.value, unit, 4), si(v.sigma, unit, 2))
}

/// The terminal report.
pub fn summary(c: &Capture, o: &FitOptions, f: &Fitted) -> String {
    let mut s = String::new();
    let n = c.t.len();
    let _ = writeln!(
        s,
        "{}: {n} samples over {} (every {}), columns `{}` and `{}`{}",
        c.file.display(),
        si(c.t[n - 1] - c.t[0], "s", 3),
        si((c.t[n - 1] - c.t[0]) / (n - 1) as f64, "s", 3),
        c.time_header,
        c.current_header,
        if c.skipped > 0 {
            format!("; {} unreadable rows skipped", c.skipped)
        } else {
            String::new()
        }
    );
    let _ = writeln!(
        s,
        "  noise {} rms; supply {}, {} in series with the winding",
        si(f.noise, "A", 3),
        si(o.supply, "V", 4),
        si(o.series_resistance, "Ω", 3)
    );
    if let Some(r) = &f.rise {
        let _ = writeln!(
            s,
            "\n  switch-on at {} (RL step fitted to {} samples, {:.1} τ):",
            si(r.t0.value, "s", 5),
            r.samples,
            r.covered
        );
        let _ = writeln!(s, "  inductance       {}", pm(r.inductance, "H"));
        let _ = writeln!(s, "  resistance       {}", pm(r.resistance, "Ω"));
        let _ = writeln!(s, "  time constant    {}", pm(r.tau, "s"));
        let _ = writeln!(s, "  steady current   {}", pm(r.steady, "A"));
        let _ = writeln!(
            s,
            "  residual         {} rms ({:.2} % of the rise)",
            si(r.residual, "A", 3),
            100.0 * r.residual / r.steady.value
        );
        if let Some(d) = &r.dip {
            let _ = writeln!(
                s,
                "  plunger: the current peaked at {} at {}, dipped to {} at {}; fitted the part before only",
                si(d.peak_i, "A", 4),
                si(d.peak_t, "s", 4),
                si(d.low_i, "A", 4),
                si(d.low_t, "s", 4)
            );
            if let Some((l, rr)) = d.after {
                let differs = (l.value - r.inductance.value).abs()
                    > 3.0 * (l.sigma.hypot(r.inductance.sigma));
                let _ = writeln!(
                    s,
                    "  after the dip:   L {}, R {}{}",
                    pm(l, "H"),
                    pm(rr, "Ω"),
                    if differs {
                        " — the two parts differ (the plunger changed the magnetic path)"
                    } else {
                        " — the same within the uncertainty"
                    }
                );
            }
        }
        if let Some((at, l)) = r.saturation {
            let _ = writeln!(
                s,
                "  saturation: the incremental inductance falls below 90 % above about {} (to {})",
                si(at, "A", 3),
                si(l, "H", 3)
            );
        }
    }
    if let Some(d) = &f.fall {
        let _ = writeln!(
            s,
            "\n  switch-off at {} (decay fitted to {} samples):",
            si(d.t0.value, "s", 5),
            d.samples
        );
        let _ = writeln!(s, "  time constant    {}", pm(d.tau, "s"));
        let _ = writeln!(s, "  heading for      −{}", pm(d.asymptote, "A"));
        if let (Some(r), Some(v)) = (d.off_resistance, d.path_drop) {
            let _ = writeln!(s, "  off resistance   {} (winding + path)", pm(r, "Ω"));
            let _ = writeln!(s, "  path drop        {}", pm(v, "V"));
        } else {
            let _ = writeln!(
                s,
                "  (give --inductance, or capture the rise too, for the path's drop)"
            );
        }
        let _ = writeln!(s, "  residual         {} rms", si(d.residual, "A", 3));
    }
    if f.problems.is_empty() {
        if let Some(r) = &f.rise {
            let _ = writeln!(s, "\n  for a scenario:\n{}", coil_section(r));
        }
    } else {
        let _ = writeln!(s);
        for p in &f.problems {
            let _ = writeln!(s, "  cannot trust this capture: {p}");
        }
    }
    s
}

/// The `[coil]` section for a scenario.
pub fn coil_section(r: &crate::fit::Rise) -> String {
    let digits = |v: Value| if v.relative() < 0.001 { 5 } else { 4 };
    let mut s = format!(
        "[coil]\ninductance = \"{}\"\nresistance = \"{}\"\n",
        si(r.inductance.value, "H", digits(r.inductance)),
        si(r.resistance.value, "Ω", digits(r.resistance))
    );
    if let Some((l_after, _)) = r.dip.as_ref().and_then(|d| d.after) {
        let _ = writeln!(
            s,
            "# with the plunger closed: inductance = \"{}\" — the release decays with this one, so a\n# guard that releases a held coil should believe the larger",
            si(l_after.value, "H", 4)
        );
    }
    if let Some((at, l)) = r.saturation {
        let _ = write!(
            s,
            "saturation_current = \"{}\"\nsaturated_inductance = \"{}\"\n",
            si(at, "A", 3),
            si(l, "H", 3)
        );
    }
    s.push_str("# reference_temperature = the winding's temperature during the capture\n");
    s
}

/// Writes the plot: capture and fitted curves on top, the residual below.
pub fn svg(c: &Capture, f: &Fitted, path: &Path) -> Result<(), Box<dyn std::error::Error>> {
    let model = |t: f64| -> Option<f64> {
        if let Some(r) = &f.rise
            && t <= r.until
        {
            let s = t - r.t0.value;
            return Some(
                r.baseline.value
                    + if s > 0.0 {
                        r.steady.value * (1.0 - (-s / r.tau.value).exp())
                    } else {
                        0.0
                    },
            );
        }
        if let Some(d) = &f.fall {
            let s = t - d.t0.value;
            let v = if s > 0.0 {
                (d.start.value + d.asymptote.value) * (-s / d.tau.value).exp() - d.asymptote.value
            } else {
                d.start.value
            };
            if v >= 0.0 && (f.rise.is_none() || t >= d.t0.value) {
                return Some(v);
            }
        }
        None
    };
    use crate::report::plot::{self, Key, TimeAxis};
    let t = TimeAxis::new(c.t[0], c.t[c.t.len() - 1]);
    let step = c.t.len().div_ceil(3000).max(1);
    let pts: Vec<(f64, f64)> =
        c.t.iter()
            .zip(&c.i)
            .step_by(step)
            .map(|(&x, &i)| (t.x(x), i))
            .collect();
    let fitted: Vec<(f64, f64)> =
        c.t.iter()
            .step_by(step)
            .filter_map(|&x| model(x).map(|v| (t.x(x), v)))
            .collect();
    let resid: Vec<(f64, f64)> =
        c.t.iter()
            .zip(&c.i)
            .step_by(step)
            .filter_map(|(&x, &i)| model(x).map(|v| (t.x(x), (i - v) * 1e3)))
            .collect();
    let grey = RGBColor(120, 120, 120);
    let fit_col = RGBColor(200, 60, 20);
    // The fit's figures beside the traces.
    let mut legend = vec![
        (Key::Dot(grey), "capture".to_string()),
        (Key::Line(fit_col, 2), "fit".into()),
    ];
    if let Some(r) = &f.rise {
        legend.push((Key::Note, format!("L = {}", pm(r.inductance, "H"))));
        legend.push((Key::Note, format!("R = {}", pm(r.resistance, "Ω"))));
        legend.push((Key::Note, format!("τ = {}", pm(r.tau, "s"))));
        legend.push((
            Key::Note,
            format!("rise residual {:.2} mA rms", r.residual * 1e3),
        ));
    }
    if let Some(d) = &f.fall {
        legend.push((Key::Note, format!("τ off = {}", pm(d.tau, "s"))));
        legend.push((
            Key::Note,
            format!("fall residual {:.2} mA rms", d.residual * 1e3),
        ));
    }
    let root = SVGBackend::new(path, (plot::WIDTH, 800)).into_drawing_area();
    root.fill(&WHITE)?;
    let (title, body) = root.split_vertically(40);
    title.draw(&Text::new(
        format!("capture {}", c.file.display()),
        (20, 12),
        ("sans-serif", 20).into_font(),
    ))?;
    let (top, bottom) = body.split_vertically(500);
    let y = plot::span_of(c.i.iter().copied(), &[]);
    let mut ch = plot::panel(&top, &t, y, "current (A)", &legend)?;
    ch.draw_series(pts.iter().map(|&p| Circle::new(p, 1, grey.filled())))?;
    ch.draw_series(LineSeries::new(fitted, fit_col.stroke_width(2)))?;
    let r_max = resid.iter().map(|p| p.1.abs()).fold(1e-9, f64::max) * 1.2;
    let legend = [(Key::Dot(grey), "capture − fit".to_string())];
    let mut rc = plot::panel(&bottom, &t, -r_max..r_max, "residual (mA)", &legend)?;
    rc.draw_series(resid.iter().map(|&p| Circle::new(p, 1, grey.filled())))?;
    root.present()?;
    Ok(())
}
