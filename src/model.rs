//! The validated, immutable fixed-point model: coefficients per drive phase.
//!
//! Built once from [`Params`] (f64 arithmetic on the f32 inputs, `libm` for exp/log), then shared
//! read-only by every channel that drives the same kind of coil. All per-tick methods take
//! `&self` and a small per-channel state; none can fail or panic.
//!
//! # Circuit
//! Low-side switch: supply → coil (L, R at the winding temperature) → switch (R_on) → ground.
//! - On: the coil current tends to `Vs/(R + R_on)` with τ_on = L/(R + R_on).
//! - Off, through the clamp path of drop `V_p + R_p·i`:
//!   - across the switch (a zener/TVS, or the switch's own avalanche at its breakdown with
//!     `R_p = 0`): asymptote `(Vs − V_p)/(R + R_p)`;
//!   - across the coil (freewheel diode, optionally with a zener): asymptote `−V_p/(R + R_p)`;
//!
//!   with τ_off = L/(R + R_p). The current stops at zero (the path blocks reverse current).
//!
//! With two-slope saturation ([`Saturation`](crate::Saturation)) an on-segment that crosses the
//! saturation current is split there: the unsaturated exponential up to the crossing (its time
//! `τ_on·ln((A − i0)/(A − I_sat))`, one fixed-point logarithm, rounded down to whole units so the
//! saturated part is never short), then the saturated one with `τ_sat = L_sat/(R + R_on)` toward
//! the same asymptote. A decay from above the saturation current is split the same way (the
//! saturated part first, its crossing rounded down so the slower unsaturated part is never
//! short). The closed forms for the decay time and the clamp energy keep the unsaturated
//! inductance: saturation only speeds a decay, so they stay upper bounds.
//!
//! The switch-node capacitance is not part of the nominal per-period model: it delays the clamp
//! by roughly `C·V_p/I`. It is used for the turn-off peak when nothing clamps the switch, and by
//! the guard's upper bound (see [`Tolerance`](crate::Tolerance)).

use crate::params::{
    ClampPath, CoilParams, ConfigError, Conflict, ControlParams, Field, Params, Problem,
    SupplyParams, SwitchParams, in_range, non_negative, positive,
};
use crate::qmath::{BitTable, DUTY_DIGITS, DecayTable, Gain};

/// Headroom of the current format: asymptotes must stay within ±2²¹ full scale.
pub(crate) const ASYMPTOTE_LIMIT: f64 = 2_097_152.0;
/// Smallest supported ratio of period to the longest time constant (2⁻²⁴).
pub(crate) const MIN_PERIOD_OVER_TAU: f64 = 1.0 / 16_777_216.0;
/// Supported time constants, s.
pub(crate) const TAU_RANGE: (f64, f64) = (1e-6, 100.0);

/// Which kind of path carries the current at turn-off.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub enum PathKind {
    /// The switch avalanches at its breakdown.
    Avalanche,
    /// A diode across the coil.
    Freewheel,
    /// A diode and zener across the coil.
    FreewheelZener,
    /// A zener/TVS across the switch.
    SwitchClamp,
}

impl PathKind {
    /// Whether the path returns the current through the supply (it is across the switch), so the
    /// supply keeps feeding energy in during the decay.
    pub const fn through_supply(self) -> bool {
        matches!(self, PathKind::Avalanche | PathKind::SwitchClamp)
    }
}

/// Figures derived from the parameters, in SI units (f32), for display and checks.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct Derived {
    /// Winding resistance at the winding temperature, Ω.
    pub resistance: f32,
    /// Time constant with the switch on, L/(R + R_on), s.
    pub tau_on: f32,
    /// Time constant of the decay through the clamp path, L/(R + R_p), s.
    pub tau_off: f32,
    /// Steady on-current at nominal supply, Vs/(R + R_on), A.
    pub on_current_nominal: f32,
    /// The clamp path's voltage V_p (diode drop, diode + zener, clamp or breakdown voltage), V.
    pub path_voltage: f32,
    /// The clamp path's series resistance R_p, Ω.
    pub path_resistance: f32,
    /// The full-scale current, A.
    pub full_scale: f32,
    /// The energy unit L·I_fs², J.
    pub energy_unit: f32,
    /// The control period, s.
    pub period: f32,
}

