//! Scenario files: the circuit, what the firmware believes about it, the guard's settings, a
//! drive timeline and the spreads for sweeps, in TOML with SI values written with their units
//! ([`crate::units`]).
//!
//! ```toml
//! name = "irrigation valve"
//! [supply]    voltage = "24 V"  min = "20 V"  max = "30 V"  source_resistance = "0.2 Ω"
//! [coil]      inductance = "40 mH"  resistance = "18 Ω"  temperature = "40 °C"
//! [switch]    on_resistance = "0.1 Ω"  capacitance = "470 pF"  breakdown = "60 V"
//! [clamp]     path = "freewheel"  forward_voltage = "0.75 V"  resistance = "0.05 Ω"
//! [control]   period = "50 us"
//! [guard]     current_ceiling = "1.2 A"  trip_current = "1.4 A"  release_current = "50 mA"
//! [[drive]]   at = "0 s"  duty = "100 %"
//! [run]       duration = "200 ms"
//! [tolerance] inductance = "±20 %"
//! ```
//! (one key per line in a real file). The full key list is in the contributor guide. Unknown
//! keys, values without units and parameter sets the library refuses are errors naming the file,
//! line and key.

use crate::plant::{Circuit, ClampKind};
use crate::units::{self, Spread, Unit};
use coilward::thermal::{ClampThermal, CoilThermal, FosterStage};
use coilward::{
    Action, ClampPath, CoilParams, ConfigError, ControlParams, GuardLimits, HeldRequest, Params,
    Retry, Saturation, SupplyParams, SwitchParams, Tolerance,
};
use serde::Deserialize;
use std::collections::{BTreeMap, HashMap};
use std::fmt;
use std::ops::Range;
use std::path::{Path, PathBuf};
use toml::Spanned;

