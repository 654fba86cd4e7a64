//! Fitting a coil's inductance and resistance to a captured current trace.
//!
//! **Switch-on.** With the supply V and everything else in series R_s (switch, shunt, wiring)
//! known, the current after the edge at t₀ is the RL step i(t) = b + I∞·(1 − e^{−(t−t₀)/τ}), and
//! R = V/I∞ − R_s, L = τ·V/I∞. The four parameters (b, I∞, τ, t₀) are fitted by least squares
//! (Levenberg–Marquardt from a start found by scanning τ with the linear parameters solved
//! exactly); their covariance s²·(JᵀJ)⁻¹ gives the uncertainties, propagated to L and R to first
//! order. The supply's own error is not in them: L and R scale with V.
//!
//! **Switch-off** (a falling edge, alone or after the rise): the decay through the freewheel
//! path, i(t) = (I₀ + a)·e^{−(t−t₀)/τ_off} − a down to zero, fitted the same way until the current
//! is within 2 % of zero. With L known (from the rise in the same capture, or given), the
//! off-circuit resistance is L/τ_off and the path's drop a·L/τ_off.
//!
//! **Plunger dip.** A solenoid's plunger moving during pull-in shows as a fall in the rising
//! current; the fit then uses only the part before it and fits the part after it separately.
//!
//! **Saturation.** The incremental inductance L_inc = (V − R_total·i)/(di/dt) along the rise,
//! from the data smoothed over about 1 % of the rise; when it stays below 90 % of its
//! low-current value over the top of the rise, the current where it falls is reported.
//!
//! Refusals, each with its reason: no edge (the current never leaves the noise), clipped (a flat
//! top while the current was still rising fast: the scope's range), too short (the fit covers
//! under half a time constant), too noisy (L or R uncertain by more than 5 %), not a coil (L or R
//! not positive: a wrong supply, on-resistance or unit).

use crate::capture::Capture;
use std::fmt;

/// A value with its standard uncertainty.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Value {
    /// The value.
    pub value: f64,
    /// One standard deviation.
    pub sigma: f64,
}

impl Value {
    /// σ/|value|.
    pub fn relative(self) -> f64 {
        self.sigma / self.value.abs()
    }
}

/// What the fit needs besides the capture.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitOptions {
    /// Supply across the coil and its series parts while on, V.
    pub supply: f64,
    /// Everything in series with the winding while on (switch, shunt, wiring), Ω.
    pub series_resistance: f64,
    /// Inductance to use for a switch-off fit when the capture has no rise, H.
    pub inductance: Option<f64>,
}

