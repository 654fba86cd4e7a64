//! `coilward-sim`: validate a drive profile against a detailed circuit before flashing it.
//!
//! Exit status: 0 the profile passed; 1 a limit was exceeded or the guard had to act; 2 bad
//! input (the message names the file, line and key).

use clap::{Parser, Subcommand};
use coilward_sim::bridge::{self, scenario::BridgeScenario};
use coilward_sim::cosim::{self, Options};
use coilward_sim::report::{self, si};
use coilward_sim::scenario::{self, Scenario};
use coilward_sim::sweep::{self, Shard};
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
        after_help = "Examples:\n  coilward-sim sweep valve.toml --samples 1000\n  coilward-sim sweep valve.toml --samples 100000 --seed 7 --shard 3/16 --json part3.json\n\nA sample is the same on every machine and shard: the shards' results together are the\nunsharded sweep's."
    )]
    Sweep {
        /// Scenario file (TOML).
        file: PathBuf,
        /// Number of samples in the whole sweep.
        #[arg(long)]
        samples: u64,
        /// Seed of the draws.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Run only part K of N (samples with index mod N = K − 1).
        #[arg(long, value_name = "K/N")]
        shard: Option<String>,
        /// Write every sample's outcome and the worst cases here (JSON).
        #[arg(long, value_name = "PATH")]
        json: Option<PathBuf>,
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

/// Whether the file is a full-bridge scenario (unreadable files go down the low-side path,
/// which reports the problem).
fn is_bridge(file: &Path) -> bool {
    std::fs::read_to_string(file)
        .is_ok_and(|t| scenario::topology_of(&t) == scenario::Topology::FullBridge)
}

fn load_bridge(file: &Path) -> Result<BridgeScenario, ExitCode> {
    refused(BridgeScenario::load(file))
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

fn run_bridge(file: &Path, out: &Outputs) -> Result<ExitCode, ExitCode> {
    let s = load_bridge(file)?;
    out.check()?;
    let r = bridge::cosim::run(&s, out.rows());
    say_part!("{}", bridge::report::summary(&s, &r));
    out.write(
        || bridge::report::json(&s, &r),
        |w| bridge::report::csv(&r.rows, w),
        |p| bridge::report::svg_window(&s, &r, p, out.window),
    )?;
    Ok(verdict(r.verdict()))
}

fn check_bridge(file: &Path) -> Result<ExitCode, ExitCode> {
    let s = load_bridge(file)?;
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

fn load(file: &Path) -> Result<Scenario, ExitCode> {
    refused(Scenario::load(file))
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

fn faults_cmd(file: &Path, json: Option<&Path>) -> Result<ExitCode, ExitCode> {
    use rayon::prelude::*;
    let bridge = is_bridge(file);
    let (name, outcomes): (String, Vec<_>) = if bridge {
        let s = load_bridge(file)?;
        if let Some(p) = json {
            writable(p, "fault report")?;
        }
        let cases = bridge::faults::suite(&s);
        let run = |c| bridge::faults::run(c).0;
        (s.name.clone(), cases.par_iter().map(run).collect())
    } else {
        let s = load(file)?;
        // The output is checked writable before the work.
        if let Some(p) = json {
            writable(p, "fault report")?;
        }
        let cases = coilward_sim::faults::suite(&s);
        let run = |c| coilward_sim::faults::run(c).0;
        (s.name.clone(), cases.par_iter().map(run).collect())
    };
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
        let topology = if bridge { "full-bridge" } else { "low-side" };
        let doc = serde_json::json!({
            "schema": coilward_sim::report::json::REPORT_SCHEMA,
            "scenario": coilward_sim::report::json::scenario(&name, file, topology),
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

fn run(file: &Path, out: &Outputs) -> Result<ExitCode, ExitCode> {
    let s = load(file)?;
    out.check()?;
    let r = cosim::run(
        &s,
        Options {
            rows: out.rows(),
            wave: None,
        },
    );
    say_part!("{}", report::summary(&s, &r));
    out.write(
        || report::json::report(&s, &r),
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
                    cosim::run(&s, opts).wave
                })
                .unwrap_or_default();
            report::svg::write_window(&s, &r, p, out.window, &wave)
        },
    )?;
    Ok(verdict(r.verdict()))
}

fn check(file: &Path) -> Result<ExitCode, ExitCode> {
    let s = load(file)?;
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
    print_tolerance_and_clamp_power(&s);
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

/// The failed samples, before any figure: they are what a designer must look at (five at most;
/// all of them are in the JSON results).
fn print_failed(results: &[sweep::Sample], failed: usize) {
    for r in results
        .iter()
        .filter(|r| r.verdict == cosim::Verdict::Fail)
        .take(5)
    {
        say!("  failed: sample {} ({})", r.index, r.findings.join(", "));
    }
    if failed > 5 {
        say!(
            "  failed: {} more samples (all in the JSON results)",
            failed - 5
        );
    }
}

fn sweep_cmd(
    file: &Path,
    samples: u64,
    seed: u64,
    shard: Option<&str>,
    json: Option<&Path>,
) -> Result<ExitCode, ExitCode> {
    let s = load(file)?;
    let shard = match shard {
        Some(t) => Shard::parse(t).map_err(|e| {
            eprintln!("error: --shard {e}");
            ExitCode::from(2)
        })?,
        None => Shard::ALL,
    };
    if samples == 0 {
        eprintln!("error: --samples must be at least 1");
        return Err(ExitCode::from(2));
    }
    if s.tolerance.is_empty() {
        eprintln!(
            "error: {}: no [tolerance] section, so every sample would be the same; add spreads such as inductance = \"±20 %\"",
            file.display()
        );
        return Err(ExitCode::from(2));
    }
    // The output is checked writable before the work.
    if let Some(p) = json {
        writable(p, "JSON results")?;
    }
    let mine = (0..samples).filter(|&i| shard.owns(i)).count() as u64;
    let bar = ProgressBar::new(mine);
    bar.set_style(
        ProgressStyle::with_template("{bar:40} {pos}/{len} samples, {eta} left")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let t0 = std::time::Instant::now();
    let results = sweep::run(&s, samples, seed, shard, || bar.inc(1));
    bar.finish_and_clear();
    let [passed, limited, failed] = [
        cosim::Verdict::Pass,
        cosim::Verdict::Limited,
        cosim::Verdict::Fail,
    ]
    .map(|v| results.iter().filter(|r| r.verdict == v).count());
    say!(
        "{} ({}): {} samples (shard {}/{} of {samples}, seed {seed}) in {:.2} s",
        s.name,
        s.file.display(),
        results.len(),
        shard.k,
        shard.n,
        t0.elapsed().as_secs_f64()
    );
    say!("  pass {passed}, limited {limited}, fail {failed}");
    let worst = results
        .iter()
        .map(|r| r.verdict)
        .max()
        .unwrap_or(cosim::Verdict::Pass);
    print_failed(&results, failed);
    let worst_json = print_worst(&results);
    print_findings(&results);
    if let Some(p) = json {
        write_file(p, "JSON results", |p| {
            let v = serde_json::json!({
                "schema": coilward_sim::report::json::REPORT_SCHEMA,
                "scenario": coilward_sim::report::json::scenario(&s.name, &s.file, "low-side"),
                "samples": samples, "seed": seed, "shard": format!("{}/{}", shard.k, shard.n),
                "verdict": worst.word(),
                "passed": passed, "limited": limited, "failed": failed,
                "worst": worst_json,
                "results": results,
            });
            std::fs::write(
                p,
                serde_json::to_string_pretty(&v).map_err(|e| e.to_string())? + "\n",
            )
            .map_err(|e| e.to_string())
        })?;
    }
    Ok(verdict(worst))
}

/// One figure of a sweep's sample.
type Figure = fn(&sweep::Sample) -> f64;

/// The figures a sweep reports its worst sample for: name, unit, and the figure (a decay that
/// never reached the release level counts as the longest).
const WORST: [(&str, &str, Figure); 5] = [
    ("peak current", "A", |x| x.peak_current_a),
    ("switch-node peak", "V", |x| x.peak_drain_voltage_v),
    ("clamp pulse", "J", |x| x.max_pulse_energy_j),
    ("decay time", "s", |x| {
        x.longest_decay_s.unwrap_or(f64::INFINITY)
    }),
    ("estimate error", "A", |x| x.max_estimate_error_a),
];

/// Prints each figure's worst sample with its drawn parameters; returns them for the JSON.
fn print_worst(results: &[sweep::Sample]) -> serde_json::Map<String, serde_json::Value> {
    say!("\n  worst cases:");
    let mut worst_json = serde_json::Map::new();
    for (what, unit, figure) in WORST {
        let Some(w) = sweep::worst_by(results, figure) else {
            continue;
        };
        let value = figure(w);
        let params: Vec<String> = w
            .parameters
            .iter()
            .map(|(k, v)| format!("{k} {}", fmt_param(k, *v)))
            .collect();
        let shown = if value.is_finite() {
            si(value, unit, 4)
        } else {
            "not reached".into()
        };
        say!(
            "  {what:<17} {shown:>11}  sample {} ({}): {}",
            w.index,
            w.verdict.word(),
            params.join(", ")
        );
        let value = value.is_finite().then_some(value);
        worst_json.insert(
            what.replace([' ', '-'], "_"),
            serde_json::json!({"value": value, "sample": w.index}),
        );
    }
    worst_json
}

/// Prints how many samples each kind of finding came up in.
fn print_findings(results: &[sweep::Sample]) {
    let mut kinds: Vec<&str> = results
        .iter()
        .flat_map(|r| r.findings.iter().copied())
        .collect();
    kinds.sort_unstable();
    kinds.dedup();
    if !kinds.is_empty() {
        say!("\n  findings among the samples (the limited ones: the guard acted):");
        for k in kinds {
            say!(
                "  {k:<26} {} samples",
                results.iter().filter(|r| r.findings.contains(&k)).count()
            );
        }
    }
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

fn fmt_param(key: &str, v: f64) -> String {
    let unit = coilward_sim::scenario::Knob::ALL
        .iter()
        .find(|k| k.name() == key)
        .map_or("", |k| k.unit().symbol());
    if unit == "°C" {
        format!("{v:.1} °C")
    } else {
        si(v, unit, 4)
    }
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
            if is_bridge(file) {
                run_bridge(file, &out)
            } else {
                run(file, &out)
            }
        }),
        Command::Check { file } if is_bridge(file) => check_bridge(file),
        Command::Check { file } => check(file),
        Command::Sweep { file, .. } if is_bridge(file) => {
            eprintln!(
                "error: {}: sweeps cover low-side scenarios only; run the full-bridge scenario with `run`",
                file.display()
            );
            Err(ExitCode::from(2))
        }
        Command::Sweep {
            file,
            samples,
            seed,
            shard,
            json,
        } => sweep_cmd(file, *samples, *seed, shard.as_deref(), json.as_deref()),
        Command::Faults { file, json } => faults_cmd(file, json.as_deref()),
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
