//! The exact solution of a two-state linear circuit over one segment, and the signals read
//! from it.
//!
//! Within a segment the circuit is linear: x′ = A·x + b with x = (coil current, switch-node
//! voltage). With A's eigenvalues μ₁, μ₂ (real, or a complex pair) the solution is
//! x(t) = x_p + Σ Re(Z_k·e^{μ_k t}), x_p = −A⁻¹b, and every quantity the plant watches (the
//! current of a clamp element, the node voltage, the current) is a linear functional of x, so it
//! has the same form: a [`Wave`] g(t) = α + Σ Re(z_k·e^{μ_k t}). A wave's turning points are
//! known in closed form (one at most for real eigenvalues, one every π/ω for a complex pair), so
//! between them it is monotonic and a sign change is found by bracketing — no time step, nothing
//! missed between samples.
//!
//! Numerics: the eigenvalues come from the stable quadratic formula (the small one as det/λ_big),
//! the gap λ₁ − λ₂ from the discriminant computed without cancellation, so stiff segments (a
//! clamp with micro-ohms across picofarads next to a millisecond coil) are exact too: the fast mode
//! simply decays to zero. Eigenvalues closer than 10⁻⁷ relative are separated to that gap (a
//! relative error of order 10⁻¹⁴ in the solution over the time the mode matters).

use num_complex::Complex64 as C;

/// A linear functional's value over a segment: α + Σ Re(z_k e^{μ_k t}).
#[derive(Debug, Clone, Copy)]
pub struct Wave {
    alpha: f64,
    /// g(0), evaluated directly from the segment's starting state (c·x0 + d) rather than
    /// through the modal sum: every mode then agrees exactly on the sign of a conduction
    /// function at the instant a segment starts, so a part sitting on its threshold cannot
    /// toggle back and forth at one instant.
    start: f64,
    z: [C; 2],
    mu: [C; 2],
    /// Number of terms: 2 for real eigenvalues, 1 for a complex pair.
    terms: usize,
}

/// e^x, with 0 below −708 (where e^x is subnormal: every term it scales is below 10⁻³⁰⁰ of
/// the wave, and the library's underflow path is slow; a stiff mode decays there within
/// picoseconds of every segment).
#[inline]
fn exp(x: f64) -> f64 {
    if x < -708.0 { 0.0 } else { x.exp() }
}

/// e^z for complex z, with the same cut (and no sine or cosine below it).
#[inline]
fn cexp(z: C) -> C {
    if z.re < -708.0 {
        C::new(0.0, 0.0)
    } else {
        let (sin, cos) = libm::sincos(z.im);
        let r = z.re.exp();
        C::new(r * cos, r * sin)
    }
}

/// φ(μ, T) = (e^{μT} − 1)/μ, accurate for small |μT|.
fn phi(mu: C, t: f64) -> C {
    let x = mu * t;
    if x.norm_sqr() < 1e-8 {
        t * (1.0 + x * (0.5 + x * (1.0 / 6.0 + x / 24.0)))
    } else if mu.im == 0.0 {
        C::new(x.re.exp_m1() / mu.re, 0.0)
    } else {
        (cexp(x) - 1.0) / mu
    }
}

/// Turning points a wave yields at most (a ring of more half-cycles inside one segment is
/// taken as monotonic past them).
const MOST_TURNS: usize = 64;

/// A wave's turning points, one after the other: `next`, `next + step`, … (summed as they
/// come) below `t_end`, at most `left` more, until a decaying oscillation (`fade`: its rate,
/// its amplitude at 0 and the level below which it no longer counts) has faded.
struct Turns {
    next: f64,
    step: f64,
    t_end: f64,
    left: usize,
    fade: Option<(f64, f64, f64)>,
}

impl Iterator for Turns {
    type Item = f64;

