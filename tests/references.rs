//! Checks against outside sources. Each test names its source; the figures are those collected
//! in the project's reference sheet (shared/REFERENCES.md), quoted beside each check.

mod common;

use coilward::{
    ClampPath, CoilParams, CoilState, ControlParams, Current, Model, Params, SupplyParams,
    SwitchParams, Volts,
};
use common::Reference;

fn close(got: f64, want: f64, rel: f64) -> bool {
    (got - want).abs() <= rel * want.abs()
}

/// The coil of vectors A (REFERENCES §3, §4): 10 mH, 10 Ω, 12 V, so I0 = 1.2 A.
fn vector_a(clamp: ClampPath) -> Model {
    Params::new(
        SupplyParams::new(12.0, 12.0, 12.0),
        CoilParams::new(0.010, 10.0),
        SwitchParams::new(0.0, 60.0),
        clamp,
        ControlParams::new(100e-6, 100, 2.0),
    )
    .validate()
    .expect("vector A is valid")
}

fn amps(m: &Model, a: f64) -> Current {
    m.current_from_amps(a as f32).expect("in range")
}

#[test]
fn copper_resistance_ratios_follow_iec_60028() {
    // Source: IEC 60028, α20 = 0.00393 /K, as tabulated in the Industrial Power Engineering and
    // Applications Handbook (Newnes), Table 30.1. Computed ratios R/R20 (REFERENCES §1):
    // −40 °C 0.7642 · 75 °C 1.2162 · 90 °C 1.2751 · 100 °C 1.3144 · 155 °C 1.5306.
    let coil = CoilParams::new(0.01, 1.0);
    for (t, ratio) in [
        (-40.0, 0.7642),
        (75.0, 1.2162),
        (90.0, 1.2751),
        (100.0, 1.3144),
        (155.0, 1.5306),
    ] {
        let r = f64::from(coil.resistance_at(t));
        assert!(
            (r - ratio).abs() < 6e-5,
            "R({t} °C)/R20 = {r}, want {ratio}"
        );
        // The equivalent (234.5 + T) form differs by < 0.01 % (REFERENCES §1).
        let alt = (234.5 + f64::from(t)) / (234.5 + 20.0);
        assert!(close(r, alt, 1e-4), "{r} vs {alt}");
        // The model is built for the winding temperature with the same law.
        let m = Params::new(
            SupplyParams::new(12.0, 10.0, 14.0),
            coil.at_temperature(t),
            SwitchParams::new(0.0, 60.0),
            ClampPath::Freewheel {
                forward_drop: 0.7,
                resistance: 0.0,
            },
            ControlParams::new(1e-4, 100, 20.0),
        )
        .validate()
        .expect("valid");
        assert!((f64::from(m.derived().resistance) - ratio).abs() < 6e-5);
    }
}

#[test]
fn rl_rise_reaches_63_95_and_99_percent_at_one_three_and_five_tau() {
    // Source: DOE Fundamentals Handbook, Electrical Science (DOE-HDBK-1011): 63.2 % at one τ;
    // computed 1 − e⁻¹ = 0.632121, 1 − e⁻³ = 0.950213, 1 − e⁻⁵ = 0.993262 (REFERENCES §2).
    let m = vector_a(ClampPath::Freewheel {
        forward_drop: 0.7,
        resistance: 0.0,
    });
    let i_inf = 1.2; // Vs/(R + R_on) with R_on = 0
    for (taus, frac) in [(1u32, 0.632121), (3, 0.950213), (5, 0.993262)] {
        // Event mode: τ = L/R = 1 ms = 1000 µs.
        let mut s = CoilState::idle();
        m.advance(&mut s, true, 1000 * taus, Volts::from_num(12));
        let got = f64::from(m.amps(s.current())) / i_inf;
        assert!(
            (got - frac).abs() < 2e-6,
            "{taus} τ (event): {got}, want {frac}"
        );
        // Period mode: ten 100 µs periods at 100 % duty per τ.
        let mut s = CoilState::idle();
        for _ in 0..10 * taus {
            m.step(&mut s, 100, Volts::from_num(12));
        }
        let got = f64::from(m.amps(s.current())) / i_inf;
        assert!(
            (got - frac).abs() < 2e-6,
            "{taus} τ (periods): {got}, want {frac}"
        );
    }
}

