//! `coilward-sim`: validate a drive profile against a detailed circuit before flashing it.
//!
//! Exit status: 0 the profile passed; 1 a limit was exceeded or the guard had to act; 2 bad
//! input (the message names the file, line and key).

use clap::{Parser, Subcommand};
use coilward_sim::bridge::{self, scenario::BridgeScenario};
use coilward_sim::cosim::{self, Options};
use coilward_sim::report::{self, si};
use coilward_sim::scenario::{self, Scenario};
use coilward_sim::sweep::records::{self, Done, Header, Writer};
use coilward_sim::sweep::summary::Summary;
use coilward_sim::sweep::{self, Plan, Shard, Spec};
use indicatif::{ProgressBar, ProgressStyle};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// `println!` that ends quietly when standard output has been closed (a pager or `head` that
/// read enough): the error is dropped instead of panicking.
macro_rules! say {
    ($($t:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stdout(), $($t)*);
    }};
}

/// `print!` with the same behaviour as [`say!`].
macro_rules! say_part {
    ($($t:tt)*) => {{
        use std::io::Write as _;
        let _ = write!(std::io::stdout(), $($t)*);
    }};
}

#[derive(Parser)]
#[command(
    name = "coilward-sim",
    version,
    about = "Run the coilward guard against a detailed circuit model of an inductive load",
    after_help = "Examples:\n  coilward-sim check examples/scenarios/irrigation-valve.toml\n  coilward-sim run examples/scenarios/irrigation-valve.toml --svg valve.svg\n  coilward-sim sweep examples/scenarios/irrigation-valve.toml --samples 1000\n  coilward-sim fit examples/captures/valve-pull-in.csv --supply \"24 V\" --on-resistance \"0.1 Ω\"\n\nExit status (run, sweep): 0 pass (no limit exceeded, the guard never changed the request),\n3 limited (no limit exceeded, the guard changed the request), 1 fail (a limit exceeded, or the\nload re-energised or reversed before its current decayed), 2 bad input."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Simulate the scenario and print a summary; optionally write JSON, CSV and SVG reports.
    #[command(
        after_help = "Examples:\n  coilward-sim run valve.toml\n  coilward-sim run valve.toml --json out.json --csv out.csv --svg out.svg\n  coilward-sim run valve.toml --svg pull-in.svg --from \"0 ms\" --to \"20 ms\""
    )]
    Run {
        /// Scenario file (TOML).
        file: PathBuf,
        /// The plot starts here (a time with its unit, e.g. "40 ms"; with --svg).
        #[arg(long, value_name = "TIME", requires = "svg")]
        from: Option<String>,
        /// The plot ends here (a time with its unit; with --svg).
        #[arg(long, value_name = "TIME", requires = "svg")]
        to: Option<String>,
        /// Write the JSON report here.
        #[arg(long, value_name = "PATH")]
        json: Option<PathBuf>,
        /// Write one CSV row per control period here.
        #[arg(long, value_name = "PATH")]
        csv: Option<PathBuf>,
        /// Write the plot here (SVG).
        #[arg(long, value_name = "PATH")]
        svg: Option<PathBuf>,
    },
    /// Validate the scenario only and print the figures a designer would work out by hand.
    #[command(after_help = "Example:\n  coilward-sim check examples/scenarios/relay-zener.toml")]
    Check {
        /// Scenario file (TOML).
        file: PathBuf,
    },
    /// Monte Carlo over the scenario's [tolerance] spreads, in parallel.
    #[command(
        after_help = "Examples:\n  coilward-sim sweep valve.toml --samples 1000\n  coilward-sim sweep valve.toml --samples 3000 --plan latin --json summary.json\n  coilward-sim sweep valve.toml --plan corners\n  coilward-sim sweep valve.toml --samples 100000 --seed 7 --shard 3/16 --records part3.jsonl\n\nA sample is the same on every machine and shard: the shards' records merged (`merge`) give\nthe unsharded sweep's summary. With --records, each sample is written as it finishes; the same\ncommand run again after an interruption finishes the sweep from what the file holds.\n\nExit status: without --records, the worst sample's (0 pass, 3 limited, 1 fail); with --records,\n0 once the samples are written (the verdict is in the records, for `merge`); 2 bad input."
    )]
    Sweep {
        /// Scenario file (TOML).
        file: PathBuf,
        /// Number of samples in the whole sweep (with --plan corners: 2^spreads, the default).
        #[arg(long)]
        samples: Option<u64>,
        /// Seed of the draws.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// How each spread is drawn: uniform, normal (the spread as ±3σ, truncated), corners
        /// (every corner of the box), latin (Latin hypercube).
        #[arg(long, default_value = "uniform")]
        plan: String,
        /// Run only part K of N (samples with index mod N = K − 1).
        #[arg(long, value_name = "K/N")]
        shard: Option<String>,
        /// Spreads held at their nominal value (comma-separated keys).
        #[arg(long, value_name = "KEYS", default_value = "")]
        fixed: String,
        /// Spreads drawn from the truncated normal whatever the plan (comma-separated keys).
        #[arg(long, value_name = "KEYS", default_value = "")]
        normal: String,
        /// Write each sample's outcome here as it finishes (JSON Lines); resumes from it.
        #[arg(long, value_name = "PATH")]
        records: Option<PathBuf>,
        /// Write the summary here (JSON).
        #[arg(long, value_name = "PATH")]
        json: Option<PathBuf>,
        /// The failure probability to show: the samples it needs are printed.
        #[arg(long, default_value = "0.1 %")]
        target: String,
    },
    /// Combine the records of a sweep's shards into the summary of the whole sweep.
    #[command(
        after_help = "Example:\n  coilward-sim merge part*.jsonl --json summary.json\n\nThe records must come from the same scenario file, seed, size and plan. The summary is the\nunsharded sweep's, bit for bit. Exit status: the worst sample's (0 pass, 3 limited, 1 fail),\n2 bad input."
    )]
    Merge {
        /// Records files (JSON Lines) written by `sweep --records`.
        #[arg(required = true)]
        records: Vec<PathBuf>,
        /// Write the summary here (JSON).
        #[arg(long, value_name = "PATH")]
        json: Option<PathBuf>,
        /// The failure probability to show: the samples it needs are printed.
        #[arg(long, default_value = "0.1 %")]
        target: String,
    },
    /// Run the fault suite on the scenario: its declared tolerance's corners and random points
    /// inside, and named faults outside.
    #[command(
        after_help = "Examples:\n  coilward-sim faults examples/scenarios/valve-at-ceiling.toml --json faults.json\n  coilward-sim faults examples/scenarios/door-motor-small-bus.toml\n\nThe scenario's [tolerance] section (and supply_reading) is the box the guard covers. A case\nexceeds when the true current passes the guard's ceiling, a clamp pulse passes its rating (low\nside) or the bus its maximum (full bridge), or the load is switched on or reversed before its\ncurrent fell below the release current. Exit status: 0 nothing inside the box exceeded, 1\nsomething inside it did, 2 bad input."
    )]
    Faults {
        /// Scenario file (TOML).
        file: PathBuf,
        /// Write every case's outcome here (JSON).
        #[arg(long, value_name = "PATH")]
        json: Option<PathBuf>,
    },
    /// Write a complete, commented scenario to start from (low side unless --bridge).
    #[command(
        after_help = "Examples:\n  coilward-sim new my-valve.toml\n  coilward-sim new --bridge my-motor.toml\n  coilward-sim new > first.toml\n\nAn existing file is never overwritten (exit status 2)."
    )]
    New {
        /// A full-bridge scenario (a motor driven both ways) instead of a low-side one.
        #[arg(long, conflicts_with = "low_side")]
        bridge: bool,
        /// A low-side scenario (the default): one switch and a clamp path.
        #[arg(long)]
        low_side: bool,
        /// Where to write it (standard output without one).
        file: Option<PathBuf>,
    },
    /// Fit a coil's inductance and resistance to a captured current trace (CSV).
    #[command(
        after_help = "Examples:\n  coilward-sim fit examples/captures/valve-pull-in.csv --supply \"24 V\" --on-resistance \"0.1 Ω\"\n  coilward-sim fit scope.csv --supply \"12 V\" --column t=Time,i=CH2 --units t=s,i=V --shunt \"0.1 Ω\" --svg fit.svg\n\nThe capture must start before the switch-on (or switch-off) edge. Exit status: 0 a trustworthy\nfit, 1 the capture cannot give one (the message says why), 2 bad input."
    )]
    Fit {
        /// Capture file (CSV; comma, semicolon or tab separated).
        file: PathBuf,
        /// Supply across the coil and its series parts while on, e.g. "24 V".
        #[arg(long)]
        supply: String,
        /// Everything in series with the winding while on (switch, shunt, wiring), e.g. "0.1 Ω".
        #[arg(long, default_value = "0 Ω")]
        on_resistance: String,
        /// Which columns: t=NAME,i=NAME (header names or 1-based numbers).
        #[arg(long, value_name = "t=NAME,i=NAME")]
        column: Option<String>,
        /// Units when the header has none: t=UNIT,i=UNIT (e.g. t=ms,i=mA; i=V with --shunt).
        #[arg(long, value_name = "t=UNIT,i=UNIT")]
        units: Option<String>,
        /// The shunt the current column was measured across, when it is a voltage.
        #[arg(long)]
        shunt: Option<String>,
        /// The inductance, for a capture of a switch-off alone (to get the path's drop).
        #[arg(long)]
        inductance: Option<String>,
        /// Write the plot (capture, fit, residual) here (SVG).
        #[arg(long, value_name = "PATH")]
        svg: Option<PathBuf>,
    },
}