    fn next(&mut self) -> Option<f64> {
        loop {
            let t = self.next;
            if self.left == 0 || t >= self.t_end {
                return None;
            }
            self.next += self.step;
            if t <= 0.0 {
                continue;
            }
            if let Some((m, amp0, level)) = self.fade
                // Once the oscillation has decayed below 10⁻¹² of its start, the rest of the
                // segment is monotonic for every purpose here.
                && exp(m * t) * amp0 < level
            {
                self.left = 0;
                return None;
            }
            self.left -= 1;
            return Some(t);
        }
    }
}

impl Wave {
    /// g(t).
    pub fn at(&self, t: f64) -> f64 {
        if t == 0.0 {
            return self.start;
        }
        if self.terms == 2 {
            // Real modes: no complex exponential (its sine and cosine would be wasted).
            return self.alpha
                + self.z[0].re * exp(self.mu[0].re * t)
                + self.z[1].re * exp(self.mu[1].re * t);
        }
        let mut g = self.alpha;
        for k in 0..self.terms {
            if self.z[k] != C::new(0.0, 0.0) {
                g += (self.z[k] * cexp(self.mu[k] * t)).re;
            }
        }
        g
    }

    /// The constant α (the value the wave settles to).
    pub fn settles_to(&self) -> f64 {
        self.alpha
    }

    /// Times in (0, t_end) where g′ = 0, ascending (at most [`MOST_TURNS`]; nothing is
    /// buffered, so a wave that turns once costs no array).
    fn turning_points(&self, t_end: f64) -> Turns {
        let none = Turns {
            next: 0.0,
            step: 0.0,
            t_end,
            left: 0,
            fade: None,
        };
        if self.terms == 2 {
            let (d1, d2) = (self.z[0].re * self.mu[0].re, self.z[1].re * self.mu[1].re);
            let gap = self.mu[0].re - self.mu[1].re;
            if d1 != 0.0 && d2 != 0.0 && (d1 > 0.0) != (d2 > 0.0) && gap != 0.0 {
                let t = (-d2 / d1).ln() / gap;
                if t > 0.0 && t < t_end {
                    return Turns {
                        next: t,
                        left: 1,
                        ..none
                    };
                }
            }
            return none;
        }
        let d = self.z[0] * self.mu[0];
        let w = self.mu[0].im;
        if d == C::new(0.0, 0.0) || w <= 0.0 {
            return none;
        }
        // Re(d e^{μt}) = |d| e^{mt} cos(ωt + arg d) = 0 at ωt = π/2 − arg d + kπ.
        let first = (core::f64::consts::FRAC_PI_2 - d.arg()).rem_euclid(core::f64::consts::PI);
        // |z| by its square root (no hypot: the parts are far from overflow or underflow).
        let amp0 = self.z[0].norm_sqr().sqrt();
        Turns {
            next: first / w,
            step: core::f64::consts::PI / w,
            t_end,
            left: MOST_TURNS,
            fade: Some((self.mu[0].re, amp0, 1e-12 * (amp0 + self.alpha.abs()))),
        }
    }

    /// The first time in (0, t_end] at which g becomes positive, if it does; `Some(0.0)` if it
    /// already is at the start. The returned time is on the positive side of the crossing.
    pub fn first_rise(&self, t_end: f64) -> Option<f64> {
        let mut a = 0.0;
        let mut ga = self.at(0.0);
        if ga > 0.0 {
            return Some(0.0);
        }
        // Every mode decays (Re μ ≤ 0), so g − α ≤ Σ|z_k| (|re| + |im| bounds |z| without a
        // square root), and for real modes, each term moving from z_k toward 0, g − α ≤
        // Σ max(z_k, 0): a wave that cannot reach zero needs no search.
        let reach: f64 = if self.terms == 2 {
            self.z.iter().map(|z| z.re.max(0.0)).sum()
        } else {
            self.z[..self.terms]
                .iter()
                .map(|z| z.re.abs() + z.im.abs())
                .sum()
        };
        let decaying = self.mu[..self.terms].iter().all(|m| m.re <= 0.0);
        if self.alpha + reach <= 0.0 && decaying {
            return None;
        }
        // Nor one that cannot climb to zero within t_end: |g′| ≤ Σ|z_k||μ_k| while every mode
        // decays (|·| bounded by |re| + |im| again).
        let climb: f64 = self.z[..self.terms]
            .iter()
            .zip(&self.mu)
            .map(|(z, m)| (z.re.abs() + z.im.abs()) * (m.re.abs() + m.im.abs()))
            .sum();
        if decaying && ga + t_end * climb <= 0.0 {
            return None;
        }
        for b in self.turning_points(t_end).chain(core::iter::once(t_end)) {
            let gb = self.at(b);
            if gb > 0.0 {
                return Some(self.bracket(a, ga, b, gb));
            }
            a = b;
            ga = gb;
        }
        None
    }

