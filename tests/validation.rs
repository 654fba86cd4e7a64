//! Every rejection of the parameter validation, with the variant and the field it names.
//! No input may panic: the property test at the end feeds arbitrary f32 bit patterns.

mod common;

use coilward::{ClampPath, ConfigError, Conflict, Field, Params, Problem, SupplySense};
use proptest::prelude::*;

fn err(p: &Params) -> ConfigError {
    p.validate().expect_err("must be refused")
}

/// Sets one f32 field of the demo drive.
fn with(field: Field, v: f32) -> Params {
    let mut p = common::valve();
    match field {
        Field::SupplyNominal => p.supply.nominal = v,
        Field::SupplyMin => p.supply.min = v,
        Field::SupplyMax => p.supply.max = v,
        Field::CoilInductance => p.coil.inductance = v,
        Field::CoilResistance => p.coil.resistance = v,
        Field::CoilReferenceTemperature => p.coil.reference_temperature = v,
        Field::CoilTemperatureCoefficient => p.coil.temperature_coefficient = v,
        Field::CoilWindingTemperature => p.coil.winding_temperature = v,
        Field::CoilNodeCapacitance => p.coil.node_capacitance = Some(v),
        Field::SwitchOnResistance => p.switch.on_resistance = v,
        Field::SwitchBreakdown => p.switch.breakdown = v,
        Field::ClampForwardDrop => {
            p.clamp = ClampPath::Freewheel {
                forward_drop: v,
                resistance: 0.0,
            }
        }
        Field::ClampZenerVoltage => {
            p.clamp = ClampPath::FreewheelZener {
                forward_drop: 0.7,
                zener_voltage: v,
                resistance: 0.0,
            }
        }
        Field::ClampVoltage => {
            p.clamp = ClampPath::SwitchClamp {
                clamp_voltage: v,
                resistance: 0.0,
            }
        }
        Field::ClampResistance => {
            p.clamp = ClampPath::Freewheel {
                forward_drop: 0.7,
                resistance: v,
            }
        }
        Field::ControlPeriod => p.control.period = v,
        Field::ControlCurrentFullScale => p.control.current_full_scale = v,
        other => panic!("{other:?} is not an f32 field of Params"),
    }
    p
}

const F32_FIELDS: [Field; 17] = [
    Field::SupplyNominal,
    Field::SupplyMin,
    Field::SupplyMax,
    Field::CoilInductance,
    Field::CoilResistance,
    Field::CoilReferenceTemperature,
    Field::CoilTemperatureCoefficient,
    Field::CoilWindingTemperature,
    Field::CoilNodeCapacitance,
    Field::SwitchOnResistance,
    Field::SwitchBreakdown,
    Field::ClampForwardDrop,
    Field::ClampZenerVoltage,
    Field::ClampVoltage,
    Field::ClampResistance,
    Field::ControlPeriod,
    Field::ControlCurrentFullScale,
];

#[test]
fn the_demo_drive_is_valid() {
    common::valve().validate().expect("the demo drive is valid");
}

#[test]
fn nan_and_infinities_are_not_finite_for_every_field() {
    for f in F32_FIELDS {
        for v in [f32::NAN, f32::INFINITY, f32::NEG_INFINITY] {
            let e = err(&with(f, v));
            assert_eq!((e.field, e.problem), (f, Problem::NotFinite), "{f:?} = {v}");
        }
    }
}

#[test]
fn huge_and_subnormal_values_are_out_of_range() {
    for f in F32_FIELDS {
        let e = err(&with(f, f32::MAX));
        assert_eq!(e.field, f, "{f:?} = MAX");
        assert!(
            matches!(e.problem, Problem::OutOfRange { .. }),
            "{f:?} = MAX: {e}"
        );
        let sub = f32::from_bits(1); // the smallest subnormal
        let e = err(&with(f, sub));
        assert_eq!(e.field, f, "{f:?} subnormal");
        assert!(
            matches!(e.problem, Problem::OutOfRange { .. }),
            "{f:?} subnormal: {e}"
        );
    }
}

#[test]
fn zero_and_negative_values_are_refused_by_their_sign() {
    // Fields that must be positive.
    for f in [
        Field::SupplyNominal,
        Field::SupplyMax,
        Field::CoilInductance,
        Field::CoilResistance,
        Field::CoilNodeCapacitance,
        Field::SwitchBreakdown,
        Field::ClampZenerVoltage,
        Field::ClampVoltage,
        Field::ControlPeriod,
        Field::ControlCurrentFullScale,
    ] {
        for v in [0.0, -0.0, -1.0, f32::MIN] {
            let e = err(&with(f, v));
            assert_eq!(
                (e.field, e.problem),
                (f, Problem::NotPositive),
                "{f:?} = {v}"
            );
        }
    }
    // Fields that may be zero but not negative.
    for f in [
        Field::SupplyMin,
        Field::CoilTemperatureCoefficient,
        Field::SwitchOnResistance,
        Field::ClampForwardDrop,
        Field::ClampResistance,
    ] {
        let e = err(&with(f, -1e-3));
        assert_eq!((e.field, e.problem), (f, Problem::Negative), "{f:?}");
    }
    // Temperatures may be negative, within −100 ..= 300 °C.
    let e = err(&with(Field::CoilWindingTemperature, -273.15));
    assert_eq!(
        (e.field, e.problem),
        (
            Field::CoilWindingTemperature,
            Problem::OutOfRange {
                min: -100.0,
                max: 300.0
            }
        )
    );
}