type Text = Option<Spanned<String>>;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Raw {
    name: Option<String>,
    /// `low-side` (the default); a `full-bridge` file is read by [`crate::bridge::scenario`].
    /// Checked before the rest by [`Cx::topology_known`]; here so that the schema knows it.
    #[serde(rename = "topology")]
    _topology: Text,
    description: Option<String>,
    supply: RawSupply,
    coil: RawCoil,
    switch: RawSwitch,
    clamp: RawClamp,
    control: RawControl,
    guard: RawGuard,
    model: Option<BTreeMap<String, Spanned<String>>>,
    adc: Option<RawAdc>,
    ticks: Option<RawTicks>,
    start: Option<RawStart>,
    #[serde(default)]
    drive: Vec<RawDrive>,
    #[serde(default)]
    supply_change: Vec<RawSupplyChange>,
    run: RawRun,
    tolerance: Option<BTreeMap<String, Spanned<String>>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSupply {
    voltage: Text,
    min: Text,
    max: Text,
    source_resistance: Text,
    ripple: Text,
    ripple_frequency: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSupplyChange {
    at: Text,
    voltage: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCoil {
    inductance: Text,
    resistance: Text,
    temperature: Text,
    reference_temperature: Text,
    temperature_coefficient: Text,
    saturation_current: Text,
    saturated_inductance: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSwitch {
    on_resistance: Text,
    capacitance: Text,
    breakdown: Text,
    body_diode_voltage: Text,
    avalanche_resistance: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawClamp {
    path: Text,
    forward_voltage: Text,
    zener_voltage: Text,
    clamp_voltage: Text,
    resistance: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawControl {
    period: Text,
    duty_resolution: Option<Spanned<i64>>,
    current_full_scale: Text,
    calls: Text,
    poll: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawGuard {
    current_ceiling: Text,
    trip_current: Text,
    release_current: Text,
    clamp_pulse_energy: Text,
    clamp_max_power: Text,
    clamp_power_window: Text,
    clamp_power: Text,
    retry_cooldown: Text,
    max_retries: Option<Spanned<i64>>,
    overcurrent: Text,
    clamp_pulse: Text,
    clamp_overheat: Text,
    coil_overheat: Text,
    supply_low: Text,
    supply_high: Text,
    held_request: Text,
    clamp_thermal_resistance: Option<Spanned<Vec<String>>>,
    clamp_thermal_time_constant: Option<Spanned<Vec<String>>>,
    clamp_ambient: Text,
    clamp_max_temperature: Text,
    clamp_hysteresis: Text,
    coil_time_constant: Text,
    coil_basic_current: Text,
    coil_overload_factor: Option<Spanned<f64>>,
    coil_reset_level: Option<Spanned<f64>>,
    coil_ambient: Text,
    coil_rise: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawAdc {
    bits: Option<Spanned<i64>>,
    full_scale: Text,
    noise: Text,
    offset: Text,
    seed: Option<Spanned<i64>>,
    stuck: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTicks {
    missed: Text,
    late: Text,
    seed: Option<Spanned<i64>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStart {
    current: Text,
    guard: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawDrive {
    at: Text,
    duty: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawRun {
    duration: Text,
}

/// A scenario that could not be used: where and why.
#[derive(Debug, Clone, PartialEq)]
pub struct ScenarioError {
    /// The file.
    pub file: PathBuf,
    /// 1-based line and column, when known.
    pub at: Option<(usize, usize)>,
    /// The key (`section.key`), when one is to blame.
    pub key: Option<String>,
    /// What is wrong.
    pub message: String,
}

impl fmt::Display for ScenarioError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some((line, col)) = self.at {
            write!(f, ":{line}:{col}")?;
        }
        f.write_str(": ")?;
        if let Some(k) = &self.key {
            write!(f, "{k}: ")?;
        }
        f.write_str(&self.message)
    }
}

impl std::error::Error for ScenarioError {}

/// A circuit value that [`[model]`](Scenario::beliefs) may override and `[tolerance]` may spread.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Knob {
    /// `supply.voltage`
    Voltage,
    /// `supply.source_resistance`
    SourceResistance,
    /// `coil.inductance`
    Inductance,
    /// `coil.resistance`
    Resistance,
    /// `coil.temperature`
    Temperature,
    /// `coil.saturation_current`
    SaturationCurrent,
    /// `coil.saturated_inductance`
    SaturatedInductance,
    /// `switch.on_resistance`
    OnResistance,
    /// `switch.capacitance`
    Capacitance,
    /// `switch.breakdown`
    Breakdown,
    /// `switch.body_diode_voltage`
    BodyDiodeVoltage,
    /// `clamp.forward_voltage`
    ForwardVoltage,
    /// `clamp.zener_voltage`
    ZenerVoltage,
    /// `clamp.clamp_voltage`
    ClampVoltage,
    /// `clamp.resistance`
    ClampResistance,
}

impl Knob {
    /// Every knob.
    pub const ALL: [Knob; 15] = [
        Knob::Voltage,
        Knob::SourceResistance,
        Knob::Inductance,
        Knob::Resistance,
        Knob::Temperature,
        Knob::SaturationCurrent,
        Knob::SaturatedInductance,
        Knob::OnResistance,
        Knob::Capacitance,
        Knob::Breakdown,
        Knob::BodyDiodeVoltage,
        Knob::ForwardVoltage,
        Knob::ZenerVoltage,
        Knob::ClampVoltage,
        Knob::ClampResistance,
    ];

    /// The key in `[model]` and `[tolerance]`.
    pub const fn name(self) -> &'static str {
        match self {
            Knob::Voltage => "voltage",
            Knob::SourceResistance => "source_resistance",
            Knob::Inductance => "inductance",
            Knob::Resistance => "resistance",
            Knob::Temperature => "temperature",
            Knob::SaturationCurrent => "saturation_current",
            Knob::SaturatedInductance => "saturated_inductance",
            Knob::OnResistance => "on_resistance",
            Knob::Capacitance => "capacitance",
            Knob::Breakdown => "breakdown",
            Knob::BodyDiodeVoltage => "body_diode_voltage",
            Knob::ForwardVoltage => "forward_voltage",
            Knob::ZenerVoltage => "zener_voltage",
            Knob::ClampVoltage => "clamp_voltage",
            Knob::ClampResistance => "clamp_resistance",
        }
    }

    /// Where the nominal value is written (`section.key`).
    pub const fn home(self) -> &'static str {
        match self {
            Knob::Voltage => "supply.voltage",
            Knob::SourceResistance => "supply.source_resistance",
            Knob::Inductance => "coil.inductance",
            Knob::Resistance => "coil.resistance",
            Knob::Temperature => "coil.temperature",
            Knob::SaturationCurrent => "coil.saturation_current",
            Knob::SaturatedInductance => "coil.saturated_inductance",
            Knob::OnResistance => "switch.on_resistance",
            Knob::Capacitance => "switch.capacitance",
            Knob::Breakdown => "switch.breakdown",
            Knob::BodyDiodeVoltage => "switch.body_diode_voltage",
            Knob::ForwardVoltage => "clamp.forward_voltage",
            Knob::ZenerVoltage => "clamp.zener_voltage",
            Knob::ClampVoltage => "clamp.clamp_voltage",
            Knob::ClampResistance => "clamp.resistance",
        }
    }

    /// Its unit.
    pub const fn unit(self) -> Unit {
        match self {
            Knob::Voltage
            | Knob::Breakdown
            | Knob::BodyDiodeVoltage
            | Knob::ForwardVoltage
            | Knob::ZenerVoltage
            | Knob::ClampVoltage => Unit::Volt,
            Knob::SourceResistance
            | Knob::Resistance
            | Knob::OnResistance
            | Knob::ClampResistance => Unit::Ohm,
            Knob::Inductance | Knob::SaturatedInductance => Unit::Henry,
            Knob::Temperature => Unit::Celsius,
            Knob::SaturationCurrent => Unit::Ampere,
            Knob::Capacitance => Unit::Farad,
        }
    }

    fn from_name(s: &str) -> Option<Knob> {
        Knob::ALL.into_iter().find(|k| k.name() == s)
    }

    /// Whether the library's parameters hold this value (so a `[model]` belief reaches the
    /// guard). The source resistance and the body diode exist in the plant only.
    pub const fn guard_uses(self) -> bool {
        !matches!(self, Knob::SourceResistance | Knob::BodyDiodeVoltage)
    }
}

/// The `[tolerance]` key for the error of the supply reading (not a circuit value, so not a
/// [`Knob`]): the guard covers it; sweeps leave the reading to `[adc]`.
pub const SUPPLY_READING: &str = "supply_reading";

/// The box the guard is told to cover, from the spreads around the beliefs: inductance,
/// resistance (with the winding temperature's and the on-resistance's spreads folded in),
/// node capacitance, saturation, the clamp path's voltage and the supply reading. The supply
/// itself, its source resistance and the switch's breakdown and body diode are measured or
/// taken as given, so their spreads reach sweeps only.
pub fn declared(b: &Values, spreads: &[(Knob, Spread)], supply_reading: f64) -> Tolerance {
    let frac = |k: Knob| {
        spreads
            .iter()
            .find(|(x, _)| *x == k)
            .map_or(0.0, |&(_, sp)| {
                let nominal = b.get(k);
                let (lo, hi) = sp.bounds(nominal);
                if nominal.abs() > 0.0 {
                    ((nominal - lo).abs().max((hi - nominal).abs()) / nominal.abs()).min(0.9)
                } else {
                    0.0
                }
            })
    };
    let r_w = b.hot_resistance();
    // The winding temperature's spread as a resistance spread (copper's linear law).
    let temp = spreads
        .iter()
        .find(|(x, _)| *x == Knob::Temperature)
        .map_or(0.0, |&(_, sp)| {
            let (lo, hi) = sp.bounds(b.temperature);
            let r = |t: f64| {
                b.resistance * (1.0 + b.temperature_coefficient * (t - b.reference_temperature))
            };
            ((r(hi) - r_w).abs().max((r_w - r(lo)).abs()) / r_w).min(0.9)
        });
    let r = ((1.0 + frac(Knob::Resistance)) * (1.0 + temp) - 1.0
        + frac(Knob::OnResistance) * b.on_resistance / r_w)
        .min(0.9);
    let clamp = match b.path {
        PathName::None => 0.0,
        PathName::Freewheel => frac(Knob::ForwardVoltage),
        PathName::FreewheelZener => frac(Knob::ForwardVoltage).max(frac(Knob::ZenerVoltage)),
        PathName::SwitchClamp => frac(Knob::ClampVoltage),
    };
    Tolerance::EXACT
        .with_inductance(frac(Knob::Inductance) as f32)
        .with_resistance(r as f32)
        .with_supply_reading(supply_reading.min(0.5) as f32)
        .with_node_capacitance(frac(Knob::Capacitance) as f32)
        .with_saturation(
            frac(Knob::SaturationCurrent) as f32,
            frac(Knob::SaturatedInductance) as f32,
        )
        .with_clamp_voltage(clamp as f32)
}

/// The clamp path's kind.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PathName {
    /// `none`
    None,
    /// `freewheel`
    Freewheel,
    /// `freewheel-zener`
    FreewheelZener,
    /// `switch-clamp`
    SwitchClamp,
}

impl PathName {
    /// The scenario spelling.
    pub const fn name(self) -> &'static str {
        match self {
            PathName::None => "none",
            PathName::Freewheel => "freewheel",
            PathName::FreewheelZener => "freewheel-zener",
            PathName::SwitchClamp => "switch-clamp",
        }
    }
}

/// The circuit's values (SI), as the plant has them or as the firmware believes them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Values {
    /// Supply voltage, V.
    pub voltage: f64,
    /// Lowest specified supply, V.
    pub supply_min: f64,
    /// Highest specified supply, V.
    pub supply_max: f64,
    /// Source resistance, Ω.
    pub source_resistance: f64,
    /// Inductance, H.
    pub inductance: f64,
    /// Winding resistance at the reference temperature, Ω.
    pub resistance: f64,
    /// Winding temperature, °C.
    pub temperature: f64,
    /// Reference temperature of `resistance`, °C.
    pub reference_temperature: f64,
    /// Temperature coefficient of resistance, 1/K.
    pub temperature_coefficient: f64,
    /// Saturation current, A (with `saturated_inductance`).
    pub saturation_current: Option<f64>,
    /// Incremental inductance above the saturation current, H.
    pub saturated_inductance: Option<f64>,
    /// Switch on-resistance, Ω.
    pub on_resistance: f64,
    /// Switch-node capacitance, F.
    pub capacitance: f64,
    /// Switch breakdown, V.
    pub breakdown: f64,
    /// Switch dynamic resistance in avalanche, Ω.
    pub avalanche_resistance: f64,
    /// Body-diode drop, V.
    pub body_diode_voltage: f64,
    /// Clamp path.
    pub path: PathName,
    /// Freewheel diode drop, V.
    pub forward_voltage: f64,
    /// Zener voltage, V.
    pub zener_voltage: f64,
    /// Clamp voltage (switch clamp), V.
    pub clamp_voltage: f64,
    /// Series resistance of the clamp path, Ω.
    pub clamp_resistance: f64,
}

impl Values {
    /// Winding resistance at the winding temperature, Ω.
    pub fn hot_resistance(&self) -> f64 {
        self.resistance
            * (1.0 + self.temperature_coefficient * (self.temperature - self.reference_temperature))
    }

    /// Reads a knob.
    pub fn get(&self, k: Knob) -> f64 {
        match k {
            Knob::Voltage => self.voltage,
            Knob::SourceResistance => self.source_resistance,
            Knob::Inductance => self.inductance,
            Knob::Resistance => self.resistance,
            Knob::Temperature => self.temperature,
            Knob::SaturationCurrent => self.saturation_current.unwrap_or(f64::NAN),
            Knob::SaturatedInductance => self.saturated_inductance.unwrap_or(f64::NAN),
            Knob::OnResistance => self.on_resistance,
            Knob::Capacitance => self.capacitance,
            Knob::Breakdown => self.breakdown,
            Knob::BodyDiodeVoltage => self.body_diode_voltage,
            Knob::ForwardVoltage => self.forward_voltage,
            Knob::ZenerVoltage => self.zener_voltage,
            Knob::ClampVoltage => self.clamp_voltage,
            Knob::ClampResistance => self.clamp_resistance,
        }
    }

    /// Sets a knob.
    pub fn set(&mut self, k: Knob, x: f64) {
        match k {
            Knob::Voltage => self.voltage = x,
            Knob::SourceResistance => self.source_resistance = x,
            Knob::Inductance => self.inductance = x,
            Knob::Resistance => self.resistance = x,
            Knob::Temperature => self.temperature = x,
            Knob::SaturationCurrent => self.saturation_current = Some(x),
            Knob::SaturatedInductance => self.saturated_inductance = Some(x),
            Knob::OnResistance => self.on_resistance = x,
            Knob::Capacitance => self.capacitance = x,
            Knob::Breakdown => self.breakdown = x,
            Knob::BodyDiodeVoltage => self.body_diode_voltage = x,
            Knob::ForwardVoltage => self.forward_voltage = x,
            Knob::ZenerVoltage => self.zener_voltage = x,
            Knob::ClampVoltage => self.clamp_voltage = x,
            Knob::ClampResistance => self.clamp_resistance = x,
        }
    }

    /// Whether the knob means anything for this circuit.
    pub fn applies(&self, k: Knob) -> bool {
        match k {
            Knob::SaturationCurrent | Knob::SaturatedInductance => {
                self.saturation_current.is_some()
            }
            Knob::ForwardVoltage => {
                matches!(self.path, PathName::Freewheel | PathName::FreewheelZener)
            }
            Knob::ZenerVoltage => self.path == PathName::FreewheelZener,
            Knob::ClampVoltage => self.path == PathName::SwitchClamp,
            Knob::ClampResistance => self.path != PathName::None,
            _ => true,
        }
    }

    /// The plant's circuit.
    pub fn circuit(&self) -> Circuit {
        let clamp = match self.path {
            PathName::None => ClampKind::None,
            PathName::Freewheel => ClampKind::Freewheel {
                drop: self.forward_voltage,
                resistance: self.clamp_resistance,
            },
            PathName::FreewheelZener => ClampKind::Freewheel {
                drop: self.forward_voltage + self.zener_voltage,
                resistance: self.clamp_resistance,
            },
            PathName::SwitchClamp => ClampKind::Switch {
                voltage: self.clamp_voltage,
                resistance: self.clamp_resistance,
            },
        };
        Circuit {
            supply: self.voltage,
            source_resistance: self.source_resistance,
            inductance: self.inductance,
            saturation: self.saturation_current.zip(self.saturated_inductance),
            resistance: self.hot_resistance(),
            on_resistance: self.on_resistance,
            capacitance: self.capacitance,
            breakdown: self.breakdown,
            avalanche_resistance: self.avalanche_resistance,
            body_diode_drop: self.body_diode_voltage,
            clamp,
        }
    }
}

/// The ADC that reads the supply for the guard.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Adc {
    /// Resolution, bits (`None`: exact, the guard sees the true supply).
    pub bits: Option<u32>,
    /// Supply voltage that reads as the full count, V.
    pub full_scale: f64,
    /// Gaussian noise, V rms.
    pub noise: f64,
    /// Offset added to every reading, V.
    pub offset: f64,
    /// Seed of the noise.
    pub seed: u64,
    /// A failed ADC: every reading is this many volts (0 for `"zero"`, the full scale for
    /// `"full"`).
    pub stuck: Option<f64>,
}

/// Control ticks that go wrong (interrupt latency).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Ticks {
    /// Fraction of periods whose tick is missed: the guard is not called and the timer repeats
    /// the last duty.
    pub missed: f64,
    /// Fraction of periods whose tick comes too late for the timer's update: the guard runs and
    /// believes its duty applied, but the timer repeats the last one for that period.
    pub late: f64,
    /// Seed of the draws.
    pub seed: u64,
}

/// How the run starts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Start {
    /// Coil current at t = 0, A.
    pub current: f64,
    /// Whether the guard is told that current (`false`: it starts as after a reset, assuming
    /// the worst).
    pub guard_told: bool,
}

/// How the firmware calls the guard (`[control] calls`).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub enum Calls {
    /// `every-period` (the default): `Guard::tick` once per control period, the PWM duty
    /// applied from it.
    #[default]
    EveryPeriod,
    /// `on-events`: a gate pin switched fully on or off by `Guard::event`, called at each
    /// change of the request, when the output tells it to look again (`next_check_us`), and at
    /// least every `poll_us` µs (`[control] poll`).
    OnEvents {
        /// The firmware's housekeeping interval, µs.
        poll_us: u64,
    },
}

