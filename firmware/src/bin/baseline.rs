//! The same runtime as the other binaries with no coilward code: the size baseline that
//! `cargo xtask target-bench` subtracts to get the guard's own .text.
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

#[entry]
fn main() -> ! {
    loop {
        black_box(0u32);
    }
}
