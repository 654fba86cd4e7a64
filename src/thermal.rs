//! Thermal replicas: the clamp device (a Foster network of up to three RC stages) and the
//! winding (a first-order thermal image, IEC 60255-149).
//!
//! # Clamp device
//! `Zth(t) = Σ Rᵢ·(1 − e^(−t/τᵢ))`. Each stage holds its rise ΔTᵢ (Q31.32 K). Over a control
//! period T with energy E deposited, the input is taken as the period's mean power `P = E/T`:
//! `ΔTᵢ' = ΔTᵢ + (Rᵢ·P − ΔTᵢ)·(1 − e^(−T/τᵢ))` (exact for power constant over the period). Over an
//! event of arbitrary length t (no division by t allowed), the energy is added as an impulse at
//! the end: `ΔTᵢ' = ΔTᵢ·e^(−t/τᵢ) + E·Rᵢ/τᵢ`, which bounds the uniform-power answer from above
//! (`x ≥ 1 − e^(−x)`), so it is conservative. The event decay `e^(−t/τ) = 2^(−t·log2(e)/τ)` comes
//! from the `2^−y` kernel (32 products) rather than a per-µs table, which keeps each replica
//! small (a table per stage would cost 544 bytes).
//!
//! # Winding
//! The thermal image θ (per unit of the steady rise at the basic current I_B) follows
//! `θ' = θ + (q − θ)·(1 − e^(−t/τ))` with `q = (I_rms/I_B)²·R(T)/R(T_B)`: the heating with the
//! resistance corrected to the estimated winding temperature `T = T_amb + θ·ΔT_B` (copper is about
//! 28 % higher at 90 °C than at 20 °C), relative to the resistance at the temperature the basic
//! current produces. It trips at `θ ≥ k²`. With α = 0 this is the IEC 60255-149 image exactly:
//! cold `t = τ·ln(I²/(I² − k²))`, hot `t = τ·ln((I² − Ip²)/(I² − k²))`.
//!
//! # Panics
//! None: configuration is validated; updates use the shared kernels, saturating.

use crate::params::{ConfigError, Field, in_range, non_negative, positive};
use crate::qmath::{Decay, DecayTable, Gain, div_up_wide, mul_exp2_neg, mul_q32, scale};
use crate::units::{Current, Energy};
use fixed::types::I32F32;

/// One RC stage of a Foster network (from the device's transient thermal impedance curve).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct FosterStage {
    /// Thermal resistance, K/W (0 ..= 1000; 0 leaves the stage unused).
    pub resistance: f32,
    /// Time constant, s (1 µs ..= 10 000 s).
    pub time_constant: f32,
}

impl FosterStage {
    /// A stage of `resistance` K/W and `time_constant` s.
    pub const fn new(resistance: f32, time_constant: f32) -> Self {
        Self {
            resistance,
            time_constant,
        }
    }

    /// An unused stage.
    pub const UNUSED: FosterStage = FosterStage::new(0.0, 1.0);
}

/// Thermal model of the device that absorbs turn-off energy (the clamp, or the switch itself
/// when it avalanches).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct ClampThermal {
    /// Up to three Foster stages; unused ones have zero resistance.
    pub stages: [FosterStage; 3],
    /// Ambient (or heatsink) temperature, °C (−100 ..= 300).
    pub ambient: f32,
    /// Temperature at which `clamp-overheat` is raised, °C (above ambient, ≤ 500).
    pub ceiling: f32,
    /// Cooling below the ceiling needed before turn-ons are allowed again, K (0 ..= 200).
    pub hysteresis: f32,
}

impl ClampThermal {
    /// A network with the given stages, ambient and ceiling (°C), with a 10 K hysteresis.
    pub const fn new(stages: [FosterStage; 3], ambient: f32, ceiling: f32) -> Self {
        Self {
            stages,
            ambient,
            ceiling,
            hysteresis: 10.0,
        }
    }
}

/// Thermal image of the winding, IEC 60255-149.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct CoilThermal {
    /// Heating time constant, s (1 ms ..= 100 000 s).
    pub time_constant: f32,
    /// Basic current I_B: the current the winding carries continuously at its rated rise, A.
    pub basic_current: f32,
    /// Overload factor k: trip at θ ≥ k² (1 ..= 3; 1.05 is common).
    pub overload_factor: f32,
    /// Ambient temperature, °C (−100 ..= 300).
    pub ambient: f32,
    /// Steady winding rise at the basic current, K (1 ..= 400).
    pub rise_at_basic: f32,
    /// The image below which `coil-overheat` clears (and a retry may switch on again), per unit
    /// (0 ..= k²). Default 1.0: the winding back at its rated steady rise.
    pub reset_level: f32,
}

impl CoilThermal {
    /// An image with time constant (s), basic current (A), overload factor, ambient (°C) and the
    /// rise at the basic current (K).
    pub const fn new(
        time_constant: f32,
        basic_current: f32,
        overload_factor: f32,
        ambient: f32,
        rise_at_basic: f32,
    ) -> Self {
        Self {
            time_constant,
            basic_current,
            overload_factor,
            ambient,
            rise_at_basic,
            reset_level: 1.0,
        }
    }

