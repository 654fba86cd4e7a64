//! The runtime quantities: current, energy and volts in fixed point.
//!
//! | quantity | type | format | range | resolution |
//! |---|---|---|---|---|
//! | current | [`Current`] | i64, 40 fractional bits, fraction of the full-scale current | ±2²³ full scale (validation keeps use below 2²¹) | 2⁻⁴⁰ full scale |
//! | supply, node voltage | [`Volts`] = `U16F16` | u32, 16 fractional bits, volts | 0 ..= 65535.99998 V | 15.3 µV |
//! | energy | [`Energy`] | u64, 32 fractional bits, units of L·I_fs² | 0 ..= 4.29·10⁹ units | 2.3·10⁻¹⁰ unit |
//! | time | `u32` | microseconds | 0 ..= 4295 s | 1 µs |
//! | back-EMF (bridge) | [`SignedVolts`] = `I16F16` | i32, 16 fractional bits, volts | ±32768 V | 15.3 µV |
//! | speed (bridge) | [`Speed`] = `I16F16` | i32, 16 fractional bits, rad/s | ±32768 rad/s | 15.3 µrad/s |
//! | charge (bridge) | [`Charge`] | i64, 16 fractional bits, full-scale current for one timer count | ±1.4·10¹⁴ units | 1.5·10⁻⁵ unit |
//!
//! L·I_fs² is twice the energy the coil stores at full-scale current, so a turn-off from full
//! scale into an ideal freewheel path is 0.5 unit.

use fixed::types::{I16F16, I24F40, U16F16, U32F32};

/// Volts in unsigned Q16.16 (0 ..= 65535.99998 V, resolution 15.3 µV).
pub type Volts = U16F16;

/// Signed volts in Q16.16 (±32768 V, resolution 15.3 µV): a motor's back-EMF.
pub type SignedVolts = I16F16;

/// Signed rad/s in Q16.16 (±32768 rad/s, about ±313 000 rpm): a motor's speed.
pub type Speed = I16F16;

/// A charge: signed Q47.16 in units of the full-scale current flowing for one timer count
/// (`I_fs·T/N`; [`BridgeModel::coulombs`](crate::bridge::BridgeModel::coulombs) converts).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Charge(i64);

impl Charge {
    /// No charge.
    pub const ZERO: Charge = Charge(0);
    /// Fractional bits of the raw value.
    pub const FRAC_BITS: u32 = 16;

    /// From the raw value.
    pub const fn from_bits(bits: i64) -> Self {
        Charge(bits)
    }

    /// The raw value.
    pub const fn to_bits(self) -> i64 {
        self.0
    }

    /// Sum, saturating.
    #[must_use]
    pub const fn saturating_add(self, other: Self) -> Self {
        Charge(self.0.saturating_add(other.0))
    }
}

/// A coil current: signed Q23.40 fraction of the model's full-scale current.
///
/// Estimates are never negative (the low-side drive cannot reverse the current); the sign is
/// there for the asymptotes and differences inside the model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Current(i64);

impl Current {
    /// Zero current.
    pub const ZERO: Current = Current(0);
    /// Exactly the full-scale current.
    pub const FULL_SCALE: Current = Current(1 << 40);
    /// Fractional bits of the raw value.
    pub const FRAC_BITS: u32 = 40;

    /// From the raw Q23.40 value.
    pub const fn from_bits(bits: i64) -> Self {
        Current(bits)
    }

    /// The raw Q23.40 value.
    pub const fn to_bits(self) -> i64 {
        self.0
    }

    /// The value as a fraction of full scale, as a `fixed` number.
    pub const fn to_fraction(self) -> I24F40 {
        I24F40::from_bits(self.0)
    }

    /// From a fraction of full scale.
    pub const fn from_fraction(f: I24F40) -> Self {
        Current(f.to_bits())
    }

    /// Largest current the model works with: 2²¹ full scale (the format's validated headroom).
    pub const LIMIT: Current = Current(1 << 61);

    /// The raw value clamped to the model's working range `0 ..= LIMIT` (currents of a
    /// low-side drive are never negative).
    pub(crate) const fn working_bits(self) -> i64 {
        if self.0 < 0 {
            0
        } else if self.0 > Self::LIMIT.0 {
            Self::LIMIT.0
        } else {
            self.0
        }
    }

    /// The larger of two currents.
    #[must_use]
    pub fn max(self, other: Self) -> Self {
        Current(self.0.max(other.0))
    }

    /// The smaller of two currents.
    #[must_use]
    pub fn min(self, other: Self) -> Self {
        Current(self.0.min(other.0))
    }
}

/// An energy: unsigned Q32.32 in units of L·I_fs² (the model's energy unit).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct Energy(u64);

impl Energy {
    /// No energy.
    pub const ZERO: Energy = Energy(0);
    /// The largest representable energy (an energy that cannot be bounded saturates here).
    pub const MAX: Energy = Energy(u64::MAX);
    /// Fractional bits of the raw value.
    pub const FRAC_BITS: u32 = 32;

    /// From the raw Q32.32 value.
    pub const fn from_bits(bits: u64) -> Self {
        Energy(bits)
    }

    /// The raw Q32.32 value.
    pub const fn to_bits(self) -> u64 {
        self.0
    }

    /// The value in energy units, as a `fixed` number.
    pub const fn to_units(self) -> U32F32 {
        U32F32::from_bits(self.0)
    }

    /// Sum, saturating at [`Energy::MAX`].
    #[must_use]
    pub const fn saturating_add(self, other: Self) -> Self {
        Energy(self.0.saturating_add(other.0))
    }
}