#[test]
fn switch_clamp_vector_a_decay_time_and_energy() {
    // REFERENCES §3, vector A: L = 10 mH, R = 10 Ω, Vs = 12 V, I0 = 1.2 A, Vcl = 36 V →
    // t = 0.4055 ms, E = 8.168 mJ; the R → 0 form 10.80 mJ is an upper bound; ½LI² = 7.20 mJ.
    // Forms derived from the RL equation (standard in application notes on inductive switching).
    let m = vector_a(ClampPath::SwitchClamp {
        clamp_voltage: 36.0,
        resistance: 0.0,
    });
    let vs = Volts::from_num(12);
    let i0 = amps(&m, 1.2);
    let t = m.decay_time_us(i0, Current::ZERO, vs).expect("decays");
    assert!((405..=407).contains(&t), "decay {t} µs, want 405.5");
    let e = f64::from(m.joules(m.turn_off_energy(i0, vs)));
    assert!((e - 8.168e-3).abs() < 0.6e-6, "energy {e} J, want 8.168 mJ");
    assert!(e < 10.80e-3 && e > 7.20e-3);
    // Peak drain voltage: the clamp voltage (no clamp resistance).
    let v = m.peak_drain_voltage(i0, vs).to_num::<f64>();
    assert!((v - 36.0).abs() < 1e-4);
}

#[test]
fn avalanche_vector_b_matches_the_unclamped_switching_form() {
    // REFERENCES §3, vector B (avalanche, R = 0): L = 1 mH, I = 10 A, BV = 60 V, VDD = 24 V →
    // t_av = 277.8 µs, E_AS = 83.33 mJ; identity ½·BV·I·t_av = E_AS. The form is the single-pulse
    // UIS rating of JEDEC JESD24 (from memory in the reference sheet). The model needs R > 0, so
    // the coil has 1 mΩ: u = R·I/(BV − VDD) = 2.8·10⁻⁴ lowers E by about 2u/3 = 0.019 % and t by
    // about u/2 = 0.014 %; the R = 0 figures are upper bounds.
    let m = Params::new(
        SupplyParams::new(24.0, 24.0, 24.0),
        CoilParams::new(1e-3, 1e-3),
        SwitchParams::new(0.01, 60.0),
        ClampPath::None,
        ControlParams::new(100e-6, 1000, 10.0),
    )
    .validate()
    .expect("vector B is valid");
    let vs = Volts::from_num(24);
    let i0 = Current::FULL_SCALE; // 10 A
    let t = f64::from(m.decay_time_us(i0, Current::ZERO, vs).expect("decays"));
    // τ·ln(1 + u) = 277.74 µs with the 1 mΩ (277.78 µs for R = 0), rounded up to whole µs.
    assert_eq!(t, 278.0, "t_av = {t} µs");
    let e = f64::from(m.joules(m.avalanche_energy(i0, vs)));
    assert!(e < 83.334e-3 && close(e, 83.333e-3, 3e-4), "E_AS = {e} J");
    // The identity ½·BV·I·t_av = E_AS holds in the R → 0 limit (both shift by O(u)).
    assert!(close(0.5 * 60.0 * 10.0 * t * 1e-6, e, 2e-3));
    assert_eq!(m.turn_off_energy(i0, vs), m.avalanche_energy(i0, vs));
}

#[test]
fn freewheel_diode_and_zener_decay_times() {
    // REFERENCES §4 with vector A's coil (L = 10 mH, R = 10 Ω, I0 = 1.2 A, Rd = 0): diode
    // Vf = 0.7 V → to zero 2.898 ms, to 10 % of I0 1.900 ms; diode + 24 V zener → 0.396 ms.
    // Forms: t = τ·ln((I0 + a)/(Ith + a)), a = Vf/(R + Rd); the zener adds to Vf
    // (Horowitz & Hill, The Art of Electronics, 3rd ed., p. 39, on the faster ramp-down).
    let vs = Volts::from_num(12);
    let diode = vector_a(ClampPath::Freewheel {
        forward_drop: 0.7,
        resistance: 0.0,
    });
    let i0 = amps(&diode, 1.2);
    let t0 = diode.decay_time_us(i0, Current::ZERO, vs).unwrap();
    assert!((2897..=2899).contains(&t0), "diode to zero {t0} µs");
    let t10 = diode.decay_time_us(i0, amps(&diode, 0.12), vs).unwrap();
    assert!((1899..=1901).contains(&t10), "diode to 10 % {t10} µs");
    let zener = vector_a(ClampPath::FreewheelZener {
        forward_drop: 0.7,
        zener_voltage: 24.0,
        resistance: 0.0,
    });
    let tz = zener.decay_time_us(i0, Current::ZERO, vs).unwrap();
    assert!((395..=397).contains(&tz), "diode + zener to zero {tz} µs");
    // The estimator's own decay agrees: after the closed-form time the current is zero, one
    // period earlier it is not.
    let mut s = CoilState::with_current(i0);
    diode.advance(&mut s, false, t0, vs);
    assert_eq!(s.current(), Current::ZERO);
    let mut s = CoilState::with_current(i0);
    diode.advance(&mut s, false, t0 - 2, vs);
    assert!(s.current() > Current::ZERO);
}

