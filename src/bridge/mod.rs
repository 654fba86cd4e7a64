//! Full-bridge drive: signed duty, three decay modes, back-EMF, returned charge.
//!
//! # Circuit
//! Four switches (each of on-resistance `R_on`, with a body diode of drop `V_f + R_d·i`) form
//! legs A and B; the coil (L, R at the winding temperature) sits between the leg midpoints, and
//! a positive current flows from A to B. A brushed motor adds its back-EMF `E` in series,
//! positive when it opposes a positive current: `L·di/dt = v_AB − R·i − E`.
//!
//! Each control period of `N` counts is a drive part of `|duty|` counts, then the off part of
//! the configured decay mode, in this order:
//!
//! | part | switches | `v_AB` | asymptote | time constant |
//! |---|---|---|---|---|
//! | drive, forward (`duty > 0`) | high A, low B | `Vs − 2R_on·i` | `(Vs − E)/(R + 2R_on)` | τ_on = L/(R + 2R_on) |
//! | drive, reverse (`duty < 0`) | low A, high B | `−Vs − 2R_on·i` | `(−Vs − E)/(R + 2R_on)` | τ_on |
//! | slow decay | low A, low B | `−2R_on·i` | `−E/(R + 2R_on)` | τ_on |
//! | fast decay, `i > 0` | none (diodes of low A, high B) | `−(Vs + 2V_f + 2R_d·i)` | `−(Vs + 2V_f + E)/(R + 2R_d)`, stops at 0 | τ_fast = L/(R + 2R_d) |
//! | fast decay, `i < 0` | none (diodes of low B, high A) | `Vs + 2V_f − 2R_d·i` | `(Vs + 2V_f − E)/(R + 2R_d)`, stops at 0 | τ_fast |
//!
//! With a gate dead time `t_d` (`BridgeParams::with_gate_dead_time`, whole timer counts rounded
//! down), a leg that changes between high and low floats for `t_d` first: with the current in
//! the drive's direction its low diode carries it, `L·di/dt = −(V_f + E) − (R + R_on + R_d)·i`,
//! an exact segment of its own at the start of a drive that follows slow decay and at the
//! start of a slow part that follows the drive (see `BridgeModel::path`).
//!
//! Mixed decay spends the configured share of the off part in fast decay, then the rest in slow
//! decay. Slow decay conducts both ways (the switches are on), so with a spinning motor the
//! current may cross zero there (dynamic braking); fast decay stops at zero because the diodes
//! block, unless the back-EMF alone exceeds `Vs + 2V_f` (then the current starts in the other
//! direction, which the branch choice below follows at the start of each segment).
//!
//! Every part is the same exact segment as the low-side model, `i' = i + (A − i)·E(t/τ)` with
//! the decay tables of [`crate::Model`], so the numerical contract is the same one (see
//! the numerical contract in `src/estimate.rs`): per segment the update's relative error is below
//! 2⁻²⁴ of the step, plus one unit of the current format.
//!
//! # Charge
//! In fast decay the current flows into the supply: that is the energy a bridge returns. Each
//! period reports the charge drawn during the drive part and the charge returned in fast
//! decay, each the exact integral of its segment, `∫ i dt = A·t − τ·Δi` (the segment's own
//! equation integrated), with the conduction time from two fixed-point logarithms in the
//! period where a fast decay stops at zero. Format: [`Charge`]; error measured in
//! `tests/bridge.rs`.
//!
//! # Cost
//! Per period: three table evaluations, three scalings, four gains, and for the charges two
//! 64×32-bit products and two wide gains (plus two logarithms in a period where a fast decay
//! stops at zero). No division, no floating point.
//!
//! # Panics
//! None. The supply is clamped to twice its validated maximum and the back-EMF to its validated
//! limit, so every asymptote lies within ±2⁶¹ raw (validation), the state stays between its old
//! value and an asymptote, and each difference fed to the scaling is below 2⁶² in magnitude.

mod bound;
mod drive;
mod guard;

pub use drive::{BridgeDriver, GateError, GatePins, GuardedBridge, LegState, PeriodPlan, Phase};
pub use guard::{
    BridgeGuard, BridgeInput, BridgeLimits, BridgeOutput, BridgePolicy, BridgeState, PumpResponse,
};

use crate::model::{
    ASYMPTOTE_LIMIT, MIN_PERIOD_OVER_TAU, coil_values, control_values, q32, supply_values,
    switch_values, tau_in_range, volts_bits,
};
use crate::params::{
    CoilParams, ConfigError, Conflict, ControlParams, Field, SupplyParams, SwitchParams,
    non_negative, positive,
};
use crate::qmath::{DUTY_DIGITS, Decay, DecayTable, Gain, ln_ratio, scale};
use crate::units::{Charge, Current, SignedVolts, Speed, Volts};

/// What the bridge does with the coil current in the off part of each period.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum DecayMode {
    /// Every switch off: the current returns through two body diodes to the supply, against it.
    Fast,
    /// Both low-side switches on: the current recirculates through them.
    Slow,
    /// Fast decay for `fast_share` of the off part (0 < share < 1), then slow decay.
    Mixed {
        /// Share of the off part spent in fast decay.
        fast_share: f32,
    },
}

/// The body diode of each switch: drop `forward_drop + resistance·i`.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct BodyDiode {
    /// Forward drop, V. Range 0.05 ..= 5.
    pub forward_drop: f32,
    /// Series resistance, Ω. Range 0 ..= 10.
    pub resistance: f32,
}

impl BodyDiode {
    /// A body diode of `forward_drop` (V) and `resistance` (Ω).
    pub const fn new(forward_drop: f32, resistance: f32) -> Self {
        Self {
            forward_drop,
            resistance,
        }
    }
}