    /// g(t) and g′(t), sharing the exponentials.
    fn with_slope(&self, t: f64) -> (f64, f64) {
        if self.terms == 2 {
            let e0 = self.z[0].re * exp(self.mu[0].re * t);
            let e1 = self.z[1].re * exp(self.mu[1].re * t);
            return (
                self.alpha + e0 + e1,
                e0 * self.mu[0].re + e1 * self.mu[1].re,
            );
        }
        let (mut g, mut d) = (self.alpha, 0.0);
        for k in 0..self.terms {
            let e = self.z[k] * cexp(self.mu[k] * t);
            g += e.re;
            d += (e * self.mu[k]).re;
        }
        (g, d)
    }

    /// Narrows a bracket with g(a) ≤ 0 < g(b) on a monotonic stretch by Newton steps kept
    /// inside the bracket (bisection — geometric across decades — whenever a step would leave it
    /// or not shrink it by half);
    /// returns a point where g > 0 within a relative 10⁻¹³ (or 10⁻¹⁸ s) of the crossing.
    fn bracket(&self, mut a: f64, ga: f64, mut b: f64, _gb: f64) -> f64 {
        let lo = if a > 0.0 { a } else { b * 1e-20 };
        // From the start of a segment, a first Newton step from t = 0 (its slope needs no
        // exponential): a crossing a node's linear charge reaches lands next to it.
        let slope0: f64 = (0..self.terms).map(|k| (self.z[k] * self.mu[k]).re).sum();
        let newton0 = if a == 0.0 && slope0 > 0.0 {
            -ga / slope0
        } else {
            f64::NAN
        };
        let mut t = if newton0 > a && newton0 < b {
            newton0
        } else if b > 8.0 * lo {
            (lo * b).sqrt()
        } else {
            0.5 * (a + b)
        };
        let mut last_step = f64::INFINITY;
        for _ in 0..200 {
            let width = b - a;
            if width <= 1e-13 * b.abs() + 1e-18 {
                break;
            }
            let (g, d) = self.with_slope(t);
            if g > 0.0 {
                b = t;
            } else {
                a = t;
            }
            let newton = if d != 0.0 { t - g / d } else { f64::NAN };
            let step = (newton - t).abs();
            let shrinking = step < 0.5 * last_step;
            last_step = step;
            t = if newton > a && newton < b && shrinking {
                newton
            } else {
                // Bisect in log t while the bracket spans decades (a stiff mode's crossing can
                // sit picoseconds into a segment of microseconds), else in t.
                let lo = if a > 0.0 { a } else { b * 1e-20 };
                if b > 8.0 * lo {
                    (lo * b).sqrt()
                } else {
                    0.5 * (a + b)
                }
            };
            // Once Newton has landed within the tolerance, probe just past it so the bracket
            // closes from both sides.
            if (t - a).abs() < 1e-13 * b.abs() + 1e-18 {
                t = a + 0.5 * (1e-13 * b.abs() + 1e-18);
            } else if (b - t).abs() < 1e-13 * b.abs() + 1e-18 {
                t = b - 0.5 * (1e-13 * b.abs() + 1e-18);
            }
        }
        b
    }

    /// The largest and smallest value over [0, t_end].
    pub fn range(&self, t_end: f64) -> (f64, f64) {
        self.range_ending(t_end, self.at(t_end))
    }

