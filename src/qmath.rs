//! Fixed-point kernels: the exponential step table, the binary logarithm and the series used by
//! the closed forms. Integer arithmetic only; every shift and product is bounded as stated.
//!
//! # The decay factor `E(x) = 1 − e^(−x)`
//! Every exact RL update is `i' = i + (A − i)·E(t/τ)`, with `A` the segment's asymptote. `E` is
//! returned as a mantissa `m` (u32) and a shift `s`: `E = m · 2^−(32+s)`. Tables are built at
//! configuration time (in f64, from f32 parameters) for one time unit `u` (one timer count, or
//! one microsecond), in radix-16 digits: `T[d][j] = E(j·16^d·u)`. A runtime count `n` is
//! evaluated by composing its digits with `E(a+b) = E(a) + E(b) − E(a)·E(b)`, from the most
//! significant non-zero digit down, in that digit's scale.
//!
//! Scale of digit `d`: the largest `s` with `E(16^(d+1)·u)·2^s < 1`, so every value whose top
//! digit is `d` has a mantissa below 2³² and at least 27 significant bits.
//!
//! Error: each table entry is within 2⁻³² of its scale (f64 → nearest u32); each composition adds
//! under 2 units of the mantissa. The result has a relative error below 2⁻²⁴ for every `n`
//! (measured by `tests/kernels.rs`, which also measures the bound).
//!
//! # Panics
//! None: shifts use `checked_shr` (a shift past the width yields 0, the correct limit),
//! additions saturate, and products are of u32 operands into u64 (which cannot overflow).

/// Number of radix-16 digits for the duty tables (counts up to 65535).
pub(crate) const DUTY_DIGITS: usize = 4;

/// `E(x) = 1 − e^(−x)` as mantissa and shift: `E = m·2^−(32+s)`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub(crate) struct Decay {
    pub(crate) m: u32,
    pub(crate) s: u32,
}

impl Decay {
    /// `E(0) = 0`.
    pub(crate) const ZERO: Self = Self { m: 0, s: 0 };

    /// The value as f64 (tests and configuration only).
    #[cfg(test)]
    pub(crate) fn value(self) -> f64 {
        f64::from(self.m) * libm::exp2(-(32.0 + f64::from(self.s)))
    }
}

/// Table of `E(j·16^d·u)` for one time unit `u`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub(crate) struct DecayTable<const D: usize> {
    m: [[u32; 16]; D],
    s: [u32; D],
}

/// As a tuple of `17·D` words, digit by digit (the sixteen mantissas, then the shift), written
/// out by hand: serde's own arrays stop at 32 and know no length `D`, and a generic helper
/// crate's loader kept a panic path.
#[cfg(feature = "flash")]
impl<const D: usize> serde::Serialize for DecayTable<D> {
    fn serialize<S: serde::Serializer>(&self, to: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeTuple;
        let mut t = to.serialize_tuple(17 * D)?;
        for (row, shift) in self.m.iter().zip(&self.s) {
            for x in row {
                t.serialize_element(x)?;
            }
            t.serialize_element(shift)?;
        }
        t.end()
    }
}

#[cfg(feature = "flash")]
impl<'de, const D: usize> serde::Deserialize<'de> for DecayTable<D> {
    fn deserialize<F: serde::Deserializer<'de>>(from: F) -> Result<Self, F::Error> {
        struct Words<const D: usize>;
        impl<'de, const D: usize> serde::de::Visitor<'de> for Words<D> {
            type Value = DecayTable<D>;

            fn expecting(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
                f.write_str("a decay table's words")
            }

            fn visit_seq<A: serde::de::SeqAccess<'de>>(
                self,
                mut seq: A,
            ) -> Result<Self::Value, A::Error> {
                let mut t = DecayTable {
                    m: [[0; 16]; D],
                    s: [0; D],
                };
                let slots = t.m.iter_mut().zip(t.s.iter_mut());
                let words =
                    slots.flat_map(|(row, shift)| row.iter_mut().chain(core::iter::once(shift)));
                for (read, x) in words.enumerate() {
                    *x = seq
                        .next_element()?
                        .ok_or_else(|| serde::de::Error::invalid_length(read, &self))?;
                }
                Ok(t)
            }
        }
        from.deserialize_tuple(17 * D, Words::<D>)
    }
}

/// `E(x) = 1 − e^(−x)` in f64 without cancellation for small x.
pub(crate) fn one_minus_exp_neg(x: f64) -> f64 {
    -libm::expm1(-x)
}

impl<const D: usize> DecayTable<D> {
    /// Builds the table for a time unit of `unit_over_tau` = u/τ (> 0, finite; validated).
    pub(crate) fn new(unit_over_tau: f64) -> Self {
        let mut m = [[0u32; 16]; D];
        let mut s = [0u32; D];
        let mut digit_unit = unit_over_tau;
        for d in 0..D {
            let sd = scale_below_one(one_minus_exp_neg(16.0 * digit_unit));
            s[d] = sd;
            let scale = libm::exp2(32.0 + f64::from(sd));
            for (j, slot) in m[d].iter_mut().enumerate().skip(1) {
                *slot = mantissa(one_minus_exp_neg(j as f64 * digit_unit) * scale);
            }
            digit_unit *= 16.0;
        }
        Self { m, s }
    }

    /// `E(n·u)` for a count `n` (`n < 16^D`; higher digits are ignored).
    ///
    /// Digits are visited from the most significant down; the first non-zero one fixes the
    /// scale. Written with iterators so that no index needs a bounds check (the panic-free link
    /// of the firmware depends on it).
    pub(crate) fn eval(&self, n: u32) -> Decay {
        let mut acc: u32 = 0;
        let mut s: u32 = 0;
        let mut started = false;
        for (d, (row, &sd)) in self.m.iter().zip(self.s.iter()).enumerate().rev() {
            let j = digit(n, d);
            if j == 0 {
                continue;
            }
            let e = row[j]; // j <= 15 and a row has 16 entries
            if !started {
                acc = e;
                s = sd;
                started = true;
                continue;
            }
            acc = compose(acc, s, e, sd);
        }
        Decay { m: acc, s }
    }
}

/// The largest `s` in `0 ..= 62` with `top·2^s < 1`: the scale of a table digit whose values stay
/// below `top` (configuration only).
fn scale_below_one(top: f64) -> u32 {
    let mut sd: i32 = if top >= 1.0 || top <= 0.0 {
        0
    } else {
        libm::floor(-libm::log2(top)) as i32
    };
    while sd > 0 && top * libm::exp2(f64::from(sd)) >= 1.0 {
        sd -= 1;
    }
    sd.clamp(0, 62) as u32
}

/// `v` rounded to the nearest u32, saturating (configuration only; `v >= 0`).
fn mantissa(v: f64) -> u32 {
    let v = libm::round(v);
    if v >= 4_294_967_295.0 {
        u32::MAX
    } else {
        v as u32
    }
}

