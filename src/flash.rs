//! A guard configured on the host and flashed as bytes (feature `flash`).
//!
//! [`Guard::new`] validates the parameters and builds the model's tables in `f64` with `libm`:
//! some 55 KB of code on a Cortex-M0+ (soft float), which a small part may not have room for.
//! Configured on the host instead — in a build script, or by any program that links this crate
//! with the feature — the guard is written as bytes with [`Guard::to_flash`]; the firmware
//! includes them (`include_bytes!`) and loads them with [`Guard::from_flash`], which does no
//! floating-point arithmetic and links no `libm`. The guard loaded is equal to the one written,
//! so a firmware gives the same results bit for bit either way (the test command runs the
//! golden trace both ways on the three emulated cores).
//!
//! The same goes for the supply reading's calibration ([`SupplySense::to_flash`]), whose
//! constructor also takes floating-point volts.
//!
//! The bytes are `b"CW"`, a kind byte (`G` a guard, `S` a supply calibration), a layout byte
//! ([`FLASH_LAYOUT`]), the value in the postcard encoding (integers as varints, `f32` as its
//! four bytes) and a 64-bit FNV-1a checksum of all that. Loading refuses bytes of another kind
//! or layout and checks the checksum, and for a guard also its fingerprint (the hash of its
//! whole configuration, which the memo uses): a byte changed in flash is found with a
//! probability of about 1 − 2⁻⁶⁴. The layout byte changes whenever the fields change, so bytes
//! written by another version of the crate are refused rather than misread.
//!
//! ```
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! use coilward::{ClampPath, CoilParams, ControlParams, Guard, GuardLimits, Params};
//! use coilward::{SupplyParams, SwitchParams};
//! let params = Params::new(
//!     SupplyParams::new(24.0, 18.0, 30.0),
//!     CoilParams::new(0.040, 18.0),
//!     SwitchParams::new(0.1, 60.0),
//!     ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.05 },
//!     ControlParams::new(50e-6, 3200, 2.0),
//! );
//! let guard = Guard::new(&params, &GuardLimits::new(1.1, 1.3, 0.05))?;
//! // On the host (a build script writes these to a file the firmware includes):
//! let mut buf = [0u8; coilward::FLASH_MAX];
//! let bytes = guard.to_flash(&mut buf)?;
//! // On the target:
//! let loaded = Guard::from_flash(bytes)?;
//! assert_eq!(loaded, guard);
//! # Ok(())
//! # }
//! ```

use crate::adc::SupplySense;
use crate::guard::Guard;
use core::hash::Hasher as _;

/// The layout of the bytes: raised whenever the fields or their encoding change.
pub const FLASH_LAYOUT: u8 = 1;

/// Bytes enough for any guard (the largest, every protection on and a declared tolerance with
/// eight slices, takes under 12 KiB, about its size in memory; asserted in a test).
pub const FLASH_MAX: usize = 16384;

const MAGIC: [u8; 2] = *b"CW";
/// Magic, kind, layout.
const HEAD: usize = 4;
/// The trailing checksum.
const SUM: usize = 8;

/// Why bytes could not be written or loaded.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum FlashError {
    /// The buffer given to `to_flash` is too small ([`FLASH_MAX`] always suffices).
    BufferTooSmall,
    /// Not bytes of this kind (a guard, a calibration), or of another layout (another version
    /// of the crate).
    NotThisKind,
    /// The bytes are of this kind, but damaged: the checksum or the guard's fingerprint does
    /// not match, or they do not decode.
    Damaged,
}

impl core::fmt::Display for FlashError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            Self::BufferTooSmall => "the buffer is too small for the bytes",
            Self::NotThisKind => "not bytes of this kind, or of another layout (crate version)",
            Self::Damaged => "the bytes are damaged",
        })
    }
}

impl core::error::Error for FlashError {}

fn checksum(bytes: &[u8]) -> [u8; SUM] {
    let mut h = crate::qmath::Fnv::new();
    h.write(bytes);
    h.finish().to_le_bytes()
}