impl core::hash::Hash for Derived {
    /// Hashes each figure's bits (for the guard's fingerprint; `f32` has no `Hash`). The
    /// pattern names every field, so a field added later cannot be left out.
    fn hash<H: core::hash::Hasher>(&self, h: &mut H) {
        let Self {
            resistance: a,
            tau_on: b,
            tau_off: c,
            on_current_nominal: d,
            path_voltage: e,
            path_resistance: f,
            full_scale: g,
            energy_unit: k,
            period: t,
        } = *self;
        core::hash::Hash::hash(&[a, b, c, d, e, f, g, k, t].map(f32::to_bits), h);
    }
}

/// The saturated part of the on-segment (see the module documentation).
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub(crate) struct SatPart {
    /// Saturation current, raw.
    pub(crate) at: i64,
    /// Decay tables of the saturated on-segment, per timer count and per µs.
    pub(crate) on_duty: DecayTable<DUTY_DIGITS>,
    pub(crate) on_event: BitTable,
    /// Unsaturated τ_on in timer counts, Q32.32 (τ_on in µs is [`Model::tau_on_us`]).
    pub(crate) tau_on_counts: u64,
    /// Saturated τ_on in µs, Q32.32.
    pub(crate) tau_us: u64,
    /// Decay tables of the saturated off-segment (τ = L_sat/(R + R_p)), per count and per µs,
    /// and that τ in counts and in µs (Q32.32): a decay from above the saturation current runs
    /// on these until it reaches it.
    pub(crate) off_duty: DecayTable<DUTY_DIGITS>,
    pub(crate) off_event: BitTable,
    pub(crate) tau_off_counts: u64,
    pub(crate) tau_off_us: u64,
}

/// The immutable fixed-point model of one drive. See the module documentation.
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct Model {
    /// Two-slope saturation, when the coil has it.
    pub(crate) saturation: Option<SatPart>,
    pub(crate) on_duty: DecayTable<DUTY_DIGITS>,
    pub(crate) off_duty: DecayTable<DUTY_DIGITS>,
    pub(crate) on_event: BitTable,
    pub(crate) off_event: BitTable,
    /// Counts in a period (100 % duty).
    pub(crate) duty_full: u32,
    /// On asymptote per supply bit (current raw per U16F16 bit).
    pub(crate) on_gain: Gain,
    /// Supply-dependent part of the off asymptote per supply bit (zero for freewheel paths).
    pub(crate) off_gain: Gain,
    /// Constant part of the off asymptote: `A_off = vs·off_gain − off_offset` (current raw).
    pub(crate) off_offset: i64,
    /// The estimator clamps the measured supply to this (U16F16 bits of twice the maximum).
    pub(crate) supply_cap: u32,
    pub(crate) path: PathKind,
    /// V_p/((R + R_p)·I_fs), Q32.32.
    pub(crate) path_drive: u64,
    /// R_p/(R + R_p), Q0.32.
    pub(crate) path_share: u32,
    /// τ_off in µs, Q32.32.
    pub(crate) tau_off_us: u64,
    /// τ_on in µs, Q32.32.
    pub(crate) tau_on_us: u64,
    /// Peak drain voltage at turn-off: `(vs if drain_adds_supply) + drain_base + I0·drain_slope`,
    /// at most `breakdown_bits` (U16F16 bits).
    pub(crate) drain_base: u32,
    pub(crate) drain_adds_supply: bool,
    pub(crate) drain_slope: Gain,
    pub(crate) breakdown_bits: u32,
    /// (τ_off − τ_on)/T, signed Q32.32.
    pub(crate) tau_gap_over_period: i64,
    /// τ_off/T, Q32.32.
    pub(crate) tau_off_over_period: u64,
    /// Chord bound of the off-segment energy: path term per (raw current · off count) and
    /// resistive term per (Q40 current² · off count), both giving Q32 energy.
    pub(crate) chord_path: Gain,
    pub(crate) chord_share: Gain,
    pub(crate) derived: Derived,
}

/// Rounds `v·2^32` to u64, saturating (inputs are validated finite and non-negative).
pub(crate) fn q32(v: f64) -> u64 {
    let x = libm::round(v * 4_294_967_296.0);
    if x <= 0.0 {
        0
    } else if x >= 18_446_744_073_709_551_615.0 {
        u64::MAX
    } else {
        x as u64
    }
}