/// Where `run` writes its reports.
struct Outputs<'a> {
    json: Option<&'a Path>,
    csv: Option<&'a Path>,
    svg: Option<&'a Path>,
    /// The plot's window, s (`--from`, `--to`).
    window: Option<(f64, f64)>,
}

/// The plot's window from `--from` and `--to` (either may be left out).
fn window(from: Option<&str>, to: Option<&str>) -> Result<Option<(f64, f64)>, ExitCode> {
    if from.is_none() && to.is_none() {
        return Ok(None);
    }
    let time = |text: Option<&str>, option: &str, default: f64| match text {
        None => Ok(default),
        Some(t) => quantity(t, coilward_sim::units::Unit::Second, option),
    };
    let a = time(from, "--from", 0.0)?;
    let b = time(to, "--to", f64::INFINITY)?;
    if a < 0.0 || b <= a {
        eprintln!(
            "error: --from and --to: the window must start at or after 0 s and end after it starts"
        );
        return Err(ExitCode::from(2));
    }
    Ok(Some((a, b)))
}

impl Outputs<'_> {
    /// Whether per-period rows are needed.
    fn rows(&self) -> bool {
        self.csv.is_some() || self.svg.is_some()
    }

    /// Before any work: the report paths are distinct and each can be written.
    fn check(&self) -> Result<(), ExitCode> {
        let given = [
            ("--json", self.json),
            ("--csv", self.csv),
            ("--svg", self.svg),
        ];
        for (i, (a, pa)) in given.iter().enumerate() {
            let Some(pa) = pa else { continue };
            for (b, pb) in &given[i + 1..] {
                if pb.is_some_and(|pb| pb == *pa) {
                    eprintln!(
                        "error: {a} and {b} name the same file, {}: one would overwrite the other",
                        pa.display()
                    );
                    return Err(ExitCode::from(2));
                }
            }
            writable(pa, &format!("{a} report"))?;
        }
        Ok(())
    }

    /// Writes the reports that were asked for, each with its own writer, and names the files.
    fn write(
        &self,
        json: impl FnOnce() -> serde_json::Value,
        csv: impl FnOnce(std::io::BufWriter<std::fs::File>) -> Result<(), ::csv::Error>,
        svg: impl FnOnce(&Path) -> Result<(), Box<dyn std::error::Error>>,
    ) -> Result<(), ExitCode> {
        if let Some(p) = self.json {
            write_file(p, "JSON report", |p| {
                let text = serde_json::to_string_pretty(&json()).map_err(|e| e.to_string())?;
                std::fs::write(p, text + "\n").map_err(|e| e.to_string())
            })?;
            say!("  json: {}", p.display());
        }
        if let Some(p) = self.csv {
            write_file(p, "CSV report", |p| {
                let f = std::fs::File::create(p).map_err(|e| e.to_string())?;
                csv(std::io::BufWriter::new(f)).map_err(|e| e.to_string())
            })?;
            say!("  csv: {}", p.display());
        }
        if let Some(p) = self.svg {
            write_file(p, "plot", |p| svg(p).map_err(|e| e.to_string()))?;
            say!("  plot: {}", p.display());
        }
        Ok(())
    }
}