/// A brushed motor's back-EMF. The default (both zero) is a stalled rotor: the worst case for
/// current.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct MotorParams {
    /// Largest back-EMF magnitude the input may carry, V (inputs are clamped to it).
    /// Range 0 ..= `supply.min`.
    pub back_emf_limit: f32,
    /// Back-EMF constant, V·s/rad, for [`BridgeModel::back_emf_from_speed`]. Range 0 ..= 100.
    pub constant: f32,
}

impl MotorParams {
    /// A motor whose back-EMF stays within `back_emf_limit` (V), with constant `constant`
    /// (V·s/rad).
    pub const fn new(back_emf_limit: f32, constant: f32) -> Self {
        Self {
            back_emf_limit,
            constant,
        }
    }
}

/// The supply's bulk capacitance and how much current the supply can sink. With these the
/// guard tracks how far returned charge lifts the supply (`supply-pump`).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct BusParams {
    /// Bulk capacitance at the bridge, F. Range 1 nF ..= 10 F.
    pub capacitance: f32,
    /// Current the supply can absorb, A (0 for a supply behind a diode). Range 0 ..= 10 kA.
    pub sink_current: f32,
}

impl BusParams {
    /// Bulk capacitance (F) and sink current (A).
    pub const fn new(capacitance: f32, sink_current: f32) -> Self {
        Self {
            capacitance,
            sink_current,
        }
    }
}

/// The full-bridge drive: supply, coil, the four switches, their body diodes, the decay mode,
/// control, and optionally the motor and the bus.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct BridgeParams {
    /// The supply.
    pub supply: SupplyParams,
    /// The coil (its node capacitance is not used by the bridge).
    pub coil: CoilParams,
    /// Each of the four switches.
    pub switch: SwitchParams,
    /// Each switch's body diode.
    pub body_diode: BodyDiode,
    /// The off part of each period.
    pub decay: DecayMode,
    /// Timing and scale.
    pub control: ControlParams,
    /// Back-EMF (default: none, a stalled rotor).
    pub motor: MotorParams,
    /// Bulk capacitance and sink (default: none, `supply-pump` is not evaluated).
    pub bus: Option<BusParams>,
    /// The gate dead time at each change of a leg between high and low, s (default 0; 0 ..=
    /// 1 ms, under a quarter of the period): give the hardware's shortest.
    pub gate_dead_time: f32,
}

impl BridgeParams {
    /// Gathers the parts (not yet validated); no back-EMF, no bus.
    pub const fn new(
        supply: SupplyParams,
        coil: CoilParams,
        switch: SwitchParams,
        body_diode: BodyDiode,
        decay: DecayMode,
        control: ControlParams,
    ) -> Self {
        Self {
            supply,
            coil,
            switch,
            body_diode,
            decay,
            control,
            motor: MotorParams {
                back_emf_limit: 0.0,
                constant: 0.0,
            },
            bus: None,
            gate_dead_time: 0.0,
        }
    }

    /// The same drive with a gate dead time of `seconds` at each change of a leg between high
    /// and low.
    #[must_use]
    pub const fn with_gate_dead_time(mut self, seconds: f32) -> Self {
        self.gate_dead_time = seconds;
        self
    }

    /// The same drive with a motor's back-EMF.
    #[must_use]
    pub const fn with_motor(mut self, motor: MotorParams) -> Self {
        self.motor = motor;
        self
    }

    /// The same drive with the bus described.
    #[must_use]
    pub const fn with_bus(mut self, bus: BusParams) -> Self {
        self.bus = Some(bus);
        self
    }

    /// Validates every field and builds the fixed-point bridge model.
    ///
    /// # Errors
    /// The first problem found, naming its [`Field`].
    pub fn validate(&self) -> Result<BridgeModel, ConfigError> {
        BridgeModel::new(self)
    }
}

/// The off part actually applied in a period: the configured mode, slow decay throughout (what
/// the guard applies while `supply-pump` is active) or fast decay throughout (what it applies
/// when a spinning motor would drive the recirculating current past the ceiling).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AppliedDecay {
    /// The configured decay mode.
    Configured,
    /// Slow decay for the whole off part.
    Slow,
    /// Fast decay for the whole off part.
    Fast,
}

/// Figures derived from the bridge parameters, in SI units (f32), for display and checks.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub struct BridgeDerived {
    /// Winding resistance at the winding temperature, Ω.
    pub resistance: f32,
    /// L/(R + 2R_on), s: driving and slow decay.
    pub tau_on: f32,
    /// L/(R + 2R_d), s: fast decay.
    pub tau_fast: f32,
    /// Steady current at full duty and nominal supply, stalled, A.
    pub on_current_nominal: f32,
    /// The full-scale current, A.
    pub full_scale: f32,
    /// The control period, s.
    pub period: f32,
    /// Coulombs per unit of [`Charge`] (full-scale current for one timer count).
    pub charge_unit: f32,
    /// Share of the off part in fast decay (1 fast, 0 slow).
    pub fast_share: f32,
    /// The bus headroom `C·(V_max − V_nom)`, C (zero without a bus).
    pub bus_headroom: f32,
}

/// Validated bus figures in [`Charge`] bits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Bus {
    /// `C·(V_max − V_nom)`.
    pub(crate) headroom: i64,
    /// `I_sink·T/N`: what the supply absorbs in one timer count.
    pub(crate) sink_per_count: i64,
}

