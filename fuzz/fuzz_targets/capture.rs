//! The capture reader and the fit on arbitrary text: an error or a fit, never a panic.
#![no_main]

use coilward_sim::capture::{Capture, ReadOptions};
use coilward_sim::fit::{self, FitOptions};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    if let Ok(c) = Capture::parse(
        std::path::Path::new("fuzz.csv"),
        &text,
        &ReadOptions::default(),
    ) {
        let _ = fit::fit(
            &c,
            &FitOptions {
                supply: 24.0,
                series_resistance: 0.1,
                inductance: None,
            },
        );
    }
});
