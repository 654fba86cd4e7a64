//! Full-bridge scenario files: `topology = "full-bridge"` at the top, then the bridge's parts,
//! the guard's settings, a signed drive timeline and the run length.
//!
//! ```toml
//! topology = "full-bridge"
//! [supply]     voltage = "12 V"  min = "10 V"  max = "14 V"
//! [coil]       inductance = "1.5 mH"  resistance = "2.5 Ω"
//! [switch]     on_resistance = "40 mΩ"  breakdown = "30 V"  dead_time = "500 ns"
//! [body_diode] forward_voltage = "0.8 V"  resistance = "20 mΩ"
//! [decay]      mode = "mixed"  fast_share = "30 %"
//! [motor]      constant = "12 mV·s/rad"  inertia = "4e-6 kg·m²"  friction = "2 µN·m·s"
//! [bus]        capacitance = "220 µF"  sink_current = "0 A"
//! [control]    period = "50 us"  duty_resolution = 1000  current_full_scale = "8 A"
//! [guard]      current_ceiling = "4 A"  trip_current = "5 A"  release_current = "50 mA"
//!              reversal_dead_time = "500 us"
//! [[drive]]    at = "0 s"  duty = "-60 %"
//! [run]        duration = "200 ms"
//! [tolerance]  inductance = "±20 %"  resistance = "±15 %"  supply_reading = "±3 %"
//!              back_emf_constant = "±20 %"  bus_capacitance = "±20 %"
//! ```
//! (one key per line in a real file; the full key list is in the contributor guide). The firmware
//! is taken to know the circuit exactly; a positive duty drives current from leg A to leg B.

use crate::bridge::plant::{BridgeCircuit, BridgeState, Bus, Rotor};
use crate::scenario::{Cx, ScenarioError};
use crate::units::{self, Spread, Unit};
use coilward::bridge::{
    BodyDiode, BridgeLimits, BridgeParams, BusParams, DecayMode, MotorParams, PumpResponse,
};
use coilward::{CoilParams, ConfigError, ControlParams, SupplyParams, SwitchParams};
use serde::Deserialize;
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use toml::Spanned;