/// The immutable fixed-point model of a full-bridge drive. See the module documentation.
#[derive(Debug, Clone, PartialEq)]
pub struct BridgeModel {
    on_duty: DecayTable<DUTY_DIGITS>,
    fast_duty: DecayTable<DUTY_DIGITS>,
    duty_full: u32,
    /// Current raw per volt bit (U16F16) through R + 2R_on.
    on_gain: Gain,
    /// Current raw per volt bit through R + 2R_d.
    fast_gain: Gain,
    /// 2V_f/(R + 2R_d), current raw.
    fast_offset: i64,
    /// Share of the off part in fast decay, Q0.16 (0 ..= 65536).
    fast_share: u32,
    supply_cap: u32,
    emf_cap: u32,
    /// Volt bits per rad/s bit (both 16 fractional bits).
    emf_per_speed: Gain,
    tau_on_us: u64,
    tau_fast_us: u64,
    /// One timer count in µs, Q32.32.
    count_us: u64,
    /// τ_on and τ_fast in timer counts, scaled from current raw to [`Charge`] bits (2⁻²⁴).
    tau_on_charge: Gain,
    tau_fast_charge: Gain,
    pub(crate) bus: Option<Bus>,
    /// The gate dead time in whole timer counts (rounded down), 0 without one.
    dead: u32,
    /// `E(t_d/τ_d)` over the dead time, `τ_d = L/(R + R_on + R_d)`: one leg's low diode and the
    /// other leg's low switch carry the current.
    dead_decay: Decay,
    /// Current raw per volt bit through R + R_on + R_d.
    dead_gain: Gain,
    /// V_f/(R + R_on + R_d), current raw.
    dead_offset: i64,
    derived: BridgeDerived,
}

/// A signed exact segment toward `a`, with no stop (the switches conduct both ways).
#[inline(always)]
fn toward(i: i64, a: i64, e: Decay) -> i64 {
    i + scale(a - i, e)
}

/// `(x·n) >> 24` for `|x| < 2⁶³` and `n < 2¹⁷`: current raw × counts into [`Charge`] bits.
#[inline(always)]
fn charge(x: i64, n: u32) -> i64 {
    // |x·n| < 2^80 fits i128; after the shift it is below 2^56.
    ((i128::from(x) * i128::from(n)) >> 24) as i64
}

/// `∫ i dt` over a free segment from `from` to `to` toward `a`, `n` counts long, in [`Charge`]
/// bits: `A·t − τ·(to − from)`, from `L·di/dt = (R + R_x)·(A − i)` integrated over the segment.
/// No chord: exact up to the rounding of the two terms (error measured in `tests/bridge.rs`).
#[inline(always)]
fn integral(from: i64, to: i64, a: i64, n: u32, tau: Gain) -> i64 {
    let d = to - from; // both within ±2^61
    let t = tau.apply_wide(d.unsigned_abs()).min(i64::MAX as u64) as i64;
    let t = if d < 0 { -t } else { t };
    charge(a, n).saturating_sub(t)
}

/// One period's corners and charges.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Parts {
    pub(crate) corners: [i64; 4],
    /// The currents after the dead-time segments (see [`BridgeModel::path`]).
    pub(crate) dead: [i64; 2],
    pub(crate) drawn: i64,
    pub(crate) returned: i64,
    /// Whether the period ends in slow decay.
    pub(crate) after_slow: bool,
}

/// One period's path (see [`BridgeModel::path`]).
struct Path {
    corners: [i64; 4],
    dead: [i64; 2],
    /// Drive counts left after the dead time, and the drive's asymptote.
    drive: (u32, i64),
    /// Fast-decay counts.
    fast: u32,
    after_slow: bool,
}

/// The body diodes' forward drop and resistance, validated.
fn diode_values(d: BodyDiode) -> Result<(f64, f64), ConfigError> {
    let vf = f64::from(positive(
        Field::BodyDiodeForwardDrop,
        d.forward_drop,
        0.05,
        5.0,
    )?);
    let rd = f64::from(non_negative(
        Field::BodyDiodeResistance,
        d.resistance,
        10.0,
    )?);
    Ok((vf, rd))
}

/// The share of the off part in fast decay, validated (mixed decay strictly between 0 and 1).
fn fast_share(decay: DecayMode) -> Result<f64, ConfigError> {
    Ok(match decay {
        DecayMode::Fast => 1.0,
        DecayMode::Slow => 0.0,
        DecayMode::Mixed { fast_share } => f64::from(positive(
            Field::DecayFastShare,
            fast_share,
            1.0 / 65_536.0,
            1.0 - 1.0 / 65_536.0,
        )?),
    })
}

/// The gate dead time (s) in whole counts of `count` seconds, under a quarter of the `n_full`
/// counts of a period.
fn dead_counts(t_dead: f32, count: f64, n_full: u32) -> Result<u32, ConfigError> {
    let t_dead = f64::from(non_negative(Field::SwitchDeadTime, t_dead, 1e-3)?);
    // Rounded down: a shorter dead time takes less off the drive, so the estimate errs high.
    // Within 10⁻⁴ of a count below a whole number it is that number (5 ps at a 50 ns count):
    // the f32 inputs' rounding, not a shorter dead time (4.45 µs at 50 ns is 89 counts).
    let dead = libm::floor(t_dead / count + 1e-4) as u32;
    if dead >= n_full / 4 && dead > 0 {
        return Err(ConfigError::conflict(
            Field::SwitchDeadTime,
            Conflict::PeriodTooShort,
        ));
    }
    Ok(dead)
}

impl Bus {
    /// The bus of capacitance `c` (F) whose supply sinks `sink` (A), with `rise` volts between
    /// the nominal and the maximum supply, in charge bits of `charge_bit` coulombs and counts of
    /// `count` seconds; and its headroom in coulombs.
    fn new((c, sink): (f64, f64), rise: f64, (count, charge_bit): (f64, f64)) -> (Self, f64) {
        let clamp_i64 = |v: f64| {
            let x = libm::round(v);
            if x >= 9.2e18 {
                i64::MAX
            } else {
                x.max(0.0) as i64
            }
        };
        let headroom = c * rise;
        (
            Self {
                headroom: clamp_i64(headroom / charge_bit),
                sink_per_count: clamp_i64(sink * count / charge_bit),
            },
            headroom,
        )
    }
}

