//! The closed forms measured against f64 evaluations of the same formulas (derived from the RL
//! equation; REFERENCES §3, §4) across the parameter range, and against the estimator itself.

mod common;

use coilward::{ClampPath, CoilState, Current, Volts};
use common::Reference;
use proptest::prelude::*;

fn log_uniform(lo: f64, hi: f64) -> impl Strategy<Value = f64> {
    (lo.ln()..hi.ln()).prop_map(f64::exp)
}

/// Energy into a path of drop V_p + R_p·i from I0 to zero (f64, direct formula with a
/// series for small λ to avoid the f64 cancellation).
fn energy_ref(r: &Reference, i0: f64, vs: f64) -> f64 {
    let rt = r.r + r.r_p;
    let b = if r.across_switch { r.v_p - vs } else { r.v_p };
    let a = b / rt;
    let tau = r.l / rt;
    let lam = (i0 / a).ln_1p();
    let (q, q2) = if lam < 1e-3 {
        let u = i0 / a;
        // Q = τ·a·(u − ln(1+u)), ∫i² = τ·a²·(u²/2 − u + ln(1+u)), by their Taylor series.
        let q = tau * a * (u * u / 2.0 - u * u * u / 3.0 + u.powi(4) / 4.0 - u.powi(5) / 5.0);
        let q2 = tau * a * a * (u.powi(3) / 3.0 - u.powi(4) / 4.0 + u.powi(5) / 5.0);
        (q, q2)
    } else {
        (
            tau * (i0 - a * lam),
            tau * (i0 * i0 / 2.0 - a * i0 + a * a * lam),
        )
    };
    r.v_p * q + r.r_p * q2
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(2000))]

    #[test]
    fn turn_off_energy_and_decay_time_match_their_formulas(
        path in 0u8..4,
        r in log_uniform(1e-3, 1e3),
        tau in log_uniform(20e-6, 10.0),
        v_p_over in log_uniform(0.05, 50.0),
        r_p_share in 0.0f64..1.0,
        i_frac in log_uniform(1e-4, 2.0),
    ) {
        let vs = 12.0f32;
        let v_max = 12.0f32;
        let l = tau * r;
        prop_assume!(l > 1e-6 && l < 1e3);
        let fs = 1.0f32;
        let (clamp, bv) = match path {
            0 => (ClampPath::None, (v_max as f64 * (1.0 + v_p_over)) as f32),
            1 => (ClampPath::Freewheel { forward_drop: (v_p_over * 0.3) as f32, resistance: (r * r_p_share) as f32 }, 5000.0),
            2 => (ClampPath::FreewheelZener { forward_drop: 0.7, zener_voltage: (v_p_over * 12.0) as f32, resistance: (r * r_p_share) as f32 }, 5000.0),
            _ => (ClampPath::SwitchClamp { clamp_voltage: (v_max as f64 * (1.0 + v_p_over)) as f32, resistance: (r * r_p_share) as f32 }, 5000.0),
        };
        let mut p = common::valve();
        p.supply = coilward::SupplyParams::new(vs, vs, v_max);
        p.coil = coilward::CoilParams::new(l as f32, r as f32);
        p.switch = coilward::SwitchParams::new(0.0, bv);
        p.clamp = clamp;
        p.control = coilward::ControlParams::new(1e-3, 1000, fs);
        let m = p.validate().map_err(|e| TestCaseError::fail(format!("{e}")))?;
        let rf = Reference::new(&p);
        let i0 = m.current_from_amps(i_frac as f32).unwrap();
        let i0f = i0.to_bits() as f64 / (1u64 << 40) as f64 * f64::from(fs);
        let vsv = Volts::from_num(vs);

        let want = energy_ref(&rf, i0f, f64::from(vs));
        let got = m.turn_off_energy(i0, vsv).to_bits() as f64 / 4_294_967_296.0
            * f64::from(m.derived().energy_unit);
        // f32 energy unit (2^-24) plus the kernels' bound: 2·10^-6 relative, or 2^-30 unit.
        let tol = want * 2e-6 + 2f64.powi(-30) * f64::from(m.derived().energy_unit);
        prop_assert!((got - want).abs() <= tol, "energy {} want {} ({:?})", got, want, p);

        // Decay time: ceiling of τ·ln(1 + I0/a), within 1 µs + 2^-27·τ.
        let rt = rf.r + rf.r_p;
        let b = if rf.across_switch { rf.v_p - f64::from(vs) } else { rf.v_p };
        let t_want = rf.l / rt * (i0f * rt / b).ln_1p() * 1e6;
        if let Some(t) = m.decay_time_us(i0, Current::ZERO, vsv) {
            let t = f64::from(t);
            prop_assert!(t >= t_want - 2f64.powi(-27) * rf.tau_off() * 1e6 - 1e-9);
            prop_assert!(t <= t_want + 1.0 + 2f64.powi(-27) * rf.tau_off() * 1e6);
        } else {
            prop_assert!(t_want > f64::from(u32::MAX));
        }
    }
}

