//! Prints the fault-suite tables of host-sim/README.md, the low side's and the bridge's:
//! `cargo run --release -p coilward-sim --example fault_table`.

use coilward_sim::bridge::{faults as bridge_faults, scenario::BridgeScenario};
use coilward_sim::faults;
use coilward_sim::scenario::Scenario;

fn main() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/scenarios");
    let base = Scenario::load(&dir.join("valve-at-ceiling.toml")).unwrap_or_else(|e| panic!("{e}"));
    let outcomes: Vec<_> = faults::suite(&base)
        .iter()
        .map(|c| faults::run(c).0)
        .collect();
    print!("{}", faults::table(&outcomes, base.period));
    println!();
    let base = BridgeScenario::load(&dir.join("door-motor-small-bus.toml"))
        .unwrap_or_else(|e| panic!("{e}"));
    let outcomes: Vec<_> = bridge_faults::suite(&base)
        .iter()
        .map(|c| bridge_faults::run(c).0)
        .collect();
    print!("{}", faults::table(&outcomes, base.period));
}
