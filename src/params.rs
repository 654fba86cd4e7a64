//! SI parameters of the drive, and the error that names what is wrong with them.
//!
//! Everything here is `f32` in SI units (volts, ohms, henries, seconds, amperes, kelvin/°C) and
//! exists at configuration time only. [`Params::validate`] checks every field once and turns the
//! set into an immutable fixed-point [`Model`](crate::Model); after that, nothing in the per-tick
//! path can fail.
//!
//! # Validation order
//! Fields are checked one by one in declaration order (supply, coil, switch, clamp, control),
//! then the relations between them. The first problem found is returned, naming its field.
//!
//! # Panics
//! Nothing in this module panics, whatever the input: NaN, ±∞, subnormal, zero, negative and huge
//! values are all answered with a [`ConfigError`].

use core::fmt;

/// Temperature coefficient of resistance of annealed copper at 20 °C, per kelvin.
///
/// IEC 60028 (international standard of resistance for copper), α20 = 0.00393 /K.
pub const COPPER_TEMPERATURE_COEFFICIENT: f32 = 0.003_93;

/// The supply that feeds the coil (the high side of the coil; the switch is on the low side).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct SupplyParams {
    /// Nominal supply voltage, V. Range 0.1 ..= 1000.
    pub nominal: f32,
    /// Lowest supply the drive is specified for, V. Range 0 ..= `nominal`.
    pub min: f32,
    /// Highest supply the drive is specified for, V. Range `nominal` ..= 1000.
    pub max: f32,
}

impl SupplyParams {
    /// A supply with its nominal, minimum and maximum voltages (V).
    pub const fn new(nominal: f32, min: f32, max: f32) -> Self {
        Self { nominal, min, max }
    }
}

/// The coil (winding) being driven.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct CoilParams {
    /// Inductance, H. Range 1 µH ..= 1000 H.
    pub inductance: f32,
    /// Winding resistance at [`reference_temperature`](Self::reference_temperature), Ω.
    /// Range 1 mΩ ..= 100 kΩ.
    pub resistance: f32,
    /// Temperature at which `resistance` was measured, °C. Range −100 ..= 300.
    pub reference_temperature: f32,
    /// Temperature coefficient of resistance at the reference temperature, 1/K.
    /// Range 0 ..= 0.02. Default: annealed copper, [`COPPER_TEMPERATURE_COEFFICIENT`].
    pub temperature_coefficient: f32,
    /// Winding temperature the model is built for, °C. Range −100 ..= 300.
    /// Default: the reference temperature.
    pub winding_temperature: f32,
    /// Parasitic capacitance at the switch node (drain to ground), F, if known.
    /// Range 1 fF ..= 1 mF. Used for the turn-off peak when nothing clamps the switch, and by
    /// the guard's bound for the charge the node takes at each turn-off.
    pub node_capacitance: Option<f32>,
    /// Two-slope saturation of the core, if the coil saturates within its working range.
    pub saturation: Option<Saturation>,
}

/// Two-slope saturation: below [`current`](Self::current) the coil has its inductance; above it
/// the incremental inductance `dψ/di` falls to [`inductance`](Self::inductance), so the flux
/// linkage is `L·I_sat + L_sat·(i − I_sat)` (the piecewise-linear magnetisation curve of any
/// electromechanics text; see the `model` module documentation).
///
/// ```
/// use coilward::{CoilParams, Saturation};
/// // A plunger coil whose inductance falls to a quarter above 0.8 A.
/// let coil = CoilParams::new(0.1, 12.0).with_saturation(Saturation::new(0.8, 0.025));
/// assert_eq!(coil.saturation.unwrap().current, 0.8);
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct Saturation {
    /// Current at which the core saturates, A. Range 100 µA ..= 10 kA.
    pub current: f32,
    /// Incremental inductance above that current, H. Range 1 µH ..= the coil's inductance.
    pub inductance: f32,
}

impl Saturation {
    /// Saturation above `current` (A), with incremental inductance `inductance` (H) there.
    pub const fn new(current: f32, inductance: f32) -> Self {
        Self {
            current,
            inductance,
        }
    }
}