/// Writes `value` as bytes of `kind` into `buf`; returns the part used.
fn store<'b, T: serde::Serialize>(
    kind: u8,
    value: &T,
    buf: &'b mut [u8],
) -> Result<&'b [u8], FlashError> {
    let (head, body) = buf
        .split_at_mut_checked(HEAD)
        .ok_or(FlashError::BufferTooSmall)?;
    head.copy_from_slice(&[MAGIC[0], MAGIC[1], kind, FLASH_LAYOUT]);
    let used = postcard::to_slice(value, body)
        .map_err(|_| FlashError::BufferTooSmall)?
        .len();
    let end = HEAD + used;
    let sum = checksum(buf.get(..end).ok_or(FlashError::BufferTooSmall)?);
    buf.get_mut(end..end + SUM)
        .ok_or(FlashError::BufferTooSmall)?
        .copy_from_slice(&sum);
    buf.get(..end + SUM).ok_or(FlashError::BufferTooSmall)
}

/// Loads a value of `kind` from bytes written by [`store`].
fn load<T: serde::de::DeserializeOwned>(kind: u8, bytes: &[u8]) -> Result<T, FlashError> {
    if bytes.get(..HEAD) != Some(&[MAGIC[0], MAGIC[1], kind, FLASH_LAYOUT][..]) {
        return Err(FlashError::NotThisKind);
    }
    let (data, sum) = bytes
        .split_at_checked(bytes.len().saturating_sub(SUM))
        .ok_or(FlashError::Damaged)?;
    if data.len() < HEAD || checksum(data)[..] != *sum {
        return Err(FlashError::Damaged);
    }
    match postcard::take_from_bytes(data.get(HEAD..).ok_or(FlashError::Damaged)?) {
        Ok((value, [])) => Ok(value),
        _ => Err(FlashError::Damaged),
    }
}

impl Guard {
    /// Writes this guard as bytes into `buf` and returns the part used. Meant for the host;
    /// see the [module documentation](crate::flash).
    ///
    /// # Errors
    /// [`FlashError::BufferTooSmall`] when `buf` cannot hold them.
    pub fn to_flash<'b>(&self, buf: &'b mut [u8]) -> Result<&'b [u8], FlashError> {
        store(b'G', self, buf)
    }

    /// Loads a guard from bytes written by [`Guard::to_flash`], without floating point.
    ///
    /// # Errors
    /// [`FlashError::NotThisKind`] for bytes that are not a guard's of this layout,
    /// [`FlashError::Damaged`] for a guard's whose checksum or fingerprint does not match.
    pub fn from_flash(bytes: &[u8]) -> Result<Self, FlashError> {
        let mut guard: Guard = load(b'G', bytes)?;
        if guard.fingerprint_holds() {
            Ok(guard)
        } else {
            Err(FlashError::Damaged)
        }
    }
}