    /// The same image clearing `coil-overheat` only below `theta` (per unit).
    #[must_use]
    pub const fn with_reset_level(mut self, theta: f32) -> Self {
        self.reset_level = theta;
        self
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
struct Stage {
    per_period: Decay,
    /// log2(e)/τᵢ per µs: an event of t µs decays by 2^(−t·rate).
    event_rate: Gain,
    /// Rᵢ·E_unit/T: ΔT target (Q32 K) per energy bit per period.
    period_gain: Gain,
    /// Rᵢ·E_unit/τᵢ: ΔT (Q32 K) per energy bit as an impulse.
    impulse_gain: Gain,
}

/// Validated clamp-device replica (see the module documentation).
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct ClampReplica {
    stages: [Option<Stage>; 3],
    ambient: i64,
    ceiling_rise: i64,
    release_rise: i64,
    /// The stages' rises with the device at its ceiling in the steady state (each stage's share
    /// of the rise is its share of the thermal resistance): the state after a reset.
    hot: [i64; 3],
}

/// Per-channel state of a [`ClampReplica`]: the rise of each stage.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ClampHeat {
    rise: [i64; 3],
}

impl ClampReplica {
    /// Validates `cfg` for a control period `period` (s) and an energy unit `energy_unit` (J).
    ///
    /// # Errors
    /// [`Field::ClampThermalStage`], [`Field::ClampThermalAmbient`],
    /// [`Field::ClampThermalCeiling`] or [`Field::ClampThermalHysteresis`].
    pub fn new(cfg: &ClampThermal, period: f32, energy_unit: f32) -> Result<Self, ConfigError> {
        let ambient = f64::from(in_range(
            Field::ClampThermalAmbient,
            cfg.ambient,
            -100.0,
            300.0,
        )?);
        let ceiling = f64::from(in_range(
            Field::ClampThermalCeiling,
            cfg.ceiling,
            cfg.ambient.min(500.0),
            500.0,
        )?);
        if ceiling <= ambient {
            return Err(ConfigError::new(
                Field::ClampThermalCeiling,
                crate::Problem::OutOfRange {
                    min: cfg.ambient,
                    max: 500.0,
                },
            ));
        }
        let hyst = f64::from(non_negative(
            Field::ClampThermalHysteresis,
            cfg.hysteresis,
            200.0,
        )?);
        let t = f64::from(period);
        let unit = f64::from(energy_unit);
        let mut stages: [Option<Stage>; 3] = [None, None, None];
        let r_total: f64 = cfg
            .stages
            .iter()
            .map(|st| f64::from(st.resistance).max(0.0))
            .filter(|r| r.is_finite())
            .sum();
        let mut hot = [0i64; 3];
        for ((slot, st), h) in stages.iter_mut().zip(cfg.stages.iter()).zip(hot.iter_mut()) {
            let r = f64::from(non_negative(
                Field::ClampThermalStage,
                st.resistance,
                1000.0,
            )?);
            let tau = f64::from(positive(
                Field::ClampThermalStage,
                st.time_constant,
                1e-6,
                1e4,
            )?);
            if r == 0.0 {
                continue;
            }
            *h = crate::model::q32_signed((ceiling - ambient) * r / r_total);
            *slot = Some(Stage {
                per_period: DecayTable::<1>::new(t / tau).eval(1),
                event_rate: Gain::new(core::f64::consts::LOG2_E * 1e-6 / tau * 4_294_967_296.0),
                period_gain: Gain::new(r * unit / t),
                impulse_gain: Gain::new(r * unit / tau),
            });
        }
        Ok(Self {
            stages,
            ambient: crate::model::q32_signed(ambient),
            ceiling_rise: crate::model::q32_signed(ceiling - ambient),
            release_rise: crate::model::q32_signed((ceiling - hyst - ambient).max(0.0)),
            hot,
        })
    }

    /// The device at its ceiling, in the steady state: the conservative state after a reset.
    pub fn hot(&self) -> ClampHeat {
        ClampHeat { rise: self.hot }
    }

    /// Adds one control period in which `energy` was deposited.
    pub fn period(&self, heat: &mut ClampHeat, energy: Energy) {
        self.period_toward(heat, &self.targets(energy));
    }

    /// Each stage's steady rise for a period that deposits `energy` every period (Q32.32 K;
    /// 0 for a stage not in use): what [`ClampReplica::period_toward`] moves toward.
    pub(crate) fn targets(&self, energy: Energy) -> [i64; 3] {
        let mut t = [0; 3];
        for (t, st) in t.iter_mut().zip(self.stages.iter()) {
            if let Some(st) = st {
                *t = st.period_gain.apply_wide(energy.to_bits()).min(1 << 62) as i64;
            }
        }
        t
    }

    /// [`ClampReplica::period`] with the stages' targets taken before.
    pub(crate) fn period_toward(&self, heat: &mut ClampHeat, targets: &[i64; 3]) {
        let each = heat.rise.iter_mut().zip(self.stages.iter()).zip(targets);
        for ((rise, st), &target) in each {
            if let Some(st) = st {
                *rise += scale(target - *rise, st.per_period);
            }
        }
    }