/// Rounds `v·2^32` to i64 (Q31.32), saturating.
pub(crate) fn q32_signed(v: f64) -> i64 {
    let x = libm::round(v * 4_294_967_296.0);
    if x >= 9.2e18 {
        i64::MAX
    } else if x <= -9.2e18 {
        i64::MIN
    } else {
        x as i64
    }
}

/// The validated coil at its winding temperature (SI, f64).
pub(crate) struct Winding {
    /// Inductance, H.
    pub(crate) l: f64,
    /// Resistance at the winding temperature, Ω.
    pub(crate) r: f64,
    /// Switch-node capacitance, F.
    pub(crate) cap: Option<f64>,
    /// Saturation current (A) and saturated inductance (H).
    pub(crate) sat: Option<(f64, f64)>,
}

/// Validates the supply: `(nominal, min, max)` in volts.
pub(crate) fn supply_values(s: &SupplyParams) -> Result<(f64, f64, f64), ConfigError> {
    let v_nom = f64::from(positive(Field::SupplyNominal, s.nominal, 0.1, 1000.0)?);
    let v_min = f64::from(non_negative(Field::SupplyMin, s.min, 1000.0)?);
    let v_max = f64::from(positive(Field::SupplyMax, s.max, 0.1, 1000.0)?);
    if v_min > v_nom {
        return Err(ConfigError::conflict(
            Field::SupplyMin,
            Conflict::MinAboveNominal,
        ));
    }
    if v_max < v_nom {
        return Err(ConfigError::conflict(
            Field::SupplyMax,
            Conflict::MaxBelowNominal,
        ));
    }
    Ok((v_nom, v_min, v_max))
}

/// Validates the coil and corrects its resistance to the winding temperature.
pub(crate) fn coil_values(c: &CoilParams) -> Result<Winding, ConfigError> {
    let l = f64::from(positive(Field::CoilInductance, c.inductance, 1e-6, 1e3)?);
    let r_ref = f64::from(positive(Field::CoilResistance, c.resistance, 1e-3, 1e5)?);
    let t_ref = f64::from(in_range(
        Field::CoilReferenceTemperature,
        c.reference_temperature,
        -100.0,
        300.0,
    )?);
    let alpha = f64::from(non_negative(
        Field::CoilTemperatureCoefficient,
        c.temperature_coefficient,
        0.02,
    )?);
    let t_wind = f64::from(in_range(
        Field::CoilWindingTemperature,
        c.winding_temperature,
        -100.0,
        300.0,
    )?);
    let cap = match c.node_capacitance {
        Some(v) => Some(f64::from(positive(
            Field::CoilNodeCapacitance,
            v,
            1e-15,
            1e-3,
        )?)),
        None => None,
    };
    let r = r_ref * (1.0 + alpha * (t_wind - t_ref));
    if !(1e-3..=1e5).contains(&r) {
        return Err(ConfigError::conflict(
            Field::CoilWindingTemperature,
            Conflict::ResistanceAtTemperature,
        ));
    }
    let sat = match c.saturation {
        Some(s) => {
            let at = f64::from(positive(
                Field::CoilSaturationCurrent,
                s.current,
                1e-4,
                1e4,
            )?);
            let ls = f64::from(positive(
                Field::CoilSaturatedInductance,
                s.inductance,
                1e-6,
                1e3,
            )?);
            if ls > l {
                return Err(ConfigError::conflict(
                    Field::CoilSaturatedInductance,
                    Conflict::SaturatedAboveInductance,
                ));
            }
            Some((at, ls))
        }
        None => None,
    };
    Ok(Winding { l, r, cap, sat })
}

/// Validates a switch against the maximum supply: `(on_resistance, breakdown)`.
pub(crate) fn switch_values(s: SwitchParams, v_max: f64) -> Result<(f64, f64), ConfigError> {
    let r_on = f64::from(non_negative(
        Field::SwitchOnResistance,
        s.on_resistance,
        1e3,
    )?);
    let bv = f64::from(positive(Field::SwitchBreakdown, s.breakdown, 1.0, 5000.0)?);
    if bv <= v_max {
        return Err(ConfigError::conflict(
            Field::SwitchBreakdown,
            Conflict::BreakdownNotAboveSupply,
        ));
    }
    Ok((r_on, bv))
}