impl BridgeModel {
    /// Validates `p` and builds the model. Same as [`BridgeParams::validate`].
    ///
    /// # Errors
    /// The first problem found, naming its field, in the order supply, coil, switch, body
    /// diode, decay, control, motor, bus, then the relations between them.
    pub fn new(p: &BridgeParams) -> Result<Self, ConfigError> {
        let (v_nom, v_min, v_max) = supply_values(&p.supply)?;
        let w = coil_values(&p.coil)?;
        let (r_on, bv) = switch_values(p.switch, v_max)?;
        let (vf, rd) = diode_values(p.body_diode)?;
        let share = fast_share(p.decay)?;
        let (t, n_full, fs) = control_values(&p.control)?;
        let emf = f64::from(non_negative(
            Field::MotorBackEmfLimit,
            p.motor.back_emf_limit,
            1000.0,
        )?);
        let k_emf = f64::from(non_negative(Field::MotorConstant, p.motor.constant, 100.0)?);
        let bus = match p.bus {
            Some(b) => Some((
                f64::from(positive(Field::BusCapacitance, b.capacitance, 1e-9, 10.0)?),
                f64::from(non_negative(Field::BusSinkCurrent, b.sink_current, 1e4)?),
            )),
            None => None,
        };

        // Relations.
        if emf > v_min {
            return Err(ConfigError::conflict(
                Field::MotorBackEmfLimit,
                Conflict::BackEmfAboveMinSupply,
            ));
        }
        if v_max + 2.0 * (vf + rd * fs) >= bv {
            return Err(ConfigError::conflict(
                Field::BodyDiodeForwardDrop,
                Conflict::BodyDiodesReachBreakdown,
            ));
        }
        if bus.is_some() && v_max <= v_nom {
            return Err(ConfigError::conflict(
                Field::SupplyMax,
                Conflict::NoBusHeadroom,
            ));
        }
        let r_on_total = w.r + 2.0 * r_on;
        let r_fast_total = w.r + 2.0 * rd;
        let tau_on = w.l / r_on_total;
        let tau_fast = w.l / r_fast_total;
        if !tau_in_range(tau_on) || !tau_in_range(tau_fast) {
            return Err(ConfigError::conflict(
                Field::CoilInductance,
                Conflict::TimeConstantOutOfRange,
            ));
        }
        if t / tau_on.max(tau_fast) < MIN_PERIOD_OVER_TAU {
            return Err(ConfigError::conflict(
                Field::ControlPeriod,
                Conflict::PeriodTooShort,
            ));
        }
        let count = t / f64::from(n_full);
        let dead = dead_counts(p.gate_dead_time, count, n_full)?;
        let r_dead_total = w.r + r_on + rd;
        let v_cap = 2.0 * v_max;
        let on_max = (v_cap + emf) / r_on_total / fs;
        let fast_max = (v_cap + 2.0 * vf + emf) / r_fast_total / fs;
        if on_max > ASYMPTOTE_LIMIT || fast_max > ASYMPTOTE_LIMIT {
            return Err(ConfigError::conflict(
                Field::ControlCurrentFullScale,
                Conflict::FullScaleTooSmall,
            ));
        }

        let raw_per_amp = 1_099_511_627_776.0 / fs;
        // One Charge bit is 2^-16 of the full-scale current for one count.
        let charge_bit = fs * count / 65_536.0;
        let (bus, headroom) = match bus {
            Some((c, sink)) => {
                let (b, headroom) = Bus::new((c, sink), v_max - v_nom, (count, charge_bit));
                (Some(b), headroom)
            }
            None => (None, 0.0),
        };
        Ok(Self {
            on_duty: DecayTable::new(count / tau_on),
            fast_duty: DecayTable::new(count / tau_fast),
            duty_full: n_full,
            on_gain: Gain::new(raw_per_amp / 65_536.0 / r_on_total),
            fast_gain: Gain::new(raw_per_amp / 65_536.0 / r_fast_total),
            fast_offset: libm::round(2.0 * vf / r_fast_total * raw_per_amp) as i64,
            fast_share: libm::round(share * 65_536.0) as u32,
            supply_cap: volts_bits(v_cap),
            emf_cap: volts_bits(emf),
            emf_per_speed: Gain::new(k_emf),
            tau_on_us: q32(tau_on * 1e6),
            tau_fast_us: q32(tau_fast * 1e6),
            count_us: q32(count * 1e6),
            tau_on_charge: Gain::new(tau_on / count / 16_777_216.0),
            tau_fast_charge: Gain::new(tau_fast / count / 16_777_216.0),
            bus,
            dead,
            dead_decay: DecayTable::<1>::new(f64::from(dead) * count * r_dead_total / w.l).eval(1),
            dead_gain: Gain::new(raw_per_amp / 65_536.0 / r_dead_total),
            dead_offset: libm::round(vf / r_dead_total * raw_per_amp) as i64,
            derived: BridgeDerived {
                resistance: w.r as f32,
                tau_on: tau_on as f32,
                tau_fast: tau_fast as f32,
                on_current_nominal: (v_nom / r_on_total) as f32,
                full_scale: fs as f32,
                period: t as f32,
                charge_unit: charge_bit as f32,
                fast_share: share as f32,
                bus_headroom: headroom as f32,
            },
        })
    }

    /// Figures derived from the parameters (SI, f32).
    pub const fn derived(&self) -> &BridgeDerived {
        &self.derived
    }

    /// Timer counts in one period (the duty magnitude that means 100 %).
    pub const fn duty_resolution(&self) -> u32 {
        self.duty_full
    }

    /// Converts a current to amperes (configuration time, host, logs).
    pub fn amps(&self, c: Current) -> f32 {
        (c.to_bits() as f64 / 1_099_511_627_776.0 * f64::from(self.derived.full_scale)) as f32
    }

    /// Converts amperes (either sign) to the current format, or `None` if not finite or beyond
    /// ±2²¹ full scale.
    pub fn current_from_amps(&self, amps: f32) -> Option<Current> {
        let f = f64::from(amps) / f64::from(self.derived.full_scale);
        if !f.is_finite() || f.abs() > ASYMPTOTE_LIMIT {
            return None;
        }
        Some(Current::from_bits(
            libm::round(f * 1_099_511_627_776.0) as i64
        ))
    }

