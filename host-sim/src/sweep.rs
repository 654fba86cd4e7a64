//! Monte Carlo over the scenario's `[tolerance]` spreads.
//!
//! Sample `i` of seed `s` draws every spread parameter uniformly within its bounds from the
//! ChaCha8 stream `i` of seed `s`, so a sample is the same whichever machine, thread or shard
//! runs it: `--shard K/N` runs the samples with `i mod N = K − 1`, and the shards' results
//! together are exactly the unsharded sweep's. The plant takes the drawn values; the guard keeps
//! the scenario's beliefs (what the firmware was built with).

use crate::cosim::{self, Options};
use crate::scenario::{Knob, Scenario};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::Serialize;

/// One sample's outcome.
#[derive(Debug, Clone, Serialize)]
pub struct Sample {
    /// Sample index.
    pub index: u64,
    /// "pass" or "fail".
    pub verdict: crate::cosim::Verdict,
    /// Kinds of the findings.
    pub findings: Vec<&'static str>,
    /// True peak current, A.
    pub peak_current_a: f64,
    /// True peak switch-node voltage, V.
    pub peak_drain_voltage_v: f64,
    /// Largest single clamp pulse, J.
    pub max_pulse_energy_j: f64,
    /// Longest decay to the release current among the turn-offs, s (`None` if one never got
    /// there or there were none).
    pub longest_decay_s: Option<f64>,
    /// Worst |estimate − true|, A.
    pub max_estimate_error_a: f64,
    /// The drawn values, by key, SI units.
    pub parameters: Vec<(&'static str, f64)>,
}

/// Which part of the sweep to run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    /// 1-based shard number.
    pub k: u64,
    /// Number of shards.
    pub n: u64,
}

impl Shard {
    /// The whole sweep.
    pub const ALL: Shard = Shard { k: 1, n: 1 };

    /// Parses `K/N`.
    pub fn parse(s: &str) -> Result<Self, String> {
        let (k, n) = s
            .split_once('/')
            .ok_or_else(|| format!("`{s}`: write the shard as K/N, e.g. 2/8"))?;
        let k: u64 = k
            .trim()
            .parse()
            .map_err(|_| format!("`{s}`: K is not a whole number"))?;
        let n: u64 = n
            .trim()
            .parse()
            .map_err(|_| format!("`{s}`: N is not a whole number"))?;
        if n == 0 || k == 0 || k > n {
            return Err(format!("`{s}`: need 1 ≤ K ≤ N"));
        }
        Ok(Self { k, n })
    }

    /// Whether sample `i` belongs to this shard.
    pub fn owns(self, i: u64) -> bool {
        i % self.n == self.k - 1
    }
}

/// Draws sample `index`'s values.
pub fn draw(s: &Scenario, seed: u64, index: u64) -> crate::scenario::Values {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(index);
    let mut v = s.plant;
    for &(knob, spread) in &s.tolerance {
        let (lo, hi) = spread.bounds(s.plant.get(knob));
        let u: f64 = rng.random();
        v.set(knob, lo + (hi - lo) * u);
    }
    v
}

/// Runs one sample.
pub fn sample(s: &Scenario, seed: u64, index: u64) -> Sample {
    let v = draw(s, seed, index);
    let r = cosim::run_with(s, &v.circuit(), Options::default());
    let longest = if r.turn_offs.iter().any(|t| t.decay_time_s.is_none()) {
        None
    } else {
        r.turn_offs
            .iter()
            .filter_map(|t| t.decay_time_s)
            .reduce(f64::max)
    };
    Sample {
        index,
        verdict: r.verdict(),
        findings: r.findings.iter().map(|f| f.kind).collect(),
        peak_current_a: r.peak_current_a,
        peak_drain_voltage_v: r.peak_drain_voltage_v,
        max_pulse_energy_j: r.max_pulse_energy_j,
        longest_decay_s: longest,
        max_estimate_error_a: r.estimate.max_abs_error_a,
        parameters: s
            .tolerance
            .iter()
            .map(|&(k, _)| (k.name(), v.get(k)))
            .collect(),
    }
}

/// Runs the shard's samples in parallel; `tick` is called once per finished sample.
pub fn run(
    s: &Scenario,
    samples: u64,
    seed: u64,
    shard: Shard,
    tick: impl Fn() + Sync,
) -> Vec<Sample> {
    let mut out: Vec<Sample> = (0..samples)
        .into_par_iter()
        .filter(|&i| shard.owns(i))
        .map(|i| {
            let r = sample(s, seed, i);
            tick();
            r
        })
        .collect();
    out.sort_by_key(|x| x.index);
    out
}

/// The sample with the largest `key` (ties: the lowest index).
pub fn worst_by(samples: &[Sample], key: impl Fn(&Sample) -> f64) -> Option<&Sample> {
    samples
        .iter()
        .fold(None, |best: Option<&Sample>, x| match best {
            Some(b) if key(b) >= key(x) => Some(b),
            _ => Some(x),
        })
}

/// The spread keys of a scenario, for headers.
pub fn knobs(s: &Scenario) -> Vec<Knob> {
    s.tolerance.iter().map(|&(k, _)| k).collect()
}