/// Why a capture cannot give a trustworthy fit.
#[derive(Debug, Clone, PartialEq)]
pub enum Problem {
    /// No edge rises (or falls) out of the noise.
    NoEdge {
        /// The current's range, A.
        range: f64,
        /// The noise, A rms.
        noise: f64,
    },
    /// The capture starts after the edge.
    StartsLate,
    /// A flat top while the current was still rising fast.
    Clipped {
        /// The level, A.
        at: f64,
        /// From when, s.
        from: f64,
    },
    /// The fitted stretch covers too little of the time constant.
    TooShort {
        /// Time constants covered.
        covered: f64,
        /// The time constant, s.
        tau: f64,
    },
    /// The uncertainties are too large.
    TooNoisy {
        /// Relative uncertainty of L.
        l: f64,
        /// Relative uncertainty of R.
        r: f64,
    },
    /// The fit did not converge.
    NoFit,
    /// The switch-off's resistance (winding and path) is below the rise's (winding alone) by
    /// more than three standard uncertainties: one of the two is wrong.
    Disagree {
        /// The rise's winding resistance, Ω.
        rise: Value,
        /// The switch-off's winding and path resistance, Ω.
        off: Value,
    },
    /// The fitted inductance or resistance is not positive: not a coil.
    NotPhysical {
        /// Inductance, H.
        inductance: f64,
        /// Resistance, Ω.
        resistance: f64,
    },
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        use crate::report::si;
        match self {
            Problem::NoEdge { range, noise } => write!(
                f,
                "no edge: the current spans {} against {} rms of noise; the capture must show the switch-on (or switch-off)",
                si(*range, "A", 3),
                si(*noise, "A", 3)
            ),
            Problem::StartsLate => f.write_str(
                "the capture starts after the edge: trigger earlier so some samples precede it",
            ),
            Problem::Clipped { at, from } => write!(
                f,
                "clipped at {} from {}: the current was still rising fast when it went flat (the scope's or the ADC's range); widen the range and capture again",
                si(*at, "A", 4),
                si(*from, "s", 4)
            ),
            Problem::TooShort { covered, tau } => write!(
                f,
                "too short: the fitted part covers {covered:.2} time constants (τ ≈ {}); L and R cannot be told apart — capture at least 2 τ",
                si(*tau, "s", 3)
            ),
            Problem::TooNoisy { l, r } => write!(
                f,
                "too noisy: L uncertain by {:.1} %, R by {:.1} % (more than 5 %); average several captures or use a larger signal",
                l * 100.0,
                r * 100.0
            ),
            Problem::NoFit => f.write_str("the fit did not converge"),
            Problem::Disagree { rise, off } => write!(
                f,
                "the two resistances disagree: the switch-off gives {} ± {} for the winding and the freewheel path together, below the rise's {} ± {} for the winding alone; check --on-resistance (the switch's may be larger than given) and --supply",
                si(off.value, "Ω", 4),
                si(off.sigma, "Ω", 2),
                si(rise.value, "Ω", 4),
                si(rise.sigma, "Ω", 2)
            ),
            Problem::NotPhysical {
                inductance,
                resistance,
            } => write!(
                f,
                "not a coil: the fit gives L = {}, R = {}; check --supply (its value and sign), --on-resistance (it must be below the coil's own) and the current's units (a capture in mA read as A)",
                si(*inductance, "H", 4),
                si(*resistance, "Ω", 4)
            ),
        }
    }
}

/// The rise.
#[derive(Debug, Clone, PartialEq)]
pub struct Rise {
    /// The edge, s.
    pub t0: Value,
    /// Baseline current before it, A.
    pub baseline: Value,
    /// Steady current the rise heads for, A (above the baseline).
    pub steady: Value,
    /// Time constant, s.
    pub tau: Value,
    /// Inductance, H.
    pub inductance: Value,
    /// Winding resistance, Ω.
    pub resistance: Value,
    /// RMS residual of the fit, A.
    pub residual: f64,
    /// Time constants the fit covers.
    pub covered: f64,
    /// Last sample used, s.
    pub until: f64,
    /// Samples used.
    pub samples: usize,
    /// The plunger dip, if one was found.
    pub dip: Option<Dip>,
    /// Where the inductance starts to fall: (current, A; incremental inductance above it, H).
    pub saturation: Option<(f64, f64)>,
}

/// A dip in the rising current (a plunger moving).
#[derive(Debug, Clone, PartialEq)]
pub struct Dip {
    /// When the current peaked before the dip, s.
    pub peak_t: f64,
    /// The current there, A.
    pub peak_i: f64,
    /// When it was lowest, s.
    pub low_t: f64,
    /// The current there, A.
    pub low_i: f64,
    /// The part after the dip fitted on its own: (inductance, resistance), when it could be.
    pub after: Option<(Value, Value)>,
}

/// The decay.
#[derive(Debug, Clone, PartialEq)]
pub struct Fall {
    /// The edge, s.
    pub t0: Value,
    /// Current at the edge, A.
    pub start: Value,
    /// Time constant of the decay, s.
    pub tau: Value,
    /// The asymptote's magnitude a (the current heads for −a), A.
    pub asymptote: Value,
    /// RMS residual, A.
    pub residual: f64,
    /// Samples used.
    pub samples: usize,
    /// With a known inductance: the off circuit's total resistance L/τ_off, Ω.
    pub off_resistance: Option<Value>,
    /// ... and the path's drop a·L/τ_off, V.
    pub path_drop: Option<Value>,
}

