//! The plant's circuit as an ngspice netlist, and a runner for ngspice in batch mode — the
//! independent reference the cross-check tests and the benchmark compare the plant against.
//!
//! Every piecewise-linear element is written as a DC source plus a resistor plus a near-ideal
//! diode (`IS=1e-14 N=0.002`, whose own drop moves by well under 1 mV over these currents): the
//! drop-plus-resistance element the plant solves exactly. The switch is a voltage-controlled
//! switch with the on-resistance (1 TΩ off); the switch's avalanche is such an element at the
//! breakdown, the body diode one from ground into the node.

use crate::plant::{Circuit, ClampKind, Plant, PlantError, State, Tally};
use std::collections::HashMap;
use std::fmt::Write as _;
use std::process::Command;

/// Writes `netlist` (with `{out}` replaced by the data file's path) and runs it through
/// `ngspice -b`: (its output, the data file's path). Fails on a run ngspice reports aborted or
/// in error.
fn batch(name: &str, netlist: &str) -> Result<(String, std::path::PathBuf), String> {
    let dir = std::env::temp_dir().join(format!("coilward-sim-ngspice-{}", std::process::id()));
    std::fs::create_dir_all(&dir).map_err(|e| format!("temp dir {}: {e}", dir.display()))?;
    let data = dir.join(format!("{name}.data"));
    let path = dir.join(format!("{name}.cir"));
    std::fs::write(&path, netlist.replace("{out}", &data.display().to_string()))
        .map_err(|e| format!("write {}: {e}", path.display()))?;
    let out = Command::new("ngspice")
        .arg("-b")
        .arg(&path)
        .output()
        .map_err(|e| format!("cannot run ngspice (apt-get install ngspice): {e}"))?;
    let log =
        String::from_utf8_lossy(&out.stdout).into_owned() + &String::from_utf8_lossy(&out.stderr);
    if log.contains("aborted") || log.contains("Error") {
        return Err(format!("ngspice failed on {name}:\n{log}"));
    }
    Ok((log, data))
}

/// Runs a netlist through ngspice in batch mode and returns its `.meas` results.
pub fn ngspice(name: &str, netlist: &str) -> Result<HashMap<String, f64>, String> {
    let (text, _) = batch(name, netlist)?;
    let mut found = HashMap::new();
    for line in text.lines() {
        let mut parts = line.split_whitespace();
        if let (Some(key), Some("="), Some(value)) = (parts.next(), parts.next(), parts.next())
            && let Ok(v) = value.parse::<f64>()
        {
            found.insert(key.to_string(), v);
        }
    }
    Ok(found)
}

/// A drive for a cross-check: PWM at `on` seconds of each `period` for `periods` periods from
/// rest, then off for `rest`.
#[derive(Debug, Clone, Copy)]
pub struct Case {
    /// Name (the netlist's file name).
    pub name: &'static str,
    /// The circuit.
    pub c: Circuit,
    /// PWM period, s.
    pub period: f64,
    /// On-time per period, s.
    pub on: f64,
    /// Periods before the final turn-off.
    pub periods: u32,
    /// Time after the last period, s.
    pub rest: f64,
    /// Current the decay time is measured to, A.
    pub release: f64,
}

impl Case {
    /// The instant of the final turn-off, s.
    pub fn t_off(&self) -> f64 {
        f64::from(self.periods - 1) * self.period + self.on
    }
}

/// The circuit as a netlist, with the measurements `ipk` (peak current), `imean` (mean over
/// the last period), `tdec` (decay time to the release current), `ecl` and `eav` (energy into
/// the clamp path and into the avalanche after the turn-off) and `vpk` (node peak after it).
pub fn netlist(k: &Case) -> String {
    netlist_at(k, Accuracy::REFERENCE)
}

/// ngspice's accuracy settings: relative tolerance and largest time step.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Accuracy {
    /// `.options reltol`.
    pub reltol: f64,
    /// The largest time step, s (`None`: 1/400 of the period, and 1/2000 of the rest after
    /// the drive, whichever is shorter).
    pub max_step: Option<f64>,
}

