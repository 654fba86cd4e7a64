//! Reading a captured current trace: a time column and a current column from a CSV file as
//! oscilloscopes and loggers export them — comma, semicolon or tab separated (with a semicolon,
//! a decimal comma is accepted), lines of preamble before the header, units in the header
//! (`t (ms)`, `I [mA]`, `time/s`) or given by option, and the current possibly recorded as the
//! voltage across a shunt.

use crate::units::{self, Unit};
use std::fmt;
use std::path::{Path, PathBuf};

/// How to read the file.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ReadOptions {
    /// The time column: a header name (case-insensitive, with or without its unit) or a 1-based
    /// index.
    pub time_column: Option<String>,
    /// The current column, likewise.
    pub current_column: Option<String>,
    /// Unit of the time column when the header does not say (e.g. `ms`).
    pub time_unit: Option<String>,
    /// Unit of the current column when the header does not say (e.g. `mA`, or `V` with a
    /// shunt).
    pub current_unit: Option<String>,
    /// Shunt resistance, Ω, when the current column is a voltage.
    pub shunt: Option<f64>,
}

/// A capture in SI units, ascending in time.
#[derive(Debug, Clone, PartialEq)]
pub struct Capture {
    /// The file.
    pub file: PathBuf,
    /// Sample times, s.
    pub t: Vec<f64>,
    /// Currents, A.
    pub i: Vec<f64>,
    /// The time column's header.
    pub time_header: String,
    /// The current column's header.
    pub current_header: String,
    /// Data rows that could not be read (blank fields, text), skipped.
    pub skipped: usize,
}

/// Why a capture could not be read.
#[derive(Debug, Clone, PartialEq)]
pub struct CaptureError {
    /// The file.
    pub file: PathBuf,
    /// 1-based line, when one is to blame.
    pub line: Option<usize>,
    /// What is wrong.
    pub message: String,
}

impl fmt::Display for CaptureError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.line {
            Some(l) => write!(f, "{}:{l}: {}", self.file.display(), self.message),
            None => write!(f, "{}: {}", self.file.display(), self.message),
        }
    }
}

impl std::error::Error for CaptureError {}

fn number(field: &str, decimal_comma: bool) -> Option<f64> {
    let f = field.trim().trim_matches('"');
    let v = if decimal_comma {
        f.replace(',', ".").parse().ok()
    } else {
        f.parse().ok()
    };
    v.filter(|x: &f64| x.is_finite())
}

/// The unit written in a header: `t (ms)`, `I [mA]`, `time/s`, `Time(s)`.
fn header_unit(h: &str) -> Option<&str> {
    let h = h.trim().trim_matches('"');
    for (open, close) in [('(', ')'), ('[', ']')] {
        if let (Some(a), Some(b)) = (h.rfind(open), h.rfind(close))
            && a < b
        {
            return Some(h[a + 1..b].trim());
        }
    }
    h.rsplit_once('/')
        .map(|(_, u)| u.trim())
        .filter(|u| !u.is_empty() && u.len() <= 4)
}

/// The header's name without its unit, lower case.
fn header_name(h: &str) -> String {
    let h = h.trim().trim_matches('"');
    let cut = h
        .find(['(', '['])
        .or_else(|| h.rfind('/'))
        .unwrap_or(h.len());
    h[..cut].trim().to_lowercase()
}

/// The scale of a unit string to SI, for `unit` (`ms` → 10⁻³ for seconds).
fn scale(text: &str, unit: Unit) -> Result<f64, String> {
    units::parse(&format!("1 {text}"), unit).map_err(|e| e.0)
}

impl Capture {
    /// Reads a capture.
    pub fn read(path: &Path, opts: &ReadOptions) -> Result<Self, CaptureError> {
        let text = std::fs::read_to_string(path).map_err(|e| CaptureError {
            file: path.to_path_buf(),
            line: None,
            message: format!("cannot read: {e}"),
        })?;
        Self::parse(path, &text, opts)
    }