/// Everything the capture gave.
#[derive(Debug, Clone, PartialEq)]
pub struct Fitted {
    /// The noise, A rms (from sample-to-sample differences).
    pub noise: f64,
    /// The rise, if the capture has one.
    pub rise: Option<Rise>,
    /// The decay, if it has one.
    pub fall: Option<Fall>,
    /// Reasons not to trust the result; empty when it is good.
    pub problems: Vec<Problem>,
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n == 0 {
        0.0
    } else if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// Noise, A rms, from the median absolute deviation of sample-to-sample differences (the
/// smooth signal's own differences are small at any useful sampling rate).
pub fn noise(i: &[f64]) -> f64 {
    let mut d: Vec<f64> = i.windows(2).map(|w| w[1] - w[0]).collect();
    let m = median(&mut d.clone());
    let mut dev: Vec<f64> = d.iter_mut().map(|x| (*x - m).abs()).collect();
    1.4826 * median(&mut dev) / std::f64::consts::SQRT_2
}

/// Solves the small dense system `a·x = b` by Gaussian elimination with partial pivoting.
fn solve<const N: usize>(mut a: [[f64; N]; N], mut b: [f64; N]) -> Option<[f64; N]> {
    for c in 0..N {
        let p = (c..N).max_by(|&x, &y| a[x][c].abs().total_cmp(&a[y][c].abs()))?;
        if a[p][c].abs() < 1e-300 {
            return None;
        }
        a.swap(c, p);
        b.swap(c, p);
        let pivot = a[c];
        for r in c + 1..N {
            let f = a[r][c] / pivot[c];
            for (x, &p) in a[r][c..].iter_mut().zip(&pivot[c..]) {
                *x -= f * p;
            }
            b[r] -= f * b[c];
        }
    }
    let mut x = [0.0; N];
    for r in (0..N).rev() {
        let s: f64 = (r + 1..N).map(|k| a[r][k] * x[k]).sum();
        x[r] = (b[r] - s) / a[r][r];
    }
    Some(x)
}

/// The inverse of a small matrix (column by column).
fn inverse<const N: usize>(a: [[f64; N]; N]) -> Option<[[f64; N]; N]> {
    let mut inv = [[0.0; N]; N];
    for c in 0..N {
        let mut e = [0.0; N];
        e[c] = 1.0;
        let x = solve(a, e)?;
        for r in 0..N {
            inv[r][c] = x[r];
        }
    }
    Some(inv)
}

/// A least-squares result: parameters, covariance, rms residual.
struct Lsq<const N: usize> {
    p: [f64; N],
    cov: [[f64; N]; N],
    rms: f64,
}

/// Levenberg–Marquardt on `f(t, p) -> (value, gradient)` over the samples.
fn levenberg_marquardt<const N: usize>(
    t: &[f64],
    y: &[f64],
    mut p: [f64; N],
    f: impl Fn(f64, &[f64; N]) -> (f64, [f64; N]),
) -> Option<Lsq<N>> {
    let ssr = |p: &[f64; N]| -> f64 {
        t.iter()
            .zip(y)
            .map(|(&t, &y)| (f(t, p).0 - y).powi(2))
            .sum()
    };
    let mut cost = ssr(&p);
    let mut lambda = 1e-3;
    for _ in 0..200 {
        let mut jtj = [[0.0; N]; N];
        let mut jtr = [0.0; N];
        for (&tk, &yk) in t.iter().zip(y) {
            let (v, g) = f(tk, &p);
            let r = v - yk;
            for a in 0..N {
                jtr[a] += g[a] * r;
                for b in 0..N {
                    jtj[a][b] += g[a] * g[b];
                }
            }
        }
        let mut improved = false;
        for _ in 0..20 {
            let mut m = jtj;
            for (a, row) in m.iter_mut().enumerate() {
                row[a] += lambda * jtj[a][a].max(1e-300);
            }
            let Some(step) = solve(m, jtr.map(|x| -x)) else {
                lambda *= 10.0;
                continue;
            };
            let mut q = p;
            for a in 0..N {
                q[a] += step[a];
            }
            let c = ssr(&q);
            if c.is_finite() && c <= cost {
                let rel = (cost - c) / cost.max(1e-300);
                p = q;
                cost = c;
                lambda = (lambda * 0.3).max(1e-12);
                improved = true;
                if rel < 1e-12 {
                    return finish(t, y, p, &f);
                }
                break;
            }
            lambda *= 10.0;
        }
        if !improved {
            break;
        }
    }
    finish(t, y, p, &f)
}

fn finish<const N: usize>(
    t: &[f64],
    y: &[f64],
    p: [f64; N],
    f: &impl Fn(f64, &[f64; N]) -> (f64, [f64; N]),
) -> Option<Lsq<N>> {
    let mut jtj = [[0.0; N]; N];
    let mut ssr = 0.0;
    for (&tk, &yk) in t.iter().zip(y) {
        let (v, g) = f(tk, &p);
        ssr += (v - yk).powi(2);
        for a in 0..N {
            for b in 0..N {
                jtj[a][b] += g[a] * g[b];
            }
        }
    }
    let dof = (t.len().saturating_sub(N)).max(1) as f64;
    let s2 = ssr / dof;
    let inv = inverse(jtj)?;
    Some(Lsq {
        p,
        cov: inv.map(|row| row.map(|x| x * s2)),
        rms: (ssr / t.len() as f64).sqrt(),
    })
}

/// The RL rise and its gradient in (b, I∞, τ, t₀).
fn rise_model(t: f64, p: &[f64; 4]) -> (f64, [f64; 4]) {
    let [b, inf, tau, t0] = *p;
    let s = t - t0;
    if s <= 0.0 {
        return (b, [1.0, 0.0, 0.0, 0.0]);
    }
    let e = (-s / tau).exp();
    (
        b + inf * (1.0 - e),
        [1.0, 1.0 - e, -inf * e * s / (tau * tau), -inf * e / tau],
    )
}

/// The decay toward −a and its gradient in (I₀, a, τ, t₀); before t₀ the current is I₀.
fn fall_model(t: f64, p: &[f64; 4]) -> (f64, [f64; 4]) {
    let [i0, a, tau, t0] = *p;
    let s = t - t0;
    if s <= 0.0 {
        return (i0, [1.0, 0.0, 0.0, 0.0]);
    }
    let e = (-s / tau).exp();
    (
        (i0 + a) * e - a,
        [
            e,
            e - 1.0,
            (i0 + a) * e * s / (tau * tau),
            (i0 + a) * e / tau,
        ],
    )
}

/// A start for the rise: τ scanned on a log grid with b and I∞ solved linearly for each.
fn rise_start(t: &[f64], y: &[f64], t0: f64) -> [f64; 4] {
    let span = t[t.len() - 1] - t0;
    let mut best = (f64::INFINITY, [y[0], y[y.len() - 1] - y[0], span, t0]);
    for k in 0..=120 {
        let tau = span * 10f64.powf(-3.0 + 5.0 * f64::from(k) / 120.0);
        // y ≈ b + I∞·u with u = 1 − e^{−s/τ}: a two-parameter linear fit.
        let (mut su, mut suu, mut sy, mut suy, n) = (0.0, 0.0, 0.0, 0.0, t.len() as f64);
        for (&tk, &yk) in t.iter().zip(y) {
            let u = if tk > t0 {
                1.0 - (-(tk - t0) / tau).exp()
            } else {
                0.0
            };
            su += u;
            suu += u * u;
            sy += yk;
            suy += u * yk;
        }
        let det = n * suu - su * su;
        if det.abs() < 1e-300 {
            continue;
        }
        let inf = (n * suy - su * sy) / det;
        let b = (sy - inf * su) / n;
        let ssr: f64 = t
            .iter()
            .zip(y)
            .map(|(&tk, &yk)| {
                let u = if tk > t0 {
                    1.0 - (-(tk - t0) / tau).exp()
                } else {
                    0.0
                };
                (b + inf * u - yk).powi(2)
            })
            .sum();
        if ssr < best.0 {
            best = (ssr, [b, inf, tau, t0]);
        }
    }
    best.1
}

fn value<const N: usize>(l: &Lsq<N>, k: usize) -> Value {
    Value {
        value: l.p[k],
        sigma: l.cov[k][k].max(0.0).sqrt(),
    }
}

/// Moving average over `w` samples (centred).
fn smooth(y: &[f64], w: usize) -> Vec<f64> {
    let half = w / 2;
    let mut prefix = vec![0.0; y.len() + 1];
    for (k, v) in y.iter().enumerate() {
        prefix[k + 1] = prefix[k] + v;
    }
    (0..y.len())
        .map(|k| {
            let a = k.saturating_sub(half);
            let b = (k + half + 1).min(y.len());
            (prefix[b] - prefix[a]) / (b - a) as f64
        })
        .collect()
}

/// The switch-off's resistance (winding and path) below the rise's (winding alone) by more than
/// three standard uncertainties, when both were fitted.
fn disagreement(f: &Fitted) -> Option<Problem> {
    let rise = f.rise.as_ref()?.resistance;
    let off = f.fall.as_ref()?.off_resistance?;
    let sigma = rise.sigma.hypot(off.sigma);
    (rise.value > 0.0 && off.value + 3.0 * sigma < rise.value)
        .then_some(Problem::Disagree { rise, off })
}

/// Fits what the capture shows.
pub fn fit(c: &Capture, o: &FitOptions) -> Fitted {
    let (t, y) = (&c.t, &c.i);
    let n = t.len();
    let sigma = noise(y);
    let mut out = Fitted {
        noise: sigma,
        rise: None,
        fall: None,
        problems: Vec::new(),
    };
    let head = (n / 50).max(5).min(n / 4);
    let base = median(&mut y[..head].to_vec());
    let (lo, hi) = y
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let up = hi - base;
    let down = base - lo;
    let range = hi - lo;
    if range < 10.0 * sigma || range <= 0.0 {
        out.problems.push(Problem::NoEdge {
            range,
            noise: sigma,
        });
        return out;
    }
    let rising = up >= down;
    let level = (6.0 * sigma).max(0.1 * range);
    let first = if rising {
        y.iter().position(|&v| v > base + level)
    } else {
        y.iter().position(|&v| v < base - level)
    };
    let Some(k1) = first else {
        out.problems.push(Problem::NoEdge {
            range,
            noise: sigma,
        });
        return out;
    };
    // The head must be a baseline: its two halves agree within the noise.
    let half = head / 2;
    let drift = (median(&mut y[..half].to_vec()) - median(&mut y[half..head].to_vec())).abs();
    if k1 < head || drift > 6.0 * sigma / (half as f64).sqrt() + 1e-3 * range {
        out.problems.push(Problem::StartsLate);
        return out;
    }
    // Back from the crossing to the last sample within the noise of the baseline.
    let quiet = 3.0 * sigma + 1e-3 * range;
    let k0 = (0..k1)
        .rev()
        .find(|&k| (y[k] - base).abs() <= quiet)
        .unwrap_or(0);
    if rising {
        // Where does the rise end: a later fall back toward the baseline (a switch-off)?
        let peak_k = (k1..n)
            .max_by(|&a, &b| y[a].total_cmp(&y[b]))
            .unwrap_or(n - 1);
        let off_k = (peak_k..n).find(|&k| y[k] < y[peak_k] - 0.5 * (y[peak_k] - base).max(level));
        let end = match off_k {
            Some(k) => (peak_k..k)
                .rev()
                .find(|&j| y[j] >= y[peak_k] - quiet)
                .unwrap_or(peak_k),
            None => n - 1,
        };
        match fit_rise(t, y, k0, end, base, sigma, range, o) {
            Ok(r) => out.rise = Some(r),
            Err(p) => out.problems.push(p),
        }
        if let Some(k) = off_k {
            let start = (end..k)
                .find(|&j| y[j] < y[end] - quiet)
                .map_or(end, |j| j.saturating_sub(1));
            let l = out
                .rise
                .as_ref()
                .map(|r| r.inductance)
                .or(o.inductance.map(|l| Value {
                    value: l,
                    sigma: 0.0,
                }));
            match fit_fall(t, y, start.saturating_sub(10).max(end), start, n - 1, l) {
                Ok(f) => out.fall = Some(f),
                Err(p) => out.problems.push(p),
            }
        }
    } else {
        let l = o.inductance.map(|l| Value {
            value: l,
            sigma: 0.0,
        });
        match fit_fall(t, y, k0.saturating_sub(10 * head), k0, n - 1, l) {
            Ok(f) => out.fall = Some(f),
            Err(p) => out.problems.push(p),
        }
    }
    if let Some(r) = &out.rise
        && (r.inductance.value <= 0.0 || r.resistance.value <= 0.0)
    {
        out.problems.push(Problem::NotPhysical {
            inductance: r.inductance.value,
            resistance: r.resistance.value,
        });
    }
    out.problems.extend(disagreement(&out));
    if let Some(r) = &out.rise {
        let (lr, rr) = (r.inductance.relative(), r.resistance.relative());
        if lr > 0.05 || rr > 0.05 {
            out.problems.push(Problem::TooNoisy { l: lr, r: rr });
        }
    }
    out
}

#[allow(clippy::too_many_arguments)]
fn fit_rise(
    t: &[f64],
    y: &[f64],
    k0: usize,
    end: usize,
    base: f64,
    sigma: f64,
    range: f64,
    o: &FitOptions,
) -> Result<Rise, Problem> {
    let mut end = end;
    // A flat top while still rising fast: clipped.
    let top = y[k0..=end]
        .iter()
        .copied()
        .fold(f64::NEG_INFINITY, f64::max);
    let flat: Vec<usize> = (k0..=end).filter(|&k| y[k] == top).collect();
    if flat.len() >= 5 {
        let from = flat[0];
        let w = ((from - k0) / 10).max(3);
        if from > k0 + 2 * w {
            let slope = |a: usize, b: usize| (y[b] - y[a]) / (t[b] - t[a]);
            let early = slope(k0, k0 + w);
            let late = slope(from - w, from);
            if late > 0.2 * early && flat.len() * 10 >= (end + 1 - from) * 9 {
                return Err(Problem::Clipped {
                    at: top,
                    from: t[from],
                });
            }
        }
    }
    // A dip: the smoothed current falls by more than the noise allows, then rises again.
    let w = ((end - k0) / 100).max(5);
    let s = smooth(&y[k0..=end], w);
    let drop = (5.0 * sigma / (w as f64).sqrt()).max(0.01 * range);
    let mut dip = None;
    let mut run_max = (0usize, f64::NEG_INFINITY);
    for (k, &v) in s.iter().enumerate() {
        if v > run_max.1 {
            run_max = (k, v);
        } else if v < run_max.1 - drop {
            let low = (k..s.len())
                .take_while(|&j| s[j] <= s[k] + drop || j == k)
                .min_by(|&a, &b| s[a].total_cmp(&s[b]))
                .unwrap_or(k);
            let recovers = s[low..].iter().any(|&x| x > s[low] + drop);
            if recovers {
                dip = Some((k0 + run_max.0, k0 + low));
            }
            break;
        }
    }
    let mut dip_out = None;
    if let Some((pk, lk)) = dip {
        let after = fit_after_dip(t, y, lk, end, o);
        dip_out = Some(Dip {
            peak_t: t[pk],
            peak_i: y[pk] - base,
            low_t: t[lk],
            low_i: y[lk] - base,
            after,
        });
        end = pk;
    }
    let (tt, yy) = (&t[..=end], &y[..=end]);
    let start = rise_start(tt, yy, t[k0]);
    let l = levenberg_marquardt(tt, yy, start, rise_model).ok_or(Problem::NoFit)?;
    let [b, inf, tau, t0] = l.p;
    if !(inf > 0.0 && tau > 0.0) {
        return Err(Problem::NoFit);
    }
    let v = o.supply;
    let total = v / inf;
    let covered = (t[end] - t0) / tau;
    if covered < 0.5 {
        return Err(Problem::TooShort { covered, tau });
    }
    let (inductance, resistance) =
        coil_values(inf, tau, (l.cov[1][1], l.cov[2][2], l.cov[1][2]), o);
    let saturation = if dip_out.is_none() {
        saturation(&t[k0..=end], &y[k0..=end], b, v, total, sigma)
    } else {
        None
    };
    Ok(Rise {
        t0: value(&l, 3),
        baseline: value(&l, 0),
        steady: value(&l, 1),
        tau: value(&l, 2),
        inductance,
        resistance,
        residual: l.rms,
        covered,
        until: t[end],
        samples: end + 1,
        dip: dip_out,
        saturation,
    })
}

/// The rise after a plunger dip: i = I∞ − (I∞ − i₁)·e^{−(t−t₁)/τ} from the dip's low point.
fn fit_after_dip(
    t: &[f64],
    y: &[f64],
    lk: usize,
    end: usize,
    o: &FitOptions,
) -> Option<(Value, Value)> {
    if end < lk + 20 {
        return None;
    }
    let t1 = t[lk];
    let (tt, yy) = (&t[lk..=end], &y[lk..=end]);
    let model = |t: f64, p: &[f64; 3]| -> (f64, [f64; 3]) {
        let [i1, inf, tau] = *p;
        let s = t - t1;
        let e = (-s / tau).exp();
        (
            inf - (inf - i1) * e,
            [e, 1.0 - e, -(inf - i1) * e * s / (tau * tau)],
        )
    };
    let span = t[end] - t1;
    let l = levenberg_marquardt(tt, yy, [y[lk], y[end], span / 2.0], model)?;
    let [_, inf, tau] = l.p;
    if !(inf > 0.0 && tau > 0.0) || span < 0.5 * tau {
        return None;
    }
    Some(coil_values(
        inf,
        tau,
        (l.cov[1][1], l.cov[2][2], l.cov[1][2]),
        o,
    ))
}

/// L = τ·V/I∞ and R = V/I∞ − R_s from a fitted steady current and time constant, with
/// first-order uncertainties from their variances and covariance `(var I∞, var τ, cov)`.
fn coil_values(
    inf: f64,
    tau: f64,
    (ci, ct, cit): (f64, f64, f64),
    o: &FitOptions,
) -> (Value, Value) {
    let v = o.supply;
    let (dl_di, dl_dt) = (-tau * v / (inf * inf), v / inf);
    let var_l = dl_di * dl_di * ci + dl_dt * dl_dt * ct + 2.0 * dl_di * dl_dt * cit;
    let dr_di = -v / (inf * inf);
    (
        Value {
            value: tau * v / inf,
            sigma: var_l.max(0.0).sqrt(),
        },
        Value {
            value: v / inf - o.series_resistance,
            sigma: (dr_di * dr_di * ci).max(0.0).sqrt(),
        },
    )
}

/// Where the incremental inductance falls below 90 % of its low-current value and stays there.
fn saturation(t: &[f64], y: &[f64], b: f64, v: f64, total: f64, sigma: f64) -> Option<(f64, f64)> {
    let n = y.len();
    if n < 100 {
        return None;
    }
    let w = (n / 100).max(5);
    let s = smooth(y, w);
    let top = s.iter().copied().fold(f64::NEG_INFINITY, f64::max) - b;
    // 20 bins of current from 10 % to 90 % of the rise; L_inc per bin from a central difference.
    let bins = 20;
    let mut l_bin = vec![Vec::new(); bins];
    for k in w..n - w {
        let i = s[k] - b;
        let frac = i / top;
        if !(0.1..0.9).contains(&frac) {
            continue;
        }
        let didt = (s[k + w] - s[k - w]) / (t[k + w] - t[k - w]);
        if didt <= 0.0 {
            continue;
        }
        let l = (v - total * i) / didt;
        l_bin[((frac - 0.1) / 0.8 * bins as f64) as usize % bins].push(l);
    }
    let med: Vec<Option<f64>> = l_bin
        .iter_mut()
        .map(|v| if v.len() >= 3 { Some(median(v)) } else { None })
        .collect();
    let low = median(
        &mut med[..bins / 4]
            .iter()
            .flatten()
            .copied()
            .collect::<Vec<_>>(),
    );
    if low.is_nan() || low <= 0.0 || sigma > 0.01 * top {
        return None;
    }
    // The first bin from which every later bin is below 90 % of the low-current value.
    let below: Vec<bool> = med
        .iter()
        .map(|m| m.is_some_and(|x| x < 0.9 * low))
        .collect();
    let first = (0..bins).find(|&k| {
        below[k..]
            .iter()
            .zip(&med[k..])
            .all(|(&bl, m)| bl || m.is_none())
    })?;
    if first >= bins - 1 || first < bins / 4 {
        return None;
    }
    let at = (0.1 + 0.8 * first as f64 / bins as f64) * top;
    let high = median(&mut med[first..].iter().flatten().copied().collect::<Vec<_>>());
    Some((at, high))
}

/// The decay from the edge at sample `k0`, with samples from `lead` (before the edge: the
/// current held at I₀) up to the one within 2 % of zero.
fn fit_fall(
    t: &[f64],
    y: &[f64],
    lead: usize,
    k0: usize,
    end: usize,
    l: Option<Value>,
) -> Result<Fall, Problem> {
    let i0 = y[k0];
    // Use the decay until it is within 2 % of zero (the path stops conducting there).
    let stop = (k0..=end).find(|&k| y[k] < 0.02 * i0).unwrap_or(end);
    if stop < k0 + 20 {
        return Err(Problem::TooShort {
            covered: 0.0,
            tau: t[stop] - t[k0],
        });
    }
    let (tt, yy) = (&t[lead..stop], &y[lead..stop]);
    let span = t[stop] - t[k0];
    // Start: a pure exponential to the 37 % point, no asymptote.
    let k37 = (k0..stop).find(|&k| y[k] < 0.368 * i0).unwrap_or(stop);
    let tau0 = (t[k37] - t[k0]).max(span / 10.0);
    let l_fit = levenberg_marquardt(tt, yy, [i0, 0.01 * i0, tau0, t[k0]], fall_model)
        .ok_or(Problem::NoFit)?;
    let [_, a, tau, _] = l_fit.p;
    if tau.is_nan() || tau <= 0.0 {
        return Err(Problem::NoFit);
    }
    let (off_resistance, path_drop) = match l {
        Some(l) => {
            let r = l.value / tau;
            let sr = r * (l.relative().powi(2) + (l_fit.cov[2][2].sqrt() / tau).powi(2)).sqrt();
            let drop = a * r;
            let sd = (drop
                * drop
                * ((l_fit.cov[1][1].sqrt() / a.abs().max(1e-300)).powi(2) + (sr / r).powi(2)))
            .sqrt();
            (
                Some(Value {
                    value: r,
                    sigma: sr,
                }),
                Some(Value {
                    value: drop,
                    sigma: sd,
                }),
            )
        }
        None => (None, None),
    };
    Ok(Fall {
        t0: value(&l_fit, 3),
        start: value(&l_fit, 0),
        tau: value(&l_fit, 2),
        asymptote: value(&l_fit, 1),
        residual: l_fit.rms,
        samples: tt.len(),
        off_resistance,
        path_drop,
    })
}
