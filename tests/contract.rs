//! The numerical contract, measured: the fixed-point estimate against an independent f64
//! piecewise-exponential reference (`common::Reference`, the exact RL solution per segment).
//!
//! Bound under test (the numerical contract in `src/estimate.rs`): within 0.1 % of the full-scale
//! current, for peak, valley and end of every period, and not growing with run length.

mod common;

use coilward::{
    ClampPath, CoilParams, CoilState, ControlParams, Params, SupplyParams, SwitchParams, Volts,
};
use common::{Reference, Rng};
use proptest::prelude::*;

const BOUND: f64 = 1e-3;

/// Runs `periods` periods of a random drive and returns the worst error (fraction of full scale)
/// in each of `blocks` equal blocks of the run.
fn run(p: &Params, periods: usize, blocks: usize, seed: u64) -> Vec<f64> {
    let model = p.validate().expect("valid parameters");
    let reference = Reference::new(p);
    let fs = reference.full_scale;
    let mut rng = Rng(seed | 1);
    let mut state = CoilState::idle();
    let mut i_ref = 0.0f64;
    let (v_lo, v_hi) = (f64::from(p.supply.min), f64::from(p.supply.max));
    let n_full = p.control.duty_resolution;
    let mut duty = 0u32;
    let mut vs = Volts::from_num(p.supply.nominal);
    let mut worst = vec![0.0f64; blocks];
    let per_block = periods.div_ceil(blocks);
    for k in 0..periods {
        // Hold a duty for a random stretch, sometimes jump to 0 or 100 %, sometimes beyond.
        if rng.next_u64().is_multiple_of(64) {
            duty = match rng.next_u64() % 8 {
                0 => 0,
                1 => n_full,
                2 => n_full + 1000,
                _ => (rng.unit() * f64::from(n_full + 1)) as u32,
            };
        }
        if rng.next_u64().is_multiple_of(16) {
            let v = v_lo + (v_hi - v_lo) * rng.unit();
            vs = Volts::from_num(v);
        }
        let vs_f = vs.to_num::<f64>();
        let est = model.step(&mut state, duty, vs);
        let (pk, va, end) = reference.step(i_ref, duty, vs_f);
        i_ref = end;
        let err = [
            (fixed_amps(est.peak.to_bits(), fs) - pk).abs(),
            (fixed_amps(est.valley.to_bits(), fs) - va).abs(),
            (fixed_amps(est.end.to_bits(), fs) - end).abs(),
        ]
        .into_iter()
        .fold(0.0, f64::max)
            / fs;
        let b = k / per_block;
        worst[b] = worst[b].max(err);
    }
    worst
}

fn show(v: &[f64]) -> String {
    v.iter()
        .map(|x| format!("{x:.2e}"))
        .collect::<Vec<_>>()
        .join(" ")
}

/// Exact conversion of a raw current to amperes in f64 (the f32 helper rounds to 24 bits).
fn fixed_amps(bits: i64, fs: f64) -> f64 {
    bits as f64 / (1u64 << 40) as f64 * fs
}

#[test]
fn a_million_periods_stay_within_the_bound_and_do_not_drift() {
    let p = common::valve();
    let worst = run(&p, 1_000_000, 10, 0x5eed_c011);
    let max = worst.iter().copied().fold(0.0, f64::max);
    println!(
        "valve, 10^6 periods, worst error per 10^5 block (fraction of full scale): {}",
        show(&worst)
    );
    assert!(max < BOUND, "worst error {max:e} exceeds {BOUND:e}");
    // Not growing: the last block is no worse than twice the first.
    assert!(
        worst[9] <= 2.0 * worst[0],
        "error grew from {:e} to {:e}",
        worst[0],
        worst[9]
    );
}