/// Validates the control timing: `(period s, duty resolution, full-scale current A)`.
pub(crate) fn control_values(c: &ControlParams) -> Result<(f64, u32, f64), ConfigError> {
    let t = f64::from(positive(Field::ControlPeriod, c.period, 1e-7, 1.0)?);
    let n_full = c.duty_resolution;
    if !(1..=65_535).contains(&n_full) {
        return Err(ConfigError::new(
            Field::ControlDutyResolution,
            Problem::OutOfRange {
                min: 1.0,
                max: 65_535.0,
            },
        ));
    }
    let fs = f64::from(positive(
        Field::ControlCurrentFullScale,
        c.current_full_scale,
        1e-4,
        1e4,
    )?);
    Ok((t, n_full, fs))
}

/// Rounds volts to U16F16 bits, saturating.
pub(crate) fn volts_bits(v: f64) -> u32 {
    let x = libm::round(v * 65_536.0);
    if x <= 0.0 {
        0
    } else if x >= 4_294_967_295.0 {
        u32::MAX
    } else {
        x as u32
    }
}

/// The clamp path's kind, drop `V_p` and resistance `R_p`, validated (`v_max`: the maximum
/// supply; `bv`: the switch's breakdown, the drop when nothing clamps).
pub(crate) fn clamp_values(
    clamp: ClampPath,
    (v_max, bv): (f64, f64),
) -> Result<(PathKind, f64, f64), ConfigError> {
    Ok(match clamp {
        ClampPath::None => (PathKind::Avalanche, bv, 0.0),
        ClampPath::Freewheel {
            forward_drop,
            resistance,
        } => {
            let vf = f64::from(non_negative(Field::ClampForwardDrop, forward_drop, 20.0)?);
            let rd = f64::from(non_negative(Field::ClampResistance, resistance, 1e4)?);
            (PathKind::Freewheel, vf, rd)
        }
        ClampPath::FreewheelZener {
            forward_drop,
            zener_voltage,
            resistance,
        } => {
            let vf = f64::from(non_negative(Field::ClampForwardDrop, forward_drop, 20.0)?);
            let vz = f64::from(positive(
                Field::ClampZenerVoltage,
                zener_voltage,
                0.1,
                5000.0,
            )?);
            let rd = f64::from(non_negative(Field::ClampResistance, resistance, 1e4)?);
            (PathKind::FreewheelZener, vf + vz, rd)
        }
        ClampPath::SwitchClamp {
            clamp_voltage,
            resistance,
        } => {
            let vcl = f64::from(positive(Field::ClampVoltage, clamp_voltage, 1.0, 5000.0)?);
            let rcl = f64::from(non_negative(Field::ClampResistance, resistance, 1e4)?);
            if vcl <= v_max {
                return Err(ConfigError::conflict(
                    Field::ClampVoltage,
                    Conflict::ClampNotAboveSupply,
                ));
            }
            (PathKind::SwitchClamp, vcl, rcl)
        }
    })
}

/// The clamp path against the switch: a clamp across the switch at full scale not above the
/// breakdown, a freewheel path that keeps the node below it at the maximum supply.
fn path_relations(
    kind: PathKind,
    (v_p, r_p): (f64, f64),
    (v_max, bv): (f64, f64),
    fs: f64,
) -> Result<(), ConfigError> {
    match kind {
        PathKind::SwitchClamp if v_p + r_p * fs > bv => {
            return Err(ConfigError::conflict(
                Field::ClampVoltage,
                Conflict::ClampAboveBreakdown,
            ));
        }
        PathKind::Freewheel | PathKind::FreewheelZener if v_max + v_p + r_p * fs >= bv => {
            let field = if kind == PathKind::FreewheelZener {
                Field::ClampZenerVoltage
            } else {
                Field::ClampForwardDrop
            };
            return Err(ConfigError::conflict(
                field,
                Conflict::FreewheelReachesBreakdown,
            ));
        }
        _ => {}
    }
    Ok(())
}

