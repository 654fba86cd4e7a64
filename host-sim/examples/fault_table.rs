//! Prints the fault-suite table of the README:
//! `cargo run --release -p coilward-sim --example fault_table`.

use coilward_sim::faults;
use coilward_sim::scenario::Scenario;

fn main() {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../examples/scenarios/valve-at-ceiling.toml");
    let base = Scenario::load(&path).unwrap_or_else(|e| panic!("{e}"));
    let outcomes: Vec<_> = faults::suite(&base)
        .iter()
        .map(|c| faults::run(c).0)
        .collect();
    print!("{}", faults::table(&outcomes, base.period));
}
