//! Shared code of the on-target binaries: the golden trace (also compiled into the host side of
//! `cargo xtask target-test`, which includes `trace.rs` by path).
#![no_std]
#![forbid(unsafe_code)]

pub mod trace;