#[test]
fn out_of_range_names_the_limits() {
    let e = err(&with(Field::CoilInductance, 0.5e-6));
    assert_eq!(
        e.problem,
        Problem::OutOfRange {
            min: 1e-6,
            max: 1e3
        }
    );
    let mut p = common::valve();
    p.control.duty_resolution = 0;
    let e = err(&p);
    assert_eq!(e.field, Field::ControlDutyResolution);
    assert!(matches!(e.problem, Problem::OutOfRange { .. }));
    p.control.duty_resolution = 65_536;
    assert_eq!(err(&p).field, Field::ControlDutyResolution);
}

fn conflict(p: &Params) -> (Field, Conflict) {
    let e = err(p);
    match e.problem {
        Problem::Conflict(c) => (e.field, c),
        other => panic!("expected a conflict, got {other:?} on {:?}", e.field),
    }
}

#[test]
fn each_inconsistency_is_named() {
    let base = common::valve(); // 24 V (18 ..= 30), 40 mH, 18 Ω, BV 60 V, 50 µs, FS 2 A

    let mut p = base;
    p.supply.min = 25.0;
    assert_eq!(conflict(&p), (Field::SupplyMin, Conflict::MinAboveNominal));

    let mut p = base;
    p.supply.max = 23.0;
    assert_eq!(conflict(&p), (Field::SupplyMax, Conflict::MaxBelowNominal));

    let mut p = base;
    p.switch.breakdown = 30.0; // = supply.max
    assert_eq!(
        conflict(&p),
        (Field::SwitchBreakdown, Conflict::BreakdownNotAboveSupply)
    );

    // A clamp voltage at or below the maximum supply.
    let p = with(Field::ClampVoltage, 30.0);
    assert_eq!(
        conflict(&p),
        (Field::ClampVoltage, Conflict::ClampNotAboveSupply)
    );

    // A clamp voltage above the switch breakdown.
    let p = with(Field::ClampVoltage, 61.0);
    assert_eq!(
        conflict(&p),
        (Field::ClampVoltage, Conflict::ClampAboveBreakdown)
    );
    // ... or reaching it through its resistance at full-scale current (55 V + 2 A · 3 Ω).
    let mut p = base;
    p.clamp = ClampPath::SwitchClamp {
        clamp_voltage: 55.0,
        resistance: 3.0,
    };
    assert_eq!(
        conflict(&p),
        (Field::ClampVoltage, Conflict::ClampAboveBreakdown)
    );

    // Freewheel path drop that lifts the switch node to the breakdown: 30 + 0.7 + 30 > 60.
    let p = with(Field::ClampZenerVoltage, 30.0);
    assert_eq!(
        conflict(&p),
        (
            Field::ClampZenerVoltage,
            Conflict::FreewheelReachesBreakdown
        )
    );

    // Winding temperature that drives the resistance below 1 mΩ.
    let mut p = base;
    p.coil.temperature_coefficient = 0.02;
    p.coil.winding_temperature = -100.0; // factor 1 − 0.02·120 < 0
    assert_eq!(
        conflict(&p),
        (
            Field::CoilWindingTemperature,
            Conflict::ResistanceAtTemperature
        )
    );

    // Time constant outside 1 µs ..= 100 s: 1 µH over 18 Ω is 56 ns.
    let p = with(Field::CoilInductance, 1e-6);
    assert_eq!(
        conflict(&p),
        (Field::CoilInductance, Conflict::TimeConstantOutOfRange)
    );

    // A period too short for the format: τ = 40 mH/18 Ω = 2.2 ms, T = 100 ns → 4.5·10⁻⁵ is fine,
    // but a 500 H coil (τ = 27.8 s) at 1 µs is 3.6·10⁻⁸ < 2⁻²⁴.
    let mut p = base;
    p.coil.inductance = 500.0;
    p.control.period = 1e-6;
    assert_eq!(
        conflict(&p),
        (Field::ControlPeriod, Conflict::PeriodTooShort)
    );

    // A full scale so small that the steady current exceeds 2^21 of it: 60 V / 18.1 Ω = 3.3 A
    // against 1 µA... below the 100 µA range limit, so use a 1 mΩ coil: 60 V/1 mΩ = 60 kA.
    let mut p = base;
    p.coil.resistance = 1e-3;
    p.coil.inductance = 1e-3;
    p.switch.on_resistance = 0.0;
    p.control.current_full_scale = 1e-2;
    assert_eq!(
        conflict(&p),
        (Field::ControlCurrentFullScale, Conflict::FullScaleTooSmall)
    );
}