/// One composition `E(a+b) = E(a) + E(b) − E(a)·E(b)` of a table entry `e` (scale `sd`) into the
/// accumulated `acc` (scale `s`, `sd >= s`: lower digits have smaller values, larger scales).
#[inline(always)]
fn compose(acc: u32, s: u32, e: u32, sd: u32) -> u32 {
    let aligned = e.checked_shr(sd.saturating_sub(s)).unwrap_or(0);
    // E_acc·E_d in scale s: acc·e·2^−(32+sd), as the product's high word shifted by sd
    // (⌊⌊x/2^32⌋/2^sd⌋ = ⌊x/2^(32+sd)⌋): 32-bit shifts only, the high word of one
    // 32×32-bit multiply (a 64-bit shift by a variable amount is a long sequence on a
    // 32-bit core).
    let high = (wide_mul(acc, e) >> 32) as u32; // < 2^32
    let prod = high.checked_shr(sd).unwrap_or(0);
    // acc + aligned − min(prod, acc), saturated: the same value in u32 (the subtraction first
    // cannot underflow, the saturating sum is the clamped exact one).
    (acc - prod.min(acc)).saturating_add(aligned)
}

/// `E(2^d·u)` for `d = 0 ..= 31`, one entry per bit of a 32-bit length: the event tables
/// (lengths in µs up to 2³² − 1). A fifth of a radix-16 table's size (160 bytes against 528)
/// for up to 32 compositions instead of 8; the error rule is the same (under 2 units of the
/// mantissa per composition, so below 2⁻²⁵ relative after 32, inside the 2⁻²⁴ contract).
/// The scale of bit `d` is the largest `s` with `E(2^(d+1)·u)·2^s < 1`, as for a radix-16 digit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub(crate) struct BitTable {
    m: [u32; 32],
    s: [u8; 32],
}

impl BitTable {
    /// Builds the table for a time unit of `unit_over_tau` = u/τ (> 0, finite; validated).
    pub(crate) fn new(unit_over_tau: f64) -> Self {
        let mut m = [0u32; 32];
        let mut s = [0u8; 32];
        let mut x = unit_over_tau;
        for d in 0..32 {
            let sd = scale_below_one(one_minus_exp_neg(2.0 * x));
            s[d] = sd as u8; // <= 62
            m[d] = mantissa(one_minus_exp_neg(x) * libm::exp2(32.0 + f64::from(sd)));
            x *= 2.0;
        }
        Self { m, s }
    }

    /// `E(n·u)`: the set bits of `n` composed from the most significant down, in the top bit's
    /// scale (as [`DecayTable::eval`]). Iterators only: no index needs a bounds check.
    pub(crate) fn eval(&self, n: u32) -> Decay {
        let mut acc: u32 = 0;
        let mut s: u32 = 0;
        let mut started = false;
        for (d, (&e, &sd)) in self.m.iter().zip(self.s.iter()).enumerate().rev() {
            // d < 32.
            if (n >> d) & 1 == 0 {
                continue;
            }
            let sd = u32::from(sd);
            if !started {
                acc = e;
                s = sd;
                started = true;
                continue;
            }
            acc = compose(acc, s, e, sd);
        }
        Decay { m: acc, s }
    }
}

/// Radix-16 digit `d` of `n`.
#[inline(always)]
fn digit(n: u32, d: usize) -> usize {
    // d < 8 for every table here, so the shift is below 32.
    ((n >> (4 * (d as u32 & 7))) & 0xF) as usize
}

/// `d·E` rounded toward zero, for `|d| < 2⁶²` (the current format's validated range).
///
/// `|d|·m` is formed from two u32×u32 products, so no product can overflow.
#[inline]
pub(crate) fn scale(d: i64, e: Decay) -> i64 {
    let mag = d.unsigned_abs();
    let hi = mag >> 32;
    let lo = mag & 0xFFFF_FFFF;
    // hi < 2^30 for |d| < 2^62 (it fits u32), so hi·m < 2^62 and the sum cannot overflow.
    let p = wide_mul(hi as u32, e.m).saturating_add(wide_mul(lo as u32, e.m) >> 32);
    let p = p.checked_shr(e.s).unwrap_or(0);
    // p <= |d| < 2^62, so the cast is exact.
    let p = p as i64;
    if d < 0 { -p } else { p }
}

/// `a·b` as a 64-bit value: one instruction (UMULL) on v7-M and v8-M. ARMv6-M has no 32×32 →
/// 64-bit multiply, and the compiler calls a 64×64-bit library routine for it; there it is
/// [`mul_by_halves`], four 16×16-bit products in 32-bit registers (ARMv6-M is the only Arm
/// profile here without compare-and-swap, which is how `cfg` tells it apart).
#[inline(always)]
pub(crate) fn wide_mul(a: u32, b: u32) -> u64 {
    #[cfg(all(target_arch = "arm", not(target_has_atomic = "32")))]
    {
        mul_by_halves(a, b)
    }
    #[cfg(not(all(target_arch = "arm", not(target_has_atomic = "32"))))]
    {
        u64::from(a) * u64::from(b)
    }
}

/// `a·b` from four 16×16-bit products, each below 2³², and 32-bit sums with their carries:
/// the same value as the 64-bit product (tested on the host, and by the golden trace on the
/// M0 build, which uses it).
#[inline(always)]
#[allow(dead_code)] // used by ARMv6-M builds and the tests
pub(crate) fn mul_by_halves(a: u32, b: u32) -> u64 {
    let (a0, a1) = (a & 0xFFFF, a >> 16);
    let (b0, b1) = (b & 0xFFFF, b >> 16);
    let low = a0 * b0; // each product < 2^32
    let (mid, mid_carry) = (a1 * b0).overflowing_add(a0 * b1); // mid + carry·2^32
    let (low, low_carry) = low.overflowing_add(mid << 16);
    // The high word: a1·b1 + the middle's top half and carry + the low word's carry, below
    // 2^32 because the whole product is below 2^64.
    let high = (a1 * b1)
        .wrapping_add(mid >> 16)
        .wrapping_add(u32::from(mid_carry) << 16)
        .wrapping_add(u32::from(low_carry));
    (u64::from(high) << 32) | u64::from(low)
}

/// A positive constant gain in floating form: `g = m·2^sh` with `m` normalised to 31..32 bits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub(crate) struct Gain {
    m: u32,
    sh: i32,
}

impl Gain {
    /// Zero gain.
    pub(crate) const ZERO: Gain = Gain { m: 0, sh: 0 };

