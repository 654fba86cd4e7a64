//! The golden trace with the guard and supply calibration configured on the host (the build
//! script writes them as bytes) and loaded here without floating point: its digest must be the
//! runtime-configured trace's, and no floating-point code may be linked (`cargo xtask
//! target-test` checks both; `cargo xtask target-bench` prints the float code it finds).
//!
//! Panic-free by construction, as the `nopanic` firmware: its panic handler references a
//! symbol that exists nowhere, so the release build links only if neither the loading (any
//! bytes) nor the trace has a reachable panic path.
#![no_std]
#![no_main]

use coilward::{Guard, SupplySense};
use coilward_firmware::trace;
use core::fmt::Write;
use core::hint::black_box;
use cortex_m_rt::entry;

unsafe extern "C" {
    /// Defined nowhere: any reachable panic makes the link fail.
    fn coilward_panic_path_is_reachable() -> !;
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never called when the link succeeds — the symbol does not exist, so a build that
    // could reach this line does not link at all.
    unsafe { coilward_panic_path_is_reachable() }
}

/// The guard, as the build script wrote it.
static GUARD: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/guard.flash"));
/// The supply calibration, as the build script wrote it.
static SENSE: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/sense.flash"));

#[entry]
fn main() -> ! {
    let mut out = coilward_firmware::host_stdout();
    let (guard, sense) = (black_box(GUARD), black_box(SENSE));
    let (Ok(guard), Ok(sense)) = (Guard::from_flash(guard), SupplySense::from_flash(sense)) else {
        let _ = writeln!(out, "check flashed-guard-loads FAILED");
        coilward_firmware::finish(false)
    };
    let _ = writeln!(out, "flash-bytes {}", GUARD.len());
    let digest = trace::run_with(&guard, &sense, |_, _| {});
    let _ = writeln!(out, "digest {digest:016x}");
    coilward_firmware::finish(true)
}