#[test]
fn energy_leaving_the_field_is_half_l_i_squared() {
    // REFERENCES §2 (W = ½·L·I², standard physics) and §4: through a freewheel path the energy
    // that leaves the field is ½·L·I0², shared by the path and the winding resistance. The
    // winding's share R·∫i²dt is computed here in f64 from the decay i(t) (independent of the
    // library): ∫i²dt = τ·(I0²/2 − a·I0 + a²·ln(1 + I0/a)).
    for (clamp, v_p) in [
        (
            ClampPath::Freewheel {
                forward_drop: 0.7,
                resistance: 0.0,
            },
            0.7,
        ),
        (
            ClampPath::FreewheelZener {
                forward_drop: 0.7,
                zener_voltage: 24.0,
                resistance: 0.0,
            },
            24.7,
        ),
    ] {
        let m = vector_a(clamp);
        let i0 = 1.2f64;
        let (l, r) = (0.010, 10.0);
        let tau = l / r;
        let a = v_p / r;
        let int_i2 = tau * (i0 * i0 / 2.0 - a * i0 + a * a * (1.0 + i0 / a).ln());
        let path = f64::from(m.joules(m.turn_off_energy(amps(&m, i0), Volts::from_num(12))));
        let total = path + r * int_i2;
        assert!(
            close(total, 7.20e-3, 2e-5),
            "path {path} + winding = {total}, want 7.20 mJ"
        );
    }
}

#[test]
fn unclamped_turn_off_into_a_capacitance() {
    // REFERENCES §5: ½·L·I² = ½·C·V² → peak above the supply I·√(L/C);
    // computed: 1 A, 10 mH, 1 nF → 3162 V. Capped at the breakdown, where the switch clamps.
    let mut coil = CoilParams::new(0.010, 10.0);
    coil.node_capacitance = Some(1e-9);
    let params = |bv: f32| {
        Params::new(
            SupplyParams::new(12.0, 12.0, 12.0),
            coil,
            SwitchParams::new(0.0, bv),
            ClampPath::None,
            ControlParams::new(100e-6, 100, 1.0),
        )
    };
    let m = params(5000.0).validate().unwrap();
    let v = m.peak_drain_voltage(Current::FULL_SCALE, Volts::from_num(12));
    let above = v.to_num::<f64>() - 12.0;
    assert!(
        close(above, 3162.28, 1e-5),
        "peak {above} V above the supply"
    );
    let m = params(100.0).validate().unwrap();
    let v = m.peak_drain_voltage(Current::FULL_SCALE, Volts::from_num(12));
    assert_eq!(v, Volts::from_num(100));
}

#[test]
fn pwm_average_matches_the_averaged_circuit_relation() {
    // REFERENCES §6 (derived): D·Vs − (1 − D)·Vf = I·(R + D·Ron + (1 − D)·Rd). It is the
    // small-ripple limit of the exact mean, so the valve (T = 50 µs ≪ τ = 2.2 ms) must agree
    // closely; the exact steady state must also be what the estimator settles to.
    let p = common::valve();
    let m = p.validate().unwrap();
    let (vs, vf, r, ron, rd) = (24.0f64, 0.7, 18.0, 0.1, 0.05);
    for n in [320u32, 1600, 2880] {
        let d = f64::from(n) / 3200.0;
        let want = (d * vs - (1.0 - d) * vf) / (r + d * ron + (1.0 - d) * rd);
        let ss = m.steady_state(n, Volts::from_num(24));
        assert!(ss.continuous);
        let mean = f64::from(m.amps(ss.mean));
        assert!(
            close(mean, want, 2e-4),
            "duty {d}: mean {mean}, want {want}"
        );
        // The estimator settles to the same periodic solution.
        let mut s = CoilState::idle();
        let mut last = None;
        for _ in 0..20_000 {
            last = Some(m.step(&mut s, n, Volts::from_num(24)));
        }
        let last = last.unwrap();
        let tol = 1 << 12; // 2^-28 of full scale
        assert!((last.valley.to_bits() - ss.valley.to_bits()).abs() < tol);
        assert!((last.peak.to_bits() - ss.peak.to_bits()).abs() < tol);
        // And the f64 reference's ripple.
        let rf = Reference::new(&p);
        let mut i = 0.0;
        let mut pv = (0.0, 0.0, 0.0);
        for _ in 0..20_000 {
            pv = rf.step(i, n, 24.0);
            i = pv.2;
        }
        let ripple = f64::from(m.amps(ss.ripple()));
        assert!(
            (ripple - (pv.0 - pv.1)).abs() < 1e-6,
            "ripple {ripple} vs {}",
            pv.0 - pv.1
        );
    }
}
