//! Supply voltage from raw ADC counts: `volts = counts · volts_per_count + offset`.
//!
//! The gain and offset come from the board's divider and a calibration, set once;
//! [`SupplySense::volts`] is integer-only and saturates to 0 ..= 65535.99998 V.
//!
//! Error: the gain is held to 2⁻³² relative (within 2⁻³² V per count for gains below 1 V/count)
//! and the offset to half a U16F16 step (7.6 µV); the conversion truncates at most one U16F16
//! step (15.3 µV).

use crate::params::{ConfigError, Field, in_range, positive};
use crate::units::Volts;

/// Calibrated conversion from ADC counts to volts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct SupplySense {
    /// Volts per count, Q16.48 (at most 1.0 = 2⁴⁸): `volts_bits = counts·gain >> 32`.
    gain: u64,
    /// Offset in U16F16 bits (signed).
    offset: i64,
}

impl SupplySense {
    /// A conversion with `volts_per_count` (V, 1 nV ..= 1 V) and `offset` (V, −1000 ..= 1000).
    ///
    /// # Errors
    /// [`Field::AdcVoltsPerCount`] or [`Field::AdcOffset`] with what is wrong.
    ///
    /// ```
    /// // A 12-bit ADC on 3.3 V behind an 11:1 divider.
    /// let sense = coilward::SupplySense::new(3.3 * 11.0 / 4095.0, 0.0)?;
    /// let v = sense.volts(1489);
    /// assert!((v.to_num::<f32>() - 13.2).abs() < 0.01);
    /// # Ok::<(), coilward::ConfigError>(())
    /// ```
    pub fn new(volts_per_count: f32, offset: f32) -> Result<Self, ConfigError> {
        let g = f64::from(positive(
            Field::AdcVoltsPerCount,
            volts_per_count,
            1e-9,
            1.0,
        )?);
        let o = f64::from(in_range(Field::AdcOffset, offset, -1000.0, 1000.0)?);
        Ok(Self {
            // g <= 1 V/count, so gain <= 2^48 and a 16-bit count times it stays below 2^64.
            gain: libm::round(g * 281_474_976_710_656.0) as u64,
            offset: libm::round(o * 65_536.0) as i64,
        })
    }

    /// The supply for a raw reading, saturating to the `Volts` range.
    #[inline]
    pub fn volts(&self, counts: u16) -> Volts {
        // counts·gain < 2^16·2^48 = 2^64; >> 32 leaves U16F16 bits below 2^32.
        let bits = ((u64::from(counts) * self.gain) >> 32) as i64;
        let v = bits
            .saturating_add(self.offset)
            .clamp(0, i64::from(u32::MAX));
        Volts::from_bits(v as u32)
    }
}