#[test]
fn no_decay_when_the_supply_reaches_the_clamp() {
    // With the supply at or above a clamp across the switch, the coil voltage cannot reverse:
    // the current never decays and the energy is unbounded.
    let p = common::valve_with(ClampPath::SwitchClamp {
        clamp_voltage: 40.0,
        resistance: 0.0,
    });
    let m = p.validate().unwrap();
    // The estimator accepts supplies up to twice the maximum (60 V) before clamping them.
    let vs = Volts::from_num(45);
    assert_eq!(
        m.decay_time_us(Current::FULL_SCALE, Current::ZERO, vs),
        None
    );
    assert_eq!(
        m.turn_off_energy(Current::FULL_SCALE, vs),
        coilward::Energy::MAX
    );
    // And the estimator's current rises during the "off" segment instead of falling.
    let mut s = CoilState::with_current(Current::FULL_SCALE.min(m.current_from_amps(0.1).unwrap()));
    let before = s.current();
    m.advance(&mut s, false, 1000, vs);
    assert!(s.current() > before);
}

#[test]
fn steady_state_in_discontinuous_conduction_matches_the_reference() {
    // A zener freewheel empties the coil early in every off-time at low duty.
    let p = common::valve_with(ClampPath::FreewheelZener {
        forward_drop: 0.7,
        zener_voltage: 150.0,
        resistance: 0.0,
    });
    let mut p = p;
    p.switch.breakdown = 400.0;
    let m = p.validate().unwrap();
    let rf = Reference::new(&p);
    let n = 160; // 5 %
    let ss = m.steady_state(n, Volts::from_num(24));
    assert!(!ss.continuous);
    assert_eq!(ss.valley, Current::ZERO);
    // Reference mean by fine integration of the exact segments over one period from zero.
    let t_on = rf.period * f64::from(n) / f64::from(rf.counts);
    let steps = 200_000;
    let mut sum = 0.0;
    for k in 0..steps {
        let t = (f64::from(k) + 0.5) / f64::from(steps) * rf.period;
        let i = if t < t_on {
            Reference::segment(0.0, rf.a_on(24.0), t, rf.tau_on())
        } else {
            let ip = Reference::segment(0.0, rf.a_on(24.0), t_on, rf.tau_on());
            Reference::segment(ip, rf.a_off(24.0), t - t_on, rf.tau_off())
        };
        sum += i;
    }
    let mean_ref = sum / f64::from(steps);
    let mean = f64::from(m.amps(ss.mean));
    assert!(
        (mean - mean_ref).abs() < 1e-6 * 2.0 + 1e-4 * mean_ref,
        "mean {mean} vs {mean_ref}"
    );
    let peak_ref = Reference::segment(0.0, rf.a_on(24.0), t_on, rf.tau_on());
    assert!((f64::from(m.amps(ss.peak)) - peak_ref).abs() < 1e-6);
}