    /// Nearest representable gain to `g` (finite, >= 0).
    pub(crate) fn new(g: f64) -> Self {
        if g.is_nan() || g <= 0.0 || !g.is_finite() {
            return Self::ZERO;
        }
        // g = frac·2^exp with frac in [0.5, 1): m = frac·2^32, sh = exp − 32.
        let (frac, exp) = libm::frexp(g);
        let mut m = libm::round(frac * 4_294_967_296.0);
        let mut exp = exp;
        if m >= 4_294_967_296.0 {
            m /= 2.0;
            exp += 1;
        }
        Self {
            m: m as u32,
            sh: exp - 32,
        }
    }

    /// `x·g`, saturating at `u64::MAX` (validation keeps every real use far below it).
    #[inline]
    pub(crate) fn apply(self, x: u32) -> u64 {
        let p = wide_mul(x, self.m);
        if self.sh >= 0 {
            let sh = self.sh as u32;
            if sh >= 64 || p.leading_zeros() < sh {
                if p == 0 { 0 } else { u64::MAX }
            } else {
                p << sh
            }
        } else {
            p.checked_shr(self.sh.unsigned_abs()).unwrap_or(0)
        }
    }

    /// `x·g` in u128 for an operand below 2⁹⁶, saturating at 2¹⁰⁰ (the node-charge raise).
    pub(crate) fn apply_u128_full(self, x: u128) -> u128 {
        let cap: u128 = 1 << 100;
        let p = x.min(1 << 96) * u128::from(self.m); // < 2^128
        if self.sh >= 0 {
            let sh = self.sh.unsigned_abs();
            if sh >= 100 || p.leading_zeros() < sh + 28 {
                if p == 0 { 0 } else { cap }
            } else {
                (p << sh).min(cap)
            }
        } else {
            p.checked_shr(self.sh.unsigned_abs()).unwrap_or(0).min(cap)
        }
    }

    /// `x·g` for a wide operand (closed forms only, not the per-period step), saturating.
    ///
    /// The 96-bit product is formed from two u32×u32 → u64 products (no 128-bit arithmetic).
    pub(crate) fn apply_wide(self, x: u64) -> u64 {
        let m = u64::from(self.m);
        let hi = (x >> 32) * m; // < 2^64
        let lo = (x & 0xFFFF_FFFF) * m; // < 2^64
        // value = hi·2^32 + lo, then shifted by sh.
        if self.sh >= 0 {
            let sh = self.sh as u32;
            // hi·2^(32+sh) must stay below 2^64.
            if hi != 0 && (sh >= 32 || hi.leading_zeros() < 32 + sh) {
                return u64::MAX;
            }
            let high = hi.checked_shl(32 + sh).unwrap_or(0);
            let low = if sh >= 64 || (lo != 0 && lo.leading_zeros() < sh) {
                return u64::MAX;
            } else {
                lo << sh
            };
            high.saturating_add(low)
        } else {
            let s = self.sh.unsigned_abs();
            if s >= 32 {
                // (hi·2^32 + lo) >> s = (hi + lo/2^32) >> (s − 32), truncated.
                hi.saturating_add(lo >> 32).checked_shr(s - 32).unwrap_or(0)
            } else {
                // hi·2^(32−s) + lo >> s.
                let high = if hi.leading_zeros() < 32 - s {
                    return u64::MAX;
                } else {
                    hi << (32 - s)
                };
                high.saturating_add(lo >> s)
            }
        }
    }

    /// `x·g` for a u128 operand (closed forms and thermal inputs), saturating at `u64::MAX`.
    pub(crate) fn apply_u128(self, x: u128) -> u64 {
        // x·m fits u128 when x < 2^96 (m < 2^32); anything larger saturates.
        if x >> 96 != 0 {
            return u64::MAX;
        }
        let p = x * u128::from(self.m);
        let r = if self.sh >= 0 {
            let sh = self.sh as u32;
            if sh >= 128 || p.leading_zeros() < sh {
                if p == 0 { 0 } else { u128::MAX }
            } else {
                p << sh
            }
        } else {
            p.checked_shr(self.sh.unsigned_abs()).unwrap_or(0)
        };
        r.min(u128::from(u64::MAX)) as u64
    }

    /// The gain as f64 (tests).
    #[cfg(test)]
    pub(crate) fn value(self) -> f64 {
        f64::from(self.m) * libm::exp2(f64::from(self.sh))
    }
}

/// `(a·b) >> 32` for `b` a Q32.32 factor, saturating, from u32×u32 → u64 products only.
#[inline]
pub(crate) fn mul_q32(a: u64, b: u64) -> u64 {
    let (a_hi, a_lo) = (a >> 32, a & 0xFFFF_FFFF);
    let (b_hi, b_lo) = (b >> 32, b & 0xFFFF_FFFF);
    // a·b/2^32 = a_hi·b_hi·2^32 + a_hi·b_lo + a_lo·b_hi + a_lo·b_lo/2^32.
    // Each part fits u32, so each product is one 32×32-bit multiply.
    let (a_hi, a_lo, b_hi, b_lo) = (a_hi as u32, a_lo as u32, b_hi as u32, b_lo as u32);
    let Some(top) = wide_mul(a_hi, b_hi).checked_mul(1 << 32) else {
        return u64::MAX;
    };
    top.saturating_add(wide_mul(a_hi, b_lo))
        .saturating_add(wide_mul(a_lo, b_hi))
        .saturating_add(wide_mul(a_lo, b_lo) >> 32)
}

/// Fractional bits of [`log2`] results.
pub(crate) const LOG_FRAC: u32 = 32;

/// `log2(m)` for a Q1.63 mantissa `m` in [1, 2), rounded to a Q0.32 fraction, one bit per
/// squaring (40 rounds in u128). Used at compile time to build [`LOG2_TABLE`].
const fn log2_mantissa_by_squaring(m: u64) -> u64 {
    let mut m = m as u128;
    let mut frac: u64 = 0;
    let mut bit = 1u64 << 39;
    while bit != 0 {
        // m < 2^64 (Q1.63 in [1, 2)), so m·m < 2^128.
        m = (m * m) >> 63;
        if m >= 1 << 64 {
            m >>= 1;
            frac |= bit;
        }
        bit >>= 1;
    }
    (frac + (1 << 7)) >> 8
}

/// Entries of the logarithm table: the mantissa's top 6 fraction bits.
const LOG2_STEPS: usize = 64;

/// `(log2(1 + k/64)` in Q0.32, `1/(1 + k/64)` in Q1.31`) for k = 0 ..= 63, built at compile time.
const LOG2_TABLE: [(u32, u32); LOG2_STEPS] = {
    let mut t = [(0u32, 0u32); LOG2_STEPS];
    let mut k = 0;
    while k < LOG2_STEPS {
        let m = (1u64 << 31) + ((k as u64) << 25); // 1 + k/64 in Q1.31
        let recip = ((1u64 << 62) + m / 2) / m; // Q1.31, rounded, ≤ 2^31
        t[k] = (log2_mantissa_by_squaring(m << 32) as u32, recip as u32);
        k += 1;
    }
    t
};

