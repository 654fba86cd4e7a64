//! The bridge guard inside its declared tolerance, against circuits it was not told exactly.
//!
//! The true circuit is the exact f64 piecewise-exponential solution of `L·di/dt = v − R·i − E`
//! per segment (the diode branch chosen by the sign of the current), the same reference as
//! `tests/bridge.rs`, run with an inductance, a resistance, a rail and a back-EMF drawn inside
//! the box the guard declares; the guard sees the rail through a reading off by up to the
//! declared fraction and the back-EMF off by up to its spread. Every period: the true magnitude
//! stays at or below the guard's prediction and its bound, the true peak stays under the
//! ceiling, and a reversal is driven only after the true current has stayed at or below the
//! release level for the dead time. The property is the comparison theorem for scalar ODEs
//! (the module documentation of `src/bridge/bound.rs`); nothing here is tuned to pass.

use coilward::bridge::{
    AppliedDecay, BodyDiode, BridgeGuard, BridgeInput, BridgeLimits, BridgeParams, DecayMode,
    MotorParams,
};
use coilward::{
    CoilParams, Condition, ControlParams, SignedVolts, SupplyParams, SwitchParams, Tolerance, Volts,
};
use proptest::prelude::*;

const L: f64 = 2e-3;
const R: f64 = 4.0;
const R_ON: f64 = 0.05;
const VF: f64 = 0.8;
const RD: f64 = 0.02;
const T: f64 = 50e-6;
const N: u32 = 1000;
const FS: f64 = 4.0;
const EMF_LIMIT: f64 = 9.0;
/// The declared box.
const F_L: f64 = 0.2;
const F_R: f64 = 0.15;
const F_V: f64 = 0.03;
const F_K: f64 = 0.2;
const CEILING: f64 = 2.5;
const RELEASE: f64 = 0.05;
const DEAD: f64 = 1e-3;
/// Rounding of the f64 sample times (`p·T + t`), s: gaps are compared with this slack only.
const TIME_ROUNDING: f64 = 1e-12;

fn guard(decay: DecayMode, dead: u32, declared: bool) -> BridgeGuard {
    let params = BridgeParams::new(
        SupplyParams::new(12.0, 10.0, 14.0),
        CoilParams::new(L as f32, R as f32),
        SwitchParams::new(R_ON as f32, 40.0),
        BodyDiode::new(VF as f32, RD as f32),
        decay,
        ControlParams::new(T as f32, N, FS as f32),
    )
    .with_motor(MotorParams::new(EMF_LIMIT as f32, 0.01))
    .with_gate_dead_time((f64::from(dead) * T / f64::from(N)) as f32);
    let tolerance = Tolerance::EXACT
        .with_inductance(F_L as f32)
        .with_resistance(F_R as f32)
        .with_supply_reading(F_V as f32)
        .with_back_emf_constant(F_K as f32);
    let limits = BridgeLimits::new(CEILING as f32, 3.0, RELEASE as f32, DEAD as f32)
        .with_tolerance(if declared {
            tolerance
        } else {
            Tolerance::EXACT
        });
    BridgeGuard::new(&params, &limits).unwrap()
}

/// The true circuit.
struct Truth {
    l: f64,
    r: f64,
    i: f64,
    after_slow: bool,
}

impl Truth {
    fn seg(i: f64, a: f64, t: f64, tau: f64) -> f64 {
        a + (i - a) * (-t / tau).exp()
    }

    /// The current `t` into a fast-decay segment from `i`: the branch of its sign, stopping
    /// at zero.
    fn fast(&self, i: f64, vs: f64, e: f64, t: f64) -> f64 {
        let r_f = self.r + 2.0 * RD;
        let tau = self.l / r_f;
        if i > 0.0 {
            Self::seg(i, -(vs + 2.0 * VF + e) / r_f, t, tau).max(0.0)
        } else if i < 0.0 {
            Self::seg(i, (vs + 2.0 * VF - e) / r_f, t, tau).min(0.0)
        } else {
            0.0
        }
    }