impl CoilParams {
    /// A copper coil of `inductance` (H) and `resistance` (Ω) measured at 20 °C, at 20 °C.
    pub const fn new(inductance: f32, resistance: f32) -> Self {
        Self {
            inductance,
            resistance,
            reference_temperature: 20.0,
            temperature_coefficient: COPPER_TEMPERATURE_COEFFICIENT,
            winding_temperature: 20.0,
            node_capacitance: None,
            saturation: None,
        }
    }

    /// The same coil with two-slope saturation.
    #[must_use]
    pub const fn with_saturation(mut self, saturation: Saturation) -> Self {
        self.saturation = Some(saturation);
        self
    }

    /// The same coil at another winding temperature (°C).
    #[must_use]
    pub const fn at_temperature(mut self, winding_temperature: f32) -> Self {
        self.winding_temperature = winding_temperature;
        self
    }

    /// Resistance at temperature `t` (°C): R(T) = R_ref · (1 + α · (T − T_ref)).
    ///
    /// The linear law of IEC 60028 for copper; it agrees with the (234.5 + T) ratio form to
    /// better than 0.01 % over −40 ..= 155 °C.
    pub fn resistance_at(&self, t: f32) -> f32 {
        self.resistance * (1.0 + self.temperature_coefficient * (t - self.reference_temperature))
    }
}

/// The low-side switch (a MOSFET).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct SwitchParams {
    /// On-resistance, Ω. Range 0 ..= 1 kΩ.
    pub on_resistance: f32,
    /// Drain-source breakdown (avalanche) voltage, V. Range 1 ..= 5000, above `supply.max`.
    pub breakdown: f32,
}

impl SwitchParams {
    /// A switch with its on-resistance (Ω) and breakdown voltage (V).
    pub const fn new(on_resistance: f32, breakdown: f32) -> Self {
        Self {
            on_resistance,
            breakdown,
        }
    }
}

/// The path that carries the coil current once the switch opens.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum ClampPath {
    /// Nothing: the switch node rises until the switch avalanches at its breakdown voltage.
    None,
    /// A diode across the coil: drop `forward_drop` (V, 0 ..= 20) plus `resistance` (Ω, 0 ..= 10 k).
    Freewheel {
        /// Forward drop, V.
        forward_drop: f32,
        /// Series resistance of the path, Ω.
        resistance: f32,
    },
    /// A diode in series with a zener across the coil (fast decay).
    FreewheelZener {
        /// Diode forward drop, V (0 ..= 20).
        forward_drop: f32,
        /// Zener voltage, V (0.1 ..= 5000).
        zener_voltage: f32,
        /// Series resistance of the path, Ω (0 ..= 10 k).
        resistance: f32,
    },
    /// A zener or TVS across the switch (drain to ground), conducting at `clamp_voltage`.
    SwitchClamp {
        /// Clamp voltage, V (1 ..= 5000), above `supply.max` and at or below the breakdown.
        clamp_voltage: f32,
        /// Dynamic resistance of the clamp, Ω (0 ..= 10 k).
        resistance: f32,
    },
}

/// Control timing and the scale of the current estimate.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct ControlParams {
    /// PWM period or control tick, s. Range 100 ns ..= 1 s.
    pub period: f32,
    /// Timer counts in one period: a duty of `duty_resolution` counts is 100 %. Range 1 ..= 65535.
    pub duty_resolution: u32,
    /// The current that the estimate's fixed-point format calls 1.0, A. Range 100 µA ..= 10 kA.
    /// Pick the coil's rating or trip level; errors are quoted as a fraction of it.
    pub current_full_scale: f32,
}

impl ControlParams {
    /// Control with a period (s), duty resolution (counts) and full-scale current (A).
    pub const fn new(period: f32, duty_resolution: u32, current_full_scale: f32) -> Self {
        Self {
            period,
            duty_resolution,
            current_full_scale,
        }
    }
}

/// The whole drive: supply, coil, switch, clamp path and control.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct Params {
    /// The supply.
    pub supply: SupplyParams,
    /// The coil.
    pub coil: CoilParams,
    /// The switch.
    pub switch: SwitchParams,
    /// The turn-off path.
    pub clamp: ClampPath,
    /// Timing and scale.
    pub control: ControlParams,
}