    /// Converts a charge to coulombs (host, logs).
    pub fn coulombs(&self, q: Charge) -> f64 {
        q.to_bits() as f64 * f64::from(self.derived.charge_unit)
    }

    /// Back-EMF `speed × constant` for a speed in rad/s (either sign), clamped to the limit.
    /// One gain: no division, no floating point.
    pub fn back_emf_from_speed(&self, speed: Speed) -> SignedVolts {
        let mag = self.emf_per_speed.apply(speed.to_bits().unsigned_abs());
        let mag = mag.min(u64::from(self.emf_cap)) as i32; // emf_cap < 2^26
        SignedVolts::from_bits(if speed.is_negative() { -mag } else { mag })
    }

    /// Timer counts of fast decay in an off part of `off` counts.
    #[inline]
    fn fast_counts(&self, off: u32, decay: AppliedDecay) -> u32 {
        match decay {
            AppliedDecay::Slow => 0,
            AppliedDecay::Fast => off,
            // off < 2^16 and the share <= 2^16: the product fits u64 and the result <= off.
            AppliedDecay::Configured => {
                ((u64::from(off) * u64::from(self.fast_share)) >> 16) as u32
            }
        }
    }

    /// The phases of a period: drive counts (with the sign of the duty), fast counts, slow
    /// counts.
    pub(crate) fn split(&self, duty: i32, decay: AppliedDecay) -> (i32, u32, u32) {
        let n = duty.unsigned_abs().min(self.duty_full);
        let off = self.duty_full - n;
        let k = self.fast_counts(off, decay);
        let signed = if duty < 0 { -(n as i32) } else { n as i32 };
        (signed, k, off - k)
    }

    /// The supply (clamped) and the back-EMF through each circuit (raw, signed).
    #[inline]
    fn inputs(&self, supply: Volts, back_emf: SignedVolts) -> (u32, i64, i64) {
        let vs = supply.to_bits().min(self.supply_cap);
        let e = back_emf.to_bits();
        let mag = e.unsigned_abs().min(self.emf_cap);
        // Validation bounds both gains' results below 2^61.
        let on = self.on_gain.apply(mag) as i64;
        let fast = self.fast_gain.apply(mag) as i64;
        if e < 0 {
            (vs, -on, -fast)
        } else {
            (vs, on, fast)
        }
    }

    /// `∫|i| dt` over a fast-decay segment of `k` counts from `i1` to `i2` (same sign or zero).
    ///
    /// While the current flows the segment follows its branch's asymptote exactly, so
    /// `∫ i dt = A·t_c − τ_fast·(i2 − i1)`; `t_c` is the whole segment unless the current
    /// stopped at zero, then `τ_fast·ln((|i1| + a)/a)` with `a = |A|` (two fixed-point
    /// logarithms, only in the period where the current stops). The result is clamped to
    /// the chord bound `(|i1| + |i2|)/2·k`, which a convex decay cannot exceed.
    fn fast_charge(&self, i1: i64, i2: i64, k: u32, vs: u32, emf_fast: i64) -> i64 {
        let pull = self.fast_gain.apply(vs) as i64 + self.fast_offset;
        let neg = i1 < 0 || (i1 == 0 && i2 < 0);
        // In the current's own direction: magnitudes and the asymptote.
        let (m1, m2, a) = if neg {
            (-i1, -i2, -(pull - emf_fast))
        } else {
            (i1, i2, -pull - emf_fast)
        };
        let q = if m2 == 0 && m1 > 0 && a < 0 {
            // Stopped at zero: Q = τ·m1 − |A|·t_c, t_c = τ·ln((m1 + |A|)/|A|).
            let pull_mag = -a;
            let ln = crate::qmath::ln_ratio((m1 + pull_mag) as u64, pull_mag as u64);
            // |A|·ln in raw (Q32.32 logarithm), then through τ into Charge bits.
            let a_ln = ((u128::from(pull_mag as u64) * u128::from(ln)) >> 32)
                .min(u128::from(u64::MAX)) as u64;
            let tau_m1 = self.tau_fast_charge.apply_wide(m1 as u64);
            let a_t = self.tau_fast_charge.apply_wide(a_ln);
            tau_m1.saturating_sub(a_t).min(i64::MAX as u64) as i64
        } else {
            integral(m1, m2, a, k, self.tau_fast_charge)
        };
        let chord = if m2 <= m1 {
            charge(i64::midpoint(m1, m2), k)
        } else {
            charge(m2, k)
        };
        q.min(chord).max(0)
    }

    /// The drive asymptote in direction `d` (sign of the duty), raw.
    #[inline]
    fn drive_asymptote(&self, vs: u32, d: i32, emf_on: i64) -> i64 {
        let a = self.on_gain.apply(vs) as i64;
        if d < 0 { -a - emf_on } else { a - emf_on }
    }

    /// A fast-decay segment from `i` over `e`: the branch of the current's sign, stopping at
    /// zero (see the module table).
    #[inline]
    fn fast_segment(&self, i: i64, vs: u32, emf_fast: i64, e: Decay) -> i64 {
        // Both terms are validated below 2^61.
        let pull = self.fast_gain.apply(vs) as i64 + self.fast_offset;
        let a_pos = -pull - emf_fast;
        let a_neg = pull - emf_fast;
        if i > 0 || (i == 0 && a_pos > 0) {
            toward(i, a_pos, e).max(0)
        } else if i < 0 || a_neg < 0 {
            toward(i, a_neg, e).min(0)
        } else {
            0
        }
    }

