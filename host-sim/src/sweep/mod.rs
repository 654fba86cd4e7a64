//! Monte Carlo over the scenario's `[tolerance]` spreads.
//!
//! Sample `i` of seed `s` draws its values from the ChaCha8 stream `i` of seed `s` by the
//! sweep's [`Plan`], so a sample is the same whichever machine, thread or shard runs it:
//! `--shard K/N` runs the samples with `i mod N = K − 1`, and the shards' results together are
//! exactly the unsharded sweep's. The plant takes the drawn values; the guard keeps the
//! scenario's beliefs (what the firmware was built with).
//!
//! [`summary`] folds samples into what a sweep amounts to (with the failure probability's
//! confidence bound) in any order; [`records`] writes them as they finish, resumes an
//! interrupted sweep and merges shards.

pub mod records;
pub mod summary;

use crate::bridge::scenario::BridgeScenario;
use crate::cosim::{self, Options};
use crate::scenario::{Loaded, Scenario};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// One sample's outcome.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Sample {
    /// Sample index.
    pub index: u64,
    /// "pass", "limited" or "fail".
    pub verdict: crate::cosim::Verdict,
    /// Kinds of the findings.
    pub findings: Vec<String>,
    /// The topology's figures ([`summary::figures`]) by key, SI; `None`: never reached (a
    /// decay that did not end); a key left out: nothing to measure (no drive ended).
    pub figures: BTreeMap<String, Option<f64>>,
    /// The drawn values, by key, SI units.
    pub parameters: Vec<(String, f64)>,
}

/// How a sweep draws each spread's value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Plan {
    /// Uniform inside the spread.
    Uniform,
    /// Normal around the spread's middle with the spread's half-width as 3σ, truncated at the
    /// spread (a draw outside it is drawn again from the same stream): how a part's "±x %" is
    /// usually meant when the parts come from a production lot.
    Normal,
    /// The box's corners: sample `i` takes each spread's low or high end by the bits of `i`
    /// (spread `j` high when bit `j` is set), so `2^d` samples for `d` spreads visit them all.
    Corners,
    /// Latin hypercube: each spread's range cut into as many equal strata as the sweep has
    /// samples, each stratum used by exactly one sample (a seeded permutation per spread),
    /// uniform inside it. Covers every spread's range evenly with few samples.
    Latin,
}

impl Plan {
    /// Every plan, in the order the help lists them.
    pub const ALL: [Plan; 4] = [Plan::Uniform, Plan::Normal, Plan::Corners, Plan::Latin];

    /// The plan's name on the command line and in records.
    pub fn word(self) -> &'static str {
        match self {
            Plan::Uniform => "uniform",
            Plan::Normal => "normal",
            Plan::Corners => "corners",
            Plan::Latin => "latin",
        }
    }

    /// Whether samples are drawn at random (so their failures bound a probability): every
    /// plan but the corners. Clopper–Pearson assumes independent draws: exact for uniform and
    /// normal; a Latin hypercube's estimate has at most N/(N − 1) times the variance of
    /// independent draws for any figure (Owen, 1997, from memory), so its bound is close.
    pub fn is_random(self) -> bool {
        self != Plan::Corners
    }

    /// From its name.
    pub fn parse(word: &str) -> Result<Self, String> {
        Self::ALL
            .into_iter()
            .find(|p| p.word() == word)
            .ok_or_else(|| {
                let all: Vec<&str> = Self::ALL.iter().map(|p| p.word()).collect();
                format!("`{word}` is not a plan; one of {}", all.join(", "))
            })
    }
}

/// What to sample: the whole sweep's size, its seed and plan, and the part to run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Spec {
    /// Samples in the whole sweep.
    pub samples: u64,
    /// Seed of the draws.
    pub seed: u64,
    /// How values are drawn.
    pub plan: Plan,
    /// The part of the sweep to run.
    pub shard: Shard,
    /// Spreads (bit j: the scenario's spread j) held at the middle of their range (their
    /// nominal value), whatever the plan.
    pub fixed: u64,
    /// Spreads drawn from the truncated normal whatever the plan (but corners).
    pub normal: u64,
}

impl Spec {
    /// A uniform sweep of `samples` with `seed`, all of it.
    pub const fn uniform(samples: u64, seed: u64) -> Self {
        Self {
            samples,
            seed,
            plan: Plan::Uniform,
            shard: Shard::ALL,
            fixed: 0,
            normal: 0,
        }
    }
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

/// Where sample `index` puts each of `d` spreads, as a fraction of its range (0: its low end,
/// 1: its high end), by the sweep's plan.
pub fn positions(spec: &Spec, d: usize, index: u64) -> Vec<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(index);
    let marked = |mask: u64, j: usize| j < 64 && mask >> j & 1 == 1;
    (0..d)
        .map(|j| match spec.plan {
            _ if marked(spec.fixed, j) => 0.5,
            Plan::Corners => f64::from(u8::from(marked(index, j))),
            _ if marked(spec.normal, j) => truncated_normal(&mut rng),
            Plan::Uniform => rng.random::<f64>(),
            Plan::Normal => truncated_normal(&mut rng),
            Plan::Latin => {
                let stratum = permute(index, spec.samples, spec.seed, j as u64);
                (stratum as f64 + rng.random::<f64>()) / spec.samples as f64
            }
        })
        .collect()
}

