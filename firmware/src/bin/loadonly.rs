//! Only the loading of a guard and a calibration from bytes (`Guard::from_flash`,
//! `SupplySense::from_flash`): `cargo xtask target-bench` reports its code as `load-text` and
//! leaves it out of the run-time .text.
#![no_std]
#![no_main]

use core::hint::black_box;
use cortex_m_rt::entry;

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    loop {
        cortex_m::asm::nop();
    }
}

/// The trace's guard and calibration as the build script wrote them.
static FLASHED_GUARD: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/guard.flash"));
static FLASHED_SENSE: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/sense.flash"));

#[entry]
fn main() -> ! {
    let guard = coilward::Guard::from_flash(black_box(FLASHED_GUARD));
    black_box(&guard);
    black_box(coilward::SupplySense::from_flash(black_box(FLASHED_SENSE)).ok());
    loop {
        black_box(0u32);
    }
}