    /// A dead-time interval `t` long from `i` while one leg of a drive of sign `sd` floats:
    /// a current along the drive flows through that leg's low diode (toward
    /// `−(V_f + E)/(R + R_on + R_d)` in its own direction), one against it through the leg's
    /// upper diode into the rail (toward `sd·(Vs + V_f) − E`); either stops at zero, where the
    /// diode blocks.
    fn dead(&self, i: f64, sd: f64, (vs, e): (f64, f64), t: f64) -> f64 {
        let r_d = self.r + R_ON + RD;
        let tau = self.l / r_d;
        if i * sd > 0.0 {
            let (m, e_own) = if i < 0.0 { (-i, -e) } else { (i, e) };
            let m = Self::seg(m, -(VF + e_own) / r_d, t, tau).max(0.0);
            if i < 0.0 { -m } else { m }
        } else if i * sd < 0.0 {
            let x = Self::seg(i, (sd * (vs + VF) - e) / r_d, t, tau);
            if sd > 0.0 { x.min(0.0) } else { x.max(0.0) }
        } else {
            0.0
        }
    }

    /// One period of `counts` (signed drive, fast, slow) with `dead` counts of gate dead time
    /// wherever a leg changes between low and high (after slow decay into the drive, and from
    /// the drive into slow decay; parts no longer than the dead time are left whole, as the
    /// library does): `(time into the period, current)` at 25 points per segment, the corners
    /// included; the state advanced.
    fn period(
        &mut self,
        (n, k, rest): (i32, u32, u32),
        dead: u32,
        vs: f64,
        e: f64,
    ) -> Vec<(f64, f64)> {
        let count = T / f64::from(N);
        let r_on = self.r + 2.0 * R_ON;
        let tau = self.l / r_on;
        let d = f64::from(n.signum());
        let mut out = vec![(0.0, self.i)];
        let mut t0 = 0.0;
        let mut walk = |out: &mut Vec<(f64, f64)>, len: u32, f: &dyn Fn(f64, f64) -> f64| {
            let i0 = out.last().unwrap().1;
            let span = f64::from(len) * count;
            for s in 1..=25 {
                let t = span * f64::from(s) / 25.0;
                out.push((t0 + t, f(i0, t)));
            }
            t0 += span;
        };
        let m = n.unsigned_abs();
        let mut drive = m;
        if dead > 0 && self.after_slow && m > dead {
            walk(&mut out, dead, &|i, t| self.dead(i, d, (vs, e), t));
            drive = m - dead;
        }
        walk(&mut out, drive, &|i, t| {
            Self::seg(i, (d * vs - e) / r_on, t, tau)
        });
        walk(&mut out, k, &|i, t| self.fast(i, vs, e, t));
        let mut slow = rest;
        if dead > 0 && k == 0 && m > 0 && rest > dead {
            walk(&mut out, dead, &|i, t| self.dead(i, d, (vs, e), t));
            slow = rest - dead;
        }
        walk(&mut out, slow, &|i, t| Self::seg(i, -e / r_on, t, tau));
        self.i = out.last().unwrap().1;
        self.after_slow = rest > 0;
        out
    }
}

/// The phases of a period as the library splits them (see `BridgeModel::split`).
fn phases(duty: i32, decay: AppliedDecay, share: f64) -> (i32, u32, u32) {
    let n = duty.unsigned_abs().min(N);
    let off = N - n;
    let k = match decay {
        AppliedDecay::Fast => off,
        AppliedDecay::Slow => 0,
        _ => ((u64::from(off) * (share * 65_536.0).round() as u64) >> 16) as u32,
    };
    (duty.signum() * n as i32, k, off - k)
}

fn amps(c: coilward::Current) -> f64 {
    c.to_bits() as f64 / 1_099_511_627_776.0 * FS
}