    /// Adds an event of `micros` µs at whose end `energy` was deposited.
    pub fn event(&self, heat: &mut ClampHeat, energy: Energy, micros: u32) {
        for (rise, st) in heat.rise.iter_mut().zip(self.stages.iter()) {
            if let Some(st) = st {
                *rise = mul_exp2_neg(*rise, st.event_rate.apply(micros));
                let add = st.impulse_gain.apply_wide(energy.to_bits()).min(1 << 62) as i64;
                *rise = rise.saturating_add(add).min(1 << 62);
            }
        }
    }

    /// Total rise above ambient, Q32.32 K.
    fn rise(heat: &ClampHeat) -> i64 {
        heat.rise.iter().fold(0i64, |a, r| a.saturating_add(*r))
    }

    /// Estimated device temperature, °C.
    pub fn temperature(&self, heat: &ClampHeat) -> I32F32 {
        I32F32::from_bits(self.ambient.saturating_add(Self::rise(heat)))
    }

    /// Whether the temperature is at or above the ceiling.
    pub fn over_ceiling(&self, heat: &ClampHeat) -> bool {
        Self::rise(heat) >= self.ceiling_rise
    }

    /// Whether it has cooled by the hysteresis below the ceiling.
    pub fn cooled(&self, heat: &ClampHeat) -> bool {
        Self::rise(heat) <= self.release_rise
    }
}

/// Validated winding thermal image (see the module documentation).
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct CoilReplica {
    /// Reset level of the image, Q32.32 per unit.
    reset: u64,
    /// τ in µs, Q32.32 (for the time to trip).
    tau_us: u64,
    /// `τ_d/(2·τ)`, Q0.32: the heating of a decay from `i0` with time constant `τ_d` at most,
    /// as a share of `i0²` held for τ (set by the guard from its fall corner; 1 until then,
    /// which holds for any decay no slower than 2τ).
    decay_share: u64,
    /// The on-event's current: `log2(e)/τ_r` per µs of its fastest rise `τ_r` (the box's
    /// shortest on-time constant), and `τ_r/τ` rounded up, Q0.32 (set by the guard; `None`
    /// until then, and the on-event is heated at its peak throughout).
    on_rise: Option<(Gain, u64)>,
    per_period: Decay,
    /// log2(e)/τ per µs (Q32.32 of the exponent per µs, in floating form).
    event_rate: Gain,
    /// (I_fs/I_B)² scaled from a Q40 mean square to Q32 θ.
    square_gain: Gain,
    /// Resistance factor R(T)/R(T_B) = c0 + c1·θ, Q32.32.
    c0: u64,
    c1: u64,
    trip: u64,
    ambient: i64,
    rise: u64,
}

/// Per-channel state of a [`CoilReplica`]: the thermal image θ (Q32.32 per unit).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CoilHeat {
    theta: u64,
}

impl CoilHeat {
    /// The image θ, Q32.32 per unit.
    pub(crate) const fn theta(self) -> u64 {
        self.theta
    }

    /// A winding already at image `theta` (per unit; 1.0 is the steady state at the basic
    /// current), e.g. `1.0` for a hot start after running at rated current.
    pub fn with_image(theta: f32) -> Self {
        let t = f64::from(theta);
        let bits = if t.is_finite() && t > 0.0 {
            libm::round(t.min(1e6) * 4_294_967_296.0) as u64
        } else {
            0
        };
        Self { theta: bits }
    }

    /// The thermal image θ (per unit).
    pub const fn image(&self) -> I32F32 {
        I32F32::from_bits(self.theta as i64)
    }
}

impl CoilReplica {
    /// Validates `cfg`. `period` (s), the model's full-scale current (A), and the coil's
    /// reference temperature (°C) and temperature coefficient (1/K) come from the drive.
    ///
    /// # Errors
    /// One of the `Field::CoilThermal*` fields.
    pub fn new(
        cfg: &CoilThermal,
        period: f32,
        full_scale: f32,
        reference_temperature: f32,
        temperature_coefficient: f32,
    ) -> Result<Self, ConfigError> {
        let tau = f64::from(positive(
            Field::CoilThermalTimeConstant,
            cfg.time_constant,
            1e-3,
            1e5,
        )?);
        let ib = f64::from(positive(
            Field::CoilThermalBasicCurrent,
            cfg.basic_current,
            1e-5,
            1e4,
        )?);
        let k = f64::from(positive(
            Field::CoilThermalOverloadFactor,
            cfg.overload_factor,
            1.0,
            3.0,
        )?);
        let amb = f64::from(in_range(
            Field::CoilThermalAmbient,
            cfg.ambient,
            -100.0,
            300.0,
        )?);
        let rise = f64::from(positive(
            Field::CoilThermalRiseAtBasic,
            cfg.rise_at_basic,
            1.0,
            400.0,
        )?);
        let alpha = f64::from(temperature_coefficient);
        let t_ref = f64::from(reference_temperature);
        let r_b = 1.0 + alpha * (amb + rise - t_ref);
        let fs = f64::from(full_scale);
        Ok(Self {
            tau_us: crate::model::q32(tau * 1e6),
            decay_share: 1 << 32,
            on_rise: None,
            per_period: DecayTable::<1>::new(f64::from(period) / tau).eval(1),
            event_rate: Gain::new(core::f64::consts::LOG2_E * 1e-6 / tau * 4_294_967_296.0),
            // 3 × mean square in Q40 (FS²·2^40) → θ Q32: ·(FS/I_B)²·2^−8/3.
            square_gain: Gain::new((fs / ib) * (fs / ib) / 256.0 / 3.0),
            c0: crate::model::q32((1.0 + alpha * (amb - t_ref)) / r_b),
            c1: crate::model::q32(alpha * rise / r_b),
            trip: crate::model::q32(k * k),
            reset: crate::model::q32(f64::from(non_negative(
                Field::CoilThermalResetLevel,
                cfg.reset_level,
                (k * k) as f32,
            )?)),
            ambient: crate::model::q32_signed(amb),
            rise: crate::model::q32(rise),
        })
    }