    /// A gate dead-time segment from `i`: the current in its own direction through one leg's
    /// low diode and the other leg's low switch, toward `−(V_f + E_own)/(R + R_on + R_d)`,
    /// stopping at zero (the diode blocks).
    #[inline]
    fn dead_segment(&self, i: i64, back_emf: SignedVolts) -> i64 {
        let e = back_emf.to_bits();
        // Validated below 2^61 like the other gains' results.
        let emf = self.dead_gain.apply(e.unsigned_abs().min(self.emf_cap)) as i64;
        let emf = if e < 0 { -emf } else { emf };
        let (mag, own_emf) = if i < 0 { (-i, -emf) } else { (i, emf) };
        let m = toward(mag, -(self.dead_offset + own_emf), self.dead_decay).max(0);
        if i < 0 { -m } else { m }
    }

    /// The period's path: the four corners (start, after the drive, after the fast part, end),
    /// the currents after the dead-time segments (the start and the end of the drive part when
    /// none), and the drive and slow counts that are left.
    ///
    /// A gate dead time is a segment of its own where a leg changes between high and low with
    /// the current flowing in the drive's direction: at the period's start after a period that
    /// ended in slow decay (`after_slow`), and at the drive's end when slow decay follows it
    /// directly. With the current against the drive the floating leg's upper diode conducts,
    /// close to the drive itself, and the segment is left as drive (its magnitude falls a
    /// little faster in truth); a part shorter than the dead time is left whole too. Both err
    /// toward a higher magnitude.
    fn path(
        &self,
        i0: i64,
        after_slow: bool,
        duty: i32,
        supply: Volts,
        back_emf: SignedVolts,
        decay: AppliedDecay,
    ) -> Path {
        let (vs, emf_on, emf_fast) = self.inputs(supply, back_emf);
        let (signed, k, rest) = self.split(duty, decay);
        let n = signed.unsigned_abs();
        let d = self.dead;
        let along = |i: i64| (signed > 0 && i > 0) || (signed < 0 && i < 0);
        let (ia, n_drive) = if d > 0 && after_slow && n > d && along(i0) {
            (self.dead_segment(i0, back_emf), n - d)
        } else {
            (i0, n)
        };
        let a_drive = self.drive_asymptote(vs, signed, emf_on);
        let i1 = toward(ia, a_drive, self.on_duty.eval(n_drive));
        let i2 = self.fast_segment(i1, vs, emf_fast, self.fast_duty.eval(k));
        let (ib, slow) = if d > 0 && k == 0 && n > 0 && rest > d && along(i1) {
            (self.dead_segment(i1, back_emf), rest - d)
        } else {
            (i2, rest)
        };
        let i3 = toward(ib, -emf_on, self.on_duty.eval(slow));
        Path {
            corners: [i0, i1, i2, i3],
            dead: [ia, ib],
            drive: (n_drive, a_drive),
            fast: k,
            after_slow: rest > 0,
        }
    }

    /// The period's corners and charges (the nominal prediction of what the bus gets).
    pub(crate) fn parts(
        &self,
        i0: i64,
        after_slow: bool,
        duty: i32,
        supply: Volts,
        back_emf: SignedVolts,
        decay: AppliedDecay,
    ) -> Parts {
        let path = self.path(i0, after_slow, duty, supply, back_emf, decay);
        let [_, i1, i2, _] = path.corners;
        let (n, a) = path.drive;
        // Charge drawn while driving (the dead time draws none), in the drive's direction.
        let drawn = if n == 0 {
            0
        } else {
            let q = integral(path.dead[0], i1, a, n, self.tau_on_charge);
            if duty < 0 { -q } else { q }
        };
        // Charge returned in fast decay: the integral of |i| over the segment.
        let (vs, _, emf_fast) = self.inputs(supply, back_emf);
        let k = path.fast;
        let returned = if k == 0 || (i1 == 0 && i2 == 0) {
            0
        } else {
            self.fast_charge(i1, i2, k, vs, emf_fast)
        };
        Parts {
            corners: path.corners,
            dead: path.dead,
            drawn,
            returned,
            after_slow: path.after_slow,
        }
    }

    /// Advances `coil` over one period with signed duty `duty` (counts; clamped to ±the
    /// resolution), the measured supply and back-EMF, and the configured decay mode.
    ///
    /// ```
    /// use coilward::bridge::{BodyDiode, BridgeCoil, BridgeParams, DecayMode};
    /// use coilward::{CoilParams, ControlParams, SignedVolts, SupplyParams, SwitchParams, Volts};
    /// // A demo motor winding: 2 mH, 4 Ω, 12 V, 20 kHz with 1000 counts, slow decay.
    /// let model = BridgeParams::new(
    ///     SupplyParams::new(12.0, 10.0, 14.0),
    ///     CoilParams::new(2e-3, 4.0),
    ///     SwitchParams::new(0.05, 40.0),
    ///     BodyDiode::new(0.8, 0.02),
    ///     DecayMode::Slow,
    ///     ControlParams::new(50e-6, 1000, 4.0),
    /// )
    /// .validate()?;
    /// let mut coil = BridgeCoil::idle();
    /// let mut last = None;
    /// for _ in 0..2000 {
    ///     last = Some(model.step(&mut coil, -500, Volts::from_num(12), SignedVolts::ZERO));
    /// }
    /// // Half duty in reverse, slow decay: the mean voltage is −6 V across 4.1 Ω, and the
    /// // ripple is nearly a triangle, so its middle is the mean current.
    /// let p = last.unwrap();
    /// let middle = (model.amps(p.peak) + model.amps(p.valley)) / 2.0;
    /// assert!((middle + 6.0 / 4.1).abs() < 0.002);
    /// assert!(p.peak.to_bits() < 0); // reverse current throughout
    /// # Ok::<(), coilward::ConfigError>(())
    /// ```
    pub fn step(
        &self,
        coil: &mut BridgeCoil,
        duty: i32,
        supply: Volts,
        back_emf: SignedVolts,
    ) -> BridgeEstimate {
        self.step_with(coil, duty, supply, back_emf, AppliedDecay::Configured)
    }

