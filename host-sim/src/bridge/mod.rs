//! The full bridge in the simulator: its plant, scenario files, co-simulation and reports.

pub mod cosim;
pub mod faults;
pub mod plant;
pub mod report;
pub mod scenario;
pub mod spice;
