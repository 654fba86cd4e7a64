//! Picks the memory layout of the emulated board for the target being built:
//! thumbv6m → MPS2 AN385 (a Cortex-M3 that runs the v6-M build; the micro:bit's 16 KiB of RAM
//! no longer holds the guard), thumbv7em → MPS2 AN386, thumbv8m.main → MPS2 AN505.
//!
//! And configures the golden trace's guard and supply calibration here, on the host, writing
//! them as bytes (`guard.flash`, `sense.flash` in `OUT_DIR`) for the `flashed` firmware, which
//! loads them without floating point.
use std::{env, fs, path::PathBuf};

#[path = "src/trace.rs"]
#[allow(dead_code)]
mod trace;

/// The trace's guard and calibration as bytes.
fn flashed(out: &std::path::Path) {
    let guard = coilward::Guard::new(&trace::params(), &trace::limits()).expect("valid guard");
    let mut buf = vec![0u8; coilward::FLASH_MAX];
    let bytes = guard.to_flash(&mut buf).expect("the guard fits FLASH_MAX");
    fs::write(out.join("guard.flash"), bytes).expect("write guard.flash");
    let sense = trace::sense().expect("valid calibration");
    let bytes = sense.to_flash(&mut buf).expect("the calibration fits");
    fs::write(out.join("sense.flash"), bytes).expect("write sense.flash");
}

fn main() {
    let target = env::var("TARGET").unwrap_or_default();
    let memory = if target.starts_with("thumbv6m") || target.starts_with("thumbv7em") {
        // MPS2 AN385/AN386: 4 MiB ZBT SSRAM1 at 0 (code), 4 MiB SSRAM2/3 at 0x2000_0000.
        "MEMORY { FLASH : ORIGIN = 0x00000000, LENGTH = 4096K\n RAM : ORIGIN = 0x20000000, LENGTH = 4096K }\n"
    } else if target.starts_with("thumbv8m") {
        // MPS2 AN505 (secure aliases): SSRAM1 at 0x1000_0000, SSRAM2/3 at 0x3800_0000.
        "MEMORY { FLASH : ORIGIN = 0x10000000, LENGTH = 4096K\n RAM : ORIGIN = 0x38000000, LENGTH = 4096K }\n"
    } else {
        // Host builds (e.g. `cargo check` without a target) need no layout.
        ""
    };
    let out = PathBuf::from(env::var("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::write(out.join("memory.x"), memory).expect("write memory.x");
    println!("cargo:rustc-link-search={}", out.display());
    flashed(&out);
    println!("cargo:rerun-if-changed=build.rs");
    println!("cargo:rerun-if-changed=src/trace.rs");
}