impl Params {
    /// Gathers the parts into one parameter set (not yet validated).
    pub const fn new(
        supply: SupplyParams,
        coil: CoilParams,
        switch: SwitchParams,
        clamp: ClampPath,
        control: ControlParams,
    ) -> Self {
        Self {
            supply,
            coil,
            switch,
            clamp,
            control,
        }
    }

    /// Validates every field and builds the fixed-point model.
    ///
    /// # Errors
    /// The first problem found, naming its [`Field`].
    pub fn validate(&self) -> Result<crate::Model, ConfigError> {
        crate::Model::new(self)
    }
}

/// A parameter field, named as `part.field` in messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Field {
    /// `supply.nominal`
    SupplyNominal,
    /// `supply.min`
    SupplyMin,
    /// `supply.max`
    SupplyMax,
    /// `coil.inductance`
    CoilInductance,
    /// `coil.resistance`
    CoilResistance,
    /// `coil.reference_temperature`
    CoilReferenceTemperature,
    /// `coil.temperature_coefficient`
    CoilTemperatureCoefficient,
    /// `coil.winding_temperature`
    CoilWindingTemperature,
    /// `coil.node_capacitance`
    CoilNodeCapacitance,
    /// `coil.saturation.current`
    CoilSaturationCurrent,
    /// `coil.saturation.inductance`
    CoilSaturatedInductance,
    /// `switch.on_resistance`
    SwitchOnResistance,
    /// `switch.breakdown`
    SwitchBreakdown,
    /// `switch.dead_time` (full bridge: the gate dead time at each leg's change)
    SwitchDeadTime,
    /// `clamp.forward_drop`
    ClampForwardDrop,
    /// `clamp.zener_voltage`
    ClampZenerVoltage,
    /// `clamp.clamp_voltage`
    ClampVoltage,
    /// `clamp.resistance`
    ClampResistance,
    /// `control.period`
    ControlPeriod,
    /// `control.duty_resolution`
    ControlDutyResolution,
    /// `control.current_full_scale`
    ControlCurrentFullScale,
    /// `adc.volts_per_count` (of [`SupplySense`](crate::SupplySense))
    AdcVoltsPerCount,
    /// `adc.offset` (of [`SupplySense`](crate::SupplySense))
    AdcOffset,
    /// `guard.current_ceiling`
    GuardCurrentCeiling,
    /// `guard.trip_current`
    GuardTripCurrent,
    /// `guard.release_current`
    GuardReleaseCurrent,
    /// `guard.clamp_pulse_energy`
    GuardClampPulseEnergy,
    /// `guard.retry_cooldown`
    GuardRetryCooldown,
    /// `guard.clamp_power.max_average`
    GuardClampPowerMax,
    /// `guard.clamp_power.window`
    GuardClampPowerWindow,
    /// `clamp_thermal.stages` (one of the Foster stages)
    ClampThermalStage,
    /// `clamp_thermal.ambient`
    ClampThermalAmbient,
    /// `clamp_thermal.ceiling`
    ClampThermalCeiling,
    /// `clamp_thermal.hysteresis`
    ClampThermalHysteresis,
    /// `coil_thermal.time_constant`
    CoilThermalTimeConstant,
    /// `coil_thermal.basic_current`
    CoilThermalBasicCurrent,
    /// `coil_thermal.overload_factor`
    CoilThermalOverloadFactor,
    /// `coil_thermal.ambient`
    CoilThermalAmbient,
    /// `coil_thermal.rise_at_basic`
    CoilThermalRiseAtBasic,
    /// `coil_thermal.reset_level`
    CoilThermalResetLevel,
    /// `hold.pull_in_current`
    HoldPullInCurrent,
    /// `hold.pull_in_time`
    HoldPullInTime,
    /// `hold.hold_current`
    HoldCurrent,
    /// `body_diode.forward_drop` (full bridge)
    BodyDiodeForwardDrop,
    /// `body_diode.resistance` (full bridge)
    BodyDiodeResistance,
    /// `decay.fast_share` (full bridge, mixed decay)
    DecayFastShare,
    /// `motor.back_emf_limit` (full bridge)
    MotorBackEmfLimit,
    /// `motor.constant` (full bridge)
    MotorConstant,
    /// `bus.capacitance` (full bridge)
    BusCapacitance,
    /// `bus.sink_current` (full bridge)
    BusSinkCurrent,
    /// `guard.reversal_dead_time` (full bridge)
    GuardReversalDeadTime,
    /// `tolerance.inductance`
    ToleranceInductance,
    /// `tolerance.resistance`
    ToleranceResistance,
    /// `tolerance.supply_reading`
    ToleranceSupplyReading,
    /// `tolerance.node_capacitance`
    ToleranceNodeCapacitance,
    /// `tolerance.saturation_current`
    ToleranceSaturationCurrent,
    /// `tolerance.saturated_inductance`
    ToleranceSaturatedInductance,
    /// `tolerance.clamp_voltage`
    ToleranceClampVoltage,
    /// `tolerance.back_emf_constant` (full bridge)
    ToleranceBackEmfConstant,
    /// `tolerance.bus_capacitance` (full bridge)
    ToleranceBusCapacitance,
}