/// Whether a time constant (s) is inside the validated range.
pub(crate) fn tau_in_range(tau: f64) -> bool {
    (TAU_RANGE.0..=TAU_RANGE.1).contains(&tau)
}

/// The turn-off peak's terms `(base, adds the supply, slope per raw current)` for a path of
/// kind `kind` with drop `v_p`, resistance `r_p` and breakdown `bv`: with nothing across the
/// switch and a node capacitance `cap`, the LC swing `I·√(L/C)` above the supply; else the
/// path's drop plus its resistance's.
fn drain_terms(
    kind: PathKind,
    (v_p, r_p, bv): (f64, f64, f64),
    (l, cap): (f64, Option<f64>),
    raw_per_amp: f64,
) -> (u32, bool, Gain) {
    match kind {
        PathKind::Avalanche => match cap {
            Some(cn) => (
                0,
                true,
                Gain::new(libm::sqrt(l / cn) * 65_536.0 / raw_per_amp),
            ),
            None => (volts_bits(bv), false, Gain::ZERO),
        },
        PathKind::Freewheel | PathKind::FreewheelZener => (
            volts_bits(v_p),
            true,
            Gain::new(r_p * 65_536.0 / raw_per_amp),
        ),
        PathKind::SwitchClamp => (
            volts_bits(v_p),
            false,
            Gain::new(r_p * 65_536.0 / raw_per_amp),
        ),
    }
}

impl SatPart {
    /// The saturated part for saturation current `at` (A) and saturated inductance `ls` (H),
    /// with the on and off resistances, the period, its counts and the full scale, and the
    /// unsaturated on-time constant (s).
    fn new(
        (at, ls): (f64, f64),
        (r_on_total, r_off_total): (f64, f64),
        (t, n_full, fs): (f64, u32, f64),
        tau_on: f64,
    ) -> Result<Self, ConfigError> {
        let tau_sat = ls / r_on_total;
        let tau_sat_off = ls / r_off_total;
        if !tau_in_range(tau_sat) || !tau_in_range(tau_sat_off) {
            return Err(ConfigError::conflict(
                Field::CoilSaturatedInductance,
                Conflict::TimeConstantOutOfRange,
            ));
        }
        let count_s = t / f64::from(n_full);
        Ok(Self {
            // Capped at the working limit 2^61 raw: a saturation current beyond it is
            // never reached by a working current.
            at: libm::round(at / fs * 1_099_511_627_776.0).min(2_305_843_009_213_693_952.0) as i64,
            on_duty: DecayTable::new(count_s / tau_sat),
            on_event: BitTable::new(1e-6 / tau_sat),
            tau_on_counts: q32(tau_on / count_s),
            tau_us: q32(tau_sat * 1e6),
            off_duty: DecayTable::new(count_s / tau_sat_off),
            off_event: BitTable::new(1e-6 / tau_sat_off),
            tau_off_counts: q32(tau_sat_off / count_s),
            tau_off_us: q32(tau_sat_off * 1e6),
        })
    }
}