/// Exit status 0 for a pass, 3 for limited, 1 for a fail.
fn verdict(v: cosim::Verdict) -> ExitCode {
    ExitCode::from(v.exit_status())
}

fn run_bridge(s: &BridgeScenario, out: &Outputs) -> Result<ExitCode, ExitCode> {
    out.check()?;
    let r = bridge::cosim::run(s, out.rows());
    say_part!("{}", bridge::report::summary(s, &r));
    out.write(
        || bridge::report::json(s, &r),
        |w| bridge::report::csv(&r.rows, w),
        |p| bridge::report::svg_window(s, &r, p, out.window),
    )?;
    Ok(verdict(r.verdict()))
}

fn check_bridge(s: &BridgeScenario) -> Result<ExitCode, ExitCode> {
    let guard = s.guard().map_err(|e| {
        eprintln!("error: {}", s.config_error(&e));
        ExitCode::from(2)
    })?;
    let m = guard.model();
    let d = m.derived();
    say!("{} ({}): valid (full bridge)", s.name, s.file.display());
    for a in &s.assumed {
        say!("  assumed: {a}");
    }
    for w in &s.warnings {
        say!("  warning: {w}");
    }
    say!(
        "  time constant, driving and slow decay   {}",
        si(f64::from(d.tau_on), "s", 4)
    );
    say!(
        "  time constant, fast decay               {}",
        si(f64::from(d.tau_fast), "s", 4)
    );
    say!(
        "  stall current, 100 %, nominal supply    {}",
        si(f64::from(d.on_current_nominal), "A", 4)
    );
    let c = &s.circuit;
    let i0 = f64::from(s.limits.current_ceiling);
    let r_f = c.resistance + 2.0 * c.diode_resistance;
    let a = (c.supply + 2.0 * c.diode_drop) / r_f;
    let q = c.inductance / r_f * (i0 - a * (1.0 + i0 / a).ln());
    say!(
        "  fast turn-off from the ceiling: {} returned ({} at {}) in {}",
        si(q, "C", 3),
        si(q * c.supply, "J", 3),
        si(c.supply, "V", 3),
        si(c.inductance / r_f * (1.0 + i0 / a).ln(), "s", 3)
    );
    if let Some(b) = c.bus {
        let rise = ((c.supply * c.supply + 2.0 * q * c.supply / b.capacitance).sqrt()) - c.supply;
        say!(
            "  with no sink, that lifts {} to {} (max {})",
            si(b.capacitance, "F", 3),
            si(c.supply + rise, "V", 3),
            si(f64::from(s.params.supply.max), "V", 3)
        );
    }
    say!(
        "  reversal dead time                      {} ({} periods)",
        si(f64::from(s.limits.reversal_dead_time), "s", 3),
        guard.dead_periods()
    );
    Ok(ExitCode::SUCCESS)
}