/// 1/ln 2 in Q1.31.
const INV_LN2_Q31: u64 = 3_098_164_010;

/// `log2(x)` in Q31.32 for `x >= 1`; `log2(0)` is returned as −64.
///
/// The mantissa (Q1.31, truncated) is split at its top six fraction bits: `m = (1 + k/64)·(1 + r)`
/// with `r < 1/64` found by multiplying with a tabulated reciprocal, and
/// `log2 m = log2(1 + k/64) + (r − r²/2 + r³/3 − r⁴/4 + r⁵/5)/ln 2` (series error below 2⁻³⁸).
/// No division; absolute error below 2⁻²⁹ (measured in the unit tests).
pub(crate) fn log2(x: u64) -> i64 {
    if x == 0 {
        return -64i64 << LOG_FRAC;
    }
    // Not `ilog2`: that has a panic path for 0, which the early return above already handles.
    #[allow(clippy::manual_ilog2)]
    let msb = 63 - x.leading_zeros();
    // Mantissa in Q1.32 (33 bits, rounded; a carry into bit 33 is clamped, costing < 2⁻³²).
    let m: u64 = if msb >= 32 {
        let sh = msb - 32;
        let half = if sh == 0 { 0 } else { 1u64 << (sh - 1) };
        (x.saturating_add(half) >> sh).min((1u64 << 33) - 1)
    } else {
        x << (32 - msb)
    };
    let k = ((m >> 26) & 63) as usize;
    let (log_k, recip) = LOG2_TABLE[k];
    // t = m/(1 + k/64) in Q2.63 (m < 2^33, recip ≤ 2^31: the product fits u64), in
    // [1, 1 + 1/64); r = t − 1 in Q0.32.
    let t = m * u64::from(recip);
    let r = (t.saturating_sub(1 << 63) + (1 << 30)) >> 31;
    // Horner in Q0.32 on r < 2^26: r·(1 − r·(1/2 − r·(1/3 − r·(1/4 − r/5)))).
    let c5 = 858_993_459u64; // 1/5
    let c4 = 1u64 << 30; // 1/4
    let c3 = 1_431_655_765u64; // 1/3
    let c2 = 1u64 << 31; // 1/2
    let mut acc = c4 - ((r * c5) >> 32);
    acc = c3 - ((r * acc) >> 32);
    acc = c2 - ((r * acc) >> 32);
    acc = (1u64 << 32) - ((r * acc) >> 32);
    let ln_part = (r * acc) >> 32; // ln(1 + r), Q0.32, < 2^26
    let frac = u64::from(log_k) + ((ln_part * INV_LN2_Q31) >> 31);
    (i64::from(msb) << LOG_FRAC) + frac as i64
}

/// Natural logarithm of the ratio `x/y` (both > 0) in Q32.32, for `x >= y`; 0 otherwise.
///
/// `ln(x/y) = ln2·(log2 x − log2 y)`: no division. Absolute error below 2⁻²⁸.
pub(crate) fn ln_ratio(x: u64, y: u64) -> u64 {
    ln_of_logs(log2(x), log2(y))
}

/// [`ln_ratio`] from the two logarithms, `log2 x` and `log2 y` (Q31.32, as [`log2`] gives
/// them): for a `y` shared by several ratios, whose logarithm is taken once.
pub(crate) fn ln_of_logs(log_x: i64, log_y: i64) -> u64 {
    let d = log_x.saturating_sub(log_y);
    if d <= 0 {
        return 0;
    }
    ((u128::from(d as u64) * u128::from(LN2_Q64)) >> 64) as u64
}

/// `2^(−k/64)` in Q1.63 for k = 0 ..= 63, by repeated integer square roots at compile time
/// (2^(−1/64) is the sixth square root of 1/2; the table is its powers).
const EXP2_NEG_TABLE: [u64; 64] = {
    // r = 2^(−1/64) in Q1.63: six square roots of 1/2.
    let mut r: u128 = (1u128 << 125).isqrt(); // √(1/2)
    let mut i = 1;
    while i < 6 {
        r = (r << 63).isqrt();
        i += 1;
    }
    let mut t = [0u64; 64];
    let mut v: u128 = 1 << 63;
    let mut k = 0;
    while k < 64 {
        t[k] = v as u64;
        v = (v * r) >> 63;
        k += 1;
    }
    t
};

/// `⌈2³²/t⌉` for `t = 128 ..= 255` (computed at compile time).
const RECIP: [u32; 128] = {
    let mut r = [0u32; 128];
    let mut k = 0;
    while k < 128 {
        let d = (k + 128) as u64;
        r[k] = ((1u64 << 32).div_ceil(d)) as u32;
        k += 1;
    }
    r
};

/// An upper bound of `num/den` (`den > 0`; `u64::MAX` for 0), at most 1/128 + 1 unit above the
/// quotient: the top eight bits of `den` index a table of rounded-up reciprocals, so there is
/// no division at run time. With `den = t·2^(e−7)` and `t` its top eight bits,
/// `num/den ≤ num·⌈2³²/t⌉·2^−(25+e)`.
pub(crate) fn div_up(num: u64, den: u64) -> u64 {
    div_up_wide(u128::from(num), den)
}

/// [`div_up`] for a wide numerator (saturated at 2¹⁰⁰ first, which keeps the product in u128;
/// a saturated numerator only errs high).
pub(crate) fn div_up_wide(num: u128, den: u64) -> u64 {
    let num = num.min(1 << 100);
    if den == 0 {
        return u64::MAX;
    }
    // Not `ilog2`: that has a panic path for 0, which the early return above already handles.
    #[allow(clippy::manual_ilog2)]
    let e = 63 - den.leading_zeros(); // den != 0, so e <= 63
    let top = if e >= 7 {
        den >> (e - 7)
    } else {
        den << (7 - e)
    }; // 128 ..= 255
    let m = RECIP
        .get((top as usize).wrapping_sub(128))
        .copied()
        .unwrap_or(u32::MAX);
    if num >> 64 == 0 {
        return recip_shr_u64(num as u64, m, 25 + e);
    }
    let p = num * u128::from(m); // < 2^100 · 2^32
    let q = p.checked_shr(25 + e).unwrap_or(0) + 1;
    q.min(u128::from(u64::MAX)) as u64
}

