//! Only the configuration (`Guard::new`, `BridgeGuard::new`): subtracted from the panic-free build by
//! `cargo xtask target-bench`, so that the reported .text is the guard's run-time code alone.
#![no_std]
#![no_main]

use coilward::Guard;
use coilward_firmware::trace;
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
    let guard = Guard::new(&black_box(trace::params()), &black_box(trace::limits()));
    black_box(&guard);
    let bridge = coilward::bridge::BridgeGuard::new(
        &black_box(trace::bridge_params()),
        &black_box(trace::bridge_limits()),
    );
    black_box(&bridge);
    loop {
        black_box(0u32);
    }
}