/// One step of the drive timeline.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Step {
    /// Start of the step, s.
    pub at: f64,
    /// Requested duty, 0 ..= 1.
    pub duty: f64,
}

/// How the source voltage moves during the run.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SupplyProfile {
    /// Steps: from `.0` seconds the source is `.1` volts (before the first: `supply.voltage`).
    pub changes: Vec<(f64, f64)>,
    /// Sinusoidal ripple: peak amplitude, V, and frequency, Hz.
    pub ripple: Option<(f64, f64)>,
}

impl SupplyProfile {
    /// The source voltage at `t` for a nominal `nominal` (steps scale with a sample's drawn
    /// supply: `drawn/nominal` times the written value).
    pub fn at(&self, t: f64, nominal: f64, drawn: f64) -> f64 {
        let n = self.changes.partition_point(|c| c.0 <= t);
        let base = if n == 0 {
            drawn
        } else {
            self.changes[n - 1].1 * drawn / nominal
        };
        let ripple = self
            .ripple
            .map_or(0.0, |(a, f)| a * (std::f64::consts::TAU * f * t).sin());
        (base + ripple).max(0.0)
    }

    /// Whether the source is constant.
    pub fn is_constant(&self) -> bool {
        self.changes.is_empty() && self.ripple.is_none()
    }
}

/// A validated scenario.
#[derive(Debug, Clone)]
pub struct Scenario {
    /// The file it came from.
    pub file: PathBuf,
    /// Its name (the file stem if it gives none).
    pub name: String,
    /// Its description.
    pub description: Option<String>,
    /// The circuit as it is.
    pub plant: Values,
    /// The circuit as the firmware believes it (`[model]` overrides; else the same).
    pub beliefs: Values,
    /// Keys `[model]` overrode.
    pub overridden: Vec<Knob>,
    /// Control period, s.
    pub period: f64,
    /// Timer counts per period.
    pub duty_resolution: u32,
    /// Full scale of the estimate, A.
    pub current_full_scale: f64,
    /// How the firmware calls the guard.
    pub calls: Calls,
    /// The guard's settings.
    pub limits: GuardLimits,
    /// Supply ADC.
    pub adc: Adc,
    /// Control-tick faults.
    pub ticks: Ticks,
    /// Initial conditions.
    pub start: Start,
    /// Drive timeline, ascending.
    pub drive: Vec<Step>,
    /// Run length, s.
    pub duration: f64,
    /// Supply steps and ripple.
    pub supply_profile: SupplyProfile,
    /// Spreads for sweeps; the guard is told the box they span (see [`declared`]).
    pub tolerance: Vec<(Knob, Spread)>,
    /// Declared error of the supply reading, ± fraction (`[tolerance] supply_reading`).
    pub supply_reading: f64,
    /// Defaults the file left to the simulator, as `key = value` notes.
    pub assumed: Vec<String>,
    /// Settings accepted that are probably not what was meant, each naming its key.
    pub warnings: Vec<String>,
    spans: HashMap<String, Range<usize>>,
    source: String,
}

/// A warning for each drive step at or after the end of the run (it never applies).
pub(crate) fn late_steps(at: impl Iterator<Item = f64>, duration: f64) -> Vec<String> {
    at.enumerate()
        .filter(|&(_, t)| t >= duration)
        .map(|(n, t)| {
            format!(
                "drive[{n}].at ({}) is at or after the end of the run (run.duration = {}): it never applies",
                crate::report::si(t, "s", 4),
                crate::report::si(duration, "s", 4)
            )
        })
        .collect()
}

/// A warning when the current's full scale is below the trip current.
pub(crate) fn full_scale_below_trip(full_scale: f64, trip: f64) -> Option<String> {
    (full_scale < trip).then(|| {
        format!(
            "control.current_full_scale ({}) is below guard.trip_current ({}): the estimate's \
             error contract is quoted in parts of full scale; pick the coil's rating or trip level",
            crate::report::si(full_scale, "A", 4),
            crate::report::si(trip, "A", 4)
        )
    })
}

/// A library refusal as the scenario's message: what is wrong, without the library's own name
/// for the field (the scenario key is named beside it, and may be spelt differently).
pub(crate) fn library_words(e: &ConfigError) -> String {
    let text = e.to_string();
    let what = text
        .strip_prefix(e.field.name())
        .and_then(|t| t.strip_prefix(": "))
        .unwrap_or(&text);
    format!("refused by the library: {what}")
}

/// The topologies a scenario file may name.
pub(crate) const TOPOLOGIES: [&str; 2] = ["low-side", "full-bridge"];

/// A TOML reader's message in the user's words: no Rust type names, a hint for a bare number.
pub(crate) fn plain_words(message: &str) -> String {
    let found = message
        .strip_prefix("invalid type: ")
        .and_then(|m| m.split_once(", expected "));
    let Some((what, expected)) = found else {
        return message.to_string();
    };
    let value = what.split_once(' ').map_or(what, |(_, v)| v);
    let value = value.strip_prefix("point ").unwrap_or(value);
    match expected {
        "a string" if what.starts_with("floating point") || what.starts_with("integer") => {
            format!(
                "{value} is a bare number: write it in quotes with its unit, e.g. \"40 mH\" or \"24 V\""
            )
        }
        "a string" => format!("expected a value in quotes, e.g. \"40 mH\", found {value}"),
        e if e.starts_with('u') || e.starts_with('i') => {
            format!("expected a whole number without quotes or unit, e.g. 3200, found {value}")
        }
        "a boolean" => format!("expected true or false, found {value}"),
        _ => format!("expected {expected}, found {value}"),
    }
}

/// The `table.key` (or `key`, or `table[n].key`) written on line `line` (1-based), when that
/// line assigns a key.
pub(crate) fn key_at_line(text: &str, line: usize) -> Option<String> {
    let lines: Vec<&str> = text.lines().collect();
    let this = lines.get(line.checked_sub(1)?)?;
    let (name, _) = this.split_once('=')?;
    let name = name.trim();
    if name.is_empty() || name.starts_with('#') || name.starts_with('[') {
        return None;
    }
    let mut counts: HashMap<&str, usize> = HashMap::new();
    let mut table: Option<String> = None;
    for l in lines.iter().take(line) {
        let t = l.trim();
        if let Some(h) = t.strip_prefix("[[").and_then(|h| h.split(']').next()) {
            let h = h.trim();
            let n = counts.entry(h).or_insert(0);
            table = Some(format!("{h}[{n}]"));
            *n += 1;
        } else if let Some(h) = t.strip_prefix('[').and_then(|h| h.split(']').next()) {
            table = Some(h.trim().to_string());
        }
    }
    Some(table.map_or_else(|| name.to_string(), |t| format!("{t}.{name}")))
}

/// Parsing context: file, text, spans.
pub(crate) struct Cx<'a> {
    pub(crate) file: &'a Path,
    pub(crate) text: &'a str,
    pub(crate) spans: HashMap<String, Range<usize>>,
}

