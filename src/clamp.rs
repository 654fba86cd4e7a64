//! Closed forms for turn-off: decay time, energy into the clamp path, peak switch-node voltage.
//!
//! With the switch open the current obeys `L·di/dt = −(b + (R + R_p)·i)`, where the path drops
//! `V_p + R_p·i` and `b = V_p − Vs` for a path across the switch (clamp or avalanche; the supply
//! keeps pushing current) or `b = V_p` for a freewheel path across the coil. Let
//! `a = b/(R + R_p)` (the magnitude of the negative asymptote), `τ = L/(R + R_p)` and
//! `λ = ln(1 + I0/a)`:
//!
//! - time from I0 to a threshold I: `t = τ·ln((I0 + a)/(I + a))`; to zero `t = τ·λ`
//!   (with R → 0: `L·I0/b`);
//! - charge `Q = ∫i dt = τ·(I0 − a·λ) = τ·a·(λ²/2)·ψ(λ)`, ψ(λ) = 2(e^λ − 1 − λ)/λ²;
//! - `∫i² dt = τ·(I0²/2 − a·I0 + a²·λ) = τ·a²·(λ³/3)·χ(λ)`,
//!   χ(λ) = 3(e^{2λ}/2 − 2e^λ + 3/2 + λ)/λ³;
//! - energy into the path `E = V_p·Q + R_p·∫i² dt`. For R → 0 and R_p = 0 this is the
//!   unclamped-inductive-switching form `½·L·I0²·V_p/(V_p − Vs)`.
//!
//! With `u = I0/a`, the same two integrals are `Q = τ·I0·u·φ1(u)/2` and
//! `∫i² dt = τ·I0²·u·φ2(u)/3`, φ1(u) = 2(u − ln(1+u))/u², φ2(u) = 3(u²/2 − u + ln(1+u))/u³.
//!
//! Which form is evaluated: for u ≤ 1/4 the alternating series φ1, φ2, with `u = 2^−y` taken
//! from the difference of two fixed-point logarithms (so u keeps its relative precision however
//! small it is: the R → 0 and high-clamp cases); for 1/4 < u and λ ≤ 1 the series ψ, χ in λ;
//! beyond, the direct forms (which lose at most a factor of about 5 to cancellation there).
//! Logarithms and powers are fixed-point `log2`/`2^−y` kernels: no division anywhere.
//!
//! # Panics
//! None: currents are first clamped to the working range 0 ..= [`Current::LIMIT`] (2⁶¹ raw),
//! asymptotes are bounded by validation, every product is u128 of u64 operands, shifted before
//! the next product, and the results saturate.

use crate::model::{Model, PathKind};
use crate::qmath::{chi, exp2, exp2_neg, ln_ratio, log2, phi1, phi2, psi};
use crate::units::{Current, Energy, Volts};

/// `τ·ln` in µs as Q64.64, for a logarithm `ln` (Q32.32) and a time constant `tau_us` (Q32.32 µs).
#[inline]
pub(crate) fn time_q64(ln: u64, tau_us: u64) -> u128 {
    u128::from(ln) * u128::from(tau_us)
}

/// `(a·b) >> sh` in u128, saturating to u64.
#[inline]
fn mul_shr(a: u64, b: u64, sh: u32) -> u64 {
    let p = (u128::from(a) * u128::from(b)) >> sh;
    p.min(u128::from(u64::MAX)) as u64
}

impl Model {
    /// Time for the current to fall from `from` to `to` through the clamp path with the switch
    /// off, in whole microseconds rounded up, at the measured supply `supply`.
    ///
    /// `t = τ_off·ln((I0 + a)/(I + a))`. `Some(0)` when `from <= to`; `None` when the current
    /// would not fall that far (a supply at or above the clamp voltage, so the path cannot
    /// reverse the coil voltage), or would take longer than `u32::MAX` µs.
    /// Error: below 1 µs + 2⁻²⁷·τ_off.
    pub fn decay_time_us(&self, from: Current, to: Current, supply: Volts) -> Option<u32> {
        let i0 = from.working_bits();
        let i1 = to.working_bits();
        if i0 <= i1 {
            return Some(0);
        }
        let a = self.decay_pull(self.supply(supply));
        if a <= 0 {
            return None;
        }
        // a, i0 and i1 are each below 2^61, so the sums fit.
        let ln = ln_ratio((i0 + a) as u64, (i1 + a) as u64);
        let t_q64 = time_q64(ln, self.tau_off_us);
        let whole = t_q64 >> 64;
        let frac = t_q64 & u128::from(u64::MAX);
        let t = whole + u128::from(frac != 0);
        u32::try_from(t).ok()
    }