impl Accuracy {
    /// The cross-checks' settings: reltol 10⁻⁵, a step of 1/400 of the period.
    pub const REFERENCE: Accuracy = Accuracy {
        reltol: 1e-5,
        max_step: None,
    };
}

/// [`netlist`] at other accuracy settings.
pub fn netlist_at(k: &Case, accuracy: Accuracy) -> String {
    let c = &k.c;
    let r = |x: f64| x.max(crate::plant::MIN_RESISTANCE);
    let t_off = f64::from(k.periods - 1) * k.period + k.on;
    let t_end = f64::from(k.periods) * k.period + k.rest;
    let mut n = String::new();
    writeln!(n, "coilward-sim cross-check: {}", k.name).unwrap();
    writeln!(n, "V1 src 0 DC {}", c.supply).unwrap();
    writeln!(n, "Rsrc src vs {}", r(c.source_resistance)).unwrap();
    writeln!(n, "L1 vs n1 {} IC=0", c.inductance).unwrap();
    writeln!(n, "Vsense n1 n2 DC 0").unwrap();
    writeln!(n, "Rcoil n2 drain {}", c.resistance).unwrap();
    writeln!(n, "C1 drain 0 {} IC={}", c.capacitance, c.supply).unwrap();
    writeln!(n, "S1 drain 0 gate 0 swmod").unwrap();
    writeln!(
        n,
        ".model swmod SW(VT=0.5 VH=0 RON={} ROFF=1e12)",
        r(c.on_resistance)
    )
    .unwrap();
    if k.on >= k.period {
        writeln!(n, "Vg gate 0 PWL(0 1 {t_off} 1 {} 0)", t_off + 1e-9).unwrap();
    } else {
        writeln!(
            n,
            "Vg gate 0 PULSE(0 1 0 1n 1n {} {} {})",
            k.on - 1e-9,
            k.period,
            k.periods
        )
        .unwrap();
    }
    // Body diode: conducts from ground into the node below −V_b.
    writeln!(n, "Vbody 0 bb DC {}", c.body_diode_drop).unwrap();
    writeln!(n, "Rbody bb bc {}", crate::plant::MIN_RESISTANCE).unwrap();
    writeln!(n, "Dbody bc drain dideal").unwrap();
    // Avalanche of the switch at its breakdown.
    writeln!(n, "Vav drain aa DC {}", c.breakdown).unwrap();
    writeln!(n, "Rav aa ab {}", r(c.avalanche_resistance)).unwrap();
    writeln!(n, "Dav ab 0 dideal").unwrap();
    writeln!(n, "Bpav pav 0 V=v(drain)*i(Vav)").unwrap();
    match c.clamp {
        ClampKind::None => writeln!(n, "Bpcl pcl 0 V=0").unwrap(),
        ClampKind::Freewheel { drop, resistance } => {
            writeln!(n, "Vp drain pa DC {drop}").unwrap();
            writeln!(n, "Rp pa pb {}", r(resistance)).unwrap();
            writeln!(n, "Dp pb vs dideal").unwrap();
            writeln!(n, "Bpcl pcl 0 V=(v(drain)-v(vs))*i(Vp)").unwrap();
        }
        ClampKind::Switch {
            voltage,
            resistance,
        } => {
            writeln!(n, "Vp drain pa DC {voltage}").unwrap();
            writeln!(n, "Rp pa pb {}", r(resistance)).unwrap();
            writeln!(n, "Dp pb 0 dideal").unwrap();
            writeln!(n, "Bpcl pcl 0 V=v(drain)*i(Vp)").unwrap();
        }
    }
    writeln!(n, ".model dideal D(IS=1e-14 N=0.002)").unwrap();
    writeln!(
        n,
        ".options reltol={} abstol=1e-10 vntol=1e-7",
        accuracy.reltol
    )
    .unwrap();
    let step = accuracy
        .max_step
        .unwrap_or((k.period / 400.0).min(k.rest / 2000.0));
    writeln!(n, ".tran {step} {t_end} 0 {step} uic").unwrap();
    let last = f64::from(k.periods - 1) * k.period;
    writeln!(n, ".meas tran ipk MAX i(Vsense) from=0 to={t_end}").unwrap();
    writeln!(
        n,
        ".meas tran imean AVG i(Vsense) from={last} to={}",
        last + k.period
    )
    .unwrap();
    writeln!(
        n,
        ".meas tran tdec TRIG AT={t_off} TARG i(Vsense) VAL={} FALL=1",
        k.release
    )
    .unwrap();
    writeln!(n, ".meas tran ecl INTEG v(pcl) from={t_off} to={t_end}").unwrap();
    writeln!(n, ".meas tran eav INTEG v(pav) from={t_off} to={t_end}").unwrap();
    writeln!(n, ".meas tran vpk MAX v(drain) from={t_off} to={t_end}").unwrap();
    writeln!(n, ".end").unwrap();
    n
}

