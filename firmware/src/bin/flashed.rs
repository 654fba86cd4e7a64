//! The golden trace with the guard and supply calibration configured on the host (the build
//! script writes them as bytes) and loaded here without floating point: its digest must be the
//! runtime-configured trace's, and no floating-point code may be linked (`cargo xtask
//! target-test` checks both; `cargo xtask target-bench` prints the float code it finds).
#![no_std]
#![no_main]

use coilward::{Guard, SupplySense};
use coilward_firmware::trace;
use core::fmt::Write;
use cortex_m_rt::entry;

#[panic_handler]
fn panic(info: &core::panic::PanicInfo) -> ! {
    coilward_firmware::report_panic(info)
}

/// The guard, as the build script wrote it.
static GUARD: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/guard.flash"));
/// The supply calibration, as the build script wrote it.
static SENSE: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/sense.flash"));

#[entry]
fn main() -> ! {
    let mut out = coilward_firmware::host_stdout();
    let (Ok(guard), Ok(sense)) = (Guard::from_flash(GUARD), SupplySense::from_flash(SENSE)) else {
        let _ = writeln!(out, "check flashed-guard-loads FAILED");
        coilward_firmware::finish(false)
    };
    let _ = writeln!(out, "flash-bytes {}", GUARD.len());
    let digest = trace::run_with(&guard, &sense, |_, _| {});
    let _ = writeln!(out, "digest {digest:016x}");
    coilward_firmware::finish(true)
}