impl Model {
    /// Validates `p` and builds the model. Same as [`Params::validate`].
    ///
    /// # Errors
    /// The first problem found, naming its field; see [`Conflict`] for the cross-checks.
    pub fn new(p: &Params) -> Result<Self, ConfigError> {
        let (v_nom, _, v_max) = supply_values(&p.supply)?;
        let Winding { l, r, cap, sat } = coil_values(&p.coil)?;

        let (r_on, bv) = switch_values(p.switch, v_max)?;

        // Clamp path: kind, V_p, R_p (relations with the full scale checked below).
        let (kind, v_p, r_p) = clamp_values(p.clamp, (v_max, bv))?;

        let (t, n_full, fs) = control_values(&p.control)?;

        path_relations(kind, (v_p, r_p), (v_max, bv), fs)?;
        let r_on_total = r + r_on;
        let r_off_total = r + r_p;
        let tau_on = l / r_on_total;
        let tau_off = l / r_off_total;
        if !tau_in_range(tau_on) || !tau_in_range(tau_off) {
            return Err(ConfigError::conflict(
                Field::CoilInductance,
                Conflict::TimeConstantOutOfRange,
            ));
        }
        if t / tau_on.max(tau_off) < MIN_PERIOD_OVER_TAU {
            return Err(ConfigError::conflict(
                Field::ControlPeriod,
                Conflict::PeriodTooShort,
            ));
        }
        let saturation = match sat {
            Some(sat) => Some(SatPart::new(
                sat,
                (r_on_total, r_off_total),
                (t, n_full, fs),
                tau_on,
            )?),
            None => None,
        };
        let v_cap = 2.0 * v_max;
        let through_supply = kind.through_supply();
        let a_on_max = v_cap / r_on_total / fs;
        let a_off_low = -v_p / r_off_total / fs;
        let a_off_high = if through_supply {
            (v_cap - v_p) / r_off_total / fs
        } else {
            a_off_low
        };
        if a_on_max > ASYMPTOTE_LIMIT
            || a_off_low.abs() > ASYMPTOTE_LIMIT
            || a_off_high.abs() > ASYMPTOTE_LIMIT
        {
            return Err(ConfigError::conflict(
                Field::ControlCurrentFullScale,
                Conflict::FullScaleTooSmall,
            ));
        }

        // Coefficients. Current raw = fraction of full scale · 2^40; supply bits = volts · 2^16.
        let raw_per_amp = 1_099_511_627_776.0 / fs;
        let count = t / f64::from(n_full);
        let on_gain = Gain::new(raw_per_amp / 65_536.0 / r_on_total);
        let off_gain = if through_supply {
            Gain::new(raw_per_amp / 65_536.0 / r_off_total)
        } else {
            Gain::ZERO
        };
        let off_offset = libm::round(v_p / r_off_total * raw_per_amp) as i64;
        let (drain_base, drain_adds_supply, drain_slope) =
            drain_terms(kind, (v_p, r_p, bv), (l, cap), raw_per_amp);

        Ok(Model {
            saturation,
            on_duty: DecayTable::new(count / tau_on),
            off_duty: DecayTable::new(count / tau_off),
            on_event: BitTable::new(1e-6 / tau_on),
            off_event: BitTable::new(1e-6 / tau_off),
            duty_full: n_full,
            on_gain,
            off_gain,
            off_offset,
            supply_cap: volts_bits(v_cap),
            path: kind,
            path_drive: q32(v_p / r_off_total / fs),
            path_share: q32(r_p / r_off_total).min(u64::from(u32::MAX)) as u32,
            tau_off_us: q32(tau_off * 1e6),
            tau_on_us: q32(tau_on * 1e6),
            drain_base,
            drain_adds_supply,
            drain_slope,
            breakdown_bits: volts_bits(bv),
            tau_gap_over_period: q32_signed((tau_off - tau_on) / t),
            tau_off_over_period: q32(tau_off / t),
            chord_path: Gain::new(v_p / r_off_total / fs * (count / tau_off) / 256.0),
            chord_share: Gain::new(r_p / r_off_total * (count / tau_off) / 256.0),
            derived: Derived {
                resistance: r as f32,
                tau_on: tau_on as f32,
                tau_off: tau_off as f32,
                on_current_nominal: (v_nom / r_on_total) as f32,
                path_voltage: v_p as f32,
                path_resistance: r_p as f32,
                full_scale: fs as f32,
                energy_unit: (l * fs * fs) as f32,
                period: t as f32,
            },
        })
    }

    /// Figures derived from the parameters (SI, f32), for display and checks.
    pub const fn derived(&self) -> &Derived {
        &self.derived
    }

    /// The kind of path that carries the current at turn-off.
    pub const fn path(&self) -> PathKind {
        self.path
    }

    /// Timer counts in one period (the duty that means 100 %).
    pub const fn duty_resolution(&self) -> u32 {
        self.duty_full
    }

    /// Converts a current to amperes (configuration time, host, logs; not for the tick path).
    pub fn amps(&self, c: crate::Current) -> f32 {
        (c.to_bits() as f64 / 1_099_511_627_776.0 * f64::from(self.derived.full_scale)) as f32
    }

    /// Converts amperes to the current format, or `None` if not finite or beyond ±2²¹ full scale.
    pub fn current_from_amps(&self, amps: f32) -> Option<crate::Current> {
        let f = f64::from(amps) / f64::from(self.derived.full_scale);
        if !f.is_finite() || f.abs() > ASYMPTOTE_LIMIT {
            return None;
        }
        Some(crate::Current::from_bits(
            libm::round(f * 1_099_511_627_776.0) as i64,
        ))
    }

