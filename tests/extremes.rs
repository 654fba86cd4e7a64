//! Overflow and panic hygiene: every public arithmetic path fed the extremes of its input types
//! — currents from `i64::MIN` to `i64::MAX`, supplies 0 to full scale, duties to `u32::MAX`,
//! elapsed times to the 32-bit wrap — with overflow checks on (the test profile keeps debug
//! assertions, so every `+`, `−`, `×` and shift is checked). An answer, never a panic. The
//! extremes are drawn by proptest mixed with ordinary values.

mod common;

use coilward::thermal::{ClampThermal, CoilThermal, FosterStage};
use coilward::{
    ClampPath, CoilState, Current, Energy, Guard, GuardLimits, HoldPhase, Input, PullInHold,
    SupplySense, Volts,
};
use proptest::prelude::*;

fn current() -> impl Strategy<Value = Current> {
    prop_oneof![
        Just(Current::from_bits(i64::MIN)),
        Just(Current::from_bits(i64::MAX)),
        Just(Current::from_bits(-1)),
        Just(Current::ZERO),
        Just(Current::LIMIT),
        Just(Current::FULL_SCALE),
        any::<i64>().prop_map(Current::from_bits),
        (0i64..(4i64 << 40)).prop_map(Current::from_bits),
    ]
}

fn volts() -> impl Strategy<Value = Volts> {
    prop_oneof![
        Just(Volts::ZERO),
        Just(Volts::MAX),
        Just(Volts::from_bits(1)),
        any::<u32>().prop_map(Volts::from_bits),
        (0u32..(40 << 16)).prop_map(Volts::from_bits)
    ]
}

fn duty() -> impl Strategy<Value = u32> {
    prop_oneof![
        Just(0u32),
        Just(u32::MAX),
        Just(3200),
        Just(3201),
        0u32..6400,
        any::<u32>()
    ]
}

fn path() -> impl Strategy<Value = ClampPath> {
    prop_oneof![
        Just(ClampPath::None),
        Just(ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05
        }),
        Just(ClampPath::FreewheelZener {
            forward_drop: 0.7,
            zener_voltage: 24.0,
            resistance: 0.2
        }),
        Just(ClampPath::SwitchClamp {
            clamp_voltage: 45.0,
            resistance: 0.5
        }),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(3000))]

    #[test]
    fn model_paths_take_any_input(clamp in path(), i in current(), j in current(), v in volts(), n in duty(), us in any::<u32>(), on in any::<bool>(), counts in any::<u16>(), amps in any::<f32>(), joules in any::<f32>(), e in any::<u64>()) {
        let m = common::valve_with(clamp).validate().unwrap();
        let mut s = CoilState::with_current(i);
        let _ = m.step(&mut s, n, v);
        m.advance(&mut s, on, us, v);
        let _ = m.decay_time_us(i, j, v);
        let _ = m.turn_off_energy(i, v);
        let _ = m.avalanche_energy(i, v);
        let _ = m.peak_drain_voltage(i, v);
        let _ = m.steady_state(n, v);
        let _ = m.amps(i);
        let _ = m.current_from_amps(amps);
        let _ = m.joules(Energy::from_bits(e));
        let _ = m.energy_from_joules(joules);
        let sense = SupplySense::new(3.3 * 11.0 / 4095.0, 0.0).unwrap();
        let _ = sense.volts(counts);
        let plan = PullInHold::new(&m, 1.0, 0.03, 0.45).unwrap();
        let mut phase = HoldPhase::default();
        let _ = plan.duty(&m, &mut phase, i, v);
        let _ = plan.hold_duty(&m, v);
    }

    #[test]
    fn guard_paths_take_any_input(clamp in path(), i in current(), steps in proptest::collection::vec((duty(), volts(), any::<u32>(), 0u8..4), 1..24), temp in any::<u32>(), declared in any::<bool>()) {
        let mut p = common::valve_with(clamp);
        let mut limits = GuardLimits::new(1.2, 1.4, 0.05);
        if declared {
            // The bound's every path: saturation, node charge (and, with nothing across the
            // switch, the ring under the breakdown), a declared tolerance.
            p.coil = p.coil.with_saturation(coilward::Saturation::new(0.8, 0.01));
            p.coil.node_capacitance = Some(1e-9);
            limits.tolerance = coilward::Tolerance::EXACT
                .with_inductance(0.3)
                .with_resistance(0.1)
                .with_supply_reading(0.05)
                .with_node_capacitance(0.5)
                .with_saturation(0.2, 0.3)
                .with_clamp_voltage(0.1);
        }
        limits.clamp_pulse_energy = Some(0.05);
        limits.clamp_thermal = Some(ClampThermal::new([FosterStage::new(2.0, 0.01), FosterStage::new(40.0, 5.0), FosterStage::UNUSED], 40.0, 150.0));
        limits.coil_thermal = Some(CoilThermal::new(120.0, 0.6, 1.05, 40.0, 70.0));
        let g = Guard::new(&p, &limits).unwrap();
        let mut s = g.start_with_current(i);
        for (n, v, us, kind) in steps {
            match kind {
                0 | 1 => {
                    let out = g.tick(&mut s, Input::new(n, v));
                    prop_assert!(out.duty <= 3200);
                    // The nominal model's gains and the bound's round independently: where an
                    // asymptote is exactly zero (a supply at the breakdown) they differ by a few
                    // raw units. 2^10 raw is 10^-9 of full scale.
                    prop_assert!(out.bound.to_bits() + 1024 >= out.estimate.end.to_bits());
                }
                2 => {
                    let _ = g.event(&mut s, n % 2 == 1, us, v);
                }
                _ => g.clear(&mut s),
            }
            let _ = g.on_time_to_ceiling_us(&s, v);
            let _ = g.suggested_model_temperature(&s, temp);
            let _ = g.winding_temperature(&s);
            let _ = g.clamp_temperature(&s);
        }
    }
}