    /// [`Wave::range`] given the value at `t_end` (`end`, e.g. from [`Solution::at`], which
    /// shares the exponentials among the state's waves).
    pub fn range_ending(&self, t_end: f64, end: f64) -> (f64, f64) {
        let (mut hi, mut lo) = (self.start.max(end), self.start.min(end));
        for t in self.turning_points(t_end) {
            let g = self.at(t);
            hi = hi.max(g);
            lo = lo.min(g);
        }
        (hi, lo)
    }

    /// ∫₀ᵀ g dt.
    pub fn integral(&self, t_end: f64) -> f64 {
        let mut s = self.alpha * t_end;
        for k in 0..self.terms {
            s += (self.z[k] * phi(self.mu[k], t_end)).re;
        }
        s
    }

    /// ∫₀ᵀ g·h dt, exactly: Re(p)·Re(q) = ½Re(p·q) + ½Re(p·q̄).
    pub fn integral_of_product(&self, h: &Wave, t_end: f64) -> f64 {
        let mut s = self.alpha * h.alpha * t_end;
        for k in 0..self.terms {
            s += h.alpha * (self.z[k] * phi(self.mu[k], t_end)).re;
        }
        for k in 0..h.terms {
            s += self.alpha * (h.z[k] * phi(h.mu[k], t_end)).re;
        }
        for j in 0..self.terms {
            for k in 0..h.terms {
                let (p, q) = (self.z[j], h.z[k]);
                let same = phi(self.mu[j] + h.mu[k], t_end);
                // A real mode is its own conjugate: the same φ, not computed twice.
                let conj = if h.mu[k].im == 0.0 {
                    same
                } else {
                    phi(self.mu[j] + h.mu[k].conj(), t_end)
                };
                s += 0.5 * (p * q * same).re;
                s += 0.5 * (p * q.conj() * conj).re;
            }
        }
        s
    }
}

/// The solution of x′ = A·x + b from x(0) = x0.
#[derive(Debug, Clone, Copy)]
pub struct Solution {
    x0: [f64; 2],
    xp: [f64; 2],
    z: [[C; 2]; 2],
    mu: [C; 2],
    terms: usize,
}

/// Why a segment could not be solved.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Singular;

/// What a segment's solution takes from its system x′ = A·x + b alone: the particular
/// solution and the modes. The same for every segment in one conduction mode, so a plant keeps
/// it per mode instead of solving the eigenproblem again each time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Modes {
    a: [[f64; 2]; 2],
    xp: [f64; 2],
    /// (A − mI) applied below; m and the split of the eigenvalues.
    m: f64,
    h: f64,
    kind: Kind,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    /// Real eigenvalues λ₁, λ₂ and their gap.
    Real { l1: f64, l2: f64, gap: f64 },
    /// A complex pair m ± iω.
    Complex { w: f64 },
}

impl Modes {
    /// The modes of x′ = A·x + b. A must be non-singular (every mode of the plant has det A >
    /// 0: the coil's inductance and the node capacitance are both positive).
    pub fn new(a: [[f64; 2]; 2], b: [f64; 2]) -> Result<Self, Singular> {
        let det = a[0][0] * a[1][1] - a[0][1] * a[1][0];
        if !(det.is_finite() && det != 0.0) {
            return Err(Singular);
        }
        let xp = [
            -(a[1][1] * b[0] - a[0][1] * b[1]) / det,
            -(a[0][0] * b[1] - a[1][0] * b[0]) / det,
        ];
        let m = 0.5 * (a[0][0] + a[1][1]);
        let h = 0.5 * (a[0][0] - a[1][1]);
        let disc = h * h + a[0][1] * a[1][0];
        let kind = if disc >= 0.0 {
            let mut d = disc.sqrt();
            let min_gap = 5e-8 * m.abs().max(1e-300);
            if d < min_gap {
                d = min_gap;
            }
            // λ₁ = m + d, λ₂ = m − d; the one of smaller magnitude from det/λ_big when the
            // pair is the exact one (no cancellation).
            let (l1, l2) = if disc.sqrt() >= min_gap {
                if m <= 0.0 {
                    let big = m - d;
                    (det / big, big)
                } else {
                    let big = m + d;
                    (big, det / big)
                }
            } else {
                (m + d, m - d)
            };
            Kind::Real {
                l1,
                l2,
                gap: l1 - l2,
            }
        } else {
            Kind::Complex { w: (-disc).sqrt() }
        };
        Ok(Self { a, xp, m, h, kind })
    }

