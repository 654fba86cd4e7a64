//! Shared code of the on-target binaries: the golden trace (also compiled into the host side of
//! `cargo xtask target-test`, which includes `trace.rs` by path).
#![no_std]
#![forbid(unsafe_code)]

pub mod trace;

/// Ends a semihosting run: QEMU exits with success or failure.
pub fn finish(success: bool) -> ! {
    use cortex_m_semihosting::debug;
    debug::exit(if success {
        debug::EXIT_SUCCESS
    } else {
        debug::EXIT_FAILURE
    });
    loop {
        cortex_m::asm::nop();
    }
}

/// The host's standard output over semihosting, or a failed run if there is none.
pub fn host_stdout() -> cortex_m_semihosting::hio::HostStream {
    match cortex_m_semihosting::hio::hstdout() {
        Ok(out) => out,
        Err(()) => finish(false),
    }
}

/// The panic report of the semihosting binaries (vectors, bench): print, exit with failure.
pub fn report_panic(info: &core::panic::PanicInfo) -> ! {
    use core::fmt::Write;
    if let Ok(mut out) = cortex_m_semihosting::hio::hstdout() {
        let _ = writeln!(out, "panic: {info}");
    }
    finish(false)
}