    /// Energy the clamp path absorbs when the switch opens with `from` flowing, until the current
    /// reaches zero, at the measured supply. With no clamp ([`PathKind::Avalanche`]) this is the
    /// energy into the switch in avalanche.
    ///
    /// [`Energy::MAX`] when the current would not decay (supply at or above the path voltage).
    /// Relative error below 10⁻⁶ for λ ≤ 1 and 10⁻⁵ above (measured in `tests/references.rs`).
    pub fn turn_off_energy(&self, from: Current, supply: Volts) -> Energy {
        let i0 = from.working_bits();
        if i0 == 0 {
            return Energy::ZERO;
        }
        let a_raw = self.decay_pull(self.supply(supply));
        if a_raw <= 0 {
            return Energy::MAX;
        }
        let y = log2(a_raw as u64) - log2(i0 as u64); // log2(1/u), u = I0/a
        if y >= 2 << 32 {
            // u <= 1/4: series in u, evaluated in the log domain so that every factor keeps
            // its relative precision however small u is (the R → 0 and high-clamp cases):
            //   path term    V_p·Q/(L·I_fs²)      = drive·I0·u·φ1(u)/2,
            //   resistive    R_p·∫i²dt/(L·I_fs²)  = share·I0²·u·φ2(u)/3,
            // with log2 u = −y. Raw scales: I0 Q40, drive and share Q32, result Q32.
            let (m, sh) = exp2_neg(y as u64);
            let u = (m >> 31).checked_shr(sh).unwrap_or(0); // Q32, for the series only
            let li = log2(i0 as u64);
            let path = if self.path_drive == 0 {
                0
            } else {
                let z = log2(self.path_drive) + li - y - (40 << 32);
                mul_shr(exp2(z), phi1(u), 63) // ·φ1/2 (φ1 is Q2.62)
            };
            let res = if self.path_share == 0 {
                0
            } else {
                let z = log2(u64::from(self.path_share)) + 2 * li - y - (80 << 32);
                mul_shr(exp2(z), phi2(u), 62) / 3
            };
            return Energy::from_bits(path.saturating_add(res));
        }
        // q  = Q/(τ·I_fs),  q2 = ∫i²dt/(τ·I_fs²), both Q40 like the raw currents.
        let (q, q2) = {
            let lambda = ln_ratio((i0 + a_raw) as u64, a_raw as u64);
            if lambda <= 1 << 32 {
                // Series in λ (λ in Q32).
                let a = a_raw as u64;
                let al = mul_shr(a, lambda, 32); // a·λ
                let al2 = mul_shr(al, lambda, 32); // a·λ²
                let q = mul_shr(al2, psi(lambda), 62 + 1); // a·λ²·ψ/2
                let al_sq = mul_shr(al, al, 40); // (a·λ)²
                let al_cu = mul_shr(al_sq, lambda, 32); // a²·λ³
                let q2 = mul_shr(al_cu, chi(lambda), 62) / 3; // a²·λ³·χ/3
                (q, q2)
            } else {
                let (i, a) = (i0 as u64, a_raw as u64);
                let q = i.saturating_sub(mul_shr(a, lambda, 32)); // I0 − a·λ
                let q2 = mul_shr(i, i, 41).saturating_sub(mul_shr(a, q, 40)); // I0²/2 − a·q
                (q, q2)
            }
        };
        let e = mul_shr(self.path_drive, q, 40).saturating_add(mul_shr(
            u64::from(self.path_share),
            q2,
            40,
        ));
        Energy::from_bits(e)
    }

    /// Energy into the switch in avalanche for a turn-off from `from`: the whole turn-off energy
    /// when nothing clamps the switch, zero when a clamp path keeps the switch below breakdown
    /// (validation guarantees that up to full-scale current).
    pub fn avalanche_energy(&self, from: Current, supply: Volts) -> Energy {
        match self.path {
            PathKind::Avalanche => self.turn_off_energy(from, supply),
            _ => Energy::ZERO,
        }
    }

    /// Peak switch-node (drain) voltage at a turn-off from `from`, at the measured supply:
    /// - freewheel paths: `Vs + V_p + R_p·I0`;
    /// - clamp across the switch: `V_p + R_p·I0`;
    /// - nothing: `min(BV, Vs + I0·√(L/C))` with the node capacitance C, or BV without it.
    ///
    /// Never above the switch breakdown, where the switch itself clamps.
    pub fn peak_drain_voltage(&self, from: Current, supply: Volts) -> Volts {
        let i0 = from.working_bits() as u64;
        let vs = if self.drain_adds_supply {
            u64::from(self.supply(supply))
        } else {
            0
        };
        let v = vs
            .saturating_add(u64::from(self.drain_base))
            .saturating_add(self.drain_slope.apply_wide(i0));
        Volts::from_bits(v.min(u64::from(self.breakdown_bits)) as u32)
    }

    /// Upper bound of the energy the path absorbs over an off-segment of `off_counts` timer
    /// counts in which the current falls from `i1` to `i2 > 0` without reaching zero:
    /// `(V_p + R_p·i1)·(i1 + i2)/2·t_off`. The decay is convex, so the chord's mean bounds the
    /// true mean current; the error is of the order of the squared ripple. Multiplications only.
    pub(crate) fn off_segment_energy_bound(
        &self,
        i1: Current,
        i2: Current,
        off_counts: u32,
    ) -> Energy {
        let a = i1.working_bits() as u64;
        let b = i2.working_bits() as u64;
        let mean = u128::midpoint(u128::from(a), u128::from(b)); // Q40
        let n = u128::from(off_counts);
        let path = self.chord_path.apply_u128(mean * n);
        let sq = (u128::from(a) * mean) >> 40; // i1·ī, Q40
        let res = self.chord_share.apply_u128(sq.saturating_mul(n));
        Energy::from_bits(path.saturating_add(res))
    }
}