/// `⌊n·m/2^s⌋ + 1`, saturated to u64, for `s` in `25 ..= 88`: [`div_up_wide`]'s quotient for a
/// numerator below 2⁶⁴, from two 32×32-bit products instead of a 128-bit one (which a 32-bit
/// core calls a library routine for). The same value bit for bit (tested against the wide
/// product).
#[inline]
fn recip_shr_u64(n: u64, m: u32, s: u32) -> u64 {
    let lo = wide_mul(n as u32, m); // < 2^64 (the low word of n)
    let hi = wide_mul((n >> 32) as u32, m); // <= (2^32 − 1)^2
    // n·m = mid·2^32 + r with r < 2^32; mid < 2^64 (hi < 2^64 − 2^33, lo >> 32 < 2^32).
    let mid = hi + (lo >> 32);
    let r = lo & 0xFFFF_FFFF;
    let q = if s >= 32 {
        // r/2^32 < 1 cannot carry into the integer part of mid/2^(s − 32).
        mid.checked_shr(s - 32).unwrap_or(0)
    } else {
        let up = 32 - s; // 1 ..= 7
        if mid.leading_zeros() < up {
            return u64::MAX;
        }
        (mid << up) | (r >> s)
    };
    q.saturating_add(1)
}

/// ln 2 in Q0.64 (also used by [`ln_ratio`]).
const LN2_Q64: u64 = 0xB172_17F7_D1CF_79AC;

/// `2^(−y)` for `y` in Q32.32 (`y >= 0`) as `(m, sh)`: the value is `m·2^−(63+sh)`, with `m`
/// in Q1.63 in (0.5, 1].
///
/// The fraction splits into its top six bits (a table) and a rest `f < 1/64`, for which
/// `2^(−f) = e^(−f·ln 2)` is summed to the sixth power (error below 2⁻⁵⁴). Relative error below
/// 2⁻⁵⁰ beyond that of `y` itself (measured against libm in the unit tests).
pub(crate) fn exp2_neg(y: u64) -> (u64, u32) {
    let int = (y >> 32) as u32;
    let frac = y as u32;
    let k = (frac >> 26) as usize; // top six bits
    let rest = u64::from(frac & 0x03FF_FFFF); // Q0.32, < 2^26
    // x = rest·ln2 in Q0.64 (< 2^58).
    let x = ((u128::from(rest) * u128::from(LN2_Q64)) >> 32) as u64;
    // e^(−x) = 1 − x(1 − x/2(1 − x/3(1 − x/4(1 − x/5(1 − x/6))))) in Q0.64, every partial
    // term < 1 (truncation of the series below 2⁻⁵⁴ for x < ln2/64).
    let one = u64::MAX; // 1 − 2^−64, close enough to 1 for the bracket terms
    let mul = |a: u64, b: u64| ((u128::from(a) * u128::from(b)) >> 64) as u64;
    let mut acc = one - mul(x, one / 6);
    acc = one - mul(mul(x, acc), one / 5);
    acc = one - mul(mul(x, acc), one / 4);
    acc = one - mul(mul(x, acc), one / 3);
    acc = one - mul(mul(x, acc), one / 2);
    let e = one - mul(x, acc); // e^(−x), Q0.64, in (0.989, 1]
    // m = T[k]·e in Q1.63 (exactly T[k] when there is no rest: e would be 1).
    let m = if rest == 0 {
        EXP2_NEG_TABLE[k]
    } else {
        ((u128::from(EXP2_NEG_TABLE[k]) * u128::from(e)) >> 64) as u64
    };
    (m, int)
}

/// `2^z` for `z` in Q31.32 (either sign), rounded toward zero and saturating at `u64::MAX`.
/// Relative error below 2⁻⁶⁰ beyond that of `z` itself (for results of 2⁶⁰ and above;
/// smaller results are truncated to whole units).
pub(crate) fn exp2(z: i64) -> u64 {
    // 2^z = 2^c · 2^−(c − z) with c = ⌈z⌉, so the second factor is exp2_neg of a fraction.
    let c = z.saturating_add((1 << 32) - 1) >> 32;
    let (m, _) = exp2_neg(((c << 32) - z) as u64);
    // m·2^(c − 63)
    let e = c - 63;
    if e >= 0 {
        if e >= 64 || m.leading_zeros() < e as u32 {
            u64::MAX
        } else {
            m << e
        }
    } else {
        m.checked_shr((-e).min(64) as u32).unwrap_or(0)
    }
}

/// `x·2^(−y)` for `x >= 0` and `y` in Q32.32, rounded toward zero (`exp2_neg` plus one
/// u128 product): the decay of a thermal replica over an arbitrary event length.
pub(crate) fn mul_exp2_neg(x: i64, y: u64) -> i64 {
    if x <= 0 || y >= 64 << 32 {
        return 0;
    }
    let (m, sh) = exp2_neg(y);
    let p = (u128::from(x as u64) * u128::from(m)) >> 63;
    // m <= 2^63, so p <= x and the cast back is exact.
    p.checked_shr(sh).unwrap_or(0) as i64
}

/// The largest count below `n` that `fits` (0 when none does), by bisection over a `fits`
/// that holds up to some count and fails above it (at most 16 evaluations); `n` itself is
/// not tried.
pub(crate) fn largest_count(n: u32, fits: impl Fn(u32) -> bool) -> u32 {
    bisect(0, n, fits)
}

/// [`largest_count`] for a test read from a value, searched from `guess`: the largest count
/// below `n` whose `value` is at most `level` (0 when none is), for a `value` whose test
/// `value(c) <= level` holds up to some count and fails above it; `v_n` is `value(n)`, known
/// to be above `level`.
///
/// The values place the probes: from `guess`, a step down (when it fails) lands past the
/// level's crossing extrapolated along the chord of the two lowest failing probes, and then
/// each probe is the chord's crossing inside the bracket, or its midpoint after two probes in
/// a row on the same side (a curved or stepped value costs at most about three times a
/// bisection). A value near a straight line over the bracket costs two or three probes after
/// the first: just below the crossing and its neighbours. Same answer as [`largest_count`]
/// for any such `value`; the values only choose which counts are tried. The quotients come
/// from [`div_up`]'s reciprocal table, no division.
pub(crate) fn largest_count_to_level(
    n: u32,
    v_n: i64,
    guess: u32,
    level: i64,
    value: impl Fn(u32) -> i64,
) -> u32 {
    if n == 0 {
        return 0;
    }
    // The chord's step from (a, va) toward the level over a run of `run` counts whose values
    // rise by `rise` (> 0): ⌈(level − va)·run/rise⌉, or more.
    let chord = |gap: i64, run: u32, rise: i64| -> u64 {
        div_up_wide(
            u128::from(gap.unsigned_abs()) * u128::from(run),
            rise.max(1).unsigned_abs(),
        )
    };
    let (mut hi, mut v_hi) = (n, v_n);
    let g = guess.min(n - 1);
    let v = value(g);
    let (mut lo, mut v_lo) = if v <= level {
        (g, v)
    } else {
        // Down from g: past the crossing of the chord through the two lowest failing probes,
        // by a quarter more and one count.
        let mut upper = (hi, v_hi);
        (hi, v_hi) = (g, v);
        loop {
            if hi == 0 {
                return 0;
            }
            let (run, rise) = (upper.0 - hi, upper.1.saturating_sub(v_hi));
            let d = if rise > 0 {
                chord(v_hi.saturating_sub(level), run, rise)
            } else {
                2 * u64::from(run)
            };
            let d = d.saturating_add(d / 4).saturating_add(1);
            let p = u64::from(hi).saturating_sub(d) as u32; // < hi
            let v = value(p);
            if v <= level {
                break (p, v);
            }
            if p == 0 {
                return 0;
            }
            upper = (hi, v_hi);
            (hi, v_hi) = (p, v);
        }
    };
    // lo fits, hi does not. `same`: probes in a row that moved the same end.
    let (mut same, mut last_low) = (0u8, None);
    while lo + 1 < hi {
        let p = if same >= 2 {
            u32::midpoint(lo, hi)
        } else {
            let step = chord(
                level.saturating_sub(v_lo),
                hi - lo,
                v_hi.saturating_sub(v_lo),
            );
            // `step` is the crossing's distance rounded up, or up to 1/128 + 1 above it:
            // aim at or below the crossing (its floor, less the quotient's error), inside.
            let up = u64::from(lo).saturating_add(step.saturating_sub(step / 128 + 1));
            // Not `clamp`: its min <= max assertion would be a panic path (lo + 1 < hi here).
            up.max(u64::from(lo) + 1).min(u64::from(hi) - 1) as u32
        };
        let v = value(p);
        let low = v <= level;
        if low {
            (lo, v_lo) = (p, v);
        } else {
            (hi, v_hi) = (p, v);
        }
        same = if last_low == Some(low) { 2 } else { 1 };
        last_low = Some(low);
    }
    lo
}