    /// Heating target q for a period with this peak and valley (mean square of a linear ramp)
    /// at the resistance of image `theta`.
    fn target_at(&self, theta: u64, peak: Current, valley: Current) -> u64 {
        self.heat_of(Self::mean_square(peak, valley), theta)
    }

    /// 3 × the mean square of a linear ramp from `valley` to `peak`, Q40 of full scale squared.
    fn mean_square(peak: Current, valley: Current) -> u64 {
        let p = peak.working_bits() as u64;
        let v = valley.working_bits() as u64;
        // 3 × the mean square of the ramp, p² + p·v + v² (the 1/3 is folded into
        // `square_gain`), in Q40 of full scale squared.
        // Rounded up (operands and sum): the image never runs cool by its own rounding.
        if p < 1 << 43 && v < 1 << 43 {
            // Below 8 full scale: Q28 operands (<= 2^31), u64 products, sum < 2^64.
            let (pq, vq) = (p.div_ceil(1 << 12), v.div_ceil(1 << 12));
            (pq * pq + pq * vq + vq * vq).div_ceil(1 << 16)
        } else {
            let (p, v) = (u128::from(p), u128::from(v));
            (p * p + p * v + v * v)
                .div_ceil(1 << 40)
                .min(u128::from(u64::MAX)) as u64
        }
    }

    /// θ per unit for `ms` (3 × a mean square, Q40 of full scale squared) at the resistance of
    /// image `theta`: `R(T)/R(T_B)` with T from θ, ≥ 0 for validated temperatures.
    fn heat_of(&self, ms: u64, theta: u64) -> u64 {
        self.heat_at(self.square_gain.apply_wide(ms), theta)
    }

    /// [`CoilReplica::heat_of`] for a gained mean square `q` ([`CoilReplica::gained`]).
    fn heat_at(&self, q: u64, theta: u64) -> u64 {
        let factor = self.c0.saturating_add(mul_q32(theta.min(1 << 52), self.c1));
        mul_q32(q, factor).min(1 << 62)
    }

    /// The ramp from `valley` to `peak` as a period's heating before the resistance's
    /// temperature factor: what [`CoilReplica::period_gained`] takes.
    pub(crate) fn gained(&self, peak: Current, valley: Current) -> u64 {
        self.square_gain.apply_wide(Self::mean_square(peak, valley))
    }

    /// [`CoilReplica::period`] with the ramp's heating taken before ([`CoilReplica::gained`]).
    pub(crate) fn period_gained(&self, heat: &mut CoilHeat, q: u64) {
        let q = self.heat_at(q, heat.theta) as i64;
        let th = heat.theta as i64;
        heat.theta = (th + scale(q - th, self.per_period)).max(0) as u64;
    }

    /// Heating target q for a period with this peak and valley (mean square of a linear ramp).
    fn target(&self, heat: CoilHeat, peak: Current, valley: Current) -> u64 {
        self.target_at(heat.theta, peak, valley)
    }

    /// Adds one control period with the estimate's peak and valley.
    pub fn period(&self, heat: &mut CoilHeat, peak: Current, valley: Current) {
        self.period_gained(heat, self.gained(peak, valley));
    }

    /// Adds an event of `micros` µs with the estimate's peak and valley over it:
    /// `θ' = q + (θ − q)·e^(−t/τ)`, with the exponential from the `2^−y` kernel.
    pub fn event(&self, heat: &mut CoilHeat, peak: Current, valley: Current, micros: u32) {
        let q = self.target(*heat, peak, valley) as i64;
        let th = heat.theta as i64;
        let y = self.event_rate.apply(micros);
        let next = if th >= q {
            q + mul_exp2_neg(th - q, y)
        } else {
            q - mul_exp2_neg(q - th, y)
        };
        heat.theta = next.max(0) as u64;
    }

    /// Sets the time constant of the slowest decay the coil's current can follow with the
    /// switch off (s), for [`CoilReplica::event_off`].
    pub(crate) fn set_decay(&mut self, tau_decay: f64) {
        let tau = self.tau_us as f64 / 4_294_967_296.0 * 1e-6;
        self.decay_share = crate::model::q32((tau_decay / (2.0 * tau)).min(1.0));
    }

    /// Sets the fastest rise the coil's current can follow with the switch on: the time
    /// constant `tau_rise` (s) of the exponential that bounds it from above (for
    /// [`CoilReplica::event_on`]).
    pub(crate) fn set_rise(&mut self, tau_rise: f64) {
        let tau = self.tau_us as f64 / 4_294_967_296.0 * 1e-6;
        let rate = Gain::new(core::f64::consts::LOG2_E * 1e-6 / tau_rise * 4_294_967_296.0);
        let share = libm::ceil((tau_rise / tau).min(1.0) * 4_294_967_296.0) as u64;
        self.on_rise = Some((rate, share));
    }

