#![doc = include_str!("../README.md")]
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]
#![warn(clippy::pedantic)]
#![allow(
    clippy::cast_possible_truncation,
    clippy::cast_possible_wrap,
    clippy::cast_sign_loss,
    clippy::cast_precision_loss,
    clippy::cast_lossless,
    clippy::many_single_char_names,
    clippy::similar_names,
    clippy::too_many_lines,
    clippy::module_name_repetitions,
    clippy::unreadable_literal,
    clippy::doc_markdown,
    // Getters and conversions return plain values; marking each one adds noise, not safety.
    clippy::must_use_candidate,
    // Used on the two tiny per-segment helpers of the tick path, where a call would cost more
    // than the body.
    clippy::inline_always
)]

// Unit tests count the limit's evaluations per thread (`guard.rs`).
#[cfg(test)]
extern crate std;

mod adc;
pub mod bridge;
mod clamp;
mod condition;
mod estimate;
#[cfg(feature = "flash")]
pub mod flash;
mod guard;
mod hal;
mod hold;
mod model;
mod params;
mod qmath;
mod steady;
pub mod thermal;
mod tolerance;
mod units;

pub use adc::SupplySense;
pub use condition::{Action, Condition, Conditions, Edge, Event, EventLog};
pub use estimate::{CoilState, PeriodEstimate};
#[cfg(feature = "flash")]
pub use flash::{FLASH_LAYOUT, FLASH_MAX, FlashError};
pub use guard::{
    ClampPower, Guard, GuardLimits, GuardState, HeldRequest, Input, LIMIT_LINGER, Output, Policy,
    Retry, TickMemo,
};
pub use hal::{GuardedPwm, GuardedSwitch};
pub use hold::{HoldPhase, PullInHold};
pub use model::{Derived, Model, PathKind};
pub use params::{
    COPPER_TEMPERATURE_COEFFICIENT, ClampPath, CoilParams, ConfigError, Conflict, ControlParams,
    Field, Params, Problem, Saturation, SupplyParams, SwitchParams,
};
pub use steady::SteadyState;
pub use tolerance::Tolerance;
pub use units::{Charge, Current, Energy, SignedVolts, Speed, Volts};
