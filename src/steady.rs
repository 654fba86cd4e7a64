//! The periodic steady state under a constant PWM duty: valley, peak, mean and ripple.
//!
//! A planning helper (hold-duty selection, checks, reports), **not** for the per-tick path: it
//! divides by a duty-dependent value. It is exact for the piecewise-exponential model:
//!
//! - continuous conduction: valley `i_v = (A_on·E1·(1 − E2) + A_off·E2)/(1 − (1 − E1)(1 − E2))`,
//!   peak `i_p = i_v + (A_on − i_v)·E1`, with E1 = E(t_on/τ_on), E2 = E(t_off/τ_off);
//! - mean from the charge of each segment (`∫i dt = A·t + τ·(i_start − i_end)`):
//!   `ī = D·A_on + (1 − D)·A_off + (τ_off − τ_on)/T·(i_p − i_v)`;
//! - when that valley would be negative the current reaches zero in every period
//!   (discontinuous): valley 0, peak `A_on·E1`, and the mean subtracts the part of the
//!   off-time spent at zero: `ī = D·A_on + (τ_off − τ_on)/T·i_p − a·t_z/T`,
//!   `t_z = τ_off·ln((i_p + a)/a)`, `a = −A_off`.
//!
//! In the small-ripple limit the mean reduces to the averaged-circuit relation
//! `D·Vs − (1 − D)·V_p = ī·(R + D·R_on + (1 − D)·R_p)` (freewheel paths).

use crate::model::Model;
use crate::qmath::{Decay, ln_ratio, scale};
use crate::units::{Current, Volts};

/// The periodic steady state under one duty and supply.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SteadyState {
    /// Current at the start of each period (the lowest in continuous conduction).
    pub valley: Current,
    /// Current at the end of each on-segment (the highest).
    pub peak: Current,
    /// Mean current over a period.
    pub mean: Current,
    /// Whether the current stays above zero through the period.
    pub continuous: bool,
}

impl SteadyState {
    /// Peak-to-valley ripple.
    pub const fn ripple(&self) -> Current {
        Current::from_bits(self.peak.to_bits() - self.valley.to_bits())
    }
}

/// `E` as Q0.62.
fn q62(e: Decay) -> u128 {
    let m = u128::from(e.m);
    if e.s <= 30 {
        m << (30 - e.s)
    } else {
        m.checked_shr(e.s - 30).unwrap_or(0)
    }
}

/// `(x·g) >> 32` for a signed x and a signed Q32.32 g, in i128.
fn mul_q32(x: i128, g: i64) -> i128 {
    (x * i128::from(g)) >> 32
}

impl Model {
    /// The periodic steady state for duty `duty` (counts, clamped to the resolution) at supply
    /// `supply`. See the module documentation for the formulas.
    pub fn steady_state(&self, duty: u32, supply: Volts) -> SteadyState {
        let vs = self.supply(supply);
        let n = duty.min(self.duty_full);
        let a_on = i128::from(self.on_asymptote(vs));
        let a_off = i128::from(self.off_asymptote(vs));
        let e1 = self.on_duty.eval(n);
        let e2 = self.off_duty.eval(self.duty_full - n);
        let (q1, q2) = (q62(e1), q62(e2));
        // Denominator 1 − (1 − E1)(1 − E2) = E1 + E2 − E1·E2 > 0 for every duty (E2 > 0 at
        // n = 0 and E1 > 0 at n = N), so the division below is defined; checked all the same.
        let den = (q1 + q2 - ((q1 * q2) >> 62)) as i128;
        let on_part = a_on * q1 as i128;
        let num = on_part - ((on_part >> 62) * q2 as i128) + a_off * q2 as i128;
        let valley = num.checked_div(den).unwrap_or(0);
        let d_num = i128::from(n);
        let d_den = i128::from(self.duty_full);
        // d_den is the validated duty resolution (>= 1); checked all the same.
        let on_mean = (a_on * d_num).checked_div(d_den).unwrap_or(0);
        let gap = self.tau_gap_over_period;
        if valley >= 0 {
            let v = valley as i64;
            let peak = v + scale(a_on as i64 - v, e1);
            let off_mean = (a_off * (d_den - d_num)).checked_div(d_den).unwrap_or(0);
            let mean = on_mean + off_mean + mul_q32(i128::from(peak - v), gap);
            return SteadyState {
                valley: Current::from_bits(v),
                peak: Current::from_bits(peak),
                mean: Current::from_bits(mean.max(0) as i64),
                continuous: true,
            };
        }
        let peak = scale(a_on as i64, e1).max(0);
        let a = (-a_off).max(1) as i64;
        let ln = ln_ratio((peak + a) as u64, a as u64);
        // a·t_z/T = a·(τ_off/T)·ln.
        // In discontinuous conduction t_z lies within the off-time, so t_z/T <= 1 (clamped
        // against rounding, which also bounds the product below).
        let tz_over_t =
            ((u128::from(self.tau_off_over_period) * u128::from(ln)) >> 32).min(1 << 32);
        let zero_part = (i128::from(a) * tz_over_t as i128) >> 32;
        let mean = on_mean + mul_q32(i128::from(peak), gap) - zero_part;
        SteadyState {
            valley: Current::ZERO,
            peak: Current::from_bits(peak),
            mean: Current::from_bits(mean.max(0) as i64),
            continuous: false,
        }
    }
}
