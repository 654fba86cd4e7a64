//! The coil-current estimate and its exact per-period update.
//!
//! Each segment of constant drive follows `i(t) = A + (i0 − A)·e^(−t/τ)`, written as
//! `i' = i0 + (A − i0)·E(t/τ)` with `E(x) = 1 − e^(−x)` from the model's tables. A period of
//! duty `n` (of `N` counts) is an on-segment of `n·T/N` then an off-segment of `(N − n)·T/N`; a
//! current that reaches zero in the off-segment stays there (the clamp paths block reverse
//! current), which is exactly what clamping the result at zero does.
//!
//! # Cost and contract
//! Integers only, no division: two table evaluations (at most three u32×u32 products each), two
//! scalings (two products each) and the two supply gains. The error contract follows.
//!
//! # Numerical contract
//! The runtime quantities' formats are also in the `units` module; the kernels' in `qmath`.
//!
//! ### Formats
//!
//! | quantity | type | format | range | resolution |
//! |---|---|---|---|---|
//! | current | `Current` | i64, 40 fractional bits, fraction of `current_full_scale` | working range 0 ..= 2²¹ full scale (validated headroom; ±2²³ representable) | 2⁻⁴⁰ full scale |
//! | supply, node voltage | `Volts` = `U16F16` | u32, 16 fractional bits, V | 0 ..= 65535.99998 V; the estimator clamps the supply to 2 × `supply.max` | 15.3 µV |
//! | energy | `Energy` | u64, 32 fractional bits, units of L·I_fs² | 0 ..= 4.29·10⁹ units | 2.3·10⁻¹⁰ unit |
//! | event time | `u32` | µs | 0 ..= 4295 s | 1 µs |
//! | duty | `u32` | timer counts, clamped to `duty_resolution` (1 ..= 65535) | | 1 count |
//! | decay factor E | mantissa u32 + shift | `E = m·2^−(32+s)`, s per radix-16 digit | 0 ..= 1 − 2⁻³² | relative 2⁻²⁴ |
//! | logarithm | i64 | Q31.32 | log2 of 1 ..= 2⁶⁴ | abs. error < 2⁻²⁹ (64-entry table + 5-term series) |
//! | power 2^−y | u64 mantissa + shift | Q1.63 | y ≥ 0 (Q32.32) | relative 2⁻⁵⁰ (64-entry table + 6-term series) |
//! | back-EMF (bridge) | `SignedVolts` = `I16F16` | i32, 16 fractional bits, V; clamped to ±`motor.back_emf_limit` | ±32768 V | 15.3 µV |
//! | speed (bridge) | `Speed` = `I16F16` | i32, 16 fractional bits, rad/s | ±32768 rad/s | 15.3 µrad/s |
//! | charge (bridge) | `Charge` | i64, 16 fractional bits, units of I_fs·T/N (full-scale current for one count) | ±1.4·10¹⁴ units | 1.5·10⁻⁵ unit |
//! | duty (bridge) | `i32` | signed timer counts, clamped to ±`duty_resolution` | | 1 count |
//!
//! ### Parameter ranges (validated; each refusal names its field)
//! supply 0.1 ..= 1000 V (min ≥ 0); inductance 1 µH ..= 1000 H; resistance 1 mΩ ..= 100 kΩ (also
//! after temperature correction); temperatures −100 ..= 300 °C; α 0 ..= 0.02 /K; node capacitance
//! 1 fF ..= 1 mF; on-resistance 0 ..= 1 kΩ; breakdown 1 ..= 5000 V; diode drop 0 ..= 20 V; zener
//! 0.1 ..= 5000 V; clamp 1 ..= 5000 V; path resistance 0 ..= 10 kΩ; period 100 ns ..= 1 s; duty
//! resolution 1 ..= 65535; full scale 100 µA ..= 10 kA. Relations: min ≤ nominal ≤ max; breakdown
//! above the maximum supply; a clamp across the switch above the maximum supply and, with its
//! resistance at full scale, not above the breakdown; a freewheel path whose drop at full scale keeps
//! the switch node below breakdown at maximum supply; both time constants in 1 µs ..= 100 s; period at
//! least 2⁻²⁴ of the longest time constant; every asymptote (up to twice the maximum supply) within
//! 2²¹ full scale. This covers the promised box — τ 10 µs ..= 10 s, currents to 100 A, supplies to
//! 100 V, periods 1 µs ..= 10 ms — in every combination (the corner T = 1 µs, τ = 10 s has
//! T/τ = 10⁻⁷ > 2⁻²⁴).
//!
//! Full bridge, in addition: body-diode drop 0.05 ..= 5 V, resistance 0 ..= 10 Ω; `fast_share`
//! strictly between 0 and 1 (2⁻¹⁶ ..= 1 − 2⁻¹⁶); back-EMF limit 0 ..= `supply.min`; motor constant
//! 0 ..= 100 V·s/rad; bus capacitance 1 nF ..= 10 F, sink 0 ..= 10 kA (and then `supply.max` above
//! nominal); reversal dead time 0 ..= 10 s; release current > 0. Relations: the maximum supply plus
//! two diode drops at full scale below the breakdown; both time constants in range; the asymptotes
//! at twice the maximum supply plus the back-EMF limit within 2²¹ full scale.
//!
//! ### Error bounds
//! Per period (two segments), in fractions of full scale:
//! - each decay factor carries a relative error below 2⁻²⁴, so a segment adds at most
//!   `2⁻²⁴·|A − i|·E`;
//! - each scaling truncates by less than one unit (2⁻⁴⁰); two per period;
//! - the supply gains are held to 2⁻³² relative.
//!
//! Unbounded run: the period map is a contraction with factor `K = (1 − E1)(1 − E2) ≤ e^(−T/τ_max)`,
//! so errors do not accumulate beyond
//!
//! ```text
//! ε∞ ≤ 2⁻³⁹/(1 − K) + 2⁻²³·max|A − i|
//! ```
//!
//! which for the validated range (T/τ_max ≥ 2⁻²⁴) is at most 3.1·10⁻⁵ of full scale plus 1.2·10⁻⁷
//! per full scale of `|A − i|` — inside the 10⁻³ promise for asymptotes up to thousands of full
//! scales. Event mode obeys the same form per event; a run of 1 µs events on a 100 s coil is bounded
//! by 2⁻⁴⁰/10⁻⁸ ≈ 9·10⁻⁵ of full scale.
//!
//! Closed forms: decay time within 1 µs (rounded up) + 2⁻²⁷·τ_off; turn-off energy within
//! 2·10⁻⁶ relative + 2⁻³⁰ unit; drain peak within one U16F16 step plus the gain's 2⁻³² relative.
//!
//! # Panics
//! None. The supply is clamped to twice the validated maximum, so both asymptotes lie within
//! ±2⁶¹ raw; the state stays between its old value and an asymptote, so it too stays within
//! that range, and every difference fed to the scaling is at most 2⁶² in magnitude.

