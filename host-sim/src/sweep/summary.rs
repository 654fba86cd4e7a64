//! What a sweep amounts to, folded one sample at a time: counts, findings, the worst sample per
//! figure, the failure fraction's upper confidence bound.
//!
//! The fold does not depend on the order the samples arrive in (ties go to the lowest index),
//! so a sweep run on any number of threads, or in shards merged afterwards, or interrupted and
//! resumed, gives the same summary bit for bit; and it keeps no per-sample data, so memory stays
//! flat however many samples there are.

use super::Sample;
use crate::cosim::Verdict;
use crate::scenario::Topology;
use std::collections::BTreeMap;

/// The confidence of the bounds reported (one-sided).
pub const CONFIDENCE: f64 = 0.95;

/// The failed samples a summary names (the lowest indices; the records hold all of them).
pub const NAMED_FAILURES: usize = 5;

/// One figure of a sample, and how it is named in reports.
pub struct Figure {
    /// Name in the printed summary.
    pub name: &'static str,
    /// Key in the records ([`Sample::figures`]).
    pub key: &'static str,
    /// Key in the JSON summary's `worst`.
    pub worst_key: &'static str,
    /// SI unit.
    pub unit: &'static str,
}

const fn figure(
    name: &'static str,
    key: &'static str,
    worst_key: &'static str,
    unit: &'static str,
) -> Figure {
    Figure {
        name,
        key,
        worst_key,
        unit,
    }
}

/// The figures a low-side sweep reports its worst sample for.
pub const LOW_SIDE: [Figure; 5] = [
    figure("peak current", "peak_current_a", "peak_current", "A"),
    figure(
        "switch-node peak",
        "peak_drain_voltage_v",
        "switch_node_peak",
        "V",
    ),
    figure("clamp pulse", "max_pulse_energy_j", "clamp_pulse", "J"),
    figure("decay time", "longest_decay_s", "decay_time", "s"),
    figure(
        "estimate error",
        "max_estimate_error_a",
        "estimate_error",
        "A",
    ),
];

/// The figures a full-bridge sweep reports its worst sample for.
pub const FULL_BRIDGE: [Figure; 5] = [
    figure("peak current", "peak_current_a", "peak_current", "A"),
    figure("bus peak", "peak_bus_v", "bus_peak", "V"),
    figure(
        "energy returned",
        "returned_energy_j",
        "returned_energy",
        "J",
    ),
    figure("decay time", "longest_decay_s", "decay_time", "s"),
    figure(
        "estimate error",
        "max_estimate_error_a",
        "estimate_error",
        "A",
    ),
];

/// The figures of a topology's samples.
pub fn figures(t: Topology) -> &'static [Figure] {
    match t {
        Topology::LowSide => &LOW_SIDE,
        Topology::FullBridge => &FULL_BRIDGE,
    }
}

/// The worst sample for one figure.
#[derive(Debug, Clone, PartialEq)]
pub struct Worst {
    /// The figure's value (`None`: never reached, as a decay that did not end; the worst).
    pub value: Option<f64>,
    /// The sample's index.
    pub index: u64,
    /// The sample's verdict.
    pub verdict: Verdict,
    /// The sample's drawn values.
    pub parameters: Vec<(String, f64)>,
}

/// A sweep's summary, built by [`Summary::add`] in any order.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Summary {
    /// Samples folded in.
    pub samples: u64,
    /// Samples that passed.
    pub passed: u64,
    /// Samples the guard limited (and nothing exceeded).
    pub limited: u64,
    /// Samples that failed.
    pub failed: u64,
    /// Per finding kind, the samples it came up in.
    pub kinds: BTreeMap<String, u64>,
    /// Per figure key, its worst sample.
    pub worst: BTreeMap<String, Worst>,
    /// The failed samples with the lowest indices (at most [`NAMED_FAILURES`]), with their
    /// findings.
    pub first_failed: Vec<(u64, Vec<String>)>,
}

impl Summary {
    /// Folds one sample in.
    pub fn add(&mut self, x: &Sample) {
        self.samples += 1;
        match x.verdict {
            Verdict::Pass => self.passed += 1,
            Verdict::Limited => self.limited += 1,
            Verdict::Fail => self.failed += 1,
        }
        let mut kinds: Vec<&String> = x.findings.iter().collect();
        kinds.sort_unstable();
        kinds.dedup();
        for k in kinds {
            *self.kinds.entry(k.clone()).or_insert(0) += 1;
        }
        for (key, &value) in &x.figures {
            // Larger is worse; never reached is worse than any value; ties go to the lowest
            // index (so the order samples arrive in does not matter).
            let rank = |v: Option<f64>| v.unwrap_or(f64::INFINITY);
            let worse =
                self.worst
                    .get(key)
                    .is_none_or(|w| match rank(value).total_cmp(&rank(w.value)) {
                        std::cmp::Ordering::Greater => true,
                        std::cmp::Ordering::Equal => x.index < w.index,
                        std::cmp::Ordering::Less => false,
                    });
            if worse {
                let w = Worst {
                    value,
                    index: x.index,
                    verdict: x.verdict,
                    parameters: x.parameters.clone(),
                };
                self.worst.insert(key.clone(), w);
            }
        }
        if x.verdict == Verdict::Fail {
            self.first_failed.push((x.index, x.findings.clone()));
            self.first_failed.sort_by_key(|f| f.0);
            self.first_failed.truncate(NAMED_FAILURES);
        }
    }