impl Field {
    /// The field's name as `part.field`, e.g. `"coil.inductance"`.
    pub const fn name(self) -> &'static str {
        match self {
            Field::SupplyNominal => "supply.nominal",
            Field::SupplyMin => "supply.min",
            Field::SupplyMax => "supply.max",
            Field::CoilInductance => "coil.inductance",
            Field::CoilResistance => "coil.resistance",
            Field::CoilReferenceTemperature => "coil.reference_temperature",
            Field::CoilTemperatureCoefficient => "coil.temperature_coefficient",
            Field::CoilWindingTemperature => "coil.winding_temperature",
            Field::CoilNodeCapacitance => "coil.node_capacitance",
            Field::CoilSaturationCurrent => "coil.saturation.current",
            Field::CoilSaturatedInductance => "coil.saturation.inductance",
            Field::SwitchOnResistance => "switch.on_resistance",
            Field::SwitchBreakdown => "switch.breakdown",
            Field::SwitchDeadTime => "switch.dead_time",
            Field::ClampForwardDrop => "clamp.forward_drop",
            Field::ClampZenerVoltage => "clamp.zener_voltage",
            Field::ClampVoltage => "clamp.clamp_voltage",
            Field::ClampResistance => "clamp.resistance",
            Field::ControlPeriod => "control.period",
            Field::ControlDutyResolution => "control.duty_resolution",
            Field::ControlCurrentFullScale => "control.current_full_scale",
            Field::AdcVoltsPerCount => "adc.volts_per_count",
            Field::AdcOffset => "adc.offset",
            Field::GuardCurrentCeiling => "guard.current_ceiling",
            Field::GuardTripCurrent => "guard.trip_current",
            Field::GuardReleaseCurrent => "guard.release_current",
            Field::GuardClampPulseEnergy => "guard.clamp_pulse_energy",
            Field::GuardRetryCooldown => "guard.retry_cooldown",
            Field::GuardClampPowerMax => "guard.clamp_power.max_average",
            Field::GuardClampPowerWindow => "guard.clamp_power.window",
            Field::ClampThermalStage => "clamp_thermal.stages",
            Field::ClampThermalAmbient => "clamp_thermal.ambient",
            Field::ClampThermalCeiling => "clamp_thermal.ceiling",
            Field::ClampThermalHysteresis => "clamp_thermal.hysteresis",
            Field::CoilThermalTimeConstant => "coil_thermal.time_constant",
            Field::CoilThermalBasicCurrent => "coil_thermal.basic_current",
            Field::CoilThermalOverloadFactor => "coil_thermal.overload_factor",
            Field::CoilThermalAmbient => "coil_thermal.ambient",
            Field::CoilThermalRiseAtBasic => "coil_thermal.rise_at_basic",
            Field::CoilThermalResetLevel => "coil_thermal.reset_level",
            Field::HoldPullInCurrent => "hold.pull_in_current",
            Field::HoldPullInTime => "hold.pull_in_time",
            Field::HoldCurrent => "hold.hold_current",
            Field::BodyDiodeForwardDrop => "body_diode.forward_drop",
            Field::BodyDiodeResistance => "body_diode.resistance",
            Field::DecayFastShare => "decay.fast_share",
            Field::MotorBackEmfLimit => "motor.back_emf_limit",
            Field::MotorConstant => "motor.constant",
            Field::BusCapacitance => "bus.capacitance",
            Field::BusSinkCurrent => "bus.sink_current",
            Field::GuardReversalDeadTime => "guard.reversal_dead_time",
            Field::ToleranceInductance => "tolerance.inductance",
            Field::ToleranceResistance => "tolerance.resistance",
            Field::ToleranceSupplyReading => "tolerance.supply_reading",
            Field::ToleranceNodeCapacitance => "tolerance.node_capacitance",
            Field::ToleranceSaturationCurrent => "tolerance.saturation_current",
            Field::ToleranceSaturatedInductance => "tolerance.saturated_inductance",
            Field::ToleranceClampVoltage => "tolerance.clamp_voltage",
            Field::ToleranceBackEmfConstant => "tolerance.back_emf_constant",
            Field::ToleranceBusCapacitance => "tolerance.bus_capacitance",
        }
    }

    /// The SI unit the field is given in (`""` for a count, a ratio or a fraction), for
    /// messages: `"outside 100 µs ..= 1 s"` reads better than a bare range.
    pub const fn unit(self) -> &'static str {
        match self {
            Field::SupplyNominal
            | Field::SupplyMin
            | Field::SupplyMax
            | Field::SwitchBreakdown
            | Field::ClampForwardDrop
            | Field::ClampZenerVoltage
            | Field::ClampVoltage
            | Field::AdcVoltsPerCount
            | Field::AdcOffset
            | Field::BodyDiodeForwardDrop
            | Field::MotorBackEmfLimit => "V",
            Field::CoilInductance | Field::CoilSaturatedInductance => "H",
            Field::CoilResistance
            | Field::SwitchOnResistance
            | Field::ClampResistance
            | Field::BodyDiodeResistance => "Ω",
            Field::CoilReferenceTemperature
            | Field::CoilWindingTemperature
            | Field::ClampThermalAmbient
            | Field::ClampThermalCeiling
            | Field::CoilThermalAmbient => "°C",
            Field::ClampThermalHysteresis | Field::CoilThermalRiseAtBasic => "K",
            Field::CoilTemperatureCoefficient => "1/K",
            Field::CoilNodeCapacitance | Field::BusCapacitance => "F",
            Field::CoilSaturationCurrent
            | Field::ControlCurrentFullScale
            | Field::GuardCurrentCeiling
            | Field::GuardTripCurrent
            | Field::GuardReleaseCurrent
            | Field::CoilThermalBasicCurrent
            | Field::HoldPullInCurrent
            | Field::HoldCurrent
            | Field::BusSinkCurrent => "A",
            Field::SwitchDeadTime
            | Field::ControlPeriod
            | Field::GuardRetryCooldown
            | Field::GuardClampPowerWindow
            | Field::CoilThermalTimeConstant
            | Field::HoldPullInTime
            | Field::GuardReversalDeadTime => "s",
            Field::GuardClampPulseEnergy => "J",
            Field::GuardClampPowerMax => "W",
            Field::MotorConstant => "V·s/rad",
            Field::ControlDutyResolution
            | Field::ClampThermalStage
            | Field::CoilThermalOverloadFactor
            | Field::CoilThermalResetLevel
            | Field::DecayFastShare
            | Field::ToleranceInductance
            | Field::ToleranceResistance
            | Field::ToleranceSupplyReading
            | Field::ToleranceNodeCapacitance
            | Field::ToleranceSaturationCurrent
            | Field::ToleranceSaturatedInductance
            | Field::ToleranceClampVoltage
            | Field::ToleranceBackEmfConstant
            | Field::ToleranceBusCapacitance => "",
        }
    }
}