    /// The segment's solution from x(0) = x0.
    pub fn from(&self, x0: [f64; 2]) -> Solution {
        let (a, xp, h) = (self.a, self.xp, self.h);
        let dx = [x0[0] - xp[0], x0[1] - xp[1]];
        // (A − mI)·Δ
        let ad = [h * dx[0] + a[0][1] * dx[1], a[1][0] * dx[0] - h * dx[1]];
        match self.kind {
            Kind::Real { l1, l2, gap } => {
                let half = 0.5;
                let z1 = [
                    C::new(half * dx[0] + ad[0] / gap, 0.0),
                    C::new(half * dx[1] + ad[1] / gap, 0.0),
                ];
                let z2 = [
                    C::new(half * dx[0] - ad[0] / gap, 0.0),
                    C::new(half * dx[1] - ad[1] / gap, 0.0),
                ];
                Solution {
                    x0,
                    xp,
                    z: [z1, z2],
                    mu: [C::new(l1, 0.0), C::new(l2, 0.0)],
                    terms: 2,
                }
            }
            Kind::Complex { w } => {
                let z = [C::new(dx[0], -ad[0] / w), C::new(dx[1], -ad[1] / w)];
                Solution {
                    x0,
                    xp,
                    z: [z, [C::new(0.0, 0.0); 2]],
                    mu: [C::new(self.m, w), C::new(0.0, 0.0)],
                    terms: 1,
                }
            }
        }
    }
}

impl Solution {
    /// Solves the segment x′ = A·x + b from x(0) = x0 (see [`Modes::new`]).
    pub fn new(a: [[f64; 2]; 2], b: [f64; 2], x0: [f64; 2]) -> Result<Self, Singular> {
        Ok(Modes::new(a, b)?.from(x0))
    }

    /// The wave of c·x + d.
    pub fn wave(&self, c: [f64; 2], d: f64) -> Wave {
        let mut z = [C::new(0.0, 0.0); 2];
        for (k, zk) in z.iter_mut().enumerate().take(self.terms) {
            *zk = self.z[k][0] * c[0] + self.z[k][1] * c[1];
        }
        Wave {
            alpha: c[0] * self.xp[0] + c[1] * self.xp[1] + d,
            start: c[0] * self.x0[0] + c[1] * self.x0[1] + d,
            z,
            mu: self.mu,
            terms: self.terms,
        }
    }

    /// x(t).
    pub fn at(&self, t: f64) -> [f64; 2] {
        if t == 0.0 {
            return self.x0;
        }
        let mut x = self.xp;
        if self.terms == 2 {
            for k in 0..2 {
                let e = exp(self.mu[k].re * t);
                x[0] += self.z[k][0].re * e;
                x[1] += self.z[k][1].re * e;
            }
            return x;
        }
        for k in 0..self.terms {
            let e = cexp(self.mu[k] * t);
            x[0] += (self.z[k][0] * e).re;
            x[1] += (self.z[k][1] * e).re;
        }
        x
    }