    /// An on-event of `micros` µs with the current starting at `start` and following (or
    /// staying under) `A + (start − A)·e^(−t/τ_r)` toward the asymptote `asymptote`, `τ_r` as set
    /// by the guard.
    ///
    /// The image's equation `τ·θ' = q(t) − θ` with `q ∝ i²·R(T)/R(T_B)` is solved in closed
    /// form: the held part `q_A + (θ − q_A)·e^(−T/τ)` at the asymptote, plus the exact
    /// `∫(i² − A²)dt = τ_r·[2A·d·(1 − x) + d²·(1 − x²)/2]` (`d = start − A`, `x = e^(−T/τ_r)`)
    /// weighted by `e^(−T/τ)` when it is negative (a rising current) and by 1 when positive,
    /// the weights between which `e^(−(T−s)/τ)` lies, so the result bounds the exact image from
    /// above, by a relative `T/τ` of the transient's share at most. The resistance factor is
    /// taken at an image no lower than any the event passes through: first at the higher of
    /// the start and the steady image at the larger of the start and the asymptote (the image
    /// never passes both), then, for a rising current, at the higher of the start and that
    /// first answer (for a falling current, with the transient's heating added to the
    /// start). With copper's coefficient the result errs high, by up to 16 % of the heating in
    /// the module's test against a numerical solution; with none it is within 10⁻⁴ of the
    /// exact closed form.
    ///
    /// Without a rise set, the current is taken at `max(start, asymptote)` throughout.
    pub fn event_on(&self, heat: &mut CoilHeat, start: Current, asymptote: Current, micros: u32) {
        let Some((rate, share)) = self.on_rise else {
            let top = Current::from_bits(start.working_bits().max(asymptote.working_bits()));
            return self.event(heat, top, top, micros);
        };
        let a = asymptote.working_bits() as u64;
        let b0 = start.working_bits() as u64;
        let d = a.abs_diff(b0);
        let dx = mul_exp2_neg(d as i64, rate.apply(micros)).max(0) as u64;
        // ∫(i² − A²)dt/τ_r in Q40 of full scale squared (u128: operands below 2^63).
        let (a, d, dx) = (u128::from(a), u128::from(d), u128::from(dx));
        let cross = (2 * a * (d - dx)) >> 40;
        let square = (d * d - dx * dx) >> 41;
        let rising = b0 <= asymptote.working_bits() as u64;
        let transient = if rising {
            cross.saturating_sub(square)
        } else {
            cross + square
        };
        let transient = (3 * transient).min(u128::from(u64::MAX)) as u64;
        let y = self.event_rate.apply(micros);
        let theta0 = heat.theta.min(1 << 62);
        // The image at the end, and the transient's added heating, with the resistance of image
        // `at` throughout.
        let image = |at: u64| {
            let q = self.target_at(at, asymptote, asymptote) as i64;
            let held = q + if theta0 as i64 >= q {
                mul_exp2_neg(theta0 as i64 - q, y)
            } else {
                -mul_exp2_neg(q - theta0 as i64, y)
            };
            let moved = mul_q32(self.heat_of(transient, at), share) as i64;
            let next = if rising {
                // Rounded toward zero: a smaller cut, the safe side.
                held - mul_exp2_neg(moved, y)
            } else {
                held + moved + 1
            };
            (next.clamp(0, 1 << 62) as u64, moved.max(0) as u64 + 1)
        };
        // Never above the start or the steady image at the larger current, `U ≥ g·I²·c0/(1 −
        // g·I²·c1)` (`div_up`: no run-time division; without a steady image, unbounded).
        let top = Current::from_bits(b0.max(asymptote.working_bits() as u64) as i64);
        let h0 = self.target_at(0, top, top);
        let slope = self.target_at(1 << 32, top, top).saturating_sub(h0);
        let steady = if slope < 1 << 32 {
            div_up_wide(u128::from(h0) << 32, (1 << 32) - slope).min(1 << 62)
        } else {
            1 << 62
        };
        let (first, moved) = image(theta0.max(steady));
        // The image passes through nothing above its start and its end, but for a falling
        // current the transient's heating on top of the start: a second pass at the
        // resistance of the highest of them.
        let peak = if rising {
            theta0.max(first)
        } else {
            theta0.saturating_add(moved).max(first)
        };
        heat.theta = image(peak).0;
    }

    /// An off-event of `micros` µs from the current `start`: the image cools as
    /// `θ·e^(−t/τ)` and the decaying current adds at most `(i0/I_B)²·τ_d/(2τ)` (its `∫i²dt` is
    /// at most `i0²·τ_d/2` for a decay toward zero or below with time constant `τ_d`), added
    /// at the end, which bounds the exact answer from above.
    pub fn event_off(&self, heat: &mut CoilHeat, start: Current, micros: u32) {
        let q = self.target(*heat, start, start);
        let y = self.event_rate.apply(micros);
        let kept = mul_exp2_neg(heat.theta.min(1 << 62) as i64, y).max(0) as u64;
        heat.theta = kept
            .saturating_add(mul_q32(q, self.decay_share))
            .min(1 << 62);
    }