/// What is wrong with a field.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Problem {
    /// NaN or ±∞.
    NotFinite,
    /// Zero or negative where only a positive value makes sense.
    NotPositive,
    /// Negative where zero or more is required.
    Negative,
    /// Finite, of the right sign, but outside the documented range (this includes subnormal
    /// values: no physical parameter of a drive is 10⁻³⁸ of its unit).
    OutOfRange {
        /// Lowest accepted value.
        min: f32,
        /// Highest accepted value.
        max: f32,
    },
    /// In range by itself, but inconsistent with the other parameters.
    Conflict(Conflict),
}

/// Ways parameters can contradict each other.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Conflict {
    /// `supply.min` is above `supply.nominal`.
    MinAboveNominal,
    /// `supply.max` is below `supply.nominal`.
    MaxBelowNominal,
    /// The switch breakdown is at or below the maximum supply: the switch cannot block it.
    BreakdownNotAboveSupply,
    /// A clamp across the switch at or below the maximum supply would conduct with the switch off.
    ClampNotAboveSupply,
    /// The clamp (with its resistance, at full-scale current) reaches the switch breakdown, so the
    /// switch would avalanche in parallel with it.
    ClampAboveBreakdown,
    /// With a freewheel path the switch node rises to supply + path drop; at maximum supply and
    /// full-scale current that reaches the switch breakdown.
    FreewheelReachesBreakdown,
    /// The winding resistance corrected to `coil.winding_temperature` leaves 1 mΩ ..= 100 kΩ.
    ResistanceAtTemperature,
    /// A time constant L/R of the on or off circuit is outside 1 µs ..= 100 s.
    TimeConstantOutOfRange,
    /// The period is shorter than 2⁻²⁴ of the longest time constant: the change over one period
    /// is too small for the current format to resolve (see the numerical contract).
    PeriodTooShort,
    /// A steady current the coil can reach (at up to twice the maximum supply) exceeds 2²¹ times
    /// the full scale, beyond the current format's headroom.
    FullScaleTooSmall,
    /// The trip current is below the current ceiling.
    TripBelowCeiling,
    /// The release current is at or above the trip current.
    ReleaseNotBelowTrip,
    /// The back-EMF limit is above the minimum supply: at the lowest supply a spinning motor
    /// could drive current through the body diodes with every switch off.
    BackEmfAboveMinSupply,
    /// With every switch off a blocking switch sees the supply plus two body-diode drops (at
    /// full-scale current); at maximum supply that reaches the breakdown.
    BodyDiodesReachBreakdown,
    /// The resting supply is already at its maximum: the bulk capacitance has no headroom to
    /// take returned energy.
    NoBusHeadroom,
    /// The saturated inductance is above the coil's inductance.
    SaturatedAboveInductance,
    /// A spread of the declared tolerance leaves a parameter the model cannot take (a time
    /// constant or a resistance out of range at a corner of the box).
    CornerOutOfRange,
    /// A spread of the declared tolerance describes a part only the other topology has (the
    /// node capacitance, saturation and clamp path on a full bridge; the back-EMF and the bulk
    /// capacitance on a low-side switch).
    OtherTopology,
    /// The release current is at or below the ring a turn-off can leave in the switch-node
    /// capacitance, so a release could never be confirmed.
    ReleaseBelowRing,
    /// The clamp-power averaging window is not longer than the control period.
    WindowNotAbovePeriod,
    /// With nothing across the switch, the node capacitance makes the turn-off (nearly)
    /// overdamped at a corner of the declared tolerance, outside what the ring model covers.
    RingOverdamped,
}