/// A scenario that did not load: its error printed, exit status 2.
fn refused<T>(loaded: Result<T, scenario::ScenarioError>) -> Result<T, ExitCode> {
    loaded.map_err(|e| {
        eprintln!("error: {e}");
        ExitCode::from(2)
    })
}

fn write_file(
    path: &Path,
    what: &str,
    f: impl FnOnce(&Path) -> Result<(), String>,
) -> Result<(), ExitCode> {
    f(path).map_err(|e| {
        eprintln!("error: cannot write the {what} to {}: {e}", path.display());
        ExitCode::from(2)
    })
}

/// Before any work: `path` can be written (it is created empty), or exit status 2.
fn writable(path: &Path, what: &str) -> Result<(), ExitCode> {
    write_file(path, what, |p| {
        std::fs::write(p, "").map_err(|e| e.to_string())
    })
}

fn faults_cmd(s: &scenario::Loaded, json: Option<&Path>) -> Result<ExitCode, ExitCode> {
    use rayon::prelude::*;
    // The output is checked writable before the work.
    if let Some(p) = json {
        writable(p, "fault report")?;
    }
    let bridge = s.topology() == scenario::Topology::FullBridge;
    let outcomes: Vec<_> = match s {
        scenario::Loaded::FullBridge(s) => {
            let run = |c| bridge::faults::run(c).0;
            bridge::faults::suite(s).par_iter().map(run).collect()
        }
        scenario::Loaded::LowSide(s) => {
            let run = |c| coilward_sim::faults::run(c).0;
            coilward_sim::faults::suite(s).par_iter().map(run).collect()
        }
    };
    let (name, file) = (s.name(), s.file());
    say!("{name} ({})", file.display());
    // The third column: the bus on a bridge, the clamp pulse on a low side.
    let third = if bridge { "bus/max" } else { "pulse/rat." };
    let w = outcomes
        .iter()
        .map(|o| o.name.chars().count())
        .max()
        .unwrap_or(4);
    say!(
        "  {:<w$} {:>6} {:>11} {:>11} {:>6} {:>9} {:>8}",
        "case",
        "inside",
        "peak/ceil.",
        third,
        "early",
        "exceeded",
        "flagged"
    );
    let yes = |b: bool| if b { "yes" } else { "no" };
    for o in &outcomes {
        say!(
            "  {:<w$} {:>6} {:>11.3} {:>11.3} {:>6} {:>9} {:>8}",
            o.name,
            yes(o.inside_tolerance),
            o.peak_over_ceiling,
            if bridge {
                o.bus_over_maximum
            } else {
                o.pulse_over_rating
            },
            yes(o.early_turn_on),
            yes(o.exceeded),
            yes(o.flagged)
        );
    }
    let inside = outcomes.iter().filter(|o| o.inside_tolerance).count();
    let bad = outcomes
        .iter()
        .filter(|o| o.inside_tolerance && o.exceeded)
        .count();
    say!("\n  inside the declared tolerance: {inside} cases, {bad} exceeded");
    if let Some(p) = json {
        let doc = serde_json::json!({
            "schema": coilward_sim::report::json::REPORT_SCHEMA,
            "scenario": coilward_sim::report::json::scenario(name, file, s.topology().word()),
            "cases": outcomes,
        });
        write_file(p, "fault report", |p| {
            std::fs::write(
                p,
                serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n",
            )
            .map_err(|e| e.to_string())
        })?;
    }
    Ok(ExitCode::from(u8::from(bad > 0)))
}

fn run(s: &Scenario, out: &Outputs) -> Result<ExitCode, ExitCode> {
    out.check()?;
    let r = cosim::run(
        s,
        Options {
            rows: out.rows(),
            wave: None,
        },
    );
    say_part!("{}", report::summary(s, &r));
    out.write(
        || report::json::report(s, &r),
        |w| report::csv::write(&r.rows, w),
        |p| {
            // A window of at most 200 periods shows the plant's full wave, from a second run
            // sampled inside it (the reports above come from the unsampled run).
            let wave = out
                .window
                .filter(|(a, b)| (b - a) <= 200.0 * s.period)
                .map(|w| {
                    let opts = Options {
                        rows: false,
                        wave: Some(w),
                    };
                    cosim::run(s, opts).wave
                })
                .unwrap_or_default();
            report::svg::write_window(s, &r, p, out.window, &wave)
        },
    )?;
    Ok(verdict(r.verdict()))
}