type Text = Option<Spanned<String>>;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Raw {
    name: Option<String>,
    description: Option<String>,
    topology: Spanned<String>,
    supply: RawSupply,
    coil: RawCoil,
    switch: RawSwitch,
    body_diode: RawDiode,
    decay: RawDecay,
    motor: Option<RawMotor>,
    bus: Option<RawBus>,
    control: RawControl,
    guard: RawGuard,
    #[serde(default)]
    drive: Vec<RawDrive>,
    run: RawRun,
    tolerance: Option<RawTolerance>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTolerance {
    inductance: Text,
    resistance: Text,
    supply_reading: Text,
    back_emf_constant: Text,
    bus_capacitance: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSupply {
    voltage: Text,
    min: Text,
    max: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCoil {
    inductance: Text,
    resistance: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSwitch {
    on_resistance: Text,
    breakdown: Text,
    dead_time: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawDiode {
    forward_voltage: Text,
    resistance: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawDecay {
    mode: Text,
    fast_share: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMotor {
    constant: Text,
    inertia: Text,
    friction: Text,
    back_emf_limit: Text,
    speed_feedback: Option<bool>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawBus {
    capacitance: Text,
    sink_current: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawControl {
    period: Text,
    duty_resolution: Option<Spanned<i64>>,
    current_full_scale: Text,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawGuard {
    current_ceiling: Text,
    trip_current: Text,
    release_current: Text,
    reversal_dead_time: Text,
    overcurrent: Text,
    supply_pump: Text,
    coil_overheat: Text,
    coil_time_constant: Text,
    coil_basic_current: Text,
    coil_overload_factor: Option<Spanned<f64>>,
    coil_reset_level: Option<Spanned<f64>>,
    coil_ambient: Text,
    coil_rise: Text,
    retry_cooldown: Text,
    max_retries: Option<Spanned<i64>>,
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

/// One drive step.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BridgeStep {
    /// Start of the step, s.
    pub at: f64,
    /// Requested signed duty, −1 ..= 1.
    pub duty: f64,
}

/// The `[tolerance]` spreads of a bridge scenario, each ± a fraction of its nominal value (0:
/// exact). The guard's declared-tolerance bound covers every circuit inside them.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct BridgeSpreads {
    /// `coil.inductance`.
    pub inductance: f64,
    /// `coil.resistance` (the winding and the switches' on-resistance together).
    pub resistance: f64,
    /// The firmware's reading of the rail.
    pub supply_reading: f64,
    /// `motor.constant` (the back-EMF the guard is given is the speed times its nominal value).
    pub back_emf_constant: f64,
    /// `bus.capacitance`.
    pub bus_capacitance: f64,
}

impl BridgeSpreads {
    /// The spreads as the library's [`coilward::Tolerance`].
    pub fn declared(&self) -> coilward::Tolerance {
        coilward::Tolerance::EXACT
            .with_inductance(self.inductance as f32)
            .with_resistance(self.resistance as f32)
            .with_supply_reading(self.supply_reading as f32)
            .with_back_emf_constant(self.back_emf_constant as f32)
            .with_bus_capacitance(self.bus_capacitance as f32)
    }

    /// Whether every spread is zero.
    pub fn is_exact(&self) -> bool {
        *self == Self::default()
    }
}

/// A validated full-bridge scenario.
#[derive(Debug, Clone)]
pub struct BridgeScenario {
    /// The file it came from.
    pub file: PathBuf,
    /// Its name.
    pub name: String,
    /// Its description.
    pub description: Option<String>,
    /// The circuit.
    pub circuit: BridgeCircuit,
    /// The gate dead time at each change of a leg between high and low, s.
    pub dead_time: f64,
    /// Whether the firmware feeds the measured speed to the guard (else it assumes a stall).
    pub speed_feedback: bool,
    /// The library's parameters.
    pub params: BridgeParams,
    /// The guard's settings.
    pub limits: BridgeLimits,
    /// Control period, s.
    pub period: f64,
    /// Drive timeline, ascending.
    pub drive: Vec<BridgeStep>,
    /// Run length, s.
    pub duration: f64,
    /// The declared spreads the guard covers (`[tolerance]`).
    pub tolerance: BridgeSpreads,
    /// Error of the firmware's reading of the rail, V (0 in a scenario; the fault suite moves
    /// it within and beyond `tolerance.supply_reading`).
    pub reading_offset: f64,
    /// The plant's state at the start (at rest in a scenario; the fault suite starts some cases
    /// with current flowing or the rotor turning). With current flowing the guard starts as
    /// after a reset, not knowing it.
    pub start: BridgeState,
    /// Defaults the file left to the simulator.
    pub assumed: Vec<String>,
    /// Settings accepted that are probably not what was meant, each naming its key.
    pub warnings: Vec<String>,
    spans: HashMap<String, std::ops::Range<usize>>,
    source: String,
}

/// The `[tolerance]` section: each spread as a fraction of its nominal value (`nominal`: the
/// supply, inductance and resistance; the motor constant and bus capacitance when described).
fn spreads(
    cx: &mut Cx,
    raw: Option<&RawTolerance>,
    (voltage, l, r): (f64, f64, f64),
    constant: Option<f64>,
    capacitance: Option<f64>,
) -> Result<BridgeSpreads, ScenarioError> {
    let Some(t) = raw else {
        return Ok(BridgeSpreads::default());
    };
    let mut one = |key: &str, text: &Text, unit: Unit, nominal: Option<f64>, needs: &str| {
        let Some(v) = text else { return Ok(0.0) };
        let name = format!("tolerance.{key}");
        cx.spans.insert(name.clone(), v.span());
        let Some(nominal) = nominal else {
            return Err(cx.error(&name, Some(v.span()), needs));
        };
        let f = match units::parse_spread(v.get_ref(), unit)
            .map_err(|e| cx.error(&name, Some(v.span()), e.0))?
        {
            Spread::Relative(f) => f,
            Spread::Absolute(a) => a / nominal,
        };
        cx.check(&name, f < 0.9, "must be below ±90 % of the nominal value")?;
        Ok(f)
    };
    Ok(BridgeSpreads {
        inductance: one("inductance", &t.inductance, Unit::Henry, Some(l), "")?,
        resistance: one("resistance", &t.resistance, Unit::Ohm, Some(r), "")?,
        supply_reading: one(
            "supply_reading",
            &t.supply_reading,
            Unit::Volt,
            Some(voltage),
            "",
        )?,
        back_emf_constant: one(
            "back_emf_constant",
            &t.back_emf_constant,
            Unit::VoltSecondPerRadian,
            constant,
            "applies to a motor: describe it in [motor] or leave this out",
        )?,
        bus_capacitance: one(
            "bus_capacitance",
            &t.bus_capacitance,
            Unit::Farad,
            capacitance,
            "applies to a bus: describe it in [bus] or leave this out",
        )?,
    })
}

/// The scenario key of a library field.
fn key_of(field: &str) -> &str {
    match field {
        "supply.nominal" => "supply.voltage",
        "body_diode.forward_drop" => "body_diode.forward_voltage",
        "coil_thermal.time_constant" => "guard.coil_time_constant",
        "coil_thermal.basic_current" => "guard.coil_basic_current",
        "coil_thermal.overload_factor" => "guard.coil_overload_factor",
        "coil_thermal.reset_level" => "guard.coil_reset_level",
        "coil_thermal.ambient" => "guard.coil_ambient",
        "coil_thermal.rise_at_basic" => "guard.coil_rise",
        other => other,
    }
}

impl BridgeScenario {
    /// Reads and validates a full-bridge scenario file.
    ///
    /// # Errors
    /// The file, line and key of the first problem.
    pub fn load(path: &Path) -> Result<Self, ScenarioError> {
        Self::parse(path, &crate::scenario::read(path)?)
    }

    /// Validates full-bridge scenario text.
    ///
    /// # Errors
    /// The file, line and key of the first problem.
    pub fn parse(path: &Path, text: &str) -> Result<Self, ScenarioError> {
        let mut cx = Cx {
            file: path,
            text,
            spans: HashMap::new(),
        };
        cx.sections_present(&[
            "supply",
            "coil",
            "switch",
            "body_diode",
            "decay",
            "control",
            "guard",
            "run",
        ])?;
        let raw: Raw = cx.document()?;
        let topology = Some(raw.topology.clone());
        cx.word("topology", &topology, &["full-bridge"])?;
        let mut assumed = Vec::new();

        let CircuitValues {
            voltage,
            min,
            max,
            l,
            r,
            r_on,
            bv,
            dead_time,
            vf,
            rd,
        } = circuit_values(&mut cx, &raw, &mut assumed)?;
        let decay = decay_mode(&mut cx, &raw)?;
        let (rotor, motor, speed_feedback) = motor_values(&mut cx, &raw, min, &mut assumed)?;
        let bus = bus_values(&mut cx, &raw, &mut assumed)?;

        let c = &raw.control;
        let (period, resolution) = crate::scenario::period_and_resolution(
            &mut cx,
            &c.period,
            &c.duty_resolution,
            &mut assumed,
        )?;
        let (mut limits, full_scale, trip) = guard_limits(&mut cx, &raw, &mut assumed)?;

        let drive = drive_steps(&mut cx, &raw)?;
        let duration = cx.required("run.duration", &raw.run.duration, Unit::Second)?;
        cx.check(
            "run.duration",
            duration > 0.0 && duration / period <= 2e7,
            "must be positive and at most 20 million control periods",
        )?;

        let tolerance = spreads(
            &mut cx,
            raw.tolerance.as_ref(),
            (voltage, l, r),
            rotor.map(|x| x.constant),
            bus.map(|b| b.capacitance),
        )?;
        limits.tolerance = tolerance.declared();

        let mut params = BridgeParams::new(
            SupplyParams::new(voltage as f32, min as f32, max as f32),
            CoilParams::new(l as f32, r as f32),
            SwitchParams::new(r_on as f32, bv as f32),
            BodyDiode::new(vf as f32, rd as f32),
            decay,
            ControlParams::new(period as f32, resolution, full_scale as f32),
        )
        .with_motor(motor)
        .with_gate_dead_time(dead_time as f32);
        if let Some(b) = bus {
            params = params.with_bus(BusParams::new(b.capacitance as f32, b.sink_current as f32));
        }
        let mut warnings = crate::scenario::late_steps(drive.iter().map(|d| d.at), duration);
        warnings.extend(crate::scenario::full_scale_below_trip(full_scale, trip));
        let scenario = Self {
            file: path.to_path_buf(),
            name: raw.name.clone().unwrap_or_else(|| {
                path.file_stem()
                    .map_or_else(String::new, |s| s.to_string_lossy().into_owned())
            }),
            description: raw.description.clone(),
            circuit: BridgeCircuit {
                supply: voltage,
                inductance: l,
                resistance: r,
                on_resistance: r_on,
                diode_drop: vf,
                diode_resistance: rd,
                rotor,
                back_emf: 0.0,
                bus,
            },
            dead_time,
            speed_feedback,
            params,
            limits,
            period,
            drive,
            duration,
            tolerance,
            reading_offset: 0.0,
            start: BridgeState::default(),
            assumed,
            warnings,
            spans: cx.spans,
            source: text.to_string(),
        };
        // The library validates the rest; its refusal names the scenario key.
        scenario.guard().map_err(|e| scenario.config_error(&e))?;
        Ok(scenario)
    }

    /// The guard for this scenario.
    ///
    /// # Errors
    /// The library's refusal.
    pub fn guard(&self) -> Result<coilward::bridge::BridgeGuard, ConfigError> {
        coilward::bridge::BridgeGuard::new(&self.params, &self.limits)
    }

    /// A library refusal as a scenario error naming the key.
    pub fn config_error(&self, e: &ConfigError) -> ScenarioError {
        let key = key_of(e.field.name()).to_string();
        let cx = Cx {
            file: &self.file,
            text: &self.source,
            spans: self.spans.clone(),
        };
        cx.error(&key, None, crate::scenario::library_words(e))
    }

    /// Requested signed duty (−1 ..= 1) in control period `k`.
    pub fn duty_in_period(&self, k: u64) -> f64 {
        crate::scenario::duty_in_period(&self.drive, |s| (s.at, s.duty), self.period, k)
    }
}

/// `[supply]`, `[coil]`, `[switch]` and `[body_diode]`: supply nominal, min and max; coil L
/// and R; on-resistance, breakdown and gate dead time; the body diode's drop and resistance.
fn circuit_values(
    cx: &mut Cx,
    raw: &Raw,
    assumed: &mut Vec<String>,
) -> Result<CircuitValues, ScenarioError> {
    let s = &raw.supply;
    let voltage = cx.required("supply.voltage", &s.voltage, Unit::Volt)?;
    let min = cx
        .value("supply.min", &s.min, Unit::Volt)?
        .unwrap_or_else(|| {
            assumed.push(format!("supply.min = supply.voltage ({voltage} V)"));
            voltage
        });
    let max = cx
        .value("supply.max", &s.max, Unit::Volt)?
        .unwrap_or_else(|| {
            assumed.push(format!("supply.max = supply.voltage ({voltage} V)"));
            voltage
        });
    let l = cx.required("coil.inductance", &raw.coil.inductance, Unit::Henry)?;
    let r = cx.required("coil.resistance", &raw.coil.resistance, Unit::Ohm)?;
    let sw = &raw.switch;
    let r_on = cx.required("switch.on_resistance", &sw.on_resistance, Unit::Ohm)?;
    let bv = cx.required("switch.breakdown", &sw.breakdown, Unit::Volt)?;
    let dead_time = cx
        .value("switch.dead_time", &sw.dead_time, Unit::Second)?
        .unwrap_or_else(|| {
            assumed.push("switch.dead_time = 0 s".into());
            0.0
        });
    cx.check(
        "switch.dead_time",
        (0.0..=1e-3).contains(&dead_time),
        "must be within 0 ..= 1 ms",
    )?;
    let d = &raw.body_diode;
    let vf = cx.required("body_diode.forward_voltage", &d.forward_voltage, Unit::Volt)?;
    let rd = cx
        .value("body_diode.resistance", &d.resistance, Unit::Ohm)?
        .unwrap_or(0.0);
    Ok(CircuitValues {
        voltage,
        min,
        max,
        l,
        r,
        r_on,
        bv,
        dead_time,
        vf,
        rd,
    })
}

/// What [`circuit_values`] reads, SI.
struct CircuitValues {
    voltage: f64,
    min: f64,
    max: f64,
    l: f64,
    r: f64,
    r_on: f64,
    bv: f64,
    dead_time: f64,
    vf: f64,
    rd: f64,
}

/// `[decay]`: the mode, and the fast share of a mixed one.
fn decay_mode(cx: &mut Cx, raw: &Raw) -> Result<DecayMode, ScenarioError> {
    let decay = match cx.word("decay.mode", &raw.decay.mode, &["fast", "slow", "mixed"])? {
        Some("fast") => DecayMode::Fast,
        Some("slow") => DecayMode::Slow,
        Some(_) => {
            let share = cx.required("decay.fast_share", &raw.decay.fast_share, Unit::Percent)?;
            DecayMode::Mixed {
                fast_share: share as f32,
            }
        }
        None => {
            return Err(cx.error("decay.mode", None, "missing; one of fast, slow, mixed"));
        }
    };
    if !matches!(decay, DecayMode::Mixed { .. }) && raw.decay.fast_share.is_some() {
        return Err(cx.error(
            "decay.fast_share",
            raw.decay.fast_share.as_ref().map(Spanned::span),
            "applies to mode = \"mixed\" only",
        ));
    }

    Ok(decay)
}

/// `[motor]`: the rotor the plant turns, the guard's motor parameters, and whether the
/// firmware feeds it the speed (none of them without the section).
fn motor_values(
    cx: &mut Cx,
    raw: &Raw,
    min: f64,
    assumed: &mut Vec<String>,
) -> Result<(Option<Rotor>, MotorParams, bool), ScenarioError> {
    Ok(match &raw.motor {
        None => (None, MotorParams::default(), false),
        Some(m) => {
            let k = cx.required("motor.constant", &m.constant, Unit::VoltSecondPerRadian)?;
            let j = cx.required("motor.inertia", &m.inertia, Unit::KilogramSquareMetre)?;
            let b = cx.required("motor.friction", &m.friction, Unit::NewtonMetreSecond)?;
            cx.check("motor.inertia", j > 0.0, "must be greater than zero")?;
            cx.check(
                "motor.friction",
                b > 0.0,
                "must be greater than zero (every rotor has some)",
            )?;
            let limit = cx
                .value("motor.back_emf_limit", &m.back_emf_limit, Unit::Volt)?
                .unwrap_or_else(|| {
                    assumed.push(format!("motor.back_emf_limit = supply.min ({min} V)"));
                    min
                });
            let feedback = m.speed_feedback.unwrap_or(false);
            (
                Some(Rotor {
                    constant: k,
                    inertia: j,
                    friction: b,
                }),
                MotorParams::new(limit as f32, k as f32),
                feedback,
            )
        }
    })
}

/// `[bus]`: the supply's bus capacitance and what it can sink (none without the section).
fn bus_values(
    cx: &mut Cx,
    raw: &Raw,
    assumed: &mut Vec<String>,
) -> Result<Option<Bus>, ScenarioError> {
    Ok(match &raw.bus {
        None => None,
        Some(b) => {
            let c = cx.required("bus.capacitance", &b.capacitance, Unit::Farad)?;
            let sink = cx
                .value("bus.sink_current", &b.sink_current, Unit::Ampere)?
                .unwrap_or_else(|| {
                    assumed.push("bus.sink_current = 0 A (a supply that cannot sink)".into());
                    0.0
                });
            Some(Bus {
                capacitance: c,
                sink_current: sink,
            })
        }
    })
}

/// `[guard]` (and `control.current_full_scale`, which defaults to twice its trip current): the
/// limits, the full scale and the trip current.
fn guard_limits(
    cx: &mut Cx,
    raw: &Raw,
    assumed: &mut Vec<String>,
) -> Result<(BridgeLimits, f64, f64), ScenarioError> {
    let c = &raw.control;
    let g = &raw.guard;
    let trip = cx.required("guard.trip_current", &g.trip_current, Unit::Ampere)?;
    let full_scale = cx
        .value(
            "control.current_full_scale",
            &c.current_full_scale,
            Unit::Ampere,
        )?
        .unwrap_or_else(|| {
            assumed.push(format!(
                "control.current_full_scale = 2 × guard.trip_current ({} A)",
                2.0 * trip
            ));
            2.0 * trip
        });
    let ceiling = cx.required("guard.current_ceiling", &g.current_ceiling, Unit::Ampere)?;
    let release = cx.required("guard.release_current", &g.release_current, Unit::Ampere)?;
    let dead = cx.required(
        "guard.reversal_dead_time",
        &g.reversal_dead_time,
        Unit::Second,
    )?;
    let mut limits = BridgeLimits::new(ceiling as f32, trip as f32, release as f32, dead as f32);
    limits.policy.overcurrent = cx.action(
        "guard.overcurrent",
        &g.overcurrent,
        limits.policy.overcurrent,
    )?;
    limits.policy.supply_pump = match cx.word(
        "guard.supply_pump",
        &g.supply_pump,
        &["recirculate", "report"],
    )? {
        Some("report") => PumpResponse::Report,
        _ => PumpResponse::Recirculate,
    };
    limits.policy.coil_overheat = cx.action(
        "guard.coil_overheat",
        &g.coil_overheat,
        limits.policy.coil_overheat,
    )?;
    limits.retry = crate::scenario::retry_of(cx, &g.retry_cooldown, &g.max_retries)?;
    limits.coil_thermal = crate::scenario::coil_thermal_of(
        cx,
        &crate::scenario::CoilThermalKeys {
            coil_time_constant: &g.coil_time_constant,
            coil_basic_current: &g.coil_basic_current,
            coil_overload_factor: &g.coil_overload_factor,
            coil_reset_level: &g.coil_reset_level,
            coil_ambient: &g.coil_ambient,
            coil_rise: &g.coil_rise,
        },
    )?;

    Ok((limits, full_scale, trip))
}

/// `[[drive]]`: the signed steps, in time order, at least one.
fn drive_steps(cx: &mut Cx, raw: &Raw) -> Result<Vec<BridgeStep>, ScenarioError> {
    let duty = crate::scenario::DutyRange {
        range: -1.0..=1.0,
        words: "must be within -100 % ..= 100 % (the sign is the direction)",
        example: "-60 %",
    };
    let steps = raw.drive.iter().map(|d| (&d.at, &d.duty));
    Ok(crate::scenario::drive_of(cx, steps, &duty)?
        .into_iter()
        .map(|(at, duty)| BridgeStep { at, duty })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    const MOTOR: &str = r#"
topology = "full-bridge"
[supply]
voltage = "12 V"
min = "10 V"
max = "14 V"
[coil]
inductance = "1.5 mH"
resistance = "2.5 Ω"
[switch]
on_resistance = "40 mΩ"
breakdown = "30 V"
[body_diode]
forward_voltage = "0.8 V"
[decay]
mode = "fast"
[control]
period = "50 us"
[guard]
current_ceiling = "4 A"
trip_current = "5 A"
release_current = "50 mA"
reversal_dead_time = "500 us"
[[drive]]
at = "0 s"
duty = "-60 %"
[run]
duration = "10 ms"
"#;

    #[test]
    fn a_minimal_file_is_read_with_its_defaults_noted() {
        let s = BridgeScenario::parse(Path::new("m.toml"), MOTOR).unwrap();
        assert_eq!(s.drive[0].duty, -0.6);
        assert!(s.assumed.iter().any(|a| a.starts_with("switch.dead_time")));
        assert_eq!(s.duty_in_period(5), -0.6);
    }

    #[test]
    fn errors_name_the_key_and_line() {
        let bad = MOTOR.replace("mode = \"fast\"", "mode = \"quick\"");
        let e = BridgeScenario::parse(Path::new("m.toml"), &bad).unwrap_err();
        assert_eq!(e.key.as_deref(), Some("decay.mode"));
        assert_eq!(e.at.map(|a| a.0), Some(16));
        let bad = MOTOR.replace("breakdown = \"30 V\"", "breakdown = \"13 V\"");
        let e = BridgeScenario::parse(Path::new("m.toml"), &bad).unwrap_err();
        assert_eq!(e.key.as_deref(), Some("switch.breakdown"));
        let bad = MOTOR.replace("duty = \"-60 %\"", "duty = \"-160 %\"");
        let e = BridgeScenario::parse(Path::new("m.toml"), &bad).unwrap_err();
        assert_eq!(e.key.as_deref(), Some("drive[0].duty"));
        let bad = MOTOR.replace(
            "[decay]\nmode = \"fast\"",
            "[decay]\nmode = \"fast\"\nfast_share = \"20 %\"",
        );
        let e = BridgeScenario::parse(Path::new("m.toml"), &bad).unwrap_err();
        assert_eq!(e.key.as_deref(), Some("decay.fast_share"));
    }
}