use crate::model::Model;
use crate::qmath::{Decay, scale};
use crate::units::{Current, Volts};

/// Per-channel state of the estimator: the coil current at the start of the next period.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CoilState {
    current: Current,
}

impl CoilState {
    /// A coil known to carry no current.
    pub const fn idle() -> Self {
        Self {
            current: Current::ZERO,
        }
    }

    /// A coil known to carry `current` (clamped to 0 ..= [`Current::LIMIT`]).
    pub const fn with_current(current: Current) -> Self {
        Self {
            current: Current::from_bits(current.working_bits()),
        }
    }

    /// The estimated coil current now.
    pub const fn current(&self) -> Current {
        self.current
    }
}

/// What the estimator says about one period (or one event segment).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct PeriodEstimate {
    /// Current at the start.
    pub start: Current,
    /// Highest current in the period (the end of the on-segment when the current rises).
    pub peak: Current,
    /// Lowest current in the period.
    pub valley: Current,
    /// Current at the end (the start of the next period).
    pub end: Current,
}

/// The time unit of a segment's length: timer counts (per period) or microseconds (events).
#[derive(Clone, Copy, PartialEq, Eq)]
pub(crate) enum Unit {
    Count,
    Micro,
}

/// `log2 |A − at|` shared by the saturation splits of one frame (the same asymptote `A` and
/// crossing level `at`, so the same value): taken by the first split that needs it.
pub(crate) type SharedLog = core::cell::Cell<Option<i64>>;

/// One exact segment toward asymptote `a`, stopping at zero.
#[inline(always)]
pub(crate) fn segment(i: i64, a: i64, e: Decay) -> i64 {
    let next = i + scale(a - i, e);
    if next < 0 { 0 } else { next }
}

/// A segment that runs on the decay `first` until the current reaches `at`, then on `second`
/// (τ of the first part in the segment's units, Q32.32). The crossing time
/// `τ·ln(|A − i0|/|A − at|)` is rounded down: the logarithm is lowered by its error bound
/// (2^−28, 16 units of Q32.32) and the product truncated, so the second part is never short
/// (it is the faster one on a rise into saturation and the slower one on a decay out of it, so
/// the result errs high either way by at most one unit of time).
#[inline]
fn split(
    i0: i64,
    a: i64,
    len: u32,
    first: impl Fn(u32) -> Decay,
    second: impl Fn(u32) -> Decay,
    (at, tau_first): (i64, u64),
    shared: Option<&SharedLog>,
) -> i64 {
    let i1 = segment(i0, a, first(len));
    let crosses = if a > i0 {
        i0 < at && i1 > at
    } else {
        i0 > at && i1 < at
    };
    if !crosses {
        return i1;
    }
    // at lies strictly between i0 and a: both differences are positive and below 2^62.
    let log_den = if let Some(v) = shared.and_then(core::cell::Cell::get) {
        v
    } else {
        let v = crate::qmath::log2(a.abs_diff(at));
        if let Some(c) = shared {
            c.set(Some(v));
        }
        v
    };
    let ln =
        crate::qmath::ln_of_logs(crate::qmath::log2(a.abs_diff(i0)), log_den).saturating_sub(16);
    let t_cross = crate::clamp::time_q64(ln, tau_first) >> 64;
    let rest = u128::from(len).saturating_sub(t_cross) as u32; // <= len
    segment(at, a, second(rest))
}