    /// Converts an energy to joules (configuration time, host, logs).
    pub fn joules(&self, e: crate::Energy) -> f32 {
        (e.to_bits() as f64 / 4_294_967_296.0 * f64::from(self.derived.energy_unit)) as f32
    }

    /// Converts joules to the energy format, or `None` if negative, not finite or too large.
    pub fn energy_from_joules(&self, joules: f32) -> Option<crate::Energy> {
        let u = f64::from(joules) / f64::from(self.derived.energy_unit);
        if !u.is_finite() || !(0.0..4_294_967_295.0).contains(&u) {
            return None;
        }
        Some(crate::Energy::from_bits(q32(u)))
    }

    /// The measured supply clamped to the estimator's range (at most twice the maximum supply).
    #[inline]
    pub(crate) fn supply(&self, vs: crate::Volts) -> u32 {
        vs.to_bits().min(self.supply_cap)
    }

    /// On-segment asymptote `Vs/(R + R_on)` for supply bits `vs` (<= `supply_cap`).
    #[inline]
    pub(crate) fn on_asymptote(&self, vs: u32) -> i64 {
        // Validation bounds this below 2^61.
        self.on_gain.apply(vs) as i64
    }

    /// Off-segment asymptote for supply bits `vs` (<= `supply_cap`).
    #[inline]
    pub(crate) fn off_asymptote(&self, vs: u32) -> i64 {
        // Both terms are bounded below 2^61 by validation.
        (self.off_gain.apply(vs) as i64) - self.off_offset
    }

    /// Current raw at which a freewheel/clamp asymptote sits below zero: `a = −A_off`.
    #[inline]
    pub(crate) fn decay_pull(&self, vs: u32) -> i64 {
        -self.off_asymptote(vs)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::params::{CoilParams, ControlParams, SupplyParams, SwitchParams};

    fn demo(clamp: ClampPath) -> Model {
        Params::new(
            SupplyParams::new(24.0, 18.0, 30.0),
            CoilParams::new(0.04, 18.0),
            SwitchParams::new(0.1, 60.0),
            clamp,
            ControlParams::new(50e-6, 3200, 2.0),
        )
        .validate()
        .unwrap()
    }

    /// Asymptotes at 24 V in amperes, from the fixed-point coefficients.
    fn asymptotes(m: &Model) -> (f64, f64) {
        let vs = 24 << 16;
        let amps = |raw: i64| raw as f64 / 1_099_511_627_776.0 * 2.0;
        (amps(m.on_asymptote(vs)), amps(m.off_asymptote(vs)))
    }

    #[test]
    fn asymptotes_match_the_circuit() {
        let (on, off) = asymptotes(&demo(ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05,
        }));
        assert!((on - 24.0 / 18.1).abs() < 1e-9);
        assert!((off + 0.7 / 18.05).abs() < 1e-9);
        let (_, off) = asymptotes(&demo(ClampPath::SwitchClamp {
            clamp_voltage: 45.0,
            resistance: 1.0,
        }));
        assert!((off - (24.0 - 45.0) / 19.0).abs() < 1e-9);
        let (_, off) = asymptotes(&demo(ClampPath::None));
        assert!((off - (24.0 - 60.0) / 18.0).abs() < 1e-9);
    }

    #[test]
    fn supply_is_clamped_to_twice_the_maximum() {
        let m = demo(ClampPath::None);
        assert_eq!(m.supply(crate::Volts::MAX), 60 << 16);
        assert_eq!(m.supply(crate::Volts::from_num(12)), 12 << 16);
    }

    #[test]
    fn unit_conversions_round_trip() {
        let m = demo(ClampPath::None);
        let c = m.current_from_amps(1.5).unwrap();
        assert_eq!(c, crate::Current::from_bits(3 << 38)); // 0.75 of the 2 A full scale
        assert!((m.amps(c) - 1.5).abs() < 1e-6);
        assert_eq!(m.current_from_amps(f32::NAN), None);
        let e = m.energy_from_joules(0.01).unwrap();
        assert!((m.joules(e) - 0.01).abs() < 1e-8);
        assert_eq!(m.energy_from_joules(-1.0), None);
    }
}