    /// As [`BridgeModel::step`], with the off part `decay` (what the guard applied).
    pub fn step_with(
        &self,
        coil: &mut BridgeCoil,
        duty: i32,
        supply: Volts,
        back_emf: SignedVolts,
        decay: AppliedDecay,
    ) -> BridgeEstimate {
        let p = self.parts(
            coil.current.to_bits(),
            coil.after_slow,
            duty,
            supply,
            back_emf,
            decay,
        );
        let [a, b, c, d] = p.corners;
        let [x, y] = p.dead;
        coil.current = Current::from_bits(d);
        coil.after_slow = p.after_slow;
        BridgeEstimate {
            start: Current::from_bits(a),
            peak: Current::from_bits(a.max(b).max(c).max(d).max(x).max(y)),
            valley: Current::from_bits(a.min(b).min(c).min(d).min(x).min(y)),
            end: Current::from_bits(d),
            drawn: Charge::from_bits(p.drawn),
            returned: Charge::from_bits(p.returned),
        }
    }

    /// The measured supply clamped to the model's range, U16F16 bits.
    pub(crate) fn supply_bits(&self, supply: Volts) -> u32 {
        supply.to_bits().min(self.supply_cap)
    }

    /// The steady current of a full forward drive at `supply` with `back_emf` (raw):
    /// `(Vs − E)/(R + 2R_on)`. Configuration time.
    pub(crate) fn steady_drive(&self, supply: Volts, back_emf: SignedVolts) -> i64 {
        let (vs, emf_on, _) = self.inputs(supply, back_emf);
        self.drive_asymptote(vs, 1, emf_on)
    }

    /// Whether the off part of `decay` has any slow decay (at some duty).
    pub(crate) fn has_slow_part(&self, decay: AppliedDecay) -> bool {
        match decay {
            AppliedDecay::Fast => false,
            AppliedDecay::Slow => true,
            AppliedDecay::Configured => self.fast_share < 1 << 16,
        }
    }

    /// Time for the current magnitude to fall from that of `from` to `to` with the bridge off
    /// in the decay mode `decay`, whole µs rounded up; `None` if it would not fall that far or
    /// would take more than `u32::MAX` µs.
    ///
    /// Fast: `τ_fast·ln((|I0| + a)/(I + a))`, `a = (Vs + 2V_f ± E)/(R + 2R_d)`. Slow:
    /// `τ_on·ln((|I0| + a)/(I + a))`, `a = ±E/(R + 2R_on)`. Mixed: the slow figure, an upper
    /// bound. No division: two fixed-point logarithms.
    pub fn decay_time_us(
        &self,
        from: Current,
        to: Current,
        supply: Volts,
        back_emf: SignedVolts,
        decay: AppliedDecay,
    ) -> Option<u32> {
        let i = from.to_bits();
        let mag = i.unsigned_abs().min(Current::LIMIT.to_bits() as u64) as i64;
        let target = to.working_bits();
        if mag <= target {
            return Some(0);
        }
        let (vs, emf_on, emf_fast) = self.inputs(supply, back_emf);
        let fast = match decay {
            AppliedDecay::Fast => true,
            AppliedDecay::Slow => false,
            AppliedDecay::Configured => self.fast_share == 1 << 16,
        };
        let (a, tau) = if fast {
            (self.fast_pull(vs, i, emf_fast), self.tau_fast_us)
        } else {
            (own(i, emf_on), self.tau_on_us)
        };
        time_to(mag, target, a, tau).and_then(|t| u32::try_from(t).ok())
    }

    /// The magnitude of the fast-decay asymptote beyond zero for a current `i` (raw): the
    /// supply, two diode drops and the back-EMF in the current's own direction.
    #[inline]
    fn fast_pull(&self, vs: u32, i: i64, emf_fast: i64) -> i64 {
        self.fast_gain.apply(vs) as i64 + self.fast_offset + own(i, emf_fast)
    }

    /// Time for the current magnitude to fall from that of `from` to `to` with the bridge off,
    /// found by stepping whole periods of `decay` and solving the crossing segment exactly:
    /// exact for mixed decay too, where [`BridgeModel::decay_time_us`] gives an upper bound.
    /// Whole µs, rounded up; `None` beyond `max_periods` periods or `u32::MAX` µs.
    ///
    /// A planning helper (it loops over periods): for configuration time, the host and the
    /// main loop, not for the tick path.
    pub fn decay_time_stepped_us(
        &self,
        from: Current,
        to: Current,
        supply: Volts,
        back_emf: SignedVolts,
        decay: AppliedDecay,
        max_periods: u32,
    ) -> Option<u32> {
        let target = to.working_bits();
        let lim = Current::LIMIT.to_bits();
        let mut i = from.to_bits().clamp(-lim, lim);
        let (vs, emf_on, emf_fast) = self.inputs(supply, back_emf);
        let (_, k, rest) = self.split(0, decay);
        let mut elapsed: u128 = 0; // Q64.64 µs
        for _ in 0..max_periods {
            if i.abs() <= target {
                return round_up(elapsed);
            }
            let i2 = self.fast_segment(i, vs, emf_fast, self.fast_duty.eval(k));
            if i2.abs() <= target {
                let t = time_to_q64(
                    i.abs(),
                    target,
                    self.fast_pull(vs, i, emf_fast),
                    self.tau_fast_us,
                )?;
                return round_up(elapsed + t);
            }
            let i3 = toward(i2, -emf_on, self.on_duty.eval(rest));
            if i3.abs() <= target || (i3 != 0 && (i3 < 0) != (i2 < 0)) {
                let t = time_to_q64(i2.abs(), target, own(i2, emf_on), self.tau_on_us)?;
                let fast_part = u128::from(k) * u128::from(self.count_us);
                return round_up(elapsed + (fast_part << 32) + t);
            }
            i = i3;
            elapsed += (u128::from(self.duty_full) * u128::from(self.count_us)) << 32;
        }
        None
    }
}

