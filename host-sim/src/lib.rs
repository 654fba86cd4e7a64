//! coilward-sim: the coilward guard, unchanged, against a detailed circuit model.
//!
//! A scenario file ([`scenario`]) describes the circuit, the firmware's beliefs, the guard's
//! settings and a drive timeline; [`cosim`] runs the guard at the control period against the
//! exact piecewise-linear [`plant`] and produces a [`cosim::Run`], which [`report`] turns into
//! a terminal summary, JSON, CSV and an SVG plot; [`sweep`] repeats it over tolerances.

pub mod bridge;
pub mod capture;
pub mod cosim;
pub mod faults;
pub mod fit;
pub mod plant;
pub mod report;
pub mod scenario;
pub mod spice;
pub mod sweep;
pub mod units;