/// Draws sample `index`'s values of a low-side scenario's spreads.
pub fn draw(s: &Scenario, spec: &Spec, index: u64) -> crate::scenario::Values {
    let mut v = s.plant;
    let u = positions(spec, s.tolerance.len(), index);
    for (&(knob, spread), u) in s.tolerance.iter().zip(u) {
        let (lo, hi) = spread.bounds(s.plant.get(knob));
        v.set(knob, lo + (hi - lo) * u);
    }
    v
}

/// The number of spreads a scenario's sweep draws.
pub fn dimensions(s: &Loaded) -> usize {
    match s {
        Loaded::LowSide(s) => s.tolerance.len(),
        Loaded::FullBridge(b) => bridge_knobs(b).len(),
    }
}

/// A bridge's spreads as knobs: the fault suite's (inductance, resistance, motor constant, bus
/// capacitance) and the supply reading's error.
fn bridge_knobs(b: &BridgeScenario) -> Vec<crate::bridge::faults::Knob> {
    let mut k = crate::bridge::faults::knobs(&b.tolerance);
    if b.tolerance.supply_reading > 0.0 {
        k.push(crate::bridge::faults::Knob {
            name: "supply reading error",
            spread: b.tolerance.supply_reading,
            set: |s, b, x| s.reading_offset = x * b.circuit.supply,
            get: (|s| s.reading_offset, "V"),
        });
    }
    k
}

/// A standard normal draw at 3σ = ½ mapped onto [0, 1] (mean ½), drawn again until inside.
fn truncated_normal(rng: &mut ChaCha8Rng) -> f64 {
    loop {
        let z: f64 = rng.sample(rand_distr::StandardNormal);
        if z.abs() <= 3.0 {
            return 0.5 + z / 6.0;
        }
    }
}

/// Position of `i` in a seeded permutation of `0..n` (one per `dimension`): a four-round
/// Feistel network on the smallest even number of bits that holds `n`, walked until it lands
/// inside (a bijection on `0..n`, computed per index in constant memory).
pub fn permute(i: u64, n: u64, seed: u64, dimension: u64) -> u64 {
    if n <= 1 {
        return 0;
    }
    let bits = (64 - (n - 1).leading_zeros()).max(2).next_multiple_of(2);
    let half = bits / 2;
    let mask = (1u64 << half) - 1;
    let mut x = i;
    loop {
        let (mut l, mut r) = (x >> half, x & mask);
        for round in 0..4u64 {
            let f = splitmix(seed ^ splitmix(dimension ^ splitmix(round ^ r << 8))) & mask;
            (l, r) = (r, l ^ f);
        }
        x = l << half | r;
        if x < n {
            return x;
        }
    }
}

/// The SplitMix64 finaliser: a fixed, well-mixed 64-bit map.
fn splitmix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ z >> 30).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ z >> 27).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ z >> 31
}

/// Runs one sample.
pub fn sample(s: &Loaded, spec: &Spec, index: u64) -> Sample {
    match s {
        Loaded::LowSide(s) => low_side_sample(s, spec, index),
        Loaded::FullBridge(b) => bridge_sample(b, spec, index),
    }
}

fn low_side_sample(s: &Scenario, spec: &Spec, index: u64) -> Sample {
    let v = draw(s, spec, index);
    let r = cosim::run_with(s, &v.circuit(), Options::default());
    let longest = if r.turn_offs.iter().any(|t| t.decay_time_s.is_none()) {
        Some(None)
    } else {
        r.turn_offs
            .iter()
            .filter_map(|t| t.decay_time_s)
            .reduce(f64::max)
            .map(Some)
    };
    let mut figures = BTreeMap::from([
        ("peak_current_a".to_string(), Some(r.peak_current_a)),
        ("peak_drain_voltage_v".into(), Some(r.peak_drain_voltage_v)),
        ("max_pulse_energy_j".into(), Some(r.max_pulse_energy_j)),
        (
            "max_estimate_error_a".into(),
            Some(r.estimate.max_abs_error_a),
        ),
    ]);
    if let Some(d) = longest {
        figures.insert("longest_decay_s".into(), d);
    }
    Sample {
        index,
        verdict: r.verdict(),
        findings: r.findings.iter().map(|f| f.kind.to_string()).collect(),
        figures,
        parameters: s
            .tolerance
            .iter()
            .map(|&(k, _)| (k.name().to_string(), v.get(k)))
            .collect(),
    }
}