    /// Time until the image could reach its trip level with the current held at `current`
    /// (rounded down, µs): `τ·ln((q − θ)/(q − k²))`; `Some(0)` once tripped, `None` when it
    /// never will at that current.
    pub fn time_to_trip_us(&self, heat: &CoilHeat, current: Current) -> Option<u32> {
        if heat.theta >= self.trip {
            return Some(0);
        }
        // The target at the trip level's resistance, the highest it reaches before the trip.
        let at_trip = CoilHeat { theta: self.trip };
        let q = self.target(at_trip, current, current);
        if q <= self.trip {
            return None;
        }
        let ln = crate::qmath::ln_ratio(q - heat.theta, q - self.trip);
        let t = crate::clamp::time_q64(ln, self.tau_us) >> 64;
        Some(t.min(u128::from(u32::MAX)) as u32)
    }

    /// `coil-overheat` with hysteresis: at the trip level, or still above the reset level
    /// when it was raised already (`raised`). Both guards decide it so.
    pub fn overheated(&self, heat: &CoilHeat, raised: bool) -> bool {
        self.tripped(heat) || (raised && !self.cooled(heat))
    }

    /// Whether the image has reached the trip level k².
    pub fn tripped(&self, heat: &CoilHeat) -> bool {
        heat.theta >= self.trip
    }

    /// Whether the image is at or below the reset level (`coil-overheat` may clear).
    pub fn cooled(&self, heat: &CoilHeat) -> bool {
        heat.theta <= self.reset
    }

    /// The winding at its trip level: the conservative state after a reset.
    pub fn hot(&self) -> CoilHeat {
        CoilHeat { theta: self.trip }
    }

    /// Estimated winding temperature, °C: `T_amb + θ·ΔT_B`.
    pub fn temperature(&self, heat: &CoilHeat) -> I32F32 {
        let rise = mul_q32(heat.theta, self.rise).min(1 << 62);
        I32F32::from_bits(self.ambient.saturating_add(rise as i64))
    }

    /// The smallest θ whose temperature is at or above `t` (Q32.32 °C; `u64::MAX` when none
    /// is): below it the image is colder than `t` (the temperature is monotone in θ).
    /// Configuration only.
    pub(crate) fn colder_than(&self, t: i64) -> u64 {
        let colder = |theta: i64| {
            self.temperature(&CoilHeat {
                theta: theta as u64,
            })
            .to_bits()
                < t
        };
        let top = (1i64 << 62) + 1;
        if !colder(0) {
            0
        } else if colder(top - 1) {
            u64::MAX
        } else {
            crate::qmath::bisect(0, top, colder) as u64 + 1
        }
    }
}

/// The clamp's average power against a limit, when no replica is configured: a first-order
/// average of the energy per control period, `P̄ ← P̄·e^(−Δt/τ_w) + E·T/τ_w` (in energy per
/// period; for the per-period update `e^(−T/τ_w)` is taken as `1 − T/τ_w`, its first-order
/// form, which decays slower and so errs high).
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub(crate) struct ClampAverage {
    /// The limit, energy per period.
    limit: Energy,
    /// `T/τ_w`, Q0.32.
    share: u64,
    /// `1/(τ_w·ln 2)` per µs, Q32.32 (the event decay's binary exponent per µs).
    per_us: u64,
}

impl ClampAverage {
    /// Validates the limit for a model of period `period` (s) and energy unit `unit` (J).
    pub(crate) fn new(
        p: crate::guard::ClampPower,
        period: f32,
        unit: f32,
    ) -> Result<Self, ConfigError> {
        let w = f64::from(positive(
            Field::GuardClampPowerMax,
            p.max_average,
            1e-6,
            1e4,
        )?);
        let tau = f64::from(positive(Field::GuardClampPowerWindow, p.window, 1e-3, 1e3)?);
        let t = f64::from(period);
        if t >= tau {
            return Err(ConfigError::conflict(
                Field::GuardClampPowerWindow,
                crate::params::Conflict::WindowNotAbovePeriod,
            ));
        }
        let per_period = (w * t / f64::from(unit)).min(4.0e9);
        Ok(Self {
            limit: Energy::from_bits(crate::model::q32(per_period)),
            share: crate::model::q32(t / tau),
            per_us: crate::model::q32(1e-6 / (tau * core::f64::consts::LN_2)),
        })
    }

    /// One period that put `e` into the clamp.
    pub(crate) fn period(&self, avg: Energy, e: Energy) -> Energy {
        let (a, e) = (avg.to_bits(), e.to_bits());
        // avg + (e − avg)·share, with share < 1: stays between avg and e.
        let next = if e >= a {
            a.saturating_add(mul_q32(e - a, self.share))
        } else {
            a - mul_q32(a - e, self.share)
        };
        Energy::from_bits(next)
    }

    /// An event of `us` µs that put `e` into the clamp.
    pub(crate) fn event(&self, avg: Energy, e: Energy, us: u32) -> Energy {
        let y = u64::from(us).saturating_mul(self.per_us);
        let kept = mul_exp2_neg(avg.to_bits().min(i64::MAX as u64) as i64, y) as u64;
        Energy::from_bits(kept.saturating_add(mul_q32(e.to_bits(), self.share)))
    }