impl SupplySense {
    /// Writes this calibration as bytes into `buf` and returns the part used (see the
    /// [`flash`](crate::flash) module).
    ///
    /// # Errors
    /// [`FlashError::BufferTooSmall`] when `buf` cannot hold them (32 bytes always do).
    pub fn to_flash<'b>(&self, buf: &'b mut [u8]) -> Result<&'b [u8], FlashError> {
        store(b'S', self, buf)
    }

    /// Loads a calibration from bytes written by [`SupplySense::to_flash`], without floating
    /// point.
    ///
    /// # Errors
    /// As [`Guard::from_flash`].
    pub fn from_flash(bytes: &[u8]) -> Result<Self, FlashError> {
        load(b'S', bytes)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::thermal::{ClampThermal, CoilThermal, FosterStage};
    use crate::{
        ClampPath, CoilParams, ControlParams, GuardLimits, Params, Retry, Saturation, SupplyParams,
        SwitchParams, Tolerance,
    };

    /// Every part of the guard in use: saturation, node charge, a declared tolerance (the most
    /// slices), pulse rating, both thermal replicas, retry.
    fn full_guard() -> Guard {
        let mut coil = CoilParams::new(0.040, 18.0).with_saturation(Saturation::new(0.9, 0.012));
        coil.node_capacitance = Some(470e-12);
        let p = Params::new(
            SupplyParams::new(24.0, 18.0, 30.0),
            coil,
            SwitchParams::new(0.1, 60.0),
            ClampPath::SwitchClamp {
                clamp_voltage: 45.0,
                resistance: 0.5,
            },
            ControlParams::new(50e-6, 3200, 2.0),
        );
        let mut l = GuardLimits::new(1.1, 1.3, 0.05).with_tolerance(
            Tolerance::EXACT
                .with_inductance(0.4)
                .with_resistance(0.1)
                .with_supply_reading(0.02)
                .with_node_capacitance(0.5)
                .with_saturation(0.1, 0.2)
                .with_clamp_voltage(0.05),
        );
        l.clamp_pulse_energy = Some(0.02);
        l.clamp_thermal = Some(ClampThermal::new(
            [
                FosterStage::new(3.0, 2e-3),
                FosterStage::new(20.0, 0.2),
                FosterStage::new(5.0, 20.0),
            ],
            40.0,
            120.0,
        ));
        l.coil_thermal = Some(CoilThermal::new(0.5, 0.7, 1.05, 25.0, 60.0));
        l.retry = Some(Retry::new(5e-3, 3));
        Guard::new(&p, &l).expect("valid guard")
    }

    #[test]
    fn a_guard_loads_as_it_was_written() {
        let g = full_guard();
        let mut buf = [0u8; FLASH_MAX];
        let bytes = g.to_flash(&mut buf).unwrap();
        assert!(bytes.len() < 12 * 1024, "{} bytes", bytes.len());
        let loaded = Guard::from_flash(bytes).unwrap();
        assert_eq!(loaded, g);
    }

    #[test]
    fn damaged_or_foreign_bytes_are_refused() {
        let g = full_guard();
        let mut buf = [0u8; FLASH_MAX];
        let bytes = g.to_flash(&mut buf).unwrap().to_vec();
        assert_eq!(Guard::from_flash(&bytes[..2]), Err(FlashError::NotThisKind));
        let mut other = bytes.clone();
        other[3] = FLASH_LAYOUT + 1;
        assert_eq!(Guard::from_flash(&other), Err(FlashError::NotThisKind));
        other[3] = FLASH_LAYOUT;
        other[2] = b'S';
        assert_eq!(SupplySense::from_flash(&other), Err(FlashError::Damaged));
        assert_eq!(Guard::from_flash(&other), Err(FlashError::NotThisKind));
        assert_eq!(
            Guard::from_flash(&bytes[..bytes.len() - 1]),
            Err(FlashError::Damaged)
        );
        let mut longer = bytes.clone();
        longer.push(0);
        assert_eq!(Guard::from_flash(&longer), Err(FlashError::Damaged));
        // Every single byte of the guard changed (one bit flipped): refused, never a different
        // guard.
        for k in 4..bytes.len() {
            let mut b = bytes.clone();
            b[k] ^= 0x10;
            assert!(Guard::from_flash(&b).is_err(), "byte {k} changed, loaded");
        }
        let mut small = [0u8; 64];
        assert_eq!(g.to_flash(&mut small), Err(FlashError::BufferTooSmall));
    }

    #[test]
    fn a_calibration_loads_as_it_was_written() {
        let s = SupplySense::new(3.3 * 11.0 / 4095.0, 0.05).unwrap();
        let mut buf = [0u8; 32];
        let bytes = s.to_flash(&mut buf).unwrap();
        assert_eq!(SupplySense::from_flash(bytes), Ok(s));
        assert_eq!(Guard::from_flash(bytes), Err(FlashError::NotThisKind));
    }
}