/// A parameter was refused: which one, and why.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct ConfigError {
    /// The offending field.
    pub field: Field,
    /// What is wrong with it.
    pub problem: Problem,
}

impl ConfigError {
    pub(crate) const fn new(field: Field, problem: Problem) -> Self {
        Self { field, problem }
    }

    pub(crate) const fn conflict(field: Field, conflict: Conflict) -> Self {
        Self::new(field, Problem::Conflict(conflict))
    }
}

impl fmt::Display for Conflict {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Conflict::MinAboveNominal => "minimum supply is above the nominal supply",
            Conflict::MaxBelowNominal => "maximum supply is below the nominal supply",
            Conflict::BreakdownNotAboveSupply => {
                "switch breakdown is at or below the maximum supply"
            }
            Conflict::ClampNotAboveSupply => {
                "clamp voltage is at or below the maximum supply, so it would conduct with the switch off"
            }
            Conflict::ClampAboveBreakdown => {
                "clamp voltage (plus its resistance at full-scale current) reaches the switch breakdown"
            }
            Conflict::FreewheelReachesBreakdown => {
                "maximum supply plus the freewheel path drop at full-scale current reaches the switch breakdown"
            }
            Conflict::ResistanceAtTemperature => {
                "resistance corrected to the winding temperature leaves 1 mOhm ..= 100 kOhm"
            }
            Conflict::TimeConstantOutOfRange => {
                "an L/R time constant of the on or off circuit is outside 1 us ..= 100 s"
            }
            Conflict::PeriodTooShort => {
                "period is shorter than 2^-24 of the longest time constant, too short for the current format"
            }
            Conflict::FullScaleTooSmall => {
                "a reachable steady current exceeds 2^21 times the full scale"
            }
            Conflict::TripBelowCeiling => "trip current is below the current ceiling",
            Conflict::ReleaseNotBelowTrip => "release current is at or above the trip current",
            Conflict::BackEmfAboveMinSupply => {
                "back-EMF limit is above the minimum supply, so the motor could conduct through the body diodes"
            }
            Conflict::BodyDiodesReachBreakdown => {
                "maximum supply plus two body-diode drops at full-scale current reaches the switch breakdown"
            }
            Conflict::NoBusHeadroom => {
                "nominal supply equals the maximum, leaving no headroom for returned energy"
            }
            Conflict::SaturatedAboveInductance => {
                "saturated inductance is above the coil's inductance"
            }
            Conflict::CornerOutOfRange => {
                "at a corner of the declared tolerance a time constant or resistance leaves its range"
            }
            Conflict::OtherTopology => {
                "this spread describes a part the other topology has, not this one: leave it at 0"
            }
            Conflict::WindowNotAbovePeriod => {
                "the averaging window is not longer than the control period"
            }
            Conflict::RingOverdamped => {
                "node capacitance makes the unclamped turn-off (nearly) overdamped, outside the ring model"
            }
            Conflict::ReleaseBelowRing => {
                "release current is at or below the ring the switch-node capacitance can leave after a turn-off"
            }
        })
    }
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: ", self.field.name())?;
        match self.problem {
            Problem::NotFinite => f.write_str("not a finite number"),
            Problem::NotPositive => f.write_str("must be greater than zero"),
            Problem::Negative => f.write_str("must not be negative"),
            Problem::OutOfRange { min, max } => match self.field.unit() {
                "" => write!(f, "outside {min} ..= {max}"),
                u => write!(f, "outside {min} {u} ..= {max} {u}"),
            },
            Problem::Conflict(c) => write!(f, "{c}"),
        }
    }
}

