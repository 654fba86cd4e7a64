//! Bridge guard ticks on arbitrary inputs — signed duty to ±2³¹, supply 0 to full scale, any
//! back-EMF — against the demo gear-motor drive: never a panic, the applied duty within ±the
//! resolution, a plan whose counts fill the period and whose drive phase has the legs in
//! opposite states, and no drive against the last drive's direction while the estimate is
//! above the release current.
#![no_main]

use coilward::bridge::{
    BodyDiode, BridgeGuard, BridgeInput, BridgeLimits, BridgeParams, BusParams, DecayMode,
    MotorParams,
};
use coilward::{CoilParams, ControlParams, SignedVolts, SupplyParams, SwitchParams, Volts};
use libfuzzer_sys::fuzz_target;
use std::sync::OnceLock;

fn guard() -> &'static BridgeGuard {
    static G: OnceLock<BridgeGuard> = OnceLock::new();
    G.get_or_init(|| {
        let params = BridgeParams::new(
            SupplyParams::new(12.0, 10.5, 14.0),
            CoilParams::new(1.2e-3, 2.0),
            SwitchParams::new(0.02, 30.0),
            BodyDiode::new(0.8, 0.015),
            DecayMode::Mixed { fast_share: 0.3 },
            ControlParams::new(50e-6, 1000, 8.0),
        )
        .with_motor(MotorParams::new(10.0, 0.015))
        .with_bus(BusParams::new(47e-6, 0.0));
        BridgeGuard::new(&params, &BridgeLimits::new(4.0, 5.0, 0.05, 2e-3))
            .expect("the demo drive is valid")
    })
}

fuzz_target!(|data: &[u8]| {
    let g = guard();
    let release = g
        .model()
        .current_from_amps(0.05)
        .expect("in range")
        .to_bits();
    let mut state = if data.first().is_some_and(|b| b & 1 == 1) {
        g.start_after_reset()
    } else {
        g.start_idle()
    };
    let mut last = 0i32;
    for rec in data.chunks_exact(12) {
        let duty = i32::from_le_bytes([rec[0], rec[1], rec[2], rec[3]]);
        let supply = Volts::from_bits(u32::from_le_bytes([rec[4], rec[5], rec[6], rec[7]]));
        let emf = SignedVolts::from_bits(i32::from_le_bytes([rec[8], rec[9], rec[10], rec[11]]));
        if duty == i32::MIN {
            g.clear(&mut state);
            continue;
        }
        let out = g.tick(
            &mut state,
            BridgeInput::new(duty, supply).with_back_emf(emf),
        );
        assert!(out.duty.unsigned_abs() <= 1000);
        let phases = out.plan.phases();
        assert_eq!(phases.iter().map(|p| p.counts()).sum::<u32>(), 1000);
        assert_ne!(phases[0].leg_a(), phases[0].leg_b());
        if out.duty != 0 {
            if last != 0 && out.duty.signum() != last {
                // The tick advanced the estimate first; the reversal was allowed on that.
                assert!(state.current().to_bits().abs() <= release);
            }
            last = out.duty.signum();
        }
    }
});