/// The back-EMF term `e` seen in the direction of current `i` (positive: it helps the decay).
#[inline]
fn own(i: i64, e: i64) -> i64 {
    if i < 0 { -e } else { e }
}

/// `τ·ln((mag + a)/(target + a))` in µs as Q64.64, for a decay of magnitude `mag` toward `−a`
/// (`None` if it never reaches `target`). Two fixed-point logarithms, no division.
fn time_to_q64(mag: i64, target: i64, a: i64, tau_us: u64) -> Option<u128> {
    // Each term is below 2^61, so the sums fit.
    let (x, y) = (mag + a, target + a);
    if y <= 0 || x <= 0 {
        return None;
    }
    Some(crate::clamp::time_q64(ln_ratio(x as u64, y as u64), tau_us))
}

/// As [`time_to_q64`], in whole µs rounded up.
fn time_to(mag: i64, target: i64, a: i64, tau_us: u64) -> Option<u128> {
    let t = time_to_q64(mag, target, a, tau_us)?;
    Some((t >> 64) + u128::from(t & u128::from(u64::MAX) != 0))
}

/// Q64.64 µs to whole µs rounded up, if it fits u32.
fn round_up(t: u128) -> Option<u32> {
    u32::try_from((t >> 64) + u128::from(t & u128::from(u64::MAX) != 0)).ok()
}

/// Per-channel state of the bridge estimator: the signed coil current (positive from leg A to
/// leg B).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BridgeCoil {
    current: Current,
    /// Whether the last period ended in slow decay (a gate dead time then opens the next drive).
    after_slow: bool,
}

impl BridgeCoil {
    /// Whether the last period ended in slow decay.
    pub(crate) const fn after_slow(&self) -> bool {
        self.after_slow
    }

    /// A coil known to carry no current.
    pub const fn idle() -> Self {
        Self {
            current: Current::ZERO,
            after_slow: false,
        }
    }

    /// A coil known to carry `current` (either sign, clamped to ±[`Current::LIMIT`]).
    pub const fn with_current(current: Current) -> Self {
        let b = current.to_bits();
        let lim = Current::LIMIT.to_bits();
        let b = if b > lim {
            lim
        } else if b < -lim {
            -lim
        } else {
            b
        };
        Self {
            current: Current::from_bits(b),
            after_slow: false,
        }
    }

    /// The estimated coil current now (signed).
    pub const fn current(&self) -> Current {
        self.current
    }
}

/// What the bridge estimator says about one period.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BridgeEstimate {
    /// Current at the start.
    pub start: Current,
    /// Highest (most positive) current in the period.
    pub peak: Current,
    /// Lowest (most negative) current in the period.
    pub valley: Current,
    /// Current at the end.
    pub end: Current,
    /// Charge drawn from the supply while driving (negative if the current ran against the
    /// drive).
    pub drawn: Charge,
    /// Charge returned to the supply in fast decay.
    pub returned: Charge,
}

impl BridgeEstimate {
    /// The largest current magnitude in the period.
    pub fn peak_magnitude(&self) -> Current {
        let p = self.peak.to_bits().unsigned_abs();
        let v = self.valley.to_bits().unsigned_abs();
        Current::from_bits(p.max(v).min(Current::LIMIT.to_bits() as u64) as i64)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo(decay: DecayMode) -> BridgeModel {
        BridgeParams::new(
            SupplyParams::new(12.0, 10.0, 14.0),
            CoilParams::new(2e-3, 4.0),
            SwitchParams::new(0.05, 40.0),
            BodyDiode::new(0.8, 0.02),
            decay,
            ControlParams::new(50e-6, 1000, 4.0),
        )
        .validate()
        .unwrap()
    }

    #[test]
    fn the_off_part_splits_by_the_share() {
        let m = demo(DecayMode::Mixed { fast_share: 0.25 });
        assert_eq!(m.split(600, AppliedDecay::Configured), (600, 100, 300));
        assert_eq!(m.split(-600, AppliedDecay::Configured), (-600, 100, 300));
        assert_eq!(m.split(-5000, AppliedDecay::Configured), (-1000, 0, 0));
        assert_eq!(m.split(0, AppliedDecay::Slow), (0, 0, 1000));
        assert_eq!(
            demo(DecayMode::Fast).split(0, AppliedDecay::Configured),
            (0, 1000, 0)
        );
    }

    #[test]
    fn fast_decay_stops_at_zero_and_slow_decay_does_not_reverse_at_stall() {
        let vs = Volts::from_num(12);
        for mode in [DecayMode::Fast, DecayMode::Slow] {
            let m = demo(mode);
            let mut c = BridgeCoil::with_current(m.current_from_amps(-2.0).unwrap());
            for _ in 0..400 {
                m.step(&mut c, 0, vs, SignedVolts::ZERO);
                assert!(c.current().to_bits() <= 0);
            }
            assert!(m.amps(c.current()).abs() < 1e-3, "{mode:?}");
        }
    }

    #[test]
    fn speed_times_constant_is_clamped_to_the_limit() {
        let m = BridgeParams::new(
            SupplyParams::new(12.0, 10.0, 14.0),
            CoilParams::new(2e-3, 4.0),
            SwitchParams::new(0.05, 40.0),
            BodyDiode::new(0.8, 0.02),
            DecayMode::Fast,
            ControlParams::new(50e-6, 1000, 4.0),
        )
        .with_motor(MotorParams::new(9.0, 0.01))
        .validate()
        .unwrap();
        let e = m.back_emf_from_speed(Speed::from_num(-300));
        assert!((e.to_num::<f32>() + 3.0).abs() < 1e-3);
        let e = m.back_emf_from_speed(Speed::from_num(2000));
        assert_eq!(e, SignedVolts::from_num(9));
    }
}
