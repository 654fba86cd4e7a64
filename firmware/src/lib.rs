//! Shared code of the on-target binaries: the golden trace (also compiled into the host side of
//! `cargo xtask target-test`, which includes `trace.rs` by path).
#![no_std]
#![forbid(unsafe_code)]

pub mod trace;

/// The panic report of the semihosting binaries (vectors, bench): print, exit with failure.
pub fn report_panic(info: &core::panic::PanicInfo) -> ! {
    use core::fmt::Write;
    if let Ok(mut out) = cortex_m_semihosting::hio::hstdout() {
        let _ = writeln!(out, "panic: {info}");
    }
    cortex_m_semihosting::debug::exit(cortex_m_semihosting::debug::EXIT_FAILURE);
    loop {
        cortex_m::asm::nop();
    }
}