impl Cx<'_> {
    /// The whole file as `T`; a TOML or schema error names the line.
    pub(crate) fn document<T: serde::de::DeserializeOwned>(&self) -> Result<T, ScenarioError> {
        toml::from_str(self.text).map_err(|e| {
            let at = e.span().map(|s| self.position(s.start));
            let mut message = plain_words(e.message().trim());
            let line = at.and_then(|(l, _)| self.text.lines().nth(l - 1));
            let key = at
                .filter(|_| !message.starts_with("missing field"))
                .and_then(|(l, _)| key_at_line(self.text, l));
            if let (Some(line), None) = (line, &key) {
                message.push_str(&format!(" (in `{}`)", line.trim()));
            }
            ScenarioError {
                file: self.file.to_path_buf(),
                at,
                key,
                message,
            }
        })
    }

    /// Every section of `required` the file leaves out, reported at once (the TOML reader would
    /// name only the first). A file that is not TOML passes here: the full parse says why.
    pub(crate) fn sections_present(&self, required: &[&str]) -> Result<(), ScenarioError> {
        let Ok(table) = self.text.parse::<toml::Table>() else {
            return Ok(());
        };
        let missing: Vec<String> = required
            .iter()
            .filter(|k| !table.contains_key(**k))
            .map(|k| format!("[{k}]"))
            .collect();
        if missing.is_empty() {
            return Ok(());
        }
        Err(ScenarioError {
            file: self.file.to_path_buf(),
            at: None,
            key: None,
            message: format!(
                "missing {} {}; `coilward-sim new` writes a complete scenario to start from",
                if missing.len() == 1 {
                    "section"
                } else {
                    "sections"
                },
                missing.join(", ")
            ),
        })
    }

    /// A `topology` that names none of [`TOPOLOGIES`] is refused before anything else (the
    /// rest of the file would be read against the wrong schema and blame another key).
    pub(crate) fn topology_known(&self) -> Result<(), ScenarioError> {
        #[derive(Deserialize)]
        struct Peek {
            topology: Option<Spanned<String>>,
        }
        match toml::from_str::<Peek>(self.text) {
            Ok(Peek { topology: Some(t) }) if !TOPOLOGIES.contains(&t.get_ref().as_str()) => {
                Err(self.error(
                    "topology",
                    Some(t.span()),
                    format!("`{}` is not one of {}", t.get_ref(), TOPOLOGIES.join(", ")),
                ))
            }
            _ => Ok(()),
        }
    }

    pub(crate) fn position(&self, offset: usize) -> (usize, usize) {
        let before = &self.text[..offset.min(self.text.len())];
        let line = before.matches('\n').count() + 1;
        let col = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
        (line, col)
    }

    pub(crate) fn error(
        &self,
        key: &str,
        span: Option<Range<usize>>,
        message: impl Into<String>,
    ) -> ScenarioError {
        let span = span.or_else(|| self.spans.get(key).cloned());
        ScenarioError {
            file: self.file.to_path_buf(),
            at: span.map(|s| self.position(s.start)),
            key: Some(key.to_string()),
            message: message.into(),
        }
    }

    /// A value with its unit; records the span under `key`.
    pub(crate) fn value(
        &mut self,
        key: &str,
        raw: &Text,
        unit: Unit,
    ) -> Result<Option<f64>, ScenarioError> {
        let Some(s) = raw else { return Ok(None) };
        self.spans.insert(key.to_string(), s.span());
        units::parse(s.get_ref(), unit)
            .map(Some)
            .map_err(|e| self.error(key, Some(s.span()), e.0))
    }

    pub(crate) fn required(
        &mut self,
        key: &str,
        raw: &Text,
        unit: Unit,
    ) -> Result<f64, ScenarioError> {
        self.value(key, raw, unit)?.ok_or_else(|| {
            self.error(
                key,
                None,
                format!("missing; give it with its unit, e.g. {}", unit.example()),
            )
        })
    }

    pub(crate) fn word<'s>(
        &mut self,
        key: &str,
        raw: &'s Text,
        allowed: &[&str],
    ) -> Result<Option<&'s str>, ScenarioError> {
        let Some(s) = raw else { return Ok(None) };
        self.spans.insert(key.to_string(), s.span());
        if allowed.contains(&s.get_ref().as_str()) {
            Ok(Some(s.get_ref().as_str()))
        } else {
            Err(self.error(
                key,
                Some(s.span()),
                format!("`{}` is not one of {}", s.get_ref(), allowed.join(", ")),
            ))
        }
    }

    pub(crate) fn action(
        &mut self,
        key: &str,
        raw: &Text,
        default: Action,
    ) -> Result<Action, ScenarioError> {
        Ok(match self.word(key, raw, &["report", "hold", "trip"])? {
            Some("report") => Action::Report,
            Some("hold") => Action::Hold,
            Some("trip") => Action::Trip,
            _ => default,
        })
    }

    pub(crate) fn count(
        &mut self,
        key: &str,
        raw: &Option<Spanned<i64>>,
        range: Range<i64>,
    ) -> Result<Option<i64>, ScenarioError> {
        let Some(s) = raw else { return Ok(None) };
        self.spans.insert(key.to_string(), s.span());
        let v = *s.get_ref();
        if range.contains(&v) {
            Ok(Some(v))
        } else {
            Err(self.error(
                key,
                Some(s.span()),
                format!("{v} is outside {} ..= {}", range.start, range.end - 1),
            ))
        }
    }

    pub(crate) fn check(&self, key: &str, ok: bool, message: &str) -> Result<(), ScenarioError> {
        if ok {
            Ok(())
        } else {
            Err(self.error(key, None, message))
        }
    }
}

/// The first control period (of `period` s) whose start is at or after `at`: a step at 10 ms
/// with a 50 µs period starts period 200 exactly, whatever the rounding of 10 ms / 50 µs.
pub(crate) fn first_period_at(at: f64, period: f64) -> u64 {
    let k = at / period;
    let near = k.round();
    if (k - near).abs() <= 1e-6 {
        near as u64
    } else {
        k.ceil() as u64
    }
}

/// The duty a drive timeline (steps in time order, each `(at, duty)`) requests in period `k`:
/// the last step started by then, or 0 before the first.
pub(crate) fn duty_in_period<T>(
    steps: &[T],
    step: impl Fn(&T) -> (f64, f64),
    period: f64,
    k: u64,
) -> f64 {
    duty_span(steps, step, period, k).0
}

/// As [`duty_in_period`], with the first period of the next step (`u64::MAX` after the last):
/// the duty holds for every period from `k` up to it.
pub(crate) fn duty_span<T>(
    steps: &[T],
    step: impl Fn(&T) -> (f64, f64),
    period: f64,
    k: u64,
) -> (f64, u64) {
    let n = steps.partition_point(|s| first_period_at(step(s).0, period) <= k);
    let until = steps
        .get(n)
        .map_or(u64::MAX, |s| first_period_at(step(s).0, period));
    let duty = if n == 0 { 0.0 } else { step(&steps[n - 1]).1 };
    (duty, until)
}

/// A scenario file's text, or an error naming the file.
pub(crate) fn read(path: &Path) -> Result<String, ScenarioError> {
    std::fs::read_to_string(path).map_err(|e| ScenarioError {
        file: path.to_path_buf(),
        at: None,
        key: None,
        message: format!("cannot read: {e}"),
    })
}

/// The circuit a scenario file describes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Topology {
    /// One low-side switch and a clamp path (`topology = "low-side"`, the default).
    LowSide,
    /// Four switches around the coil (`topology = "full-bridge"`).
    FullBridge,
}

impl Topology {
    /// The word the scenario file and the reports use.
    pub fn word(self) -> &'static str {
        match self {
            Topology::LowSide => "low-side",
            Topology::FullBridge => "full-bridge",
        }
    }
}

/// A scenario file loaded once, whichever circuit it describes: what a command takes, so that
/// the topology is decided in one place.
#[derive(Debug, Clone)]
pub enum Loaded {
    /// One low-side switch and a clamp path (each kind boxed: they are large and unequal).
    LowSide(Box<Scenario>),
    /// Four switches around the coil.
    FullBridge(Box<crate::bridge::scenario::BridgeScenario>),
}

impl Loaded {
    /// Reads a scenario file and validates it as the topology it names.
    pub fn load(path: &Path) -> Result<Self, ScenarioError> {
        let text = read(path)?;
        Ok(match topology_of(&text) {
            Topology::LowSide => Loaded::LowSide(Box::new(Scenario::parse(path, &text)?)),
            Topology::FullBridge => {
                let s = crate::bridge::scenario::BridgeScenario::parse(path, &text)?;
                Loaded::FullBridge(Box::new(s))
            }
        })
    }

    /// Its topology.
    pub fn topology(&self) -> Topology {
        match self {
            Loaded::LowSide(_) => Topology::LowSide,
            Loaded::FullBridge(_) => Topology::FullBridge,
        }
    }

    /// Its name.
    pub fn name(&self) -> &str {
        match self {
            Loaded::LowSide(s) => &s.name,
            Loaded::FullBridge(s) => &s.name,
        }
    }

    /// The file it came from.
    pub fn file(&self) -> &Path {
        match self {
            Loaded::LowSide(s) => &s.file,
            Loaded::FullBridge(s) => &s.file,
        }
    }
}

/// The topology named by a scenario's top-level `topology` key (the low side when it has none
/// or the text is not TOML: the full parse then reports the problem).
pub fn topology_of(text: &str) -> Topology {
    #[derive(Deserialize)]
    struct Peek {
        topology: Option<String>,
    }
    match toml::from_str::<Peek>(text) {
        Ok(Peek {
            topology: Some(t), ..
        }) if t == "full-bridge" => Topology::FullBridge,
        _ => Topology::LowSide,
    }
}

/// The scenario key that holds the library field `field` (as [`coilward::Field::name`] spells
/// it).
fn scenario_key(field: &str) -> &str {
    match field {
        "supply.nominal" => "supply.voltage",
        "coil.winding_temperature" => "coil.temperature",
        "coil.node_capacitance" => "switch.capacitance",
        "guard.clamp_power.max_average" => "guard.clamp_max_power",
        "guard.clamp_power.window" => "guard.clamp_power_window",
        "coil.saturation.current" => "coil.saturation_current",
        "coil.saturation.inductance" => "coil.saturated_inductance",
        "tolerance.node_capacitance" => "tolerance.capacitance",
        "clamp.forward_drop" => "clamp.forward_voltage",
        "clamp.zener_voltage" => "clamp.zener_voltage",
        "clamp.clamp_voltage" => "clamp.clamp_voltage",
        "clamp_thermal.stages" => "guard.clamp_thermal_resistance",
        "clamp_thermal.ambient" => "guard.clamp_ambient",
        "clamp_thermal.ceiling" => "guard.clamp_max_temperature",
        "clamp_thermal.hysteresis" => "guard.clamp_hysteresis",
        "coil_thermal.time_constant" => "guard.coil_time_constant",
        "coil_thermal.basic_current" => "guard.coil_basic_current",
        "coil_thermal.overload_factor" => "guard.coil_overload_factor",
        "coil_thermal.reset_level" => "guard.coil_reset_level",
        "coil_thermal.ambient" => "guard.coil_ambient",
        "coil_thermal.rise_at_basic" => "guard.coil_rise",
        other => other,
    }
}

impl Scenario {
    /// Reads and validates a scenario file.
    pub fn load(path: &Path) -> Result<Self, ScenarioError> {
        Self::parse(path, &read(path)?)
    }

