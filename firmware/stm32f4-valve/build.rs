//! The STM32F401CC memory layout for cortex-m-rt.
use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::write(
        out.join("memory.x"),
        "MEMORY { FLASH : ORIGIN = 0x08000000, LENGTH = 256K\n RAM : ORIGIN = 0x20000000, LENGTH = 64K }\n",
    )
    .expect("write memory.x");
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rerun-if-changed=build.rs");
}