    /// Reads capture text (`path` names it in messages).
    pub fn parse(path: &Path, text: &str, opts: &ReadOptions) -> Result<Self, CaptureError> {
        let err = |(line, message): (Option<usize>, String)| CaptureError {
            file: path.to_path_buf(),
            line,
            message,
        };
        let lines: Vec<&str> = text.lines().collect();
        let layout =
            Layout::of(&lines).ok_or_else(|| err((None, "no rows of numbers found".into())))?;
        let tc = layout
            .column(
                &opts.time_column,
                &|n| {
                    n == "t" || n.starts_with("time") || n == "x" || n == "second" || n == "seconds"
                },
                "time",
            )
            .map_err(err)?;
        let ic = layout
            .column(
                &opts.current_column,
                &|n| n == "i" || n.contains("current") || n.starts_with("i_") || n == "amps",
                "current",
            )
            .map_err(err)?;
        if tc == ic {
            return Err(err((
                None,
                "the time and current columns are the same".into(),
            )));
        }
        let tu = layout.unit(tc, &opts.time_unit, "time").map_err(err)?;
        let iu = layout
            .unit(ic, &opts.current_unit, "current")
            .map_err(err)?;
        let t_scale =
            scale(&tu, Unit::Second).map_err(|m| err((None, format!("time unit: {m}"))))?;
        let i_scale = current_scale(&iu, opts.shunt).map_err(|m| err((None, m)))?;
        let (t, i, skipped) = layout
            .rows(&lines, (tc, ic), (t_scale, i_scale), &tu)
            .map_err(err)?;
        if t.len() < 20 {
            return Err(err((
                None,
                format!("only {} samples: a fit needs at least 20", t.len()),
            )));
        }
        Ok(Self {
            file: path.to_path_buf(),
            t,
            i,
            time_header: layout.headers[tc].clone(),
            current_header: layout.headers[ic].clone(),
            skipped,
        })
    }
}

/// A problem with a capture: the line (1-based) it is on, if one, and what it is.
type Problem = (Option<usize>, String);

/// How a capture's text is laid out: its delimiter, whether numbers use a decimal comma, where
/// the header and the first data row are, and the column names.
struct Layout {
    delim: char,
    decimal_comma: bool,
    first_data: usize,
    /// The header's line index (0-based), if the file has one.
    header_line: Option<usize>,
    headers: Vec<String>,
}

impl Layout {
    /// The layout of `lines` (`None`: no rows of numbers). The delimiter is the one most of
    /// the first 40 non-empty lines carry (`;`, tab, else `,`; a decimal comma with the first
    /// two); the header is the last non-numeric line before the first run of numeric rows.
    fn of(lines: &[&str]) -> Option<Self> {
        let sample: Vec<&str> = lines
            .iter()
            .copied()
            .filter(|l| !l.trim().is_empty())
            .take(40)
            .collect();
        let count = |c: char| sample.iter().filter(|l| l.contains(c)).count();
        let delim = if count(';') * 2 > sample.len() {
            ';'
        } else if count('\t') * 2 > sample.len() {
            '\t'
        } else {
            ','
        };
        let mut layout = Layout {
            delim,
            decimal_comma: delim != ',',
            first_data: 0,
            header_line: None,
            headers: Vec::new(),
        };
        let numeric = |l: &str| {
            let f = layout.split(l);
            f.len() >= 2 && f.iter().all(|x| number(x, layout.decimal_comma).is_some())
        };
        let first_data = lines.iter().enumerate().position(|(n, l)| {
            numeric(l)
                && lines
                    .get(n + 1)
                    .is_none_or(|m| numeric(m) || m.trim().is_empty())
        })?;
        let header_line = lines[..first_data]
            .iter()
            .rposition(|l| !l.trim().is_empty());
        layout.headers = match header_line {
            Some(h) => layout.split(lines[h]),
            None => (1..=layout.split(lines[first_data]).len())
                .map(|k| format!("column {k}"))
                .collect(),
        };
        layout.first_data = first_data;
        layout.header_line = header_line;
        Some(layout)
    }