    /// Validates scenario text (`path` names it in messages).
    pub fn parse(path: &Path, text: &str) -> Result<Self, ScenarioError> {
        let mut cx = Cx {
            file: path,
            text,
            spans: HashMap::new(),
        };
        cx.topology_known()?;
        cx.sections_present(&[
            "supply", "coil", "switch", "clamp", "control", "guard", "run",
        ])?;
        let raw: Raw = cx.document()?;
        let mut assumed = Vec::new();
        let mut plant = plant_values(&mut cx, &raw, &mut assumed)?;
        let (beliefs, overridden) = beliefs_of(&mut cx, &raw, &plant)?;
        let (period, duty_resolution) = control_values(&mut cx, &raw.control, &mut assumed)?;
        let (mut limits, current_full_scale, trip) = guard_limits(&mut cx, &raw, &mut assumed)?;
        let adc = adc_values(&mut cx, &raw)?;
        let ticks = ticks_values(&mut cx, &raw)?;
        let start = start_values(&mut cx, &raw)?;
        let drive = drive_steps(&mut cx, &raw)?;
        let calls = calls(&mut cx, &raw, &drive, &mut assumed)?;
        let supply_profile = supply_profile(&mut cx, &raw)?;
        let duration = run_duration(&mut cx, &raw, period)?;
        let (tolerance, supply_reading) = tolerance_spreads(&mut cx, &raw, &plant, &beliefs)?;
        plant.supply_min = plant.supply_min.min(plant.voltage);
        limits.tolerance = declared(&beliefs, &tolerance, supply_reading);
        let mut warnings = late_steps(drive.iter().map(|d| d.at), duration);
        warnings.extend(full_scale_below_trip(current_full_scale, trip));
        let scenario = Scenario {
            file: path.to_path_buf(),
            name: raw.name.clone().unwrap_or_else(|| {
                path.file_stem()
                    .map_or_else(String::new, |s| s.to_string_lossy().into_owned())
            }),
            description: raw.description.clone(),
            plant,
            beliefs,
            overridden,
            period,
            duty_resolution,
            current_full_scale,
            calls,
            limits,
            adc,
            ticks,
            start,
            drive,
            duration,
            supply_profile,
            tolerance,
            supply_reading,
            assumed,
            warnings,
            spans: cx.spans,
            source: text.to_string(),
        };
        // The library's own validation, once, with its refusal mapped to the key.
        scenario.guard().map_err(|e| scenario.config_error(&e))?;
        Ok(scenario)
    }

    /// The library parameters the firmware would be built with (the beliefs).
    pub fn params(&self) -> Params {
        let b = &self.beliefs;
        let clamp = match b.path {
            PathName::None => ClampPath::None,
            PathName::Freewheel => ClampPath::Freewheel {
                forward_drop: b.forward_voltage as f32,
                resistance: b.clamp_resistance as f32,
            },
            PathName::FreewheelZener => ClampPath::FreewheelZener {
                forward_drop: b.forward_voltage as f32,
                zener_voltage: b.zener_voltage as f32,
                resistance: b.clamp_resistance as f32,
            },
            PathName::SwitchClamp => ClampPath::SwitchClamp {
                clamp_voltage: b.clamp_voltage as f32,
                resistance: b.clamp_resistance as f32,
            },
        };
        let mut coil = CoilParams::new(b.inductance as f32, b.resistance as f32);
        coil.reference_temperature = b.reference_temperature as f32;
        coil.temperature_coefficient = b.temperature_coefficient as f32;
        coil.winding_temperature = b.temperature as f32;
        coil.node_capacitance = Some(b.capacitance as f32);
        if let Some((at, ls)) = b.saturation_current.zip(b.saturated_inductance) {
            coil.saturation = Some(Saturation::new(at as f32, ls as f32));
        }
        Params::new(
            SupplyParams::new(b.voltage as f32, b.supply_min as f32, b.supply_max as f32),
            coil,
            SwitchParams::new(b.on_resistance as f32, b.breakdown as f32),
            clamp,
            ControlParams::new(
                self.period as f32,
                self.duty_resolution,
                self.current_full_scale as f32,
            ),
        )
    }

    /// The guard, built as the firmware would build it.
    pub fn guard(&self) -> Result<coilward::Guard, ConfigError> {
        coilward::Guard::new(&self.params(), &self.limits)
    }

    /// A library refusal as a scenario error at the key that holds the field.
    pub fn config_error(&self, e: &ConfigError) -> ScenarioError {
        let key = scenario_key(e.field.name()).to_string();
        // A belief overridden in [model] is blamed there.
        let key = Knob::ALL
            .into_iter()
            .find(|k| k.home() == key && self.overridden.contains(k))
            .map_or(key, |k| format!("model.{}", k.name()));
        let cx = Cx {
            file: &self.file,
            text: &self.source,
            spans: self.spans.clone(),
        };
        cx.error(&key, None, crate::scenario::library_words(e))
    }

    /// The first control period at or after a step's time (a step at 10 ms with a 50 µs period
    /// starts period 200 exactly, whatever the rounding of 10 ms / 50 µs).
    pub fn step_period(&self, at: f64) -> u64 {
        first_period_at(at, self.period)
    }

    /// Requested duty (0 ..= 1) in control period `k`.
    pub fn duty_in_period(&self, k: u64) -> f64 {
        duty_in_period(&self.drive, |s| (s.at, s.duty), self.period, k)
    }
}

/// `[supply]`, `[coil]`, `[switch]` and `[clamp]`: the plant's values.
fn plant_values(
    cx: &mut Cx,
    raw: &Raw,
    assumed: &mut Vec<String>,
) -> Result<Values, ScenarioError> {
    let (voltage, supply_min, supply_max, source_resistance) =
        supply_values(cx, &raw.supply, assumed)?;
    let coil = coil_values(cx, &raw.coil)?;
    let (on_resistance, capacitance, breakdown, body_diode_voltage, avalanche_resistance) =
        switch_values(cx, &raw.switch, assumed)?;
    let (kind, fv, zv, kv, clamp_resistance) = clamp_values(cx, &raw.clamp)?;
    let CoilValues {
        inductance,
        resistance,
        temperature,
        reference_temperature,
        temperature_coefficient,
        saturation_current,
        saturated_inductance,
    } = coil;
    let plant = Values {
        voltage,
        supply_min: supply_min.unwrap_or(voltage),
        supply_max: supply_max.unwrap_or(voltage),
        source_resistance,
        inductance,
        resistance,
        temperature,
        reference_temperature,
        temperature_coefficient,
        saturation_current,
        saturated_inductance,
        on_resistance,
        capacitance,
        breakdown,
        avalanche_resistance,
        body_diode_voltage,
        path: kind,
        forward_voltage: fv,
        zener_voltage: zv,
        clamp_voltage: kv,
        clamp_resistance: clamp_resistance.unwrap_or(0.0),
    };
    cx.check(
        "clamp.resistance",
        plant.clamp_resistance >= 0.0,
        "must not be negative",
    )?;

    Ok(plant)
}

/// `[supply]`: voltage, min, max (as given) and the source resistance.
fn supply_values(
    cx: &mut Cx,
    s: &RawSupply,
    assumed: &mut Vec<String>,
) -> Result<(f64, Option<f64>, Option<f64>, f64), ScenarioError> {
    let voltage = cx.required("supply.voltage", &s.voltage, Unit::Volt)?;
    let supply_min = cx.value("supply.min", &s.min, Unit::Volt)?;
    let supply_max = cx.value("supply.max", &s.max, Unit::Volt)?;
    if supply_min.is_none() {
        assumed.push(format!("supply.min = supply.voltage ({voltage} V)"));
    }
    if supply_max.is_none() {
        assumed.push(format!("supply.max = supply.voltage ({voltage} V)"));
    }
    let source_resistance = cx
        .value("supply.source_resistance", &s.source_resistance, Unit::Ohm)?
        .unwrap_or(0.0);
    cx.check(
        "supply.source_resistance",
        source_resistance >= 0.0,
        "must not be negative",
    )?;

    Ok((voltage, supply_min, supply_max, source_resistance))
}

/// `[coil]`'s values.
struct CoilValues {
    inductance: f64,
    resistance: f64,
    temperature: f64,
    reference_temperature: f64,
    temperature_coefficient: f64,
    saturation_current: Option<f64>,
    saturated_inductance: Option<f64>,
}

/// `[coil]`.
fn coil_values(cx: &mut Cx, c: &RawCoil) -> Result<CoilValues, ScenarioError> {
    let inductance = cx.required("coil.inductance", &c.inductance, Unit::Henry)?;
    let resistance = cx.required("coil.resistance", &c.resistance, Unit::Ohm)?;
    let reference_temperature = cx
        .value(
            "coil.reference_temperature",
            &c.reference_temperature,
            Unit::Celsius,
        )?
        .unwrap_or(20.0);
    let temperature = cx
        .value("coil.temperature", &c.temperature, Unit::Celsius)?
        .unwrap_or(reference_temperature);
    let temperature_coefficient = cx
        .value(
            "coil.temperature_coefficient",
            &c.temperature_coefficient,
            Unit::PerKelvin,
        )?
        .unwrap_or(f64::from(coilward::COPPER_TEMPERATURE_COEFFICIENT));
    let saturation_current = cx.value(
        "coil.saturation_current",
        &c.saturation_current,
        Unit::Ampere,
    )?;
    let saturated_inductance = cx.value(
        "coil.saturated_inductance",
        &c.saturated_inductance,
        Unit::Henry,
    )?;
    match (saturation_current, saturated_inductance) {
        (Some(_), None) => {
            return Err(cx.error(
                "coil.saturated_inductance",
                cx.spans.get("coil.saturation_current").cloned(),
                "missing: saturation_current needs saturated_inductance",
            ));
        }
        (None, Some(_)) => {
            return Err(cx.error(
                "coil.saturation_current",
                cx.spans.get("coil.saturated_inductance").cloned(),
                "missing: saturated_inductance needs saturation_current",
            ));
        }
        (Some(i), Some(l)) => {
            cx.check("coil.saturation_current", i > 0.0, "must be positive")?;
            cx.check(
                "coil.saturated_inductance",
                l > 0.0 && l <= inductance,
                "must be positive and at most coil.inductance",
            )?;
        }
        (None, None) => {}
    }

    Ok(CoilValues {
        inductance,
        resistance,
        temperature,
        reference_temperature,
        temperature_coefficient,
        saturation_current,
        saturated_inductance,
    })
}