    /// Whether the average is above the limit.
    pub(crate) fn over(&self, avg: Energy) -> bool {
        avg > self.limit
    }
}

/// The thermal images of one channel, to keep across a reset (in RAM the reset leaves alone):
/// [`GuardState::thermal`](crate::GuardState::thermal) saves it,
/// [`Guard::start_after_reset_restored`](crate::Guard::start_after_reset_restored) takes it
/// back. As bytes it carries a check word, so memory that was never written (a power-on) is
/// refused rather than read as a cool winding.
///
/// ```
/// use coilward::thermal::ThermalSnapshot;
/// let garbage = [0x5a_u8; ThermalSnapshot::BYTES];
/// assert_eq!(ThermalSnapshot::from_bytes(&garbage), None);
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ThermalSnapshot {
    pub(crate) coil: CoilHeat,
    pub(crate) clamp: ClampHeat,
}

impl ThermalSnapshot {
    /// Size of [`to_bytes`](Self::to_bytes): the winding image, three clamp stages and a check
    /// word, little-endian.
    pub const BYTES: usize = 40;

    /// The snapshot as bytes with a check word (FNV-1a of the first 32 bytes).
    pub fn to_bytes(&self) -> [u8; Self::BYTES] {
        let mut out = [0u8; Self::BYTES];
        let words = [
            self.coil.theta,
            self.clamp.rise[0] as u64,
            self.clamp.rise[1] as u64,
            self.clamp.rise[2] as u64,
        ];
        for (chunk, w) in out.chunks_exact_mut(8).zip(words.iter()) {
            chunk.copy_from_slice(&w.to_le_bytes());
        }
        let check = Self::check(&out);
        if let Some(tail) = out.get_mut(32..40) {
            tail.copy_from_slice(&check.to_le_bytes());
        }
        out
    }

    /// The snapshot from bytes, or `None` when the check word does not match.
    pub fn from_bytes(bytes: &[u8; Self::BYTES]) -> Option<Self> {
        let mut w = [0u64; 5];
        for (slot, chunk) in w.iter_mut().zip(bytes.chunks_exact(8)) {
            let mut b = [0u8; 8];
            b.copy_from_slice(chunk);
            *slot = u64::from_le_bytes(b);
        }
        (w[4] == Self::check(bytes)).then_some(Self {
            coil: CoilHeat { theta: w[0] },
            clamp: ClampHeat {
                rise: [w[1] as i64, w[2] as i64, w[3] as i64],
            },
        })
    }

    /// FNV-1a over the first 32 bytes.
    fn check(bytes: &[u8; Self::BYTES]) -> u64 {
        bytes.iter().take(32).fold(0xcbf2_9ce4_8422_2325, |h, b| {
            (h ^ u64::from(*b)).wrapping_mul(0x0000_0100_0000_01b3)
        })
    }
}

#[cfg(test)]
mod tests {
    extern crate std;
    use super::*;
    use std::eprintln;

    const FS: f64 = 4.0;

    fn amps(a: f64) -> Current {
        Current::from_bits((a / FS * (1u64 << 40) as f64) as i64)
    }

    /// The current `amps(a)` stands for.
    fn held(a: f64) -> f64 {
        amps(a).to_bits() as f64 / (1u64 << 40) as f64 * FS
    }