/// An integer a monotone search runs over (counts, raw currents).
pub(crate) trait Searched: Copy + PartialOrd {
    /// The midpoint, rounded toward the lower end.
    fn mid(lo: Self, hi: Self) -> Self;
    /// The next value up (saturating).
    fn next(self) -> Self;
}

impl Searched for u32 {
    fn mid(lo: Self, hi: Self) -> Self {
        u32::midpoint(lo, hi)
    }
    fn next(self) -> Self {
        self.saturating_add(1)
    }
}

impl Searched for i64 {
    fn mid(lo: Self, hi: Self) -> Self {
        i64::midpoint(lo, hi)
    }
    fn next(self) -> Self {
        self.saturating_add(1)
    }
}

/// The largest value in `lo ..< hi` that `fits`, given that `lo` fits (or is the answer when
/// nothing does) and `hi` does not (or is the end), for a `fits` that holds up to some value and
/// fails above it: the one bisection of the crate (the duty limit, the hold duty, the pulse
/// ceiling, the bridge's limits).
pub(crate) fn bisect<T: Searched>(lo: T, hi: T, fits: impl Fn(T) -> bool) -> T {
    let (mut lo, mut hi) = (lo, hi);
    while lo.next() < hi {
        let mid = T::mid(lo, hi);
        if fits(mid) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    lo
}

/// Which series [`series`] builds.
#[derive(Clone, Copy)]
enum Series {
    /// 2/n!
    Psi,
    /// 3·(2^(n−1) − 2)/n!
    Chi,
    /// 2/n (the alternating series φ1)
    Phi1,
    /// 3/n (the alternating series φ2)
    Phi2,
}

/// Coefficients `c_k·2^62` of a power series in k = n − `start`, computed exactly in integers at
/// compile time (a Q2.62 fraction divided by 2, 3, …, n in turn; the rounding is below 2⁻⁶⁰).
const fn series<const N: usize>(kind: Series, start: u32) -> [u64; N] {
    let mut out = [0u64; N];
    let mut k = 0;
    while k < N {
        let n = start + k as u32;
        let mut v: u128 = match kind {
            Series::Psi => 2 << 62,
            Series::Chi => (3 * ((1u128 << (n - 1)) - 2)) << 62,
            Series::Phi1 => (2u128 << 62) / n as u128,
            Series::Phi2 => (3u128 << 62) / n as u128,
        };
        if matches!(kind, Series::Psi | Series::Chi) {
            let mut f = 2u32;
            while f <= n {
                v /= f as u128;
                f += 1;
            }
        }
        out[k] = v as u64;
        k += 1;
    }
    out
}

/// ψ(λ) = 2·(e^λ − 1 − λ)/λ² = Σ_{k≥0} 2·λ^k/(k+2)!, coefficients in Q2.62.
const PSI: [u64; 16] = series::<16>(Series::Psi, 2);
/// χ(λ) = 3·(e^{2λ}/2 − 2e^λ + 3/2 + λ)/λ³ = Σ_{n≥3} 3(2^{n−1} − 2)/n!·λ^{n−3}, Q2.62.
const CHI: [u64; 20] = series::<20>(Series::Chi, 3);

/// φ1(u) = 2(u − ln(1+u))/u² = Σ_{k≥0} 2(−u)^k/(k+2), Q2.62.
const PHI1: [u64; 24] = series::<24>(Series::Phi1, 2);
/// φ2(u) = 3(u²/2 − u + ln(1+u))/u³ = Σ_{k≥0} 3(−u)^k/(k+3), Q2.62.
const PHI2: [u64; 24] = series::<24>(Series::Phi2, 3);

/// Horner evaluation of an alternating Q2.62 series `Σ c_k·(−x)^k` at `x` (Q32.32,
/// 0 <= x <= 1/4), result Q2.62. Every partial sum `c_k − x·(…)` stays positive because
/// `c_k > x·c_(k+1)` for these coefficients, so unsigned arithmetic is exact.
fn horner_alternating(c: &[u64], x: u64) -> u64 {
    let mut acc: u128 = 0;
    let mut k = c.len();
    while k > 0 {
        k -= 1;
        acc = u128::from(c[k]).saturating_sub((acc * u128::from(x)) >> 32);
    }
    acc as u64
}

/// φ1(u) in Q2.62 for u in Q32.32, 0 <= u <= 1/4. Truncation error below 2⁻⁴⁸.
pub(crate) fn phi1(u: u64) -> u64 {
    horner_alternating(&PHI1, u.min(1 << 30))
}

/// φ2(u) in Q2.62 for u in Q32.32, 0 <= u <= 1/4. Truncation error below 2⁻⁴⁸.
pub(crate) fn phi2(u: u64) -> u64 {
    horner_alternating(&PHI2, u.min(1 << 30))
}

/// Horner evaluation of a Q2.62 series at `x` (Q32.32, 0 <= x <= 1), result Q2.62.
fn horner(c: &[u64], x: u64) -> u64 {
    let mut acc: u128 = 0;
    let mut k = c.len();
    while k > 0 {
        k -= 1;
        acc = ((acc * u128::from(x)) >> 32) + u128::from(c[k]);
    }
    acc as u64
}

/// ψ(λ) in Q2.62 for λ in Q32.32, 0 <= λ <= 1. Truncation error below 2⁻⁴⁰.
pub(crate) fn psi(lambda: u64) -> u64 {
    horner(&PSI, lambda.min(1 << 32))
}

/// χ(λ) in Q2.62 for λ in Q32.32, 0 <= λ <= 1. Truncation error below 2⁻³⁶.
pub(crate) fn chi(lambda: u64) -> u64 {
    horner(&CHI, lambda.min(1 << 32))
}

/// A 64-bit FNV-1a hasher (configuration only): the guard's fingerprint is its whole
/// configuration hashed through it ([`core::hash::Hash`]), by which a channel's memo knows the
/// guard it was made by. Integers are folded a byte at a time, little-endian, as FNV-1a is
/// defined; `usize` as 64 bits, so the hash is the same on every target.
pub(crate) struct Fnv(pub(crate) u64);

impl Fnv {
    /// FNV-1a's 64-bit offset basis.
    pub(crate) const fn new() -> Self {
        Self(0xcbf2_9ce4_8422_2325)
    }
}

impl core::hash::Hasher for Fnv {
    fn finish(&self) -> u64 {
        self.0
    }

    // Not inlined: the derived hashes of the configuration call these once per field, and
    // inlining them would add kilobytes of configuration code for nothing.
    #[inline(never)]
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            // FNV-1a's multiply wraps by definition.
            self.0 = (self.0 ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3);
        }
    }

    #[inline(never)]
    fn write_u64(&mut self, v: u64) {
        self.write(&v.to_le_bytes());
    }

    #[inline(never)]
    fn write_u32(&mut self, v: u32) {
        self.write(&v.to_le_bytes());
    }

    fn write_i64(&mut self, v: i64) {
        self.write_u64(v as u64);
    }

    fn write_i32(&mut self, v: i32) {
        self.write_u32(v as u32);
    }

    // Lengths (of the arrays the derived hashes walk) and any `usize` are hashed as 64 bits
    // on every target, so a guard's fingerprint is the same on the host and on a 32-bit core
    // (a guard configured on the host and flashed is checked by it).
    fn write_usize(&mut self, v: usize) {
        self.write_u64(v as u64);
    }

    fn write_isize(&mut self, v: isize) {
        self.write_u64(v as u64);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    proptest::proptest! {
        /// The search by value finds the bisection's answer from any guess, for straight,
        /// curved and stepped values, and a value on a straight line costs at most five
        /// evaluations when the guess is within a few hundred counts.
        #[test]
        fn the_search_by_value_agrees_with_bisection(
            n in 0u32..70_000,
            t in 0u32..70_000,
            guess in 0u32..80_000,
            shape in 0u8..4,
        ) {
            let value = |c: u32| -> i64 {
                let x = i64::from(c);
                match shape {
                    0 => 1_000 * x,
                    1 => x * x,
                    2 => (x * x * x) >> 20,
                    _ => 5_000 * (x / 97),
                }
            };
            let level = value(t);
            let fits = |c: u32| value(c) <= level;
            let want = largest_count(n, fits);
            let calls = core::cell::Cell::new(0u32);
            let got = largest_count_to_level(n, value(n), guess, level, |c| {
                calls.set(calls.get() + 1);
                value(c)
            });
            proptest::prop_assert_eq!(got, want);
            // At most about three bisections (stepped values).
            proptest::prop_assert!(calls.get() <= 48, "{} evaluations", calls.get());
            if shape == 0 && want + 1 < n && guess < n && guess.abs_diff(want) <= 300 {
                proptest::prop_assert!(calls.get() <= 5, "{} evaluations", calls.get());
            }
        }
    }

    #[test]
    fn series_coefficients_match_their_definition() {
        // ψ: 2/2! = 1, 2/3! = 1/3; χ: n = 3 gives 3·2/6 = 1, n = 4 gives 3·6/24 = 0.75.
        let q = (1u64 << 62) as f64;
        assert!((PSI[0] as f64 / q - 1.0).abs() < 1e-15);
        assert!((PSI[1] as f64 / q - 1.0 / 3.0).abs() < 1e-15);
        assert!((CHI[0] as f64 / q - 1.0).abs() < 1e-15);
        assert!((CHI[1] as f64 / q - 0.75).abs() < 1e-15);
    }

    #[test]
    fn psi_and_chi_match_closed_forms() {
        for &l in &[1e-6f64, 1e-3, 0.1, 0.5, 0.9, 1.0] {
            let x = (l * 4_294_967_296.0) as u64;
            let lq = x as f64 / 4_294_967_296.0;
            let psi_ref = 2.0 * (libm::expm1(lq) - lq) / (lq * lq);
            let got = psi(x) as f64 / (1u64 << 62) as f64;
            assert!(
                (got - psi_ref).abs() < 1e-8,
                "psi({l}) = {got}, want {psi_ref}"
            );
            if l >= 1e-3 {
                // χ(λ) = 3·(u²/2 − u + λ)/λ³ with u = e^λ − 1.
                let u = libm::expm1(lq);
                let want = 3.0 * (0.5 * u * u - u + lq) / (lq * lq * lq);
                let got = chi(x) as f64 / (1u64 << 62) as f64;
                assert!((got - want).abs() < 1e-6, "chi({l}) = {got}, want {want}");
            }
        }
    }

    #[test]
    fn phi_series_match_closed_forms() {
        for &u in &[0.01f64, 0.1, 0.25] {
            let x = (u * 4_294_967_296.0) as u64;
            let uq = x as f64 / 4_294_967_296.0;
            let l = libm::log1p(uq);
            let p1 = 2.0 * (uq - l) / (uq * uq);
            let p2 = 3.0 * (uq * uq / 2.0 - uq + l) / (uq * uq * uq);
            let q = (1u64 << 62) as f64;
            assert!((phi1(x) as f64 / q - p1).abs() < 1e-9, "phi1({u})");
            assert!((phi2(x) as f64 / q - p2).abs() < 1e-7, "phi2({u})");
        }
    }

    #[test]
    fn exp2_matches_libm() {
        for &z in &[-3.5f64, 0.0, 1.0, 10.25, 40.7, 62.9] {
            let q = (z * 4_294_967_296.0) as i64;
            let zq = q as f64 / 4_294_967_296.0;
            let want = libm::exp2(zq);
            let got = exp2(q) as f64;
            assert!(
                (got - want).abs() <= want * 1e-15 + 1.0,
                "2^{z}: {got} vs {want}"
            );
        }
        assert_eq!(exp2(64 << 32), u64::MAX);
        assert_eq!(exp2(-64 << 32), 0);
    }

    #[test]
    fn exp2_neg_matches_libm() {
        for &y in &[0.0f64, 0.5, 1.0, 2.25, 7.123_456, 31.999, 40.5] {
            let q = (y * 4_294_967_296.0) as u64;
            let yq = q as f64 / 4_294_967_296.0;
            let (m, sh) = exp2_neg(q);
            let got = m as f64 * libm::exp2(-(63.0 + f64::from(sh)));
            let want = libm::exp2(-yq);
            assert!(
                (got - want).abs() <= want * 1e-15,
                "2^-{y}: {got} vs {want}"
            );
        }
    }

    #[test]
    fn log2_of_powers_of_two_is_exact() {
        for k in 0..64 {
            assert_eq!(log2(1u64 << k), (k as i64) << LOG_FRAC);
        }
    }

    #[test]
    fn decay_table_zero_and_saturation() {
        let t = DecayTable::<4>::new(1e-3);
        assert_eq!(t.eval(0), Decay { m: 0, s: 0 });
        let big = DecayTable::<4>::new(10.0);
        let e = big.eval(65535);
        assert_eq!((e.m, e.s), (u32::MAX, 0));
    }

    #[test]
    fn gain_round_trips() {
        for &g in &[1e-9f64, 0.37, 1.0, 123_456.789, 3.0e12] {
            let q = Gain::new(g);
            assert!((q.value() - g).abs() <= g * 2.4e-10, "{g}");
        }
        assert_eq!(Gain::new(-1.0), Gain::ZERO);
        assert_eq!(Gain::new(f64::NAN), Gain::ZERO);
    }

    mod bounds {
        //! The documented error bounds, measured against f64 references (libm, correctly
        //! rounded to well under the bounds tested).
        use super::super::*;
        use proptest::prelude::*;

        fn log_uniform(lo: f64, hi: f64) -> impl Strategy<Value = f64> {
            (lo.ln()..hi.ln()).prop_map(f64::exp)
        }

        proptest! {
            #![proptest_config(ProptestConfig::with_cases(4096))]

            /// Decay tables: relative error below 2^-24 for every count, over the unit/τ ratios
            /// that validation admits (down to 2^-24/65535 per count, up to settled).
            #[test]
            fn decay_table_relative_error(u in log_uniform(2.0e-13, 50.0), n in 1u32..=u32::MAX) {
                let t = BitTable::new(u);
                let got = t.eval(n).value();
                let want = one_minus_exp_neg(f64::from(n) * u);
                prop_assert!((got - want).abs() <= want * 2f64.powi(-24) + 2f64.powi(-32),
                    "E({n}·{u}) = {got}, want {want}");
            }

            #[test]
            fn duty_table_relative_error(u in log_uniform(2.0e-13, 50.0), n in 1u32..=65_535) {
                let t = DecayTable::<DUTY_DIGITS>::new(u);
                let got = t.eval(n).value();
                let want = one_minus_exp_neg(f64::from(n) * u);
                prop_assert!((got - want).abs() <= want * 2f64.powi(-24) + 2f64.powi(-32));
            }

            /// The split 96-bit product of `apply_wide` equals the u128 one.
            #[test]
            fn apply_wide_matches_u128(g in log_uniform(1e-30, 1e30), x in any::<u64>()) {
                let gain = Gain::new(g);
                prop_assert_eq!(gain.apply_wide(x), gain.apply_u128(u128::from(x)));
            }

            /// `mul_q32` equals the u128 product, saturated.
            #[test]
            fn mul_q32_matches_u128(a in any::<u64>(), b in any::<u64>()) {
                let want = ((u128::from(a) * u128::from(b)) >> 32).min(u128::from(u64::MAX)) as u64;
                prop_assert_eq!(mul_q32(a, b), want);
            }

            /// The 64-bit path of div_up_wide gives the wide product's value bit for bit.
            #[test]
            fn the_narrow_quotient_is_the_wide_one(n in any::<u64>(), m in any::<u32>(), s in 25u32..=88) {
                let wide = ((u128::from(n) * u128::from(m)) >> s) + 1;
                let want = wide.min(u128::from(u64::MAX)) as u64;
                prop_assert_eq!(recip_shr_u64(n, m, s), want);
            }

            /// The product by 16-bit halves is the 64-bit product.
            #[test]
            fn the_product_by_halves_is_the_wide_one(a in any::<u32>(), b in any::<u32>()) {
                prop_assert_eq!(mul_by_halves(a, b), u64::from(a) * u64::from(b));
            }

            /// A table composition in 32-bit words gives the 64-bit formula's value bit for bit:
            /// acc + e·2^−(sd−s) − min(acc·e·2^−(32+sd), acc), saturated at 2³² − 1.
            #[test]
            fn the_word_composition_is_the_wide_one(acc in any::<u32>(), e in any::<u32>(), s in 0u32..=62, up in 0u32..=62) {
                let sd = (s + up).min(62);
                let aligned = u64::from(e).checked_shr(sd - s).unwrap_or(0);
                let prod = (u64::from(acc) * u64::from(e)).checked_shr(32 + sd).unwrap_or(0);
                let want = (u64::from(acc) + aligned - prod.min(u64::from(acc))).min(u64::from(u32::MAX));
                prop_assert_eq!(u64::from(compose(acc, s, e, sd)), want);
            }

            /// div_up: at or above the quotient, and at most 1/128 of it (plus 1) above.
            #[test]
            fn div_up_bounds_the_quotient(num in any::<u64>(), den in 1u64..=u64::MAX) {
                let q = u128::from(num) / u128::from(den);
                let got = u128::from(div_up(num, den));
                prop_assert!(got >= q && got <= q + q / 127 + 2, "{num}/{den}: {got} vs {q}");
            }

            /// log2: absolute error below 2^-29.
            #[test]
            fn log2_absolute_error(x in 1u64..=u64::MAX) {
                let got = log2(x) as f64 / 4_294_967_296.0;
                let want = libm::log2(x as f64);
                prop_assert!((got - want).abs() < 2f64.powi(-29), "log2({x}) = {got}, want {want}");
            }

            /// ln of a ratio: absolute error below 2^-28.
            #[test]
            fn ln_ratio_absolute_error(y in 1u64..(1 << 62), k in 1.0f64..1e6) {
                let x = ((y as f64) * k).min(4.6e18) as u64;
                prop_assume!(x >= y);
                let got = ln_ratio(x, y) as f64 / 4_294_967_296.0;
                let want = libm::log(x as f64 / y as f64);
                prop_assert!((got - want).abs() < 2f64.powi(-28));
            }

            /// Scaling: within one unit of the exact product d·E of the represented E.
            #[test]
            fn scale_is_within_one_unit(d in -(1i64 << 62)..=(1i64 << 62), m in any::<u32>(), s in 0u32..70) {
                let e = Decay { m, s };
                let exact = d as f64 * f64::from(m) * 2f64.powi(-(32 + s as i32));
                let got = scale(d, e) as f64;
                prop_assert!((got - exact).abs() <= 1.0 + exact.abs() * 1e-15);
            }
        }
    }
}