    /// The eigenvalue of largest magnitude, 1/s (how fast the fastest mode moves).
    pub fn fastest_rate(&self) -> f64 {
        self.mu[0].norm().max(self.mu[1].norm())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Reference: the same system integrated by classical RK4 with 10⁵ steps (a textbook
    /// method, independent of the closed form).
    fn rk4(a: [[f64; 2]; 2], b: [f64; 2], x0: [f64; 2], t: f64) -> [f64; 2] {
        let n = 100_000;
        let h = t / f64::from(n);
        let f = |x: [f64; 2]| {
            [
                a[0][0] * x[0] + a[0][1] * x[1] + b[0],
                a[1][0] * x[0] + a[1][1] * x[1] + b[1],
            ]
        };
        let mut x = x0;
        for _ in 0..n {
            let k1 = f(x);
            let k2 = f([x[0] + 0.5 * h * k1[0], x[1] + 0.5 * h * k1[1]]);
            let k3 = f([x[0] + 0.5 * h * k2[0], x[1] + 0.5 * h * k2[1]]);
            let k4 = f([x[0] + h * k3[0], x[1] + h * k3[1]]);
            for i in 0..2 {
                x[i] += h / 6.0 * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i]);
            }
        }
        x
    }

    #[test]
    fn closed_form_matches_rk4_for_real_complex_and_near_repeated_modes() {
        let cases = [
            // Underdamped LC ring (40 mH, 1 nF, 18 Ω).
            (
                [[-450.0, -25.0], [1e9, 0.0]],
                [600.0, 0.0],
                [1.0, 24.0],
                2e-4,
            ),
            // Overdamped, well separated.
            (
                [[-450.0, -25.0], [1e3, -5e3]],
                [600.0, 10.0],
                [0.3, 2.0],
                5e-3,
            ),
            // Critically damped: (a11 − a22)² = −4·a12·a21.
            (
                [[-1000.0, -1.0], [250_000.0, 0.0]],
                [0.0, 0.0],
                [1.0, 0.0],
                2e-2,
            ),
        ];
        for (a, b, x0, t) in cases {
            let s = Solution::new(a, b, x0).unwrap();
            let want = rk4(a, b, x0, t);
            let got = s.at(t);
            for i in 0..2 {
                let scale = want[i].abs().max(1e-3);
                assert!(
                    (got[i] - want[i]).abs() < 1e-7 * scale,
                    "{a:?}: x{i} {} vs RK4 {}",
                    got[i],
                    want[i]
                );
            }
        }
    }

    #[test]
    fn integrals_match_quadrature() {
        let s = Solution::new([[-450.0, -25.0], [1e6, -2e3]], [600.0, 0.0], [1.0, 24.0]).unwrap();
        let g = s.wave([1.0, 0.0], 0.0);
        let h = s.wave([0.0, 1.0], -3.0);
        let t = 3e-3;
        // Composite Simpson with 2·10⁵ intervals as the reference.
        let n = 200_000;
        let dt = t / f64::from(n);
        let (mut sg, mut sgh) = (0.0, 0.0);
        for k in 0..=n {
            let w = if k == 0 || k == n {
                1.0
            } else if k % 2 == 1 {
                4.0
            } else {
                2.0
            };
            let x = f64::from(k) * dt;
            sg += w * g.at(x);
            sgh += w * g.at(x) * h.at(x);
        }
        sg *= dt / 3.0;
        sgh *= dt / 3.0;
        assert!((g.integral(t) - sg).abs() < 1e-9 * sg.abs());
        assert!((g.integral_of_product(&h, t) - sgh).abs() < 1e-9 * sgh.abs());
    }

    #[test]
    fn first_rise_finds_a_crossing_between_turning_points() {
        // A ring around 24 V of amplitude 24 V: v − 47 becomes positive near the first crest.
        let s = Solution::new([[0.0, -25.0], [1e9, 0.0]], [600.0, 0.0], [1.0, 24.0]).unwrap();
        let v = s.wave([0.0, 1.0], -47.0);
        let t = v.first_rise(1e-3).unwrap();
        assert!(v.at(t) > 0.0 && v.at(t * (1.0 - 1e-9)) <= 1e-6);
        // The crest itself: 24 + 1 A·√(L/C) with L = 40 mH, C = 1 nF is 24 + 6324.6 V.
        let (hi, _) = s.wave([0.0, 1.0], 0.0).range(1e-4);
        assert!((hi - (24.0 + (0.04f64 / 1e-9).sqrt())).abs() < 1e-6 * hi);
        assert!(s.wave([0.0, 1.0], -1e5).first_rise(1e-3).is_none());
    }
}