    /// The image's equation `τ·θ' = (i/I_B)²·(c0 + c1·θ) − θ` for `i = A + d·e^(−t/τ_r)`.
    /// With `c1 = 0` the exact solution is the superposition of first-order responses to
    /// exponential inputs (Laplace-transform tables; the same sums as a Foster network's):
    /// `(1/τ)∫e^(−s/τ_k)·e^(−(T−s)/τ)ds = (e^(−T/τ_k) − e^(−T/τ))·τ_k/(τ_k − τ)`. With
    /// `c1 > 0` it is integrated numerically (classical RK4, steps of τ_r/40 through the
    /// transient and τ/2000 after it).
    fn reference(
        theta0: f64,
        (a, d): (f64, f64),
        t: f64,
        (tau, tau_r): (f64, f64),
        ib: f64,
        c: (f64, f64),
    ) -> f64 {
        let g = 1.0 / (ib * ib);
        if c.1 == 0.0 {
            let k = |tk: f64| ((-t / tk).exp() - (-t / tau).exp()) * tk / (tk - tau);
            let held = a * a * (1.0 - (-t / tau).exp());
            return theta0 * (-t / tau).exp()
                + g * c.0 * (held + 2.0 * a * d * k(tau_r) + d * d * k(tau_r / 2.0));
        }
        let rate = |s: f64, th: f64| {
            let i = a + d * (-s / tau_r).exp();
            (g * i * i * (c.0 + c.1 * th) - th) / tau
        };
        let (mut s, mut th) = (0.0, theta0);
        while s < t {
            let h = if s < 30.0 * tau_r {
                tau_r / 40.0
            } else {
                tau / 2000.0
            }
            .min(t - s);
            let k1 = rate(s, th);
            let k2 = rate(s + h / 2.0, th + h / 2.0 * k1);
            let k3 = rate(s + h / 2.0, th + h / 2.0 * k2);
            let k4 = rate(s + h, th + h * k3);
            th += h / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4);
            s += h;
        }
        th
    }

    #[test]
    fn an_on_event_is_heated_by_the_exact_integral_of_i_squared_and_never_less() {
        let (tau, ib, tau_r, amb, rise, t_ref) = (60.0, 1.0, 2.2e-3, 20.0, 60.0, 20.0);
        for alpha in [0.0, 0.00393] {
            let cfg = CoilThermal::new(tau as f32, ib as f32, 1.05, amb as f32, rise as f32);
            let mut r = CoilReplica::new(&cfg, 50e-6, FS as f32, t_ref as f32, alpha as f32)
                .expect("valid image");
            r.set_rise(tau_r);
            let r_b = 1.0 + alpha * (amb + rise - t_ref);
            let c = ((1.0 + alpha * (amb - t_ref)) / r_b, alpha * rise / r_b);
            let a = 1.2;
            let mut worst: f64 = 0.0;
            for start in [0.0, 0.6, 1.2, 1.5] {
                for t in [2.2e-4, 2.2e-3, 0.011, 1.0, 60.0, 600.0] {
                    for theta0 in [0.0, 0.8, 1.2] {
                        let mut h = CoilHeat::with_image(theta0 as f32);
                        let us = (t * 1e6) as u32;
                        r.event_on(&mut h, amps(start), amps(a), us);
                        let got = h.theta as f64 / 4_294_967_296.0;
                        let t = f64::from(us) * 1e-6;
                        let (a, start) = (held(a), held(start));
                        let want = reference(theta0, (a, start - a), t, (tau, tau_r), ib, c);
                        let heating = (want - theta0 * (-t / tau).exp()).abs();
                        let over = (got - want) / heating.max(1e-3);
                        worst = worst.max(over);
                        // Q32.32 image from Q28 currents: 2^−30 of the heating covers the
                        // reference's own rounding.
                        let slack = heating * 1e-9 + 1e-9;
                        assert!(
                            got >= want - slack,
                            "α {alpha} start {start} t {t} θ0 {theta0}: {got} < {want}"
                        );
                        // α = 0: exact but for the transient's weight (a relative τ_r/τ) and
                        // rounding. α > 0: the resistance taken at the highest image the event
                        // reaches (the share c1·Δθ of the heating at most).
                        let allowed = if alpha == 0.0 { 1e-4 } else { c.1 * 1.3 };
                        assert!(
                            over <= allowed,
                            "α {alpha} start {start} t {t} θ0 {theta0}: {got} vs {want}"
                        );
                    }
                }
            }
            eprintln!(
                "CHECK on-event heating, α {alpha}: at most {worst:.2e} of the heating above the reference"
            );
        }
    }

    #[test]
    fn a_short_on_event_is_heated_far_less_than_at_its_peak() {
        // One τ_r from rest: ∫i²dt = A²·τ_r·(1 − 2(1 − e⁻¹) + (1 − e⁻²)/2) = 0.168·A²·τ_r, where
        // heating at the peak A(1 − e⁻¹) for the whole event gives 0.400·A²·τ_r.
        let cfg = CoilThermal::new(60.0, 1.0, 1.05, 20.0, 60.0);
        let mut r = CoilReplica::new(&cfg, 50e-6, FS as f32, 20.0, 0.0).expect("valid image");
        r.set_rise(0.01);
        let mut h = CoilHeat::default();
        r.event_on(&mut h, amps(0.0), amps(1.0), 10_000);
        let got = h.theta as f64 / 4_294_967_296.0;
        let want = 0.01 * (1.0 - 2.0 * (1.0 - (-1f64).exp()) + (1.0 - (-2f64).exp()) / 2.0) / 60.0;
        assert!((got - want).abs() < 2e-3 * want, "{got} vs {want}");
    }

    /// `colder_than` is the first θ at or above a temperature: one below it is colder, it
    /// is not (ambient 20 °C, 60 K at image 1; temperatures from below ambient to far above).
    #[test]
    fn colder_than_is_the_first_image_at_a_temperature() {
        let cfg = CoilThermal::new(60.0, 1.0, 1.05, 20.0, 60.0);
        let r = CoilReplica::new(&cfg, 50e-6, FS as f32, 20.0, 0.0).expect("valid image");
        let t = |theta: u64| r.temperature(&CoilHeat { theta }).to_bits();
        for c in [-40.0, 20.0, 20.000_01, 25.0, 80.0, 155.5, 1e6] {
            let want = crate::model::q32_signed(c);
            let at = r.colder_than(want);
            if at == u64::MAX {
                assert!(t(1 << 62) < want, "{c} °C");
                continue;
            }
            assert!(t(at) >= want, "{c} °C at {at}");
            assert!(at == 0 || t(at - 1) < want, "{c} °C below {at}");
        }
        assert_eq!(r.colder_than(crate::model::q32_signed(-40.0)), 0);
        // 80 °C is 60 K above ambient: image 1.
        let one = r.colder_than(crate::model::q32_signed(80.0));
        assert!(one.abs_diff(1 << 32) < 1 << 12, "{one}");
    }
}
