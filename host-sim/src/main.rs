//! `coilward-sim`: the host simulator for coilward drive profiles.
//!
//! Not built yet. The package exists so the workspace has its final shape; the circuit plant,
//! scenario files, co-simulation and reports arrive with the simulator's own issue. Until then
//! the binary says so and exits with status 2 (bad input), so no script mistakes it for a pass.

fn main() {
    eprintln!(
        "coilward-sim {}: the simulator is not implemented yet; see `cargo run --example demo_coil` \
         for the estimate of a demo coil",
        env!("CARGO_PKG_VERSION")
    );
    std::process::exit(2);
}