    /// A line's fields, trimmed.
    fn split(&self, l: &str) -> Vec<String> {
        l.split(self.delim).map(|f| f.trim().to_string()).collect()
    }

    /// The header's line number (1-based), for messages.
    fn header_number(&self) -> Option<usize> {
        self.header_line.map(|h| h + 1)
    }

    /// The column `want` names (a 1-based number or a header), else the one header `guess`
    /// accepts.
    fn column(
        &self,
        want: &Option<String>,
        guess: &dyn Fn(&str) -> bool,
        what: &str,
    ) -> Result<usize, Problem> {
        let headers = &self.headers;
        if let Some(w) = want {
            if let Ok(k) = w.trim().parse::<usize>() {
                return if k >= 1 && k <= headers.len() {
                    Ok(k - 1)
                } else {
                    Err((
                        None,
                        format!(
                            "column {k} does not exist: the file has {} columns",
                            headers.len()
                        ),
                    ))
                };
            }
            let wl = w.trim().to_lowercase();
            return headers
                .iter()
                .position(|h| {
                    h.trim().trim_matches('"').to_lowercase() == wl || header_name(h) == wl
                })
                .ok_or_else(|| {
                    (
                        self.header_number(),
                        format!(
                            "no column named `{w}`; the columns are: {}",
                            headers.join(" | ")
                        ),
                    )
                });
        }
        let found: Vec<usize> = headers
            .iter()
            .enumerate()
            .filter(|(_, h)| guess(&header_name(h)))
            .map(|(k, _)| k)
            .collect();
        match found.as_slice() {
            [k] => Ok(*k),
            _ => Err((
                self.header_number(),
                format!(
                    "cannot tell which column is the {what}; name it with --column t=NAME,i=NAME (the columns are: {})",
                    headers.join(" | ")
                ),
            )),
        }
    }

    /// The unit of column `col`: as given, else from its header.
    fn unit(&self, col: usize, given: &Option<String>, what: &str) -> Result<String, Problem> {
        given
            .clone()
            .or_else(|| header_unit(&self.headers[col]).map(str::to_string))
            .ok_or_else(|| {
                (
                    self.header_number(),
                    format!(
                        "the {what} column `{}` has no unit: write it in the header, e.g. `{what} (ms)`, or give --units t=ms,i=mA",
                        self.headers[col]
                    ),
                )
            })
    }

    /// The samples (SI) from the first data row on, and how many rows were skipped (not two
    /// numbers); time must increase.
    fn rows(
        &self,
        lines: &[&str],
        (tc, ic): (usize, usize),
        (t_scale, i_scale): (f64, f64),
        tu: &str,
    ) -> Result<(Vec<f64>, Vec<f64>, usize), Problem> {
        let (mut t, mut i, mut skipped) = (Vec::new(), Vec::new(), 0);
        for (n, l) in lines.iter().enumerate().skip(self.first_data) {
            if l.trim().is_empty() {
                continue;
            }
            let f = self.split(l);
            match (
                f.get(tc).and_then(|x| number(x, self.decimal_comma)),
                f.get(ic).and_then(|x| number(x, self.decimal_comma)),
            ) {
                (Some(a), Some(b)) => {
                    if let Some(&last) = t.last()
                        && a * t_scale <= last
                    {
                        return Err((
                            Some(n + 1),
                            format!("time goes backwards or repeats ({a} {tu})"),
                        ));
                    }
                    t.push(a * t_scale);
                    i.push(b * i_scale);
                }
                _ => skipped += 1,
            }
        }
        Ok((t, i, skipped))
    }
}