/// `[switch]`: on-resistance, capacitance, breakdown, body diode, avalanche resistance.
fn switch_values(
    cx: &mut Cx,
    w: &RawSwitch,
    assumed: &mut Vec<String>,
) -> Result<(f64, f64, f64, f64, f64), ScenarioError> {
    let on_resistance = cx.required("switch.on_resistance", &w.on_resistance, Unit::Ohm)?;
    let capacitance = match cx.value("switch.capacitance", &w.capacitance, Unit::Farad)? {
        Some(c) => c,
        None => {
            assumed.push("switch.capacitance = 100 pF".to_string());
            100e-12
        }
    };
    cx.check(
        "switch.capacitance",
        capacitance > 0.0 && capacitance <= 1e-3,
        "must be above 0 and at most 1 mF",
    )?;
    let breakdown = cx.required("switch.breakdown", &w.breakdown, Unit::Volt)?;
    let body_diode_voltage = match cx.value(
        "switch.body_diode_voltage",
        &w.body_diode_voltage,
        Unit::Volt,
    )? {
        Some(v) => v,
        None => {
            assumed.push("switch.body_diode_voltage = 0.8 V".to_string());
            0.8
        }
    };
    cx.check(
        "switch.body_diode_voltage",
        body_diode_voltage >= 0.0,
        "must not be negative",
    )?;
    let avalanche_resistance = cx
        .value(
            "switch.avalanche_resistance",
            &w.avalanche_resistance,
            Unit::Ohm,
        )?
        .unwrap_or(0.0);
    cx.check(
        "switch.avalanche_resistance",
        avalanche_resistance >= 0.0,
        "must not be negative",
    )?;

    Ok((
        on_resistance,
        capacitance,
        breakdown,
        body_diode_voltage,
        avalanche_resistance,
    ))
}

/// `[clamp]`: the path and its forward, zener and clamp voltages (0 where they do not apply),
/// and its resistance as given.
fn clamp_values(
    cx: &mut Cx,
    k: &RawClamp,
) -> Result<(PathName, f64, f64, f64, Option<f64>), ScenarioError> {
    let kind = match cx.word(
        "clamp.path",
        &k.path,
        &["none", "freewheel", "freewheel-zener", "switch-clamp"],
    )? {
        Some("none") => PathName::None,
        Some("freewheel") => PathName::Freewheel,
        Some("freewheel-zener") => PathName::FreewheelZener,
        Some(_) => PathName::SwitchClamp,
        None => {
            return Err(cx.error(
                "clamp.path",
                None,
                "missing; one of none, freewheel, freewheel-zener, switch-clamp",
            ));
        }
    };
    let forward_voltage = cx.value("clamp.forward_voltage", &k.forward_voltage, Unit::Volt)?;
    let zener_voltage = cx.value("clamp.zener_voltage", &k.zener_voltage, Unit::Volt)?;
    let clamp_voltage = cx.value("clamp.clamp_voltage", &k.clamp_voltage, Unit::Volt)?;
    let clamp_resistance = cx.value("clamp.resistance", &k.resistance, Unit::Ohm)?;
    let needs = |key: &str, v: Option<f64>, cx: &Cx| -> Result<f64, ScenarioError> {
        v.ok_or_else(|| {
            cx.error(
                key,
                cx.spans.get("clamp.path").cloned(),
                format!("missing: path \"{}\" needs it", kind.name()),
            )
        })
    };
    let refuse = |key: &str, v: Option<f64>, cx: &Cx| -> Result<(), ScenarioError> {
        if v.is_some() {
            Err(cx.error(
                key,
                None,
                format!("does not apply to path \"{}\"", kind.name()),
            ))
        } else {
            Ok(())
        }
    };
    let (fv, zv, kv) = match kind {
        PathName::None => {
            refuse("clamp.forward_voltage", forward_voltage, cx)?;
            refuse("clamp.zener_voltage", zener_voltage, cx)?;
            refuse("clamp.clamp_voltage", clamp_voltage, cx)?;
            refuse("clamp.resistance", clamp_resistance, cx)?;
            (0.0, 0.0, 0.0)
        }
        PathName::Freewheel => {
            refuse("clamp.zener_voltage", zener_voltage, cx)?;
            refuse("clamp.clamp_voltage", clamp_voltage, cx)?;
            (
                needs("clamp.forward_voltage", forward_voltage, cx)?,
                0.0,
                0.0,
            )
        }
        PathName::FreewheelZener => {
            refuse("clamp.clamp_voltage", clamp_voltage, cx)?;
            (
                needs("clamp.forward_voltage", forward_voltage, cx)?,
                needs("clamp.zener_voltage", zener_voltage, cx)?,
                0.0,
            )
        }
        PathName::SwitchClamp => {
            refuse("clamp.forward_voltage", forward_voltage, cx)?;
            refuse("clamp.zener_voltage", zener_voltage, cx)?;
            (0.0, 0.0, needs("clamp.clamp_voltage", clamp_voltage, cx)?)
        }
    };

    Ok((kind, fv, zv, kv, clamp_resistance))
}

/// `[model]`: the firmware's beliefs (the plant's values unless overridden), and the keys
/// overridden.
fn beliefs_of(
    cx: &mut Cx,
    raw: &Raw,
    plant: &Values,
) -> Result<(Values, Vec<Knob>), ScenarioError> {
    let mut beliefs = *plant;
    let mut overridden = Vec::new();
    for (key, value) in raw.model.iter().flatten() {
        let name = format!("model.{key}");
        let knob = Knob::from_name(key).ok_or_else(|| {
            cx.error(
                &name,
                Some(value.span()),
                format!(
                    "unknown key; [model] takes {}",
                    Knob::ALL.map(Knob::name).join(", ")
                ),
            )
        })?;
        if !plant.applies(knob) {
            return Err(cx.error(&name, Some(value.span()), "does not apply to this circuit"));
        }
        if !knob.guard_uses() {
            return Err(cx.error(
                &name,
                Some(value.span()),
                "the guard has no such parameter, so a belief about it would change nothing; \
                 remove it (the plant's value stays in its own section)",
            ));
        }
        let x = cx.required(&name, &Some(value.clone()), knob.unit())?;
        beliefs.set(knob, x);
        overridden.push(knob);
    }

    Ok((beliefs, overridden))
}

/// `[control]`: the period and the duty resolution.
fn control_values(
    cx: &mut Cx,
    ct: &RawControl,
    assumed: &mut Vec<String>,
) -> Result<(f64, u32), ScenarioError> {
    period_and_resolution(cx, &ct.period, &ct.duty_resolution, assumed)
}

/// `control.period` (above 0, at most 1 s) and `control.duty_resolution` [1000], the same in
/// both topologies' files.
pub(crate) fn period_and_resolution(
    cx: &mut Cx,
    period: &Text,
    resolution: &Option<Spanned<i64>>,
    assumed: &mut Vec<String>,
) -> Result<(f64, u32), ScenarioError> {
    let period = cx.required("control.period", period, Unit::Second)?;
    cx.check(
        "control.period",
        period > 0.0 && period <= 1.0,
        "must be above 0 s and at most 1 s",
    )?;
    let duty_resolution = match cx.count("control.duty_resolution", resolution, 1..65_536)? {
        Some(n) => u32::try_from(n).unwrap_or(1000),
        None => {
            assumed.push("control.duty_resolution = 1000".to_string());
            1000
        }
    };
    Ok((period, duty_resolution))
}

/// `[guard]` (and `control.current_full_scale`, which defaults to its trip current): the
/// limits, the full scale and the trip current.
fn guard_limits(
    cx: &mut Cx,
    raw: &Raw,
    assumed: &mut Vec<String>,
) -> Result<(GuardLimits, f64, f64), ScenarioError> {
    let ct = &raw.control;
    let g = &raw.guard;
    let ceiling = cx.required("guard.current_ceiling", &g.current_ceiling, Unit::Ampere)?;
    let trip = cx.required("guard.trip_current", &g.trip_current, Unit::Ampere)?;
    let release = cx.required("guard.release_current", &g.release_current, Unit::Ampere)?;
    let current_full_scale = match cx.value(
        "control.current_full_scale",
        &ct.current_full_scale,
        Unit::Ampere,
    )? {
        Some(a) => a,
        None => {
            assumed.push(format!(
                "control.current_full_scale = guard.trip_current ({trip} A)"
            ));
            trip
        }
    };
    let mut limits = GuardLimits::new(ceiling as f32, trip as f32, release as f32);
    limits.clamp_pulse_energy = cx
        .value(
            "guard.clamp_pulse_energy",
            &g.clamp_pulse_energy,
            Unit::Joule,
        )?
        .map(|x| x as f32);
    let max_power = cx.value("guard.clamp_max_power", &g.clamp_max_power, Unit::Watt)?;
    let window = cx.value(
        "guard.clamp_power_window",
        &g.clamp_power_window,
        Unit::Second,
    )?;
    if max_power.is_some() || window.is_some() {
        let d = coilward::ClampPower::DEFAULT;
        limits.clamp_power = Some(coilward::ClampPower::new(
            max_power.map_or(d.max_average, |x| x as f32),
            window.map_or(d.window, |x| x as f32),
        ));
    }
    limits.retry = retry_of(cx, &g.retry_cooldown, &g.max_retries)?;
    let mut policy = limits.policy;
    policy.overcurrent = cx.action("guard.overcurrent", &g.overcurrent, policy.overcurrent)?;
    policy.clamp_pulse = cx.action("guard.clamp_pulse", &g.clamp_pulse, policy.clamp_pulse)?;
    policy.clamp_power = cx.action("guard.clamp_power", &g.clamp_power, policy.clamp_power)?;
    policy.clamp_overheat = cx.action(
        "guard.clamp_overheat",
        &g.clamp_overheat,
        policy.clamp_overheat,
    )?;
    policy.coil_overheat = cx.action(
        "guard.coil_overheat",
        &g.coil_overheat,
        policy.coil_overheat,
    )?;
    policy.supply_low = cx.action("guard.supply_low", &g.supply_low, policy.supply_low)?;
    policy.supply_high = cx.action("guard.supply_high", &g.supply_high, policy.supply_high)?;
    policy.held_request =
        match cx.word("guard.held_request", &g.held_request, &["defer", "drop"])? {
            Some("drop") => HeldRequest::Drop,
            _ => HeldRequest::Defer,
        };
    limits.policy = policy;
    limits.clamp_thermal = clamp_thermal(cx, g)?;
    limits.coil_thermal = coil_thermal(cx, g)?;

    Ok((limits, current_full_scale, trip))
}