    /// The worst verdict among the samples (pass for none).
    pub fn verdict(&self) -> Verdict {
        if self.failed > 0 {
            Verdict::Fail
        } else if self.limited > 0 {
            Verdict::Limited
        } else {
            Verdict::Pass
        }
    }

    /// The one-sided upper bound on the probability that a sample fails, at [`CONFIDENCE`].
    pub fn failure_upper(&self) -> f64 {
        upper_bound(self.failed, self.samples, CONFIDENCE)
    }
}

/// The Clopper–Pearson one-sided upper confidence bound on a probability from `k` events in
/// `n` trials: the `p` for which `k` or fewer events have probability `1 − confidence`, which
/// is the `confidence` quantile of Beta(k + 1, n − k). 1 when `k ≥ n` or `n = 0`. With `k = 0`
/// it is `1 − (1 − confidence)^(1/n)` (about 3/n at 95 %, the "rule of three").
pub fn upper_bound(k: u64, n: u64, confidence: f64) -> f64 {
    use statrs::distribution::{Beta, Continuous, ContinuousCDF};
    if n == 0 || k >= n {
        return 1.0;
    }
    if k == 0 {
        // The closed form: the Beta(1, n) quantile, 1 − (1 − q)^(1/n).
        return -((1.0 - confidence).ln() / n as f64).exp_m1();
    }
    let Ok(beta) = Beta::new((k + 1) as f64, (n - k) as f64) else {
        return 1.0;
    };
    // statrs's quantile is a bisection good to about 1e-9; two Newton steps on the CDF (its
    // regularised incomplete beta is good to near the last bit) take it to the last digits.
    let mut p = beta.inverse_cdf(confidence);
    for _ in 0..2 {
        let density = beta.pdf(p);
        if density > 0.0 {
            p = (p - (beta.cdf(p) - confidence) / density).clamp(0.0, 1.0);
        }
    }
    p
}

/// The samples a sweep needs, with no failure among them, for [`upper_bound`] to be at or
/// below `target` (the smallest `n` with `1 − (1 − confidence)^(1/n) ≤ target`); `None` for a
/// target outside (0, 1).
pub fn samples_for(target: f64, confidence: f64) -> Option<u64> {
    if !(target > 0.0 && target < 1.0) {
        return None;
    }
    let n = ((1.0 - confidence).ln() / (-target).ln_1p()).ceil();
    // Guard the rounding of the logarithms: the smallest n whose bound is at or below target.
    let mut n = n.max(1.0) as u64;
    while n > 1 && upper_bound(0, n - 1, confidence) <= target {
        n -= 1;
    }
    while upper_bound(0, n, confidence) > target {
        n += 1;
    }
    Some(n)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Zero failures: the closed form against its definition (k = 0 events has probability
    /// (1 − p)^n = 1 − confidence at the bound).
    #[test]
    fn no_failures_bound_is_the_closed_form() {
        for n in [1u64, 10, 100, 1000, 100_000] {
            let p = upper_bound(0, n, CONFIDENCE);
            let tail = (1.0 - p).powf(n as f64);
            assert!((tail - 0.05).abs() < 1e-12, "n {n}: (1 − p)^n = {tail}");
        }
    }

    /// The bound is where the binomial tail P(X ≤ k; n, p) equals 1 − confidence (its
    /// definition), summed directly for small n.
    #[test]
    fn bound_meets_its_definition() {
        for (k, n) in [(1u64, 10u64), (3, 20), (5, 100), (10, 50)] {
            let p = upper_bound(k, n, CONFIDENCE);
            let mut tail = 0.0;
            let mut term = (1.0 - p).powf(n as f64); // P(X = 0)
            for i in 0..=k {
                tail += term;
                term *= (n - i) as f64 / (i + 1) as f64 * p / (1.0 - p);
            }
            assert!((tail - 0.05).abs() < 1e-9, "k {k} n {n}: tail {tail}");
        }
    }

    /// Samples for a target with no failures. 2 995 for 0.1 % at 95 %, 299 for 1 %, 29 956 for
    /// 0.01 %: the success-run table (n = ln(1 − C)/ln(R), rounded up), from memory and
    /// recomputed here.
    #[test]
    fn samples_for_a_target() {
        assert_eq!(samples_for(1e-3, 0.95), Some(2995));
        assert_eq!(samples_for(1e-2, 0.95), Some(299));
        assert_eq!(samples_for(1e-4, 0.95), Some(29956));
        assert_eq!(samples_for(0.0, 0.95), None);
        for t in [0.3, 0.05, 2e-3, 7e-5] {
            let n = samples_for(t, CONFIDENCE).unwrap();
            assert!(upper_bound(0, n, CONFIDENCE) <= t);
            assert!(upper_bound(0, n - 1, CONFIDENCE) > t);
        }
    }
}
