//! Guard tick and event sequences on arbitrary inputs — duty beyond the resolution, supply 0 to
//! full scale, elapsed times up to the 32-bit wrap — against a valid demo drive: never a panic,
//! the applied duty within the resolution, and with the output on in PWM the predicted peak at
//! or under the ceiling.
#![no_main]

use coilward::{
    ClampPath, CoilParams, ControlParams, Guard, GuardLimits, Input, Params, SupplyParams,
    SwitchParams, Volts,
};
use libfuzzer_sys::fuzz_target;
use std::sync::OnceLock;

fn guard() -> &'static Guard {
    static G: OnceLock<Guard> = OnceLock::new();
    G.get_or_init(|| {
        let params = Params::new(
            SupplyParams::new(24.0, 18.0, 30.0),
            CoilParams::new(0.040, 18.0),
            SwitchParams::new(0.1, 60.0),
            ClampPath::Freewheel {
                forward_drop: 0.7,
                resistance: 0.05,
            },
            ControlParams::new(50e-6, 3200, 2.0),
        );
        let mut limits = GuardLimits::new(1.2, 1.4, 0.05);
        limits.clamp_pulse_energy = Some(0.05);
        Guard::new(&params, &limits).expect("the demo drive is valid")
    })
}

fuzz_target!(|data: &[u8]| {
    let g = guard();
    let mut state = if data.first().is_some_and(|b| b & 1 == 1) {
        g.start_after_reset()
    } else {
        g.start_idle()
    };
    for rec in data.chunks_exact(9) {
        let duty = u32::from_le_bytes([rec[1], rec[2], rec[3], rec[4]]);
        let supply = Volts::from_bits(u32::from_le_bytes([rec[5], rec[6], rec[7], rec[8]]));
        match rec[0] % 4 {
            0 | 1 => {
                let out = g.tick(&mut state, Input::new(duty, supply));
                assert!(out.duty <= 3200);
                if out.duty > 0 {
                    assert!(
                        out.predicted_peak <= g.ceiling(),
                        "peak {:?} above the ceiling",
                        out.predicted_peak
                    );
                }
            }
            2 => {
                let _ = g.event(&mut state, duty & 1 == 1, duty, supply);
            }
            _ => g.clear(&mut state),
        }
    }
});