#[test]
fn messages_name_the_field() {
    let e = err(&with(Field::CoilInductance, f32::NAN));
    assert_eq!(e.to_string(), "coil.inductance: not a finite number");
    let e = err(&with(Field::ClampVoltage, 30.0));
    assert!(
        e.to_string()
            .starts_with("clamp.clamp_voltage: clamp voltage is at or below")
    );
}

#[test]
fn adc_conversion_is_validated() {
    let e = SupplySense::new(f32::NAN, 0.0).unwrap_err();
    assert_eq!(
        (e.field, e.problem),
        (Field::AdcVoltsPerCount, Problem::NotFinite)
    );
    let e = SupplySense::new(0.0, 0.0).unwrap_err();
    assert_eq!(e.problem, Problem::NotPositive);
    let e = SupplySense::new(0.01, 5000.0).unwrap_err();
    assert_eq!(e.field, Field::AdcOffset);
    // Saturates instead of wrapping.
    let s = SupplySense::new(1.0, 0.0).unwrap();
    assert_eq!(s.volts(u16::MAX).to_num::<u32>(), 65_535);
    let s = SupplySense::new(0.001, -10.0).unwrap();
    assert_eq!(s.volts(5), coilward::Volts::ZERO);
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(20_000))]

    /// Arbitrary bit patterns in every f32 field: an answer, never a panic; and a model that
    /// is built steps without panicking at any duty and supply.
    #[test]
    fn arbitrary_bits_never_panic(bits in proptest::collection::vec(any::<u32>(), 17), counts in any::<u32>(), path in 0u8..4) {
        let f = |k: usize| f32::from_bits(bits[k]);
        let mut p = common::valve();
        p.supply = coilward::SupplyParams::new(f(0), f(1), f(2));
        let mut coil = coilward::CoilParams::new(f(3), f(4));
        coil.reference_temperature = f(5);
        coil.temperature_coefficient = f(6);
        coil.winding_temperature = f(7);
        coil.node_capacitance = if bits[8] & 1 == 0 { None } else { Some(f(8)) };
        p.coil = coil;
        p.switch = coilward::SwitchParams::new(f(9), f(10));
        p.clamp = match path {
            0 => ClampPath::None,
            1 => ClampPath::Freewheel { forward_drop: f(11), resistance: f(14) },
            2 => ClampPath::FreewheelZener { forward_drop: f(11), zener_voltage: f(12), resistance: f(14) },
            _ => ClampPath::SwitchClamp { clamp_voltage: f(13), resistance: f(14) },
        };
        p.control = coilward::ControlParams::new(f(15), counts, f(16));
        if let Ok(m) = p.validate() {
            let mut s = coilward::CoilState::idle();
            for k in 0..8u32 {
                let v = coilward::Volts::from_bits(bits[k as usize].rotate_left(k));
                m.step(&mut s, counts.wrapping_mul(k), v);
                m.advance(&mut s, k % 2 == 0, bits[k as usize], v);
                let _ = m.turn_off_energy(s.current(), v);
                let _ = m.decay_time_us(s.current(), coilward::Current::ZERO, v);
                let _ = m.steady_state(counts >> k, v);
            }
        }
    }
}

#[test]
fn extreme_runtime_inputs_are_absorbed() {
    // Overflow checks are on in the test profile: any wrap would panic here.
    for clamp in [
        ClampPath::None,
        ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05,
        },
        ClampPath::FreewheelZener {
            forward_drop: 0.7,
            zener_voltage: 20.0,
            resistance: 0.0,
        },
        ClampPath::SwitchClamp {
            clamp_voltage: 45.0,
            resistance: 1.0,
        },
    ] {
        let m = common::valve_with(clamp).validate().unwrap();
        let supplies = [
            coilward::Volts::ZERO,
            coilward::Volts::MAX,
            coilward::Volts::from_num(24),
        ];
        let starts = [
            coilward::Current::ZERO,
            coilward::Current::from_bits(i64::MAX),
            coilward::Current::from_bits(i64::MIN),
        ];
        for v in supplies {
            for c in starts {
                for duty in [0, 1, 3199, 3200, 3201, u32::MAX] {
                    let mut s = coilward::CoilState::with_current(c);
                    let e = m.step(&mut s, duty, v);
                    assert!(e.valley <= e.peak && e.valley >= coilward::Current::ZERO);
                    let _ = m.steady_state(duty, v);
                }
                for us in [0, 1, 1_000_000, u32::MAX] {
                    let mut s = coilward::CoilState::with_current(c);
                    m.advance(&mut s, true, us, v);
                    m.advance(&mut s, false, us, v);
                    let _ = m.turn_off_energy(s.current(), v);
                    let _ = m.turn_off_energy(c, v);
                    let _ = m.peak_drain_voltage(c, v);
                    let _ = m.decay_time_us(c, coilward::Current::ZERO, v);
                }
            }
        }
    }
}