/// `[adc]`: the supply reading's converter (a perfect one without the section).
fn adc_values(cx: &mut Cx, raw: &Raw) -> Result<Adc, ScenarioError> {
    Ok(match &raw.adc {
        None => Adc {
            bits: None,
            full_scale: 0.0,
            noise: 0.0,
            offset: 0.0,
            seed: 0,
            stuck: None,
        },
        Some(a) => {
            let bits = cx
                .count("adc.bits", &a.bits, 1..25)?
                .map(|b| u32::try_from(b).unwrap_or(12));
            let full_scale = cx.value("adc.full_scale", &a.full_scale, Unit::Volt)?;
            if bits.is_some() && full_scale.is_none() {
                return Err(cx.error(
                    "adc.full_scale",
                    cx.spans.get("adc.bits").cloned(),
                    "missing: adc.bits needs the supply voltage that reads as the full count",
                ));
            }
            let noise = cx.value("adc.noise", &a.noise, Unit::Volt)?.unwrap_or(0.0);
            cx.check("adc.noise", noise >= 0.0, "must not be negative")?;
            let fs = full_scale.unwrap_or(0.0);
            cx.check(
                "adc.full_scale",
                full_scale.is_none() || fs > 0.0,
                "must be positive",
            )?;
            Adc {
                bits,
                full_scale: fs,
                noise,
                offset: cx
                    .value("adc.offset", &a.offset, Unit::Volt)?
                    .unwrap_or(0.0),
                seed: cx
                    .count("adc.seed", &a.seed, 0..i64::MAX)?
                    .map_or(1, |s| s as u64),
                stuck: match cx.word("adc.stuck", &a.stuck, &["zero", "full"])? {
                    Some("zero") => Some(0.0),
                    Some(_) if full_scale.is_some() => Some(fs),
                    Some(_) => {
                        return Err(cx.error(
                            "adc.stuck",
                            None,
                            "\"full\" needs adc.full_scale (the reading at the top code)",
                        ));
                    }
                    None => None,
                },
            }
        }
    })
}

/// `[ticks]`: missed and late control periods.
fn ticks_values(cx: &mut Cx, raw: &Raw) -> Result<Ticks, ScenarioError> {
    Ok(match &raw.ticks {
        None => Ticks::default(),
        Some(k) => {
            let missed = cx
                .value("ticks.missed", &k.missed, Unit::Percent)?
                .unwrap_or(0.0);
            let late = cx
                .value("ticks.late", &k.late, Unit::Percent)?
                .unwrap_or(0.0);
            cx.check(
                "ticks.missed",
                (0.0..=1.0).contains(&missed),
                "must be within 0 % ..= 100 %",
            )?;
            cx.check(
                "ticks.late",
                (0.0..=1.0).contains(&late),
                "must be within 0 % ..= 100 %",
            )?;
            cx.check(
                "ticks.late",
                missed + late <= 1.0,
                "missed and late together exceed 100 %",
            )?;
            Ticks {
                missed,
                late,
                seed: cx
                    .count("ticks.seed", &k.seed, 0..i64::MAX)?
                    .map_or(1, |s| s as u64),
            }
        }
    })
}

/// `[start]`: the current at the start and whether the guard is told it.
fn start_values(cx: &mut Cx, raw: &Raw) -> Result<Start, ScenarioError> {
    Ok(match &raw.start {
        None => Start {
            current: 0.0,
            guard_told: true,
        },
        Some(st) => Start {
            current: cx
                .value("start.current", &st.current, Unit::Ampere)?
                .unwrap_or(0.0),
            guard_told: cx.word("start.guard", &st.guard, &["told", "reset"])? != Some("reset"),
        },
    })
}

/// `[[drive]]`: the steps, in time order, at least one.
fn drive_steps(cx: &mut Cx, raw: &Raw) -> Result<Vec<Step>, ScenarioError> {
    let duty = DutyRange {
        range: 0.0..=1.0,
        words: "must be within 0 % ..= 100 %",
        example: "100 %",
    };
    let steps = raw.drive.iter().map(|d| (&d.at, &d.duty));
    Ok(drive_of(cx, steps, &duty)?
        .into_iter()
        .map(|(at, duty)| Step { at, duty })
        .collect())
}

/// The duty a topology's `[[drive]]` steps take: its range, the words for it, an example.
pub(crate) struct DutyRange {
    pub(crate) range: std::ops::RangeInclusive<f64>,
    pub(crate) words: &'static str,
    pub(crate) example: &'static str,
}

/// `[[drive]]`: (start, duty) steps from their `at` and `duty` keys, in time order, at least
/// one, each duty within `duty.range` (both topologies).
pub(crate) fn drive_of<'a>(
    cx: &mut Cx,
    steps: impl Iterator<Item = (&'a Text, &'a Text)>,
    duty: &DutyRange,
) -> Result<Vec<(f64, f64)>, ScenarioError> {
    let mut drive: Vec<(f64, f64)> = Vec::new();
    for (n, (raw_at, raw_duty)) in steps.enumerate() {
        let key_at = format!("drive[{n}].at");
        let key_duty = format!("drive[{n}].duty");
        let at = cx.required(&key_at, raw_at, Unit::Second)?;
        let d = cx.required(&key_duty, raw_duty, Unit::Percent)?;
        cx.check(&key_duty, duty.range.contains(&d), duty.words)?;
        cx.check(&key_at, at >= 0.0, "must not be negative")?;
        if let Some(&(prev, _)) = drive.last() {
            cx.check(&key_at, at >= prev, "the drive steps must be in time order")?;
        }
        drive.push((at, d));
    }
    if drive.is_empty() {
        return Err(cx.error(
            "drive",
            None,
            format!(
                "no [[drive]] steps: give at least one, e.g. [[drive]] at = \"0 s\" duty = \"{}\"",
                duty.example
            ),
        ));
    }
    Ok(drive)
}

/// The supply's steps (`[[supply_change]]`) and ripple (`supply.ripple`, its frequency).
fn supply_profile(cx: &mut Cx, raw: &Raw) -> Result<SupplyProfile, ScenarioError> {
    let s = &raw.supply;
    let ripple = cx.value("supply.ripple", &s.ripple, Unit::Volt)?;
    let ripple_frequency = cx.value("supply.ripple_frequency", &s.ripple_frequency, Unit::Hertz)?;
    let ripple = match (ripple, ripple_frequency) {
        (Some(a), Some(f)) => {
            cx.check("supply.ripple", a >= 0.0, "must not be negative")?;
            cx.check("supply.ripple_frequency", f > 0.0, "must be positive")?;
            Some((a, f))
        }
        (None, None) => None,
        (Some(_), None) => {
            return Err(cx.error(
                "supply.ripple_frequency",
                cx.spans.get("supply.ripple").cloned(),
                "missing: supply.ripple needs its frequency",
            ));
        }
        (None, Some(_)) => {
            return Err(cx.error(
                "supply.ripple",
                cx.spans.get("supply.ripple_frequency").cloned(),
                "missing: supply.ripple_frequency needs the ripple's amplitude",
            ));
        }
    };
    let mut changes: Vec<(f64, f64)> = Vec::new();
    for (n, c) in raw.supply_change.iter().enumerate() {
        let key_at = format!("supply_change[{n}].at");
        let key_v = format!("supply_change[{n}].voltage");
        let at = cx.required(&key_at, &c.at, Unit::Second)?;
        let v = cx.required(&key_v, &c.voltage, Unit::Volt)?;
        cx.check(&key_at, at >= 0.0, "must not be negative")?;
        cx.check(&key_v, v >= 0.0, "must not be negative")?;
        if let Some(&(prev, _)) = changes.last() {
            cx.check(
                &key_at,
                at >= prev,
                "the supply changes must be in time order",
            )?;
        }
        changes.push((at, v));
    }

    Ok(SupplyProfile { changes, ripple })
}

/// `[run]`: the duration (at most 1 h and 10⁸ control periods).
fn run_duration(cx: &mut Cx, raw: &Raw, period: f64) -> Result<f64, ScenarioError> {
    let duration = cx.required("run.duration", &raw.run.duration, Unit::Second)?;
    cx.check(
        "run.duration",
        duration > 0.0 && duration <= 3600.0,
        "must be above 0 s and at most 1 h",
    )?;
    cx.check(
        "run.duration",
        duration / period <= 1e8,
        "more than 10⁸ control periods",
    )?;

    Ok(duration)
}