/// A rising segment of `len` units from `i0` toward `a` with the unsaturated decay `unsat`,
/// split where it crosses the saturation current when `sat` = (saturation current, unsaturated
/// time constant in the same units as Q32.32, saturated decay) is given.
#[inline]
pub(crate) fn rise(
    i0: i64,
    a: i64,
    len: u32,
    unsat: impl Fn(u32) -> Decay,
    sat: Option<(i64, u64, impl Fn(u32) -> Decay)>,
    shared: Option<&SharedLog>,
) -> i64 {
    match sat {
        Some((at, _, sat)) if a > at && i0 >= at => segment(i0, a, sat(len)),
        Some((at, tau, sat)) if a > at && i0 >= 0 => {
            split(i0, a, len, unsat, sat, (at, tau), shared)
        }
        _ => segment(i0, a, unsat(len)),
    }
}

/// A falling segment of `len` units from `i0` toward `a < i0` with the unsaturated decay
/// `unsat`; from above the saturation current it falls on `sat` = (saturation current,
/// saturated time constant in the same units as Q32.32, saturated decay) until it reaches it.
#[inline]
pub(crate) fn fall(
    i0: i64,
    a: i64,
    len: u32,
    unsat: impl Fn(u32) -> Decay,
    sat: Option<(i64, u64, impl Fn(u32) -> Decay)>,
    shared: Option<&SharedLog>,
) -> i64 {
    match sat {
        Some((at, tau, sat)) if i0 > at && a < at => {
            split(i0, a, len, sat, unsat, (at, tau), shared)
        }
        _ => segment(i0, a, unsat(len)),
    }
}

impl PeriodEstimate {
    #[inline(always)]
    fn of(i0: i64, i1: i64, i2: i64) -> Self {
        // Each segment is monotonic, so the extremes are among the three corner values.
        Self {
            start: Current::from_bits(i0),
            peak: Current::from_bits(i0.max(i1).max(i2)),
            valley: Current::from_bits(i0.min(i1).min(i2)),
            end: Current::from_bits(i2),
        }
    }
}

impl Model {
    /// The on-segment of `len` units from `i0` toward `a`, split at the saturation current when
    /// the coil saturates (see the model's module documentation).
    #[inline]
    pub(crate) fn on_part(&self, i0: i64, a: i64, len: u32, unit: Unit) -> i64 {
        let unsat = |n| match unit {
            Unit::Count => self.on_duty.eval(n),
            Unit::Micro => self.on_event.eval(n),
        };
        let tau_units = |s: &crate::model::SatPart| match unit {
            Unit::Count => s.tau_on_counts,
            Unit::Micro => self.tau_on_us,
        };
        rise(i0, a, len, unsat, self.saturated(unit, tau_units), None)
    }

    /// The off-segment of `len` units from `i1` toward `a`, falling through the saturation
    /// current from above when the coil saturates.
    #[inline]
    pub(crate) fn off_part(&self, i1: i64, a: i64, len: u32, unit: Unit) -> i64 {
        let unsat = |n| match unit {
            Unit::Count => self.off_duty.eval(n),
            Unit::Micro => self.off_event.eval(n),
        };
        fall(i1, a, len, unsat, self.saturated_off(unit), None)
    }

    /// The saturated decay in `unit`, as [`fall`] takes it.
    #[inline]
    pub(crate) fn saturated_off(
        &self,
        unit: Unit,
    ) -> Option<(i64, u64, impl Fn(u32) -> Decay + '_)> {
        self.saturation.as_ref().map(move |s| {
            let eval = move |n| match unit {
                Unit::Count => s.off_duty.eval(n),
                Unit::Micro => s.off_event.eval(n),
            };
            let tau = match unit {
                Unit::Count => s.tau_off_counts,
                Unit::Micro => s.tau_off_us,
            };
            (s.at, tau, eval)
        })
    }