/// The scale of the current column's unit to amperes: a current unit, or a voltage across
/// `shunt`.
fn current_scale(iu: &str, shunt: Option<f64>) -> Result<f64, String> {
    match scale(iu, Unit::Ampere) {
        Ok(s) => Ok(s),
        Err(_) => match (scale(iu, Unit::Volt), shunt) {
            (Ok(v), Some(r)) if r > 0.0 => Ok(v / r),
            (Ok(_), _) => Err(format!(
                "the current column is in {iu}: give the shunt it was measured across, e.g. --shunt \"0.1 Ω\""
            )),
            (Err(m), _) => Err(format!("current unit: {m}")),
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read(text: &str, o: &ReadOptions) -> Result<Capture, CaptureError> {
        Capture::parse(Path::new("cap.csv"), text, o)
    }

    fn rows(n: usize, delim: &str, comma: bool) -> String {
        (0..n)
            .map(|k| {
                let line = format!("{}{delim}{}", k as f64 * 0.5, 0.01 * k as f64);
                if comma { line.replace('.', ",") } else { line }
            })
            .collect::<Vec<_>>()
            .join("\n")
    }

    #[test]
    fn comma_and_semicolon_exports_with_units_in_the_header() {
        let c = read(
            &format!("t (ms),I [mA]\n{}", rows(30, ",", false)),
            &ReadOptions::default(),
        )
        .unwrap();
        assert_eq!(c.t.len(), 30);
        assert!((c.t[2] - 1e-3).abs() < 1e-15 && (c.i[2] - 0.02e-3).abs() < 1e-15);
        // A European export: semicolons, decimal commas, preamble lines.
        let text = format!(
            "Scope export\nSample rate;2 kS/s\n\nTime/s;Current/A\n{}",
            rows(30, ";", true)
        );
        let c = read(&text, &ReadOptions::default()).unwrap();
        assert!((c.t[3] - 1.5).abs() < 1e-12 && (c.i[3] - 0.03).abs() < 1e-12);
    }

    #[test]
    fn columns_and_units_by_option_and_a_shunt() {
        let text = format!(
            "x,ch2,ch1\n{}",
            (0..30)
                .map(|k| format!("{k},9,{}", k as f64 * 0.1))
                .collect::<Vec<_>>()
                .join("\n")
        );
        let o = ReadOptions {
            time_column: Some("x".into()),
            current_column: Some("3".into()),
            time_unit: Some("us".into()),
            current_unit: Some("mV".into()),
            shunt: Some(0.1),
        };
        let c = read(&text, &o).unwrap();
        assert!((c.t[1] - 1e-6).abs() < 1e-18);
        assert!(
            (c.i[10] - 1.0e-3 / 0.1).abs() < 1e-12,
            "1 mV over 0.1 Ω is 10 mA: {}",
            c.i[10]
        );
    }

    #[test]
    fn clear_messages() {
        let no_unit = read(
            &format!("t,i\n{}", rows(30, ",", false)),
            &ReadOptions::default(),
        )
        .unwrap_err();
        assert!(
            no_unit.message.contains("has no unit") && no_unit.line == Some(1),
            "{no_unit}"
        );
        let volts = read(
            &format!("t (s),i (V)\n{}", rows(30, ",", false)),
            &ReadOptions::default(),
        )
        .unwrap_err();
        assert!(volts.message.contains("shunt"), "{volts}");
        let ambiguous = read(
            &format!("a (s),b (A)\n{}", rows(30, ",", false)),
            &ReadOptions::default(),
        )
        .unwrap_err();
        assert!(ambiguous.message.contains("--column"), "{ambiguous}");
        let short = read(
            &format!("t (s),i (A)\n{}", rows(5, ",", false)),
            &ReadOptions::default(),
        )
        .unwrap_err();
        assert!(short.message.contains("at least 20"), "{short}");
        let back = read(
            "t (s),i (A)\n".to_string().as_str().to_owned().as_str(),
            &ReadOptions::default(),
        );
        assert!(back.is_err());
    }
}