fn check(s: &Scenario) -> Result<ExitCode, ExitCode> {
    let guard = s.guard().map_err(|e| {
        eprintln!("error: {}", s.config_error(&e));
        ExitCode::from(2)
    })?;
    let m = guard.model();
    let d = m.derived();
    let vs = coilward::Volts::saturating_from_num(s.beliefs.voltage);
    let amps = |a: f32| m.current_from_amps(a);
    say!("{} ({}): valid", s.name, s.file.display());
    for a in &s.assumed {
        say!("  assumed: {a}");
    }
    for w in &s.warnings {
        say!("  warning: {w}");
    }
    say!("\n  as the firmware believes the circuit (the guard's model):");
    say!(
        "  time constant, switch on        {}",
        si(f64::from(d.tau_on), "s", 4)
    );
    say!(
        "  time constant, freewheeling     {}",
        si(f64::from(d.tau_off), "s", 4)
    );
    say!(
        "  clamp path                      {} + {}",
        si(f64::from(d.path_voltage), "V", 4),
        si(f64::from(d.path_resistance), "Ω", 3)
    );
    let r_on = f64::from(d.resistance) + s.beliefs.on_resistance;
    for (label, v) in [
        ("min", s.beliefs.supply_min),
        ("nominal", s.beliefs.voltage),
        ("max", s.beliefs.supply_max),
    ] {
        say!(
            "  steady current, 100 %, {label:<8} {} (at {})",
            si(v / r_on, "A", 4),
            si(v, "V", 3)
        );
    }
    say!(
        "  effective current ceiling       {}",
        si(f64::from(m.amps(guard.ceiling())), "A", 4)
    );
    let trip = s.limits.trip_current;
    let release = s.limits.release_current;
    if let (Some(i_trip), Some(i_rel)) = (amps(trip), amps(release)) {
        say!(
            "\n  turning off at the trip current, {}:",
            si(f64::from(trip), "A", 4)
        );
        match m.decay_time_us(i_trip, i_rel, vs) {
            Some(us) => say!(
                "  decay to the release current    {} (to {})",
                si(f64::from(us) * 1e-6, "s", 4),
                si(f64::from(release), "A", 3)
            ),
            None => {
                say!("  decay to the release current    never (the path holds the current up)")
            }
        }
        say!(
            "  energy into the clamp path      {}",
            si(f64::from(m.joules(m.turn_off_energy(i_trip, vs))), "J", 4)
        );
        say!(
            "  switch-node peak                {}",
            si(m.peak_drain_voltage(i_trip, vs).to_num::<f64>(), "V", 4)
        );
        if let Some(e) = s.limits.clamp_pulse_energy {
            say!(
                "  clamp pulse rating              {}",
                si(f64::from(e), "J", 3)
            );
        }
        let ceiling = guard.ceiling();
        if let Some(us) = m.decay_time_us(ceiling, i_rel, vs) {
            say!(
                "  release from the ceiling        {}",
                si(f64::from(us) * 1e-6, "s", 4)
            );
        }
    }
    print_tolerance_and_clamp_power(s);
    if !s.tolerance.is_empty() {
        say!("\n  tolerance spreads (for sweep):");
        for (k, sp) in &s.tolerance {
            let (lo, hi) = sp.bounds(s.plant.get(*k));
            say!(
                "  {:<20} {} ..= {}",
                k.name(),
                si(lo, k.unit().symbol(), 4),
                si(hi, k.unit().symbol(), 4)
            );
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// `check`'s lines on the tolerance the guard covers and the drive's worst average clamp power
/// (from a simulated run).
fn print_tolerance_and_clamp_power(s: &Scenario) {
    let t = s.limits.tolerance;
    say!(
        "\n  declared tolerance the guard covers: inductance ±{:.1} %, resistance ±{:.1} %, \
         supply reading ±{:.1} %, node capacitance +{:.1} %, clamp voltage ±{:.1} %",
        t.inductance * 100.0,
        t.resistance * 100.0,
        t.supply_reading * 100.0,
        t.node_capacitance * 100.0,
        t.clamp_voltage * 100.0
    );
    if s.beliefs.saturation_current.is_some() {
        say!(
            "  saturation current ±{:.1} %, saturated inductance ±{:.1} %",
            t.saturation_current * 100.0,
            t.saturated_inductance * 100.0
        );
    }
    let run = cosim::run(
        s,
        Options {
            rows: true,
            wave: None,
        },
    );
    let p = s
        .limits
        .clamp_power
        .unwrap_or(coilward::ClampPower::DEFAULT);
    let worst = cosim::worst_average_clamp_power(&run.rows, s.period, f64::from(p.window));
    let limit = if s.limits.clamp_thermal.is_some() {
        "the clamp's thermal replica is configured".to_string()
    } else {
        format!("limit {}", si(f64::from(p.max_average), "W", 3))
    };
    say!(
        "  clamp average power, worst      {} over a {} window, simulated ({limit})",
        si(worst, "W", 3),
        si(f64::from(p.window), "s", 3)
    );
}

/// `--target`: a probability written as a percentage (`0.1 %`) or a fraction (`0.001`).
fn target_probability(text: &str) -> Result<f64, ExitCode> {
    let t = text.trim();
    let (number, scale) = match t.strip_suffix('%') {
        Some(n) => (n.trim(), 0.01),
        None => (t, 1.0),
    };
    match number.parse::<f64>() {
        Ok(x) if x * scale > 0.0 && x * scale < 1.0 => Ok(x * scale),
        _ => {
            eprintln!(
                "error: --target `{text}`: write a probability above 0 and below 100 %, e.g. 0.1 %"
            );
            Err(ExitCode::from(2))
        }
    }
}

/// The sweep's size, seed, plan and shard from the command line.
/// A sweep's size, seed, plan and shard as given.
type SweepChoice<'a> = (Option<u64>, u64, &'a str, Option<&'a str>);

fn sweep_spec(
    s: &scenario::Loaded,
    (samples, seed, plan, shard): SweepChoice,
) -> Result<Spec, ExitCode> {
    let bad = |e: String| {
        eprintln!("error: {e}");
        ExitCode::from(2)
    };
    let plan = Plan::parse(plan).map_err(|e| bad(format!("--plan {e}")))?;
    let shard = match shard {
        Some(t) => Shard::parse(t).map_err(|e| bad(format!("--shard {e}")))?,
        None => Shard::ALL,
    };
    let d = sweep::dimensions(s) as u32;
    if d == 0 {
        return Err(bad(format!(
            "{}: no [tolerance] section, so every sample would be the same; add spreads such as inductance = \"±20 %\"",
            s.file().display()
        )));
    }
    let samples = if plan == Plan::Corners {
        let corners = 1u64 << d.min(63);
        if d > 24 {
            return Err(bad(format!(
                "--plan corners: {d} spreads have 2^{d} corners; use --plan latin"
            )));
        }
        match samples {
            Some(n) if n != corners => {
                return Err(bad(format!(
                    "--samples {n}: the box of {d} spreads has {corners} corners; leave --samples out or give {corners}"
                )));
            }
            _ => corners,
        }
    } else {
        match samples {
            Some(n) if n > 0 => n,
            Some(_) => return Err(bad("--samples must be at least 1".into())),
            None => {
                return Err(bad(format!(
                    "--samples is needed with --plan {}",
                    plan.word()
                )));
            }
        }
    };
    Ok(Spec {
        samples,
        seed,
        plan,
        shard,
        fixed: 0,
        normal: 0,
    })
}

/// The records to append to: the file's samples folded into `summary` and marked in `done`
/// when it holds this sweep's (a resumed sweep), else a new file.
fn open_records(
    path: &Path,
    header: &Header,
    done: &mut Done,
    summary: &mut Summary,
) -> Result<Writer, ExitCode> {
    let refuse = |e: String| {
        eprintln!("error: --records {}: {e}", path.display());
        ExitCode::from(2)
    };
    if std::fs::metadata(path).map_or(true, |m| m.len() == 0) {
        return Writer::create(path, header).map_err(refuse);
    }
    let found = records::read(path, done, summary).map_err(&refuse)?;
    if let Some(why) = header.mismatch(&found.header) {
        return Err(refuse(format!(
            "holds another sweep's samples ({why}); give another path, or delete the file to start again"
        )));
    }
    if found.header.shard != header.shard {
        return Err(refuse(format!(
            "holds shard {}, not {}; give each shard its own file",
            found.header.shard, header.shard
        )));
    }
    say!(
        "  resuming: {} samples already in {}{}",
        summary.samples,
        path.display(),
        if found.cut {
            " (a last record cut short is dropped)"
        } else {
            ""
        }
    );
    Writer::resume(path, found.complete_len).map_err(refuse)
}

fn sweep_cmd(
    s: &scenario::Loaded,
    (what, (fixed, normal)): (SweepChoice, (&str, &str)),
    (records, json): (Option<&Path>, Option<&Path>),
    target: &str,
) -> Result<ExitCode, ExitCode> {
    let file = s.file();
    let mut spec = sweep_spec(s, what)?;
    let mask = |option: &str, keys: &str| {
        sweep::mask_of(s, keys).map_err(|e| {
            eprintln!("error: --{option} {e}");
            ExitCode::from(2)
        })
    };
    spec.fixed = mask("fixed", fixed)?;
    spec.normal = mask("normal", normal)?;
    let target = target_probability(target)?;
    let bytes = std::fs::read(file).map_err(|e| {
        eprintln!("error: {}: {e}", file.display());
        ExitCode::from(2)
    })?;
    let header = Header::new(s, &bytes, &spec);
    let (mut done, mut summary) = (Done::new(spec.samples), Summary::default());
    let writer = records
        .map(|p| open_records(p, &header, &mut done, &mut summary))
        .transpose()?;
    // The output is checked writable before the work.
    if let Some(p) = json {
        writable(p, "JSON summary")?;
    }
    let mine = (0..spec.samples)
        .filter(|&i| spec.shard.owns(i) && !done.has(i))
        .count() as u64;
    let bar = ProgressBar::new(mine);
    bar.set_style(
        ProgressStyle::with_template("{bar:40} {pos}/{len} samples, {eta} left")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let t0 = std::time::Instant::now();
    let shared = std::sync::Mutex::new((writer, summary, None::<String>));
    sweep::each(
        s,
        &spec,
        |i| done.has(i),
        |x| {
            let mut g = shared.lock().unwrap_or_else(|e| e.into_inner());
            let (writer, summary, error) = &mut *g;
            if let Some(w) = writer
                && let Err(e) = w.sample(&x)
            {
                error.get_or_insert(e);
            }
            summary.add(&x);
            bar.inc(1);
        },
    );
    bar.finish_and_clear();
    let (_, summary, error) = shared.into_inner().unwrap_or_else(|e| e.into_inner());
    if let (Some(e), Some(p)) = (error, records) {
        eprintln!("error: cannot write the records to {}: {e}", p.display());
        return Err(ExitCode::from(2));
    }
    say!(
        "{} ({}): {} samples (shard {}/{} of {}, seed {}, plan {}), {mine} run in {:.2} s",
        s.name(),
        s.file().display(),
        summary.samples,
        spec.shard.k,
        spec.shard.n,
        spec.samples,
        spec.seed,
        spec.plan.word(),
        t0.elapsed().as_secs_f64()
    );
    say_part!("{}", report::sweep::text(&header, &summary, target));
    write_summary(json, &header, &summary)?;
    Ok(if records.is_some() {
        ExitCode::SUCCESS
    } else {
        verdict(summary.verdict())
    })
}

/// Writes the JSON summary, if asked for.
fn write_summary(json: Option<&Path>, header: &Header, summary: &Summary) -> Result<(), ExitCode> {
    let Some(p) = json else { return Ok(()) };
    write_file(p, "JSON summary", |p| {
        let v = report::sweep::json(header, summary);
        let text = serde_json::to_string_pretty(&v).map_err(|e| e.to_string())?;
        std::fs::write(p, text + "\n").map_err(|e| e.to_string())
    })
}

fn merge_cmd(files: &[PathBuf], json: Option<&Path>, target: &str) -> Result<ExitCode, ExitCode> {
    let target = target_probability(target)?;
    let refuse = |p: &Path, e: String| {
        eprintln!("error: {}: {e}", p.display());
        ExitCode::from(2)
    };
    let Some(first) = files.first() else {
        return Err(ExitCode::from(2));
    };
    let header = records::header(first).map_err(|e| refuse(first, e))?;
    let (mut done, mut summary) = (Done::new(header.sweep_size), Summary::default());
    let mut shards = Vec::new();
    for p in files {
        let found = records::read(p, &mut done, &mut summary).map_err(|e| refuse(p, e))?;
        if let Some(why) = header.mismatch(&found.header) {
            let why = format!("another sweep than {} ({why})", first.display());
            return Err(refuse(p, why));
        }
        if found.cut {
            let why = "ends in a record cut short (its shard was interrupted): run that shard's sweep again to finish it";
            return Err(refuse(p, why.into()));
        }
        shards.push(found.header.shard);
    }
    say!(
        "{} ({}): {} of {} samples (seed {}, plan {}) merged from {} files (shards {})",
        header.scenario,
        header.file,
        summary.samples,
        header.sweep_size,
        header.seed,
        header.plan.word(),
        files.len(),
        shards.join(", ")
    );
    if summary.samples < header.sweep_size {
        say!(
            "  warning: {} samples of the sweep are missing (a shard not merged, or not finished)",
            header.sweep_size - summary.samples
        );
    }
    say_part!("{}", report::sweep::text(&header, &summary, target));
    write_summary(json, &header, &summary)?;
    Ok(verdict(summary.verdict()))
}

/// `t=A,i=B` into its two parts.
fn pair(text: &str, option: &str) -> Result<(Option<String>, Option<String>), ExitCode> {
    let (mut t, mut i) = (None, None);
    for part in text.split(',') {
        match part.split_once('=') {
            Some(("t", v)) => t = Some(v.trim().to_string()),
            Some(("i", v)) => i = Some(v.trim().to_string()),
            _ => {
                eprintln!("error: {option} `{text}`: write it as t=...,i=...");
                return Err(ExitCode::from(2));
            }
        }
    }
    Ok((t, i))
}

fn quantity(text: &str, unit: coilward_sim::units::Unit, option: &str) -> Result<f64, ExitCode> {
    coilward_sim::units::parse(text, unit).map_err(|e| {
        eprintln!("error: {option}: {e}");
        ExitCode::from(2)
    })
}

#[allow(clippy::too_many_arguments)]
fn fit_cmd(
    file: &Path,
    supply: &str,
    on_resistance: &str,
    column: Option<&str>,
    units: Option<&str>,
    shunt: Option<&str>,
    inductance: Option<&str>,
    svg: Option<&Path>,
) -> Result<ExitCode, ExitCode> {
    use coilward_sim::units::Unit;
    let supply = quantity(supply, Unit::Volt, "--supply")?;
    let series = quantity(on_resistance, Unit::Ohm, "--on-resistance")?;
    let (time_column, current_column) = column
        .map(|c| pair(c, "--column"))
        .transpose()?
        .unwrap_or_default();
    let (time_unit, current_unit) = units
        .map(|c| pair(c, "--units"))
        .transpose()?
        .unwrap_or_default();
    let opts = coilward_sim::capture::ReadOptions {
        time_column,
        current_column,
        time_unit,
        current_unit,
        shunt: shunt
            .map(|s| quantity(s, Unit::Ohm, "--shunt"))
            .transpose()?,
    };
    let capture = coilward_sim::capture::Capture::read(file, &opts).map_err(|e| {
        eprintln!("error: {e}");
        ExitCode::from(2)
    })?;
    let fo = coilward_sim::fit::FitOptions {
        supply,
        series_resistance: series,
        inductance: inductance
            .map(|l| quantity(l, Unit::Henry, "--inductance"))
            .transpose()?,
    };
    let fitted = coilward_sim::fit::fit(&capture, &fo);
    say_part!("{}", report::fit::summary(&capture, &fo, &fitted));
    if let Some(p) = svg {
        write_file(p, "plot", |p| {
            report::fit::svg(&capture, &fitted, p).map_err(|e| e.to_string())
        })?;
        say!("  plot: {}", p.display());
    }
    Ok(
        if fitted.problems.is_empty() && (fitted.rise.is_some() || fitted.fall.is_some()) {
            ExitCode::SUCCESS
        } else {
            ExitCode::from(1)
        },
    )
}

/// The scenario `new` writes.
const LOW_SIDE_TEMPLATE: &str = include_str!("../templates/low-side.toml");
/// The scenario `new --bridge` writes.
const BRIDGE_TEMPLATE: &str = include_str!("../templates/full-bridge.toml");

fn new_cmd(bridge: bool, file: Option<&Path>) -> Result<ExitCode, ExitCode> {
    let text = if bridge {
        BRIDGE_TEMPLATE
    } else {
        LOW_SIDE_TEMPLATE
    };
    let Some(p) = file else {
        say_part!("{text}");
        return Ok(ExitCode::SUCCESS);
    };
    let written = std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(p)
        .and_then(|mut f| std::io::Write::write_all(&mut f, text.as_bytes()));
    match written {
        Ok(()) => {
            say!(
                "wrote {}; next: coilward-sim check {}",
                p.display(),
                p.display()
            );
            Ok(ExitCode::SUCCESS)
        }
        Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {
            eprintln!(
                "error: {}: already exists; choose another name",
                p.display()
            );
            Err(ExitCode::from(2))
        }
        Err(e) => {
            eprintln!("error: {}: cannot write the scenario ({e})", p.display());
            Err(ExitCode::from(2))
        }
    }
}

/// What to do with a scenario file.
enum OnScenario<'a> {
    /// `run`, writing these reports.
    Run(Outputs<'a>),
    /// `check`.
    Check,
    /// `sweep` with its sample choice, outputs and target.
    Sweep {
        what: (Option<u64>, u64, &'a str, Option<&'a str>),
        spreads: (&'a str, &'a str),
        out: (Option<&'a Path>, Option<&'a Path>),
        target: &'a str,
    },
    /// `faults`, writing the report here.
    Faults(Option<&'a Path>),
}

/// A command on a scenario file, loaded once: the one place the topology is decided (`run`
/// and `check` differ by topology; `sweep` and `faults` take either).
fn on_scenario(file: &Path, what: OnScenario<'_>) -> Result<ExitCode, ExitCode> {
    use scenario::Loaded::{FullBridge, LowSide};
    let s = refused(scenario::Loaded::load(file))?;
    match (what, &s) {
        (OnScenario::Run(out), LowSide(s)) => run(s, &out),
        (OnScenario::Run(out), FullBridge(s)) => run_bridge(s, &out),
        (OnScenario::Check, LowSide(s)) => check(s),
        (OnScenario::Check, FullBridge(s)) => check_bridge(s),
        (
            OnScenario::Sweep {
                what,
                spreads,
                out,
                target,
            },
            _,
        ) => sweep_cmd(&s, (what, spreads), out, target),
        (OnScenario::Faults(json), _) => faults_cmd(&s, json),
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let r = match &cli.command {
        Command::Run {
            file,
            json,
            csv,
            svg,
            from,
            to,
        } => window(from.as_deref(), to.as_deref()).and_then(|window| {
            let out = Outputs {
                json: json.as_deref(),
                csv: csv.as_deref(),
                svg: svg.as_deref(),
                window,
            };
            on_scenario(file, OnScenario::Run(out))
        }),
        Command::Check { file } => on_scenario(file, OnScenario::Check),
        Command::Sweep {
            file,
            samples,
            seed,
            plan,
            shard,
            fixed,
            normal,
            records,
            json,
            target,
        } => on_scenario(
            file,
            OnScenario::Sweep {
                what: (*samples, *seed, plan, shard.as_deref()),
                spreads: (fixed, normal),
                out: (records.as_deref(), json.as_deref()),
                target,
            },
        ),
        Command::Faults { file, json } => on_scenario(file, OnScenario::Faults(json.as_deref())),
        Command::Merge {
            records,
            json,
            target,
        } => merge_cmd(records, json.as_deref(), target),
        Command::New { bridge, file, .. } => new_cmd(*bridge, file.as_deref()),
        Command::Fit {
            file,
            supply,
            on_resistance,
            column,
            units,
            shunt,
            inductance,
            svg,
        } => fit_cmd(
            file,
            supply,
            on_resistance,
            column.as_deref(),
            units.as_deref(),
            shunt.as_deref(),
            inductance.as_deref(),
            svg.as_deref(),
        ),
    };
    r.unwrap_or_else(|code| code)
}