    /// The saturated part in `unit`, as [`rise`] takes it: (saturation current, the unsaturated
    /// time constant in that unit, the saturated decay).
    #[inline]
    pub(crate) fn saturated(
        &self,
        unit: Unit,
        tau_units: impl Fn(&crate::model::SatPart) -> u64,
    ) -> Option<(i64, u64, impl Fn(u32) -> Decay + '_)> {
        self.saturation.as_ref().map(move |s| {
            let eval = move |n| match unit {
                Unit::Count => s.on_duty.eval(n),
                Unit::Micro => s.on_event.eval(n),
            };
            (s.at, tau_units(s), eval)
        })
    }

    /// Advances `state` over one control period in which duty `duty` (counts, clamped to the
    /// duty resolution) was applied, with the measured supply `supply`.
    ///
    /// Edge-aligned: on for `duty·T/N` from the start of the period, then off.
    ///
    /// ```
    /// use coilward::{ClampPath, CoilParams, CoilState, ControlParams, Params, SupplyParams,
    ///                SwitchParams, Volts};
    /// // A demo coil: 100 mH, 10 Ω, 12 V, diode freewheel, 20 kHz PWM with 1000 counts.
    /// let p = Params::new(
    ///     SupplyParams::new(12.0, 10.0, 14.0),
    ///     CoilParams::new(0.1, 10.0),
    ///     SwitchParams::new(0.05, 60.0),
    ///     ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.0 },
    ///     ControlParams::new(50e-6, 1000, 2.0),
    /// );
    /// let model = p.validate()?;
    /// let mut coil = CoilState::idle();
    /// let mut last = None;
    /// for _ in 0..20_000 {
    ///     last = Some(model.step(&mut coil, 500, Volts::from_num(12)));
    /// }
    /// let amps = model.amps(coil.current());
    /// // Half duty settles near (0.5·12 − 0.5·0.7)/(10 + 0.5·0.05) = 0.5636 A.
    /// assert!((amps - 0.5636).abs() < 0.001);
    /// let period = last.unwrap();
    /// assert!(period.peak > period.valley);
    /// # Ok::<(), coilward::ConfigError>(())
    /// ```
    pub fn step(&self, state: &mut CoilState, duty: u32, supply: Volts) -> PeriodEstimate {
        let n = if duty > self.duty_full {
            self.duty_full
        } else {
            duty
        };
        self.step_with(state, n, supply, self.duty_factors(n))
    }

    /// The decay factors of a period of duty `n <= duty_full`: `E` of its on-part and of its
    /// off-part (what [`Model::step_with`] takes).
    pub(crate) fn duty_factors(&self, n: u32) -> (Decay, Decay) {
        (
            self.on_duty.eval(n),
            self.off_duty.eval(self.duty_full.saturating_sub(n)),
        )
    }

    /// [`Model::step`] for a duty `n <= duty_full` whose factors `(on, off)` were evaluated
    /// before ([`Model::duty_factors`]): bit for bit the same result without the two table
    /// evaluations (a part of another length, after a saturation split, still reads its table).
    pub(crate) fn step_with(
        &self,
        state: &mut CoilState,
        n: u32,
        supply: Volts,
        (on, off): (Decay, Decay),
    ) -> PeriodEstimate {
        let vs = self.supply(supply);
        let i0 = state.current.to_bits();
        let unsat_on = |k| if k == n { on } else { self.on_duty.eval(k) };
        let sat_on = self.saturated(Unit::Count, |s| s.tau_on_counts);
        let i1 = rise(i0, self.on_asymptote(vs), n, unsat_on, sat_on, None);
        // n <= duty_full, so the subtraction cannot wrap.
        let m = self.duty_full - n;
        let unsat_off = |k| if k == m { off } else { self.off_duty.eval(k) };
        let i2 = fall(
            i1,
            self.off_asymptote(vs),
            m,
            unsat_off,
            self.saturated_off(Unit::Count),
            None,
        );
        state.current = Current::from_bits(i2);
        PeriodEstimate::of(i0, i1, i2)
    }

    /// Advances `state` by `micros` microseconds with the switch held on (`on`) or off, for loads
    /// switched on events timed by a free-running timer. Exact for any span up to 2³² − 1 µs.
    ///
    /// For a timer that wraps, pass the wrapping difference of two readings
    /// (`now.wrapping_sub(then)`).
    pub fn advance(
        &self,
        state: &mut CoilState,
        on: bool,
        micros: u32,
        supply: Volts,
    ) -> PeriodEstimate {
        let vs = self.supply(supply);
        let i0 = state.current.to_bits();
        let i1 = if on {
            self.on_part(i0, self.on_asymptote(vs), micros, Unit::Micro)
        } else {
            self.off_part(i0, self.off_asymptote(vs), micros, Unit::Micro)
        };
        state.current = Current::from_bits(i1);
        PeriodEstimate::of(i0, i1, i1)
    }
}