fn bridge_sample(base: &BridgeScenario, spec: &Spec, index: u64) -> Sample {
    let knobs = bridge_knobs(base);
    let mut s = base.clone();
    for (k, u) in knobs.iter().zip(positions(spec, knobs.len(), index)) {
        (k.set)(&mut s, base, k.spread * (2.0 * u - 1.0));
    }
    let r = crate::bridge::cosim::run(&s, false);
    let mut figures = BTreeMap::from([
        ("peak_current_a".to_string(), Some(r.peak_current_a)),
        ("peak_bus_v".into(), Some(r.peak_bus_v)),
        ("returned_energy_j".into(), Some(r.returned_energy_j)),
        ("max_estimate_error_a".into(), Some(r.max_estimate_error_a)),
    ]);
    // A drive ended and driven again (or the run's end) before it decayed is not a decay.
    if let Some(d) = r
        .stops
        .iter()
        .filter_map(|t| t.decay_time_s)
        .reduce(f64::max)
    {
        figures.insert("longest_decay_s".into(), Some(d));
    }
    Sample {
        index,
        verdict: r.verdict(),
        findings: r.findings.iter().map(|f| f.kind.to_string()).collect(),
        figures,
        parameters: knobs
            .iter()
            .map(|k| (k.name.replace(' ', "_"), (k.get.0)(&s)))
            .collect(),
    }
}

/// The keys of the values a scenario's sweep draws, in order.
pub fn sample_keys(s: &Loaded) -> Vec<String> {
    match s {
        Loaded::LowSide(s) => s
            .tolerance
            .iter()
            .map(|(k, _)| k.name().to_string())
            .collect(),
        Loaded::FullBridge(b) => bridge_knobs(b)
            .iter()
            .map(|k| k.name.replace(' ', "_"))
            .collect(),
    }
}

/// The keys of the spreads `mask` marks (bit j: spread j).
pub fn marked_keys(s: &Loaded, mask: u64) -> Vec<String> {
    sample_keys(s)
        .into_iter()
        .enumerate()
        .filter(|&(j, _)| j < 64 && mask >> j & 1 == 1)
        .map(|(_, k)| k)
        .collect()
}

/// The mask of the spreads named in `keys` (comma-separated), or the name that is not a spread
/// of the scenario.
pub fn mask_of(s: &Loaded, keys: &str) -> Result<u64, String> {
    let all = sample_keys(s);
    keys.split(',')
        .map(str::trim)
        .filter(|k| !k.is_empty())
        .try_fold(0u64, |mask, k| match all.iter().position(|a| a == k) {
            Some(j) if j < 64 => Ok(mask | 1 << j),
            _ => Err(format!(
                "`{k}` is not one of the scenario's spreads ({})",
                all.join(", ")
            )),
        })
}

/// The unit of a drawn value's key, for reports.
pub fn unit_of(s: &Loaded, key: &str) -> &'static str {
    match s {
        Loaded::LowSide(_) => crate::scenario::Knob::ALL
            .iter()
            .find(|k| k.name() == key)
            .map_or("", |k| k.unit().symbol()),
        Loaded::FullBridge(b) => bridge_knobs(b)
            .iter()
            .find(|k| k.name.replace(' ', "_") == key)
            .map_or("", |k| k.get.1),
    }
}

/// Runs the shard's samples that `skip` does not name, in parallel, handing each to `each` as
/// it finishes (in no particular order; nothing is kept).
pub fn each(
    s: &Loaded,
    spec: &Spec,
    skip: impl Fn(u64) -> bool + Sync,
    each: impl Fn(Sample) + Sync,
) {
    (0..spec.samples)
        .into_par_iter()
        .filter(|&i| spec.shard.owns(i) && !skip(i))
        .for_each(|i| each(sample(s, spec, i)));
}

