//! The scenario parsers (low-side and full-bridge) on arbitrary text: an error naming what is
//! wrong, never a panic; a scenario that parses also runs (its duration cut to 2 ms so the
//! fuzzer stays fast).
#![no_main]

use coilward_sim::bridge::scenario::BridgeScenario;
use coilward_sim::scenario::Scenario;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let path = std::path::Path::new("fuzz.toml");
    if let Ok(mut s) = Scenario::parse(path, &text) {
        s.duration = s.duration.min(2e-3);
        let _ = coilward_sim::cosim::run(&s, coilward_sim::cosim::Options::default());
    }
    if let Ok(mut s) = BridgeScenario::parse(path, &text) {
        s.duration = s.duration.min(2e-3);
        let _ = coilward_sim::bridge::cosim::run(&s, false);
    }
});