/// Runs `periods` periods of random requests against a true circuit drawn from `seed`; returns
/// the smallest margins (prediction − true peak, bound − true magnitude, ceiling − true peak)
/// and the shortest true reversal gap, s.
fn run(
    seed: u64,
    (decay, share): (DecayMode, f64),
    dead: u32,
    declared: bool,
    periods: usize,
) -> (f64, f64, f64, f64) {
    let mut rng = Rng(seed | 1);
    let g = guard(decay, dead, declared);
    let mut s = g.start_idle();
    let mut truth = Truth {
        l: L * (1.0 + F_L * rng.sym()),
        r: R * (1.0 + F_R * rng.sym()),
        i: 0.0,
        after_slow: false,
    };
    let k_true = 1.0 + F_K * rng.sym();
    let (mut request, mut emf) = (0i32, 0.0f64);
    let (mut worst_pred, mut worst_bound, mut worst_ceiling) = (f64::MAX, f64::MAX, f64::MAX);
    let mut shortest_gap = f64::MAX;
    let mut last_dir = 0i32;
    let mut quiet_since: Option<f64> = None;
    for p in 0..periods {
        if rng.next().is_multiple_of(40) {
            request = ((rng.sym() * 1.1) * f64::from(N)) as i32;
            emf = rng.sym() * EMF_LIMIT / (1.0 + F_K);
        }
        // The reading (inside the supply window, quantised as the firmware's would be) and
        // the true rail within the declared error of it.
        let reading = Volts::from_num(10.0 + 4.0 * rng.unit());
        let vs_true = reading.to_num::<f64>() / (1.0 + F_V * rng.sym());
        let e_given = SignedVolts::from_num(emf);
        let e_true = (e_given.to_num::<f64>() * k_true).clamp(-EMF_LIMIT, EMF_LIMIT);
        let t_now = p as f64 * T;
        let input = BridgeInput::new(request, reading).with_back_emf(e_given);
        let out = g.tick(&mut s, input);
        worst_bound = worst_bound.min(amps(out.bound) - truth.i.abs());
        if out.duty != 0 && out.duty.signum() != last_dir && last_dir != 0 {
            // Driven the other way with the true current above release: a gap of zero.
            shortest_gap = shortest_gap.min(quiet_since.map_or(0.0, |since| t_now - since));
        }
        if out.duty != 0 {
            last_dir = out.duty.signum();
        }
        let path = truth.period(phases(out.duty, out.decay, share), dead, vs_true, e_true);
        let peak = path.iter().fold(0.0f64, |m, x| m.max(x.1.abs()));
        worst_pred = worst_pred.min(amps(out.predicted_peak) - peak);
        if !out.active.contains(Condition::CurrentLimit) || amps(out.predicted_peak) <= CEILING {
            worst_ceiling = worst_ceiling.min(CEILING - peak);
        }
        // When the true current first stayed at or below release with the output off (the
        // first sample of this period at or below it, later than the true crossing).
        if out.duty != 0 {
            quiet_since = None;
        } else {
            for &(t, x) in &path {
                if x.abs() > RELEASE {
                    quiet_since = None;
                } else if quiet_since.is_none() {
                    quiet_since = Some(t_now + t);
                }
            }
        }
    }
    (worst_pred, worst_bound, worst_ceiling, shortest_gap)
}

/// xorshift64*: reproducible draws without a dependency.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
    fn sym(&mut self) -> f64 {
        2.0 * self.unit() - 1.0
    }
}