#[test]
fn the_slowest_corner_of_the_range_holds() {
    // τ = 10 s with a 1 µs period (T/τ = 10^-7), a million periods (one second of drive).
    let p = Params::new(
        SupplyParams::new(12.0, 10.0, 14.0),
        CoilParams::new(10.0, 1.0),
        SwitchParams::new(0.0, 40.0),
        ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.0,
        },
        ControlParams::new(1e-6, 64, 14.0),
    );
    let worst = run(&p, 1_000_000, 4, 7);
    let max = worst.iter().copied().fold(0.0, f64::max);
    println!("tau 10 s, T 1 us: worst error per block {}", show(&worst));
    assert!(max < BOUND, "worst error {max:e}");
}

#[test]
fn the_fastest_corner_of_the_range_holds() {
    // τ = 10 µs with a 10 ms period: every period settles fully within its segments.
    let p = Params::new(
        SupplyParams::new(12.0, 10.0, 14.0),
        CoilParams::new(100e-6, 10.0),
        SwitchParams::new(0.0, 60.0),
        ClampPath::SwitchClamp {
            clamp_voltage: 36.0,
            resistance: 0.0,
        },
        ControlParams::new(10e-3, 65_535, 1.5),
    );
    let worst = run(&p, 20_000, 2, 11);
    let max = worst.iter().copied().fold(0.0, f64::max);
    assert!(max < BOUND, "worst error {max:e}");
}

/// Log-uniform in [lo, hi].
fn log_uniform(lo: f64, hi: f64) -> impl Strategy<Value = f64> {
    (lo.ln()..hi.ln()).prop_map(f64::exp)
}

fn any_clamp() -> impl Strategy<Value = u8> {
    0u8..4
}

prop_compose! {
    /// Parameter sets across the documented range: τ 10 µs ..= 10 s, supplies to 100 V,
    /// currents to 100 A, periods 1 µs ..= 10 ms, every clamp path.
    fn any_drive()(
        tau in log_uniform(10e-6, 10.0),
        r in log_uniform(0.5, 1000.0),
        ron_share in 0.0f64..0.5,
        v_nom in log_uniform(3.0, 100.0),
        period in log_uniform(1e-6, 10e-3),
        counts in 1u32..=65_535,
        path in any_clamp(),
        fs_factor in 0.5f64..2.0,
        temp in -40.0f64..155.0,
    ) -> Params {
        // Keep currents at or below 100 A and the inductance within its 1000 H range.
        let r = r.max(v_nom / 100.0).min(999.0 / tau);
        let v_nom = v_nom.min(r * 100.0);
        let l = tau * r;
        let v_max = v_nom * 1.2;
        let bv = v_max * 3.0 + 5.0;
        let clamp = match path {
            0 => ClampPath::None,
            1 => ClampPath::Freewheel { forward_drop: 0.7, resistance: (r * 0.01) as f32 },
            2 => ClampPath::FreewheelZener { forward_drop: 0.7, zener_voltage: v_max as f32, resistance: 0.0 },
            _ => ClampPath::SwitchClamp { clamp_voltage: (v_max * 2.0) as f32, resistance: 0.0 },
        };
        let i_max = v_max / (r * (1.0 + 0.00393 * (temp - 20.0)));
        let mut coil = CoilParams::new(l as f32, r as f32).at_temperature(temp as f32);
        coil.node_capacitance = Some(1e-9);
        Params::new(
            SupplyParams::new(v_nom as f32, (v_nom * 0.8) as f32, v_max as f32),
            coil,
            SwitchParams::new((r * ron_share) as f32, bv as f32),
            clamp,
            ControlParams::new(period as f32, counts, (i_max * fs_factor) as f32),
        )
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn random_drives_across_the_range_stay_within_the_bound(p in any_drive(), seed in any::<u64>()) {
        prop_assert!(p.validate().is_ok(), "{:?}", p.validate());
        let worst = run(&p, 20_000, 1, seed);
        prop_assert!(worst[0] < BOUND, "worst error {:e} for {:?}", worst[0], p);
    }
}