/// Runs the shard's samples in parallel and returns them by index; `tick` is called once per
/// finished sample.
pub fn run(s: &Loaded, spec: &Spec, tick: impl Fn() + Sync) -> Vec<Sample> {
    let out = std::sync::Mutex::new(Vec::new());
    each(
        s,
        spec,
        |_| false,
        |x| {
            tick();
            out.lock().unwrap_or_else(|e| e.into_inner()).push(x);
        },
    );
    let mut out = out.into_inner().unwrap_or_else(|e| e.into_inner());
    out.sort_by_key(|x| x.index);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The permutation is a bijection on `0..n` for sizes around powers of two and odd ones,
    /// and differs between dimensions.
    #[test]
    fn permute_is_a_bijection() {
        for n in [1u64, 2, 3, 5, 16, 17, 100, 1000, 4097] {
            let mut seen = vec![false; n as usize];
            for i in 0..n {
                let p = permute(i, n, 7, 3) as usize;
                assert!(!seen[p], "n {n}: {p} twice");
                seen[p] = true;
            }
        }
        let a: Vec<u64> = (0..100).map(|i| permute(i, 100, 7, 0)).collect();
        let b: Vec<u64> = (0..100).map(|i| permute(i, 100, 7, 1)).collect();
        assert_ne!(a, b);
    }

    fn valve() -> Scenario {
        let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/../examples/scenarios/");
        Scenario::load(std::path::Path::new(&format!("{dir}relay-zener.toml"))).unwrap()
    }

    /// Each spread's position in its range, per sample.
    fn spots(s: &Scenario, spec: &Spec) -> Vec<Vec<f64>> {
        (0..spec.samples)
            .map(|i| {
                let v = draw(s, spec, i);
                s.tolerance
                    .iter()
                    .map(|&(k, sp)| {
                        let (lo, hi) = sp.bounds(s.plant.get(k));
                        (v.get(k) - lo) / (hi - lo)
                    })
                    .collect()
            })
            .collect()
    }

    /// A fixed spread stays at its middle (the nominal value) in every plan; a spread marked
    /// normal is drawn so under a uniform plan.
    #[test]
    fn per_spread_choices_override_the_plan() {
        let s = valve();
        for plan in Plan::ALL {
            let spec = Spec {
                plan,
                fixed: 0b1,
                normal: 0b10,
                ..Spec::uniform(64, 3)
            };
            for p in spots(&s, &spec) {
                assert!((p[0] - 0.5).abs() < 1e-12, "{plan:?}: {}", p[0]);
            }
        }
        let spec = Spec {
            normal: 0b10,
            ..Spec::uniform(2000, 3)
        };
        let outer = spots(&s, &spec)
            .iter()
            .filter(|p| !(1.0 / 6.0..=5.0 / 6.0).contains(&p[1]))
            .count();
        // The range is ±3σ, so its outer sixths lie beyond ±2σ: 4.3 % of the truncated normal's
        // draws (2Φ(−2)/(2Φ(3) − 1), about 86 of 2000) against a third of a uniform's (667).
        assert!(outer < 150, "{outer} of 2000 in the outer sixths");
    }

    /// Latin hypercube: in every spread, each of the N strata holds exactly one sample.
    #[test]
    fn latin_fills_every_stratum_once() {
        let s = valve();
        let spec = Spec {
            plan: Plan::Latin,
            ..Spec::uniform(50, 11)
        };
        let x = spots(&s, &spec);
        for d in 0..s.tolerance.len() {
            let mut strata: Vec<u64> = x.iter().map(|p| (p[d] * 50.0).floor() as u64).collect();
            strata.sort_unstable();
            assert_eq!(strata, (0..50).collect::<Vec<_>>(), "spread {d}");
        }
    }

    /// Corners: 2^d samples visit every corner once.
    #[test]
    fn corners_visit_every_corner() {
        let s = valve();
        let d = s.tolerance.len();
        let spec = Spec {
            plan: Plan::Corners,
            ..Spec::uniform(1 << d, 1)
        };
        let mut seen: Vec<u64> = spots(&s, &spec)
            .iter()
            .map(|p| {
                p.iter().enumerate().fold(0, |c, (j, &u)| {
                    assert!(u.abs() < 1e-9 || (u - 1.0).abs() < 1e-9, "{u}");
                    c | u64::from(u > 0.5) << j
                })
            })
            .collect();
        seen.sort_unstable();
        assert_eq!(seen, (0..1 << d).collect::<Vec<u64>>());
    }

    /// Normal: inside the spread, centred, σ a sixth of the range (truncation at 3σ shrinks it
    /// by 1.4 %: σ_t/σ = √(1 − 6φ(3)/(2Φ(3) − 1)) = 0.9866, from the truncated normal's
    /// variance).
    #[test]
    fn normal_is_centred_with_its_sigma() {
        let s = valve();
        let spec = Spec {
            plan: Plan::Normal,
            ..Spec::uniform(20_000, 5)
        };
        let x = spots(&s, &spec);
        for d in 0..s.tolerance.len() {
            let u: Vec<f64> = x.iter().map(|p| p[d]).collect();
            assert!(u.iter().all(|&v| (0.0..=1.0).contains(&v)));
            let mean = u.iter().sum::<f64>() / u.len() as f64;
            let sd = (u.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / u.len() as f64).sqrt();
            assert!((mean - 0.5).abs() < 0.004, "spread {d}: mean {mean}");
            let want = 0.9866 / 6.0;
            assert!(
                (sd / want - 1.0).abs() < 0.02,
                "spread {d}: σ {sd}, want {want}"
            );
        }
    }
}
