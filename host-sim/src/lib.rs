//! coilward-sim: the coilward guard, unchanged, against a detailed circuit model.

pub mod plant;