impl core::error::Error for ConfigError {}

/// A value in `min ..= max` (`min > 0`): finite, positive, normal, in range.
pub(crate) fn positive(field: Field, v: f32, min: f32, max: f32) -> Result<f32, ConfigError> {
    if !v.is_finite() {
        return Err(ConfigError::new(field, Problem::NotFinite));
    }
    if v <= 0.0 {
        return Err(ConfigError::new(field, Problem::NotPositive));
    }
    if !v.is_normal() || v < min || v > max {
        return Err(ConfigError::new(field, Problem::OutOfRange { min, max }));
    }
    Ok(v)
}

/// A value in `0 ..= max`: finite, not negative, zero or normal, in range.
pub(crate) fn non_negative(field: Field, v: f32, max: f32) -> Result<f32, ConfigError> {
    if !v.is_finite() {
        return Err(ConfigError::new(field, Problem::NotFinite));
    }
    if v < 0.0 {
        return Err(ConfigError::new(field, Problem::Negative));
    }
    if (v != 0.0 && !v.is_normal()) || v > max {
        return Err(ConfigError::new(
            field,
            Problem::OutOfRange { min: 0.0, max },
        ));
    }
    Ok(v)
}

/// A signed value in `min ..= max`: finite, zero or normal, in range.
pub(crate) fn in_range(field: Field, v: f32, min: f32, max: f32) -> Result<f32, ConfigError> {
    if !v.is_finite() {
        return Err(ConfigError::new(field, Problem::NotFinite));
    }
    if (v != 0.0 && !v.is_normal()) || v < min || v > max {
        return Err(ConfigError::new(field, Problem::OutOfRange { min, max }));
    }
    Ok(v)
}
