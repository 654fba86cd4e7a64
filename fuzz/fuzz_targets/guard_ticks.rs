//! Guard tick and event sequences on arbitrary inputs — duty beyond the resolution, supply 0 to
//! full scale, elapsed times up to the 32-bit wrap — against three valid drives (one plain, one
//! saturating with node capacitance and a declared tolerance, one unclamped that rings under its
//! breakdown): never a panic, the applied duty within the resolution, the bound at or above the
//! nominal estimate, and with the output on in PWM the predicted peak at or under the ceiling.
#![no_main]

use coilward::{
    ClampPath, CoilParams, ControlParams, Guard, GuardLimits, Input, Params, Saturation,
    SupplyParams, SwitchParams, Tolerance, Volts,
};
use libfuzzer_sys::fuzz_target;
use std::sync::OnceLock;

/// Three drives: the demo valve; the same valve saturating above 0.8 A with 1 nF at its node
/// and a declared tolerance; a high-resistance coil with nothing across the switch, whose
/// turn-offs ring under the breakdown, with a declared tolerance.
fn guards() -> &'static [Guard; 3] {
    static G: OnceLock<[Guard; 3]> = OnceLock::new();
    G.get_or_init(|| {
        let valve = |coil: CoilParams| {
            Params::new(
                SupplyParams::new(24.0, 18.0, 30.0),
                coil,
                SwitchParams::new(0.1, 60.0),
                ClampPath::Freewheel {
                    forward_drop: 0.7,
                    resistance: 0.05,
                },
                ControlParams::new(50e-6, 3200, 2.0),
            )
        };
        let mut limits = GuardLimits::new(1.2, 1.4, 0.05);
        limits.clamp_pulse_energy = Some(0.05);
        let plain = Guard::new(&valve(CoilParams::new(0.040, 18.0)), &limits);
        let mut coil = CoilParams::new(0.040, 18.0).with_saturation(Saturation::new(0.8, 0.01));
        coil.node_capacitance = Some(1e-9);
        let box_ = Tolerance::EXACT
            .with_inductance(0.3)
            .with_resistance(0.1)
            .with_supply_reading(0.05)
            .with_node_capacitance(0.5)
            .with_saturation(0.2, 0.3)
            .with_clamp_voltage(0.1);
        let saturating = Guard::new(&valve(coil), &limits.with_tolerance(box_));
        let mut coil = CoilParams::new(0.05, 100.0);
        coil.node_capacitance = Some(22e-9);
        let ring = Params::new(
            SupplyParams::new(24.0, 20.0, 26.0),
            coil,
            SwitchParams::new(0.05, 400.0),
            ClampPath::None,
            ControlParams::new(50e-6, 1000, 0.5),
        );
        let ringing = Guard::new(
            &ring,
            &GuardLimits::new(0.3, 0.35, 0.01)
                .with_tolerance(Tolerance::EXACT.with_inductance(0.1).with_resistance(0.05)),
        );
        [
            plain.expect("the demo drive is valid"),
            saturating.expect("the saturating drive is valid"),
            ringing.expect("the ringing drive is valid"),
        ]
    })
}

fuzz_target!(|data: &[u8]| {
    let first = data.first().copied().unwrap_or(0);
    let g = &guards()[usize::from(first >> 1) % 3];
    let mut state = if first & 1 == 1 {
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
                assert!(out.duty <= g.model().duty_resolution());
                // Within the two models' independent rounding (2^10 raw, 10^-9 of full scale).
                assert!(out.bound.to_bits() + 1024 >= out.estimate.end.to_bits());
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