/// `[tolerance]`: the spreads (the plant's keys) and the supply reading's, as a fraction.
fn tolerance_spreads(
    cx: &mut Cx,
    raw: &Raw,
    plant: &Values,
    beliefs: &Values,
) -> Result<(Vec<(Knob, Spread)>, f64), ScenarioError> {
    let mut tolerance = Vec::new();
    let mut supply_reading = 0.0;
    for (key, value) in raw.tolerance.iter().flatten() {
        let name = format!("tolerance.{key}");
        if key == SUPPLY_READING {
            supply_reading = match units::parse_spread(value.get_ref(), Unit::Volt) {
                Ok(Spread::Relative(f)) => f,
                Ok(Spread::Absolute(a)) => a / beliefs.voltage,
                Err(e) => return Err(cx.error(&name, Some(value.span()), e.0)),
            };
            cx.spans.insert(name, value.span());
            continue;
        }
        let knob = Knob::from_name(key).ok_or_else(|| {
            cx.error(
                &name,
                Some(value.span()),
                format!(
                    "unknown key; [tolerance] takes {SUPPLY_READING}, {}",
                    Knob::ALL.map(Knob::name).join(", ")
                ),
            )
        })?;
        if !plant.applies(knob) {
            return Err(cx.error(&name, Some(value.span()), "does not apply to this circuit"));
        }
        let spread = units::parse_spread(value.get_ref(), knob.unit())
            .map_err(|e| cx.error(&name, Some(value.span()), e.0))?;
        cx.spans.insert(name, value.span());
        tolerance.push((knob, spread));
    }
    Ok((tolerance, supply_reading))
}

/// `[control] calls` and `poll`: an on-events run switches the load fully on or off and has no
/// control ticks to go wrong.
fn calls(
    cx: &mut Cx,
    raw: &Raw,
    drive: &[Step],
    assumed: &mut Vec<String>,
) -> Result<Calls, ScenarioError> {
    let ct = &raw.control;
    let word = cx.word("control.calls", &ct.calls, &["every-period", "on-events"])?;
    let poll = cx.value("control.poll", &ct.poll, Unit::Second)?;
    if word != Some("on-events") {
        if poll.is_some() {
            return Err(cx.error(
                "control.poll",
                None,
                "only for calls = \"on-events\" (every-period calls come once a period)",
            ));
        }
        return Ok(Calls::EveryPeriod);
    }
    for (n, d) in drive.iter().enumerate() {
        cx.check(
            &format!("drive[{n}].duty"),
            d.duty == 0.0 || d.duty == 1.0,
            "on-events calls switch the load fully on or off: give 0 % or 100 %",
        )?;
    }
    if raw.ticks.is_some() {
        return Err(cx.error(
            "ticks",
            None,
            "[ticks] is for every-period calls; on-events calls have no timer update to miss",
        ));
    }
    let poll = match poll {
        Some(p) => p,
        None => {
            assumed.push("control.poll = 10 ms".to_string());
            0.01
        }
    };
    cx.check(
        "control.poll",
        (1e-6..=4294.0).contains(&poll),
        "must be within 1 µs ..= 4294 s (a 32-bit µs timer)",
    )?;
    Ok(Calls::OnEvents {
        poll_us: (poll * 1e6).round() as u64,
    })
}

fn stage_list(
    cx: &mut Cx,
    key: &str,
    raw: &Option<Spanned<Vec<String>>>,
    unit: Unit,
) -> Result<Option<Vec<f64>>, ScenarioError> {
    let Some(list) = raw else { return Ok(None) };
    cx.spans.insert(key.to_string(), list.span());
    let mut out = Vec::new();
    for s in list.get_ref() {
        out.push(units::parse(s, unit).map_err(|e| cx.error(key, Some(list.span()), e.0))?);
    }
    if out.is_empty() || out.len() > 3 {
        return Err(cx.error(key, Some(list.span()), "give one to three stages"));
    }
    Ok(Some(out))
}

fn clamp_thermal(cx: &mut Cx, g: &RawGuard) -> Result<Option<ClampThermal>, ScenarioError> {
    let r = stage_list(
        cx,
        "guard.clamp_thermal_resistance",
        &g.clamp_thermal_resistance,
        Unit::KelvinPerWatt,
    )?;
    let tau = stage_list(
        cx,
        "guard.clamp_thermal_time_constant",
        &g.clamp_thermal_time_constant,
        Unit::Second,
    )?;
    let ambient = cx.value("guard.clamp_ambient", &g.clamp_ambient, Unit::Celsius)?;
    let ceiling = cx.value(
        "guard.clamp_max_temperature",
        &g.clamp_max_temperature,
        Unit::Celsius,
    )?;
    let hysteresis = cx.value("guard.clamp_hysteresis", &g.clamp_hysteresis, Unit::Kelvin)?;
    let any = r.is_some()
        || tau.is_some()
        || ambient.is_some()
        || ceiling.is_some()
        || hysteresis.is_some();
    if !any {
        return Ok(None);
    }
    let missing = |key: &str, cx: &Cx| {
        cx.error(key, None, "missing: the clamp's thermal model needs clamp_thermal_resistance, clamp_thermal_time_constant, clamp_ambient and clamp_max_temperature")
    };
    let r = r.ok_or_else(|| missing("guard.clamp_thermal_resistance", cx))?;
    let tau = tau.ok_or_else(|| missing("guard.clamp_thermal_time_constant", cx))?;
    if r.len() != tau.len() {
        return Err(cx.error(
            "guard.clamp_thermal_time_constant",
            None,
            "needs as many entries as clamp_thermal_resistance",
        ));
    }
    let mut stages = [FosterStage::UNUSED; 3];
    for (s, (r, t)) in stages.iter_mut().zip(r.iter().zip(&tau)) {
        *s = FosterStage::new(*r as f32, *t as f32);
    }
    let mut t = ClampThermal::new(
        stages,
        ambient.ok_or_else(|| missing("guard.clamp_ambient", cx))? as f32,
        ceiling.ok_or_else(|| missing("guard.clamp_max_temperature", cx))? as f32,
    );
    if let Some(h) = hysteresis {
        t.hysteresis = h as f32;
    }
    Ok(Some(t))
}

/// `guard.retry_cooldown` and `guard.max_retries` [3], the same in both topologies' files.
pub(crate) fn retry_of(
    cx: &mut Cx,
    cooldown: &Text,
    max_retries: &Option<Spanned<i64>>,
) -> Result<Option<Retry>, ScenarioError> {
    let cooldown = cx.value("guard.retry_cooldown", cooldown, Unit::Second)?;
    let retries = cx.count("guard.max_retries", max_retries, 0..256)?;
    match (cooldown, retries) {
        (Some(c), r) => Ok(Some(Retry::new(
            c as f32,
            u8::try_from(r.unwrap_or(3)).unwrap_or(3),
        ))),
        (None, Some(_)) => Err(cx.error(
            "guard.retry_cooldown",
            cx.spans.get("guard.max_retries").cloned(),
            "missing: max_retries needs retry_cooldown",
        )),
        (None, None) => Ok(None),
    }
}

/// The `[guard]` keys of the winding's thermal image, the same in both topologies' files.
pub(crate) struct CoilThermalKeys<'a> {
    pub(crate) coil_time_constant: &'a Text,
    pub(crate) coil_basic_current: &'a Text,
    pub(crate) coil_overload_factor: &'a Option<Spanned<f64>>,
    pub(crate) coil_reset_level: &'a Option<Spanned<f64>>,
    pub(crate) coil_ambient: &'a Text,
    pub(crate) coil_rise: &'a Text,
}

fn coil_thermal(cx: &mut Cx, g: &RawGuard) -> Result<Option<CoilThermal>, ScenarioError> {
    coil_thermal_of(
        cx,
        &CoilThermalKeys {
            coil_time_constant: &g.coil_time_constant,
            coil_basic_current: &g.coil_basic_current,
            coil_overload_factor: &g.coil_overload_factor,
            coil_reset_level: &g.coil_reset_level,
            coil_ambient: &g.coil_ambient,
            coil_rise: &g.coil_rise,
        },
    )
}

/// The winding's thermal image from its `[guard]` keys (`None` when none is given).
pub(crate) fn coil_thermal_of(
    cx: &mut Cx,
    g: &CoilThermalKeys,
) -> Result<Option<CoilThermal>, ScenarioError> {
    let tau = cx.value(
        "guard.coil_time_constant",
        g.coil_time_constant,
        Unit::Second,
    )?;
    let basic = cx.value(
        "guard.coil_basic_current",
        g.coil_basic_current,
        Unit::Ampere,
    )?;
    let ambient = cx.value("guard.coil_ambient", g.coil_ambient, Unit::Celsius)?;
    let rise = cx.value("guard.coil_rise", g.coil_rise, Unit::Kelvin)?;
    let k = g.coil_overload_factor.as_ref().map(|s| {
        cx.spans
            .insert("guard.coil_overload_factor".into(), s.span());
        *s.get_ref()
    });
    if tau.is_none() && basic.is_none() && ambient.is_none() && rise.is_none() && k.is_none() {
        return Ok(None);
    }
    let missing = |key: &str, cx: &Cx| {
        cx.error(key, None, "missing: the winding's thermal image needs coil_time_constant, coil_basic_current, coil_ambient and coil_rise (coil_overload_factor defaults to 1.05)")
    };
    let reset = g.coil_reset_level.as_ref().map(|s| {
        cx.spans.insert("guard.coil_reset_level".into(), s.span());
        *s.get_ref()
    });
    Ok(Some(
        CoilThermal::new(
            tau.ok_or_else(|| missing("guard.coil_time_constant", cx))? as f32,
            basic.ok_or_else(|| missing("guard.coil_basic_current", cx))? as f32,
            k.unwrap_or(1.05) as f32,
            ambient.ok_or_else(|| missing("guard.coil_ambient", cx))? as f32,
            rise.ok_or_else(|| missing("guard.coil_rise", cx))? as f32,
        )
        .with_reset_level(reset.unwrap_or(1.0) as f32),
    ))
}