/// The same drive on the plant, measured as the netlist measures it: (peak current, mean current over the last period, decay time,
/// clamp + avalanche energy after the turn-off, peak node after it).
pub fn plant(k: &Case) -> Result<(f64, f64, Option<f64>, f64, f64), PlantError> {
    plant_with(k, true)
}

/// [`plant`] with the replay of settled runs on or off ([`Plant::reuse`]): the same results,
/// bit for bit, at another cost.
pub fn plant_with(k: &Case, reuse: bool) -> Result<(f64, f64, Option<f64>, f64, f64), PlantError> {
    let mut p = Plant::new(k.c, State::at_rest(k.c.supply));
    p.reuse = reuse;
    let mut peak = p.state.current;
    let mut last = Tally::starting(p.state);
    for n in 0..k.periods {
        last = Tally::starting(p.state);
        p.run(true, k.on, &mut last)?;
        if n + 1 < k.periods && k.on < k.period {
            p.run(false, k.period - k.on, &mut last)?;
        }
        peak = peak.max(last.peak_current);
    }
    // The release; its first (period − on) completes the last period, as the netlist's gate
    // pulse train does.
    let mut off = Tally::starting(p.state);
    off.time_offset = k.t_off();
    off.watch = Some(k.release);
    p.run(false, k.period - k.on, &mut off)?;
    let mean = (last.charge + off.charge) / k.period;
    p.run(false, k.rest, &mut off)?;
    Ok((
        peak.max(off.peak_current),
        mean,
        off.below_at,
        off.clamp_energy + off.avalanche_energy,
        off.peak_node,
    ))
}

/// Runs a netlist whose control block writes one vector with `wrdata FILE` (the netlist must
/// name the file as `{out}`, replaced here) and returns its (time, value) pairs.
pub fn ngspice_trace(name: &str, netlist: &str) -> Result<Vec<(f64, f64)>, String> {
    let (log, data) = batch(name, netlist)?;
    if log.contains("too small") {
        return Err(format!("ngspice failed on {name}:\n{log}"));
    }
    let text = std::fs::read_to_string(&data)
        .map_err(|e| format!("ngspice wrote no data for {name} ({e}):\n{log}"))?;
    Ok(text
        .lines()
        .filter_map(|l| {
            let mut f = l.split_whitespace().map(str::parse::<f64>);
            match (f.next(), f.next()) {
                (Some(Ok(t)), Some(Ok(v))) => Some((t, v)),
                _ => None,
            }
        })
        .collect())
}

/// The demo valve's circuit (`examples/scenarios/irrigation-valve.toml`: 24 V through 0.2 Ω,
/// 40 mH / 18 Ω, 0.1 Ω switch with 470 pF at the node and a 60 V breakdown, diode freewheel
/// 0.7 V + 0.05 Ω), as the cross-checks and the benchmark use it.
pub fn demo_valve() -> Circuit {
    Circuit {
        supply: 24.0,
        source_resistance: 0.2,
        inductance: 0.040,
        saturation: None,
        resistance: 18.0,
        on_resistance: 0.1,
        capacitance: 470e-12,
        breakdown: 60.0,
        avalanche_resistance: 0.0,
        body_diode_drop: 0.8,
        clamp: ClampKind::Freewheel {
            drop: 0.7,
            resistance: 0.05,
        },
    }
}