#[test]
fn the_bound_covers_every_drawn_circuit_in_each_decay_mode() {
    // No gate dead time, then 2 µs of it at each leg change (40 timer counts of 50 ns).
    for (decay, share, dead) in [
        (DecayMode::Fast, 1.0, 0),
        (DecayMode::Slow, 0.0, 0),
        (DecayMode::Mixed { fast_share: 0.3 }, 0.3, 0),
        (DecayMode::Slow, 0.0, 40),
        (DecayMode::Mixed { fast_share: 0.3 }, 0.3, 40),
    ] {
        let mut worst = (f64::MAX, f64::MAX, f64::MAX, f64::MAX);
        for seed in 1..=12 {
            let w = run(seed, (decay, share), dead, true, 3000);
            worst = (
                worst.0.min(w.0),
                worst.1.min(w.1),
                worst.2.min(w.2),
                worst.3.min(w.3),
            );
        }
        println!(
            "{decay:?}, dead time {dead} counts: smallest margins: prediction {:+.6} A, bound {:+.6} A, ceiling {:+.4} A; \
             shortest true reversal gap {:.1} µs (dead time {:.0} µs)",
            worst.0,
            worst.1,
            worst.2,
            worst.3 * 1e6,
            DEAD * 1e6
        );
        assert!(worst.0 >= 0.0, "true peak above the prediction: {worst:?}");
        assert!(worst.1 >= 0.0, "true magnitude above the bound: {worst:?}");
        assert!(worst.2 >= 0.0, "true peak above the ceiling: {worst:?}");
        assert!(
            worst.3 >= DEAD - TIME_ROUNDING,
            "reversal gap short: {worst:?}"
        );
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]
    #[test]
    fn random_circuits_inside_the_box_stay_covered(
        seed in any::<u64>(),
        share in 0.05f64..0.95,
        dead in 0u32..100,
    ) {
        let decay = DecayMode::Mixed { fast_share: share as f32 };
        let share = f64::from(share as f32);
        let (pred, bound, ceiling, gap) = run(seed, (decay, share), dead, true, 1500);
        prop_assert!(pred >= 0.0 && bound >= 0.0 && ceiling >= 0.0, "{pred} {bound} {ceiling}");
        prop_assert!(gap >= DEAD - TIME_ROUNDING, "{gap}");
    }
}

#[test]
fn the_same_circuits_escape_a_guard_told_nothing_of_the_box() {
    // The check has teeth: the nominal guard, run against the same circuits, is passed by the
    // true current (its prediction is exact only for the nominal circuit).
    let mut worst = f64::MAX;
    for seed in 1..=12 {
        worst = worst.min(run(seed, (DecayMode::Slow, 0.0), 0, false, 3000).0);
    }
    println!("nominal guard: smallest prediction margin {worst:+.4} A");
    assert!(worst < -0.05, "{worst}");
}

#[test]
fn spreads_of_parts_the_bridge_lacks_are_refused_by_name() {
    let params = BridgeParams::new(
        SupplyParams::new(12.0, 10.0, 14.0),
        CoilParams::new(L as f32, R as f32),
        SwitchParams::new(R_ON as f32, 40.0),
        BodyDiode::new(VF as f32, RD as f32),
        DecayMode::Fast,
        ControlParams::new(T as f32, N, FS as f32),
    );
    let limits = BridgeLimits::new(2.5, 3.0, 0.05, 1e-3);
    for (t, field) in [
        (
            Tolerance::EXACT.with_node_capacitance(0.2),
            "tolerance.node_capacitance",
        ),
        (
            Tolerance::EXACT.with_clamp_voltage(0.1),
            "tolerance.clamp_voltage",
        ),
        (
            Tolerance::EXACT.with_bus_capacitance(0.2),
            "tolerance.bus_capacitance",
        ),
    ] {
        let e = BridgeGuard::new(&params, &limits.with_tolerance(t)).unwrap_err();
        assert_eq!(e.field.name(), field);
    }
    // With nothing declared the bound still runs, over the model's own rounding: one slice.
    let g = BridgeGuard::new(&params, &limits).unwrap();
    assert_eq!(g.bound_slices(), 1);
    let g = BridgeGuard::new(
        &params,
        &limits.with_tolerance(Tolerance::EXACT.with_inductance(0.1)),
    )
    .unwrap();
    assert_eq!(g.bound_slices(), 3);
}
