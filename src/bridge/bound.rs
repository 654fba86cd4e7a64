//! The bridge guard's upper bound of the coil current inside a declared tolerance.
//!
//! The construction is the low side's ([`crate::tolerance`]), carried in two *frames*: `b₊` is
//! at or above `i` and `b₋` at or above `−i`, both kept at zero or above, so `|i| ≤ max(b₊, b₋)`
//! for every circuit inside the box.
//!
//! # The box
//! Inductance `L·(1 ± f_L)`, winding resistance `R·(1 ± f_R)`, the supply reading within `± f_V`
//! of the true rail, the back-EMF within `± f_K` of the one the guard is given (a spread of the
//! motor constant, or of the speed reading) and never beyond the motor's limit, and the bulk
//! capacitance down to `C·(1 − f_C)`. The switches' and body diodes' resistances and drops and
//! the gate dead time are taken as given (fold an on-resistance spread into `f_R`).
//!
//! # Construction (proof sketch)
//! In a frame every segment is `L·dj/dt = U − R_t·j` with `U` the applied voltage less the
//! back-EMF, both seen in the frame's direction. Where the bound meets a true current (`j = b
//! ≥ 0`) the largest right side over the box takes the lowest resistance, the largest `U` (the
//! highest rail when the drive pushes the frame's way, the lowest when it pulls against it or in
//! fast decay; the lowest back-EMF in the frame's direction) and the lowest inductance while
//! `U − R_t·b > 0`, the highest after. A segment never crosses its asymptote, so the choice is
//! made once per segment: rising from below its asymptote it takes the slice's low inductance,
//! falling its high one (the comparison theorem, as on the low side). The inductance range is
//! cut into at most [`BRIDGE_SLICES`] slices, each with its own pair of frames; the guard acts on
//! the largest. A fast-decay segment that would rise (a rail read below the back-EMF) is taken
//! at its asymptote, which no true current passes.
//!
//! *The floor at zero.* When the bound reaches zero every true current is at or below zero in
//! its frame; if the segment's largest `U` is at or below zero no true current crosses zero
//! upward, so zero stays a bound; if it is above, the bound's asymptote is above zero and the
//! bound never reaches it. So each segment ends at `max(0, ·)`.
//!
//! *Gate dead time.* Where the nominal model applies a dead-time segment (the current flowing
//! in the drive's direction) the bound applies it at its corner while the bound is above zero;
//! otherwise the segment is left as the drive or the slow decay beside it, whose right side is
//! at least the true one there (the floating leg's diode applies the rail with the current
//! against the drive, and blocks a current that would cross zero).
//!
//! *Returned charge* in fast decay is at most `∫ b dt`, which the chord `(b₁ + b₂)/2·t`
//! bounds (the bound is convex there); the bus check adds it to the charge that the rail reading
//! already shows, `C_lo·(V_read,hi − V_nom)`, ignoring the drive's draw (see the bridge guard).
//!
//! Rounding: every corner is widened by 10⁻⁶ relative and each segment adds 2 raw units, as on
//! the low side; the back-EMF given is taken one raw unit lower still (its own rounding). With
//! no spread declared the box is the model itself, so the bound covers the nominal estimate's
//! rounding: the guard always acts on it.
//!
//! # Panics
//! None: products are bounded by validation, sums saturate.

use super::{AppliedDecay, BridgeModel, BridgeParams, charge, toward};
use crate::params::{ConfigError, Conflict, Field};
use crate::qmath::{DUTY_DIGITS, Decay, DecayTable, Gain};
use crate::tolerance::{MARGIN, ROUNDING, SLICE_RATIO, Tolerance, spreads};
use crate::units::{SignedVolts, Volts};

/// Slices of the inductance range the bridge bound tracks side by side, at most: ±15 % in
/// slices of at most 8 %; a wider spread widens the slices (sound, more conservative).
pub(crate) const BRIDGE_SLICES: usize = 4;

/// The bound's state: per slice, `[b₊, b₋]` in raw current units (both ≥ 0).
pub(crate) type BoundState = [[i64; 2]; BRIDGE_SLICES];

/// One slice `L_a ..= L_b`: its rise and fall tables per timer count.
#[derive(Debug, Clone, PartialEq)]
struct Slice {
    /// Drive and slow decay: `τ = L_a/(R_lo + 2R_on)` rising, `L_b/(…)` falling.
    on_rise: DecayTable<DUTY_DIGITS>,
    on_fall: DecayTable<DUTY_DIGITS>,
    /// Fast decay falling: `τ = L_b/(R_lo + 2R_d)`.
    fast_fall: DecayTable<DUTY_DIGITS>,
    /// A dead-time segment, `τ = L/(R_lo + R_on + R_d)` at `L_a` (rising) and `L_b` (falling).
    dead_rise: Decay,
    dead_fall: Decay,
}

/// The bus terms of the bound, in Charge bits.
#[derive(Debug, Clone, Copy, PartialEq)]
struct BoundBus {
    /// `C_lo` per supply bit.
    per_bit: Gain,
    /// The nominal supply in supply bits.
    nominal: u32,
    /// `C_lo·(V_max − V_nom)`.
    headroom: i64,
    /// `L_hi·s²·2¹⁶·2³²/(2·q_bit)`, widened (`s`: amperes per raw current unit): `x²` of a
    /// current `x·2¹⁶` (raw) times this, over a stopping voltage in volt bits, bounds the charge
    /// that stopping it with every switch off returns (see [`BridgeBound::stop_fits`]).
    stop: Gain,
    /// What the supply sinks, raw current (rounded down).
    sink: i64,
}

/// The bridge guard's bound (see the module documentation).
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct BridgeBound {
    slices: [Slice; BRIDGE_SLICES],
    used: usize,
    /// Current raw per volt bit through `R_lo + 2R_on`, `R_lo + 2R_d`, `R_lo + R_on + R_d`.
    on_gain: Gain,
    fast_gain: Gain,
    dead_gain: Gain,
    /// `2V_f/(R_lo + 2R_d)` and `V_f/(R_lo + R_on + R_d)`, raw.
    fast_offset: i64,
    dead_offset: i64,
    /// `2V_f` in volt bits, rounded down.
    stop_offset: i64,
    /// `f_V/(1 − f_V)` and `f_V/(1 + f_V)`, widened: the true rail is within
    /// `reading·(1 − below) ..= reading·(1 + above)`.
    above: Gain,
    below: Gain,
    /// `f_K`, widened.
    emf_spread: Gain,
    bus: Option<BoundBus>,
    /// Both frames after a reset: the steady current at full drive, the highest rail and the
    /// back-EMF helping, at the lowest resistance, or the trip current if higher.
    after_reset: i64,
}

/// The inputs of one period seen in one frame: the drive's sign and the asymptotes (raw).
#[derive(Debug, Clone, Copy)]
struct Frame {
    sd: i32,
    drive: i64,
    slow: i64,
    fast: i64,
    dead: i64,
    /// The lowest voltage that stops a current in fast decay, `V_lo + 2V_f + e_lo`, volt bits
    /// (at or below zero: the back-EMF keeps the current flowing).
    stop: i64,
}

/// One frame's period: the largest value it reaches, its end, its fast-decay charge bound and
/// the frame's stopping voltage (volt bits).
#[derive(Debug, Clone, Copy)]
pub(crate) struct FramePeriod {
    pub(crate) peak: i64,
    pub(crate) end: i64,
    pub(crate) returned: i64,
    pub(crate) stop: i64,
}

impl FramePeriod {
    const ZERO: Self = Self {
        peak: 0,
        end: 0,
        returned: 0,
        stop: 0,
    };
}

/// A segment of the bound toward `a` from `j` (≥ 0): the rise or the fall table as `j` lies
/// below or above `a`, with the rounding allowance and the floor at zero.
#[inline(always)]
fn segment(
    j: i64,
    a: i64,
    n: u32,
    rise: &DecayTable<DUTY_DIGITS>,
    fall: &DecayTable<DUTY_DIGITS>,
) -> i64 {
    if n == 0 {
        return j;
    }
    let e = if j < a { rise.eval(n) } else { fall.eval(n) };
    // j and a are validated below 2^61 in magnitude.
    (toward(j, a, e) + ROUNDING).max(0)
}

/// `x·(1 + g)` for a supply reading, saturating at `u32::MAX` bits.
fn widen(x: u32, g: Gain) -> u32 {
    u64::from(x)
        .saturating_add(g.apply(x))
        .min(u64::from(u32::MAX)) as u32
}

impl BridgeBound {
    /// Builds the bound of `p` (validated as `model`) for `t` (with no spread declared, it covers
    /// the model's own rounding). `trip` is the trip current, raw.
    pub(crate) fn new(
        p: &BridgeParams,
        model: &BridgeModel,
        t: &Tolerance,
        trip: i64,
    ) -> Result<Self, ConfigError> {
        let s = spreads(t)?;
        for (spread, field) in [
            (s.c, Field::ToleranceNodeCapacitance),
            (s.i_sat, Field::ToleranceSaturationCurrent),
            (s.l_sat, Field::ToleranceSaturatedInductance),
            (s.clamp, Field::ToleranceClampVoltage),
        ] {
            if spread > 0.0 {
                return Err(ConfigError::conflict(field, Conflict::OtherTopology));
            }
        }
        if s.bus > 0.0 && p.bus.is_none() {
            return Err(ConfigError::conflict(
                Field::ToleranceBusCapacitance,
                Conflict::OtherTopology,
            ));
        }
        let d = model.derived();
        let r_lo = f64::from(d.resistance) * (1.0 - s.r - MARGIN);
        if r_lo <= 0.0 {
            return Err(ConfigError::conflict(
                Field::ToleranceResistance,
                Conflict::CornerOutOfRange,
            ));
        }
        let r_on = f64::from(p.switch.on_resistance);
        let rd = f64::from(p.body_diode.resistance);
        let vf = f64::from(p.body_diode.forward_drop);
        let (r_drive, r_fast, r_dead) = (r_lo + 2.0 * r_on, r_lo + 2.0 * rd, r_lo + r_on + rd);
        let l_nom = f64::from(p.coil.inductance);
        let (l_lo, l_hi) = (l_nom * (1.0 - s.l - MARGIN), l_nom * (1.0 + s.l + MARGIN));
        let count = f64::from(d.period) / f64::from(model.duty_resolution());
        // The fastest corner must still be a time constant the tables take.
        let tau_min = l_lo / r_drive.max(r_fast).max(r_dead);
        if !crate::model::tau_in_range(tau_min) || !crate::model::tau_in_range(l_hi / r_lo) {
            return Err(ConfigError::conflict(
                Field::ToleranceInductance,
                Conflict::CornerOutOfRange,
            ));
        }
        let used = (libm::ceil(libm::log(l_hi / l_lo) / libm::log(SLICE_RATIO)) as usize)
            .clamp(1, BRIDGE_SLICES);
        let q = libm::pow(l_hi / l_lo, 1.0 / used as f64);
        let t_dead = f64::from(model.dead) * count;
        let slice = |j: usize| {
            let l_a = l_lo * libm::pow(q, j as f64);
            let l_b = if j + 1 >= used {
                l_hi
            } else {
                l_lo * libm::pow(q, (j + 1) as f64)
            };
            let dead = |l: f64| DecayTable::<1>::new(t_dead * r_dead / l).eval(1);
            Slice {
                on_rise: DecayTable::new(count * r_drive / l_a),
                on_fall: DecayTable::new(count * r_drive / l_b),
                fast_fall: DecayTable::new(count * r_fast / l_b),
                dead_rise: dead(l_a),
                dead_fall: dead(l_b),
            }
        };
        let raw_per_amp = 1_099_511_627_776.0 / f64::from(d.full_scale);
        let up = 1.0 + MARGIN;
        let gain = |r: f64| Gain::new(raw_per_amp / 65_536.0 / r * up);
        let bus = p.bus.map(|b| {
            let c_lo = f64::from(b.capacitance) * (1.0 - s.bus - MARGIN);
            let charge_bit = f64::from(d.charge_unit);
            let v = |x: f32| (f64::from(x) * 65_536.0) as u32;
            let amp = f64::from(d.full_scale) / 1_099_511_627_776.0;
            BoundBus {
                per_bit: Gain::new(c_lo / 65_536.0 / charge_bit),
                nominal: v(p.supply.nominal),
                headroom: (c_lo * f64::from(p.supply.max - p.supply.nominal) / charge_bit) as i64,
                stop: Gain::new(
                    l_hi * amp * amp * 65_536.0 * 4_294_967_296.0 / (2.0 * charge_bit) * up * up,
                ),
                sink: (f64::from(b.sink_current) * raw_per_amp) as i64,
            }
        });
        let v_hi = f64::from(p.supply.max) * (1.0 + s.v / (1.0 - s.v) + MARGIN);
        let worst = (v_hi + f64::from(p.motor.back_emf_limit)) / r_drive * raw_per_amp;
        Ok(Self {
            slices: core::array::from_fn(|j| slice(j.min(used - 1))),
            used,
            on_gain: gain(r_drive),
            fast_gain: gain(r_fast),
            dead_gain: gain(r_dead),
            fast_offset: libm::ceil(2.0 * vf / r_fast * raw_per_amp * up) as i64,
            dead_offset: libm::ceil(vf / r_dead * raw_per_amp * up) as i64,
            stop_offset: libm::floor(2.0 * vf * 65_536.0) as i64,
            above: Gain::new(s.v / (1.0 - s.v) + MARGIN),
            below: Gain::new(s.v / (1.0 + s.v) + MARGIN),
            emf_spread: Gain::new(s.k + MARGIN),
            bus,
            after_reset: (libm::ceil(worst) as i64).max(trip),
        })
    }

    /// How many slices are in use.
    pub(crate) const fn slices(&self) -> usize {
        self.used
    }

    /// The state for a coil known to carry `i` (raw, signed).
    pub(crate) fn start(i: i64) -> BoundState {
        // Within the representable magnitude, so that every segment's difference fits.
        let limit = crate::units::Current::LIMIT.to_bits();
        let i = i.clamp(-limit, limit);
        [[i.max(0), (-i).max(0)]; BRIDGE_SLICES]
    }

    /// The state after a reset: either direction may carry the worst case.
    pub(crate) fn after_reset(&self) -> BoundState {
        [[self.after_reset; 2]; BRIDGE_SLICES]
    }

    /// The largest magnitude the state allows now.
    pub(crate) fn magnitude(&self, st: &BoundState) -> i64 {
        st.iter()
            .take(self.used)
            .map(|f| f[0].max(f[1]))
            .max()
            .unwrap_or(0)
    }

    /// The period's inputs seen in frame `f` (0: `+i`, 1: `−i`) for a drive of sign `sign`,
    /// with the rail read between `rails.0` and `rails.1` (supply bits, clamped by the model).
    /// and the back-EMF given between `emfs.0` and `emfs.1`.
    fn frame(
        &self,
        f: usize,
        sign: i32,
        m: &BridgeModel,
        rails: (u32, u32),
        emfs: (SignedVolts, SignedVolts),
    ) -> Frame {
        let v_hi = widen(rails.1, self.above);
        let v_lo = rails
            .0
            .saturating_sub(self.below.apply(rails.0).min(u64::from(rails.0)) as u32);
        // The back-EMF in the frame's direction, its lowest within the spread and the limit.
        let (a, b) = (i64::from(emfs.0.to_bits()), i64::from(emfs.1.to_bits()));
        let e = if f == 0 { a.min(b) } else { -a.max(b) };
        let cap = i64::from(m.emf_cap);
        let e = e.clamp(-cap, cap);
        // One raw unit lower still: the back-EMF given is the true one rounded to its format.
        let e_lo = (e - self.emf_spread.apply(e.unsigned_abs() as u32) as i64 - 1).max(-cap);
        let through = |g: Gain, e: i64| {
            // |e| <= cap < 2^26: each result is validated below 2^61.
            let x = g.apply(e.unsigned_abs() as u32) as i64;
            if e < 0 { -x } else { x }
        };
        let sd = if f == 0 { sign } else { -sign };
        let on = |v: u32| self.on_gain.apply(v) as i64;
        let drive = if sd >= 0 { on(v_hi) } else { -on(v_lo) } - through(self.on_gain, e_lo);
        Frame {
            sd,
            drive,
            slow: -through(self.on_gain, e_lo),
            fast: -(self.fast_gain.apply(v_lo) as i64 + self.fast_offset)
                - through(self.fast_gain, e_lo),
            dead: -(self.dead_offset + through(self.dead_gain, e_lo)),
            stop: i64::from(v_lo) + self.stop_offset + e_lo,
        }
    }

    /// One slice's period in one frame from `j0` (see the module documentation).
    fn period(
        s: &Slice,
        j0: i64,
        after_slow: bool,
        fr: &Frame,
        (n, k, rest): (u32, u32, u32),
        dead: u32,
    ) -> FramePeriod {
        let dead_seg = |j: i64| {
            let e = if j < fr.dead {
                s.dead_rise
            } else {
                s.dead_fall
            };
            (toward(j, fr.dead, e) + ROUNDING).max(0)
        };
        let (ja, n_drive) = if dead > 0 && after_slow && n > dead && fr.sd > 0 && j0 > 0 {
            (dead_seg(j0), n - dead)
        } else {
            (j0, n)
        };
        let j1 = segment(ja, fr.drive, n_drive, &s.on_rise, &s.on_fall);
        let j2 = if k == 0 {
            j1
        } else if j1 < fr.fast {
            fr.fast // a rise (rail read below the back-EMF): no true current passes it
        } else {
            (toward(j1, fr.fast, s.fast_fall.eval(k)) + ROUNDING).max(0)
        };
        let (jb, slow) = if dead > 0 && k == 0 && n > 0 && rest > dead && fr.sd > 0 && j1 > 0 {
            (dead_seg(j1), rest - dead)
        } else {
            (j2, rest)
        };
        let j3 = segment(jb, fr.slow, slow, &s.on_rise, &s.on_fall);
        // The chord over the fast part, rounded up (charge() truncates).
        let returned = if k == 0 {
            0
        } else {
            charge(i64::midpoint(j1, j2), k) + 1
        };
        FramePeriod {
            peak: j0.max(ja).max(j1).max(j2).max(jb).max(j3),
            end: j3,
            returned,
            stop: fr.stop,
        }
    }

    /// Frame `f` of every slice over a period of `duty` and `decay` from `st`: the largest
    /// peak, end and returned charge over the slices, and each slice's end.
    #[allow(clippy::too_many_arguments)] // the period's inputs, as the nominal model's
    pub(crate) fn frame_period(
        &self,
        st: &BoundState,
        f: usize,
        m: &BridgeModel,
        after_slow: bool,
        (duty, decay): (i32, AppliedDecay),
        rails: (u32, u32),
        emfs: (SignedVolts, SignedVolts),
    ) -> (FramePeriod, [i64; BRIDGE_SLICES]) {
        let (signed, k, rest) = m.split(duty, decay);
        let fr = self.frame(f, signed.signum(), m, rails, emfs);
        let phases = (signed.unsigned_abs(), k, rest);
        let mut worst = FramePeriod {
            peak: 0,
            end: 0,
            returned: 0,
            stop: fr.stop,
        };
        let mut ends = [0; BRIDGE_SLICES];
        // `f & 1`: a frame index the compiler can bound (no panic path).
        let f = f & 1;
        let slices = self.slices.iter().take(self.used);
        for ((s, frames), end) in slices.zip(st).zip(&mut ends) {
            let p = Self::period(s, frames[f], after_slow, &fr, phases, m.dead);
            *end = p.end;
            worst.peak = worst.peak.max(p.peak);
            worst.end = worst.end.max(p.end);
            worst.returned = worst.returned.max(p.returned);
        }
        (worst, ends)
    }

    /// Moves both frames of every slice over the period just ended, whose rail was read
    /// between `rails.0` and `rails.1` (supply bits) and whose back-EMF was given between
    /// `emfs.0` and `emfs.1`; returns the largest
    /// magnitude reached in it.
    pub(crate) fn advance(
        &self,
        st: &mut BoundState,
        m: &BridgeModel,
        after_slow: bool,
        applied: (i32, AppliedDecay),
        rails: (u32, u32),
        emfs: (SignedVolts, SignedVolts),
    ) -> i64 {
        let mut peak = 0;
        for f in 0..2 {
            let (p, ends) = self.frame_period(st, f, m, after_slow, applied, rails, emfs);
            for (frames, e) in st.iter_mut().zip(ends).take(self.used) {
                frames[f & 1] = e;
            }
            peak = peak.max(p.peak);
        }
        peak
    }

    /// The charge the rail reading already shows above rest, at most (Charge bits, at the
    /// lowest capacitance), and the bus terms; `None` without a bus.
    fn bus_now(&self, supply: Volts) -> Option<(BoundBus, i64)> {
        let b = self.bus?;
        let v_hi = widen(supply.to_bits(), self.above);
        let now = b
            .per_bit
            .apply(v_hi.saturating_sub(b.nominal))
            .min(i64::MAX as u64) as i64;
        Some((b, now))
    }

    /// Whether the plan `(duty, decay)` from `st` keeps the true rail at or under the maximum,
    /// in the coming period and after it: the charge the rail reading already shows, plus what
    /// the period returns in both frames less what the supply sinks meanwhile (`sunk`), plus
    /// what bringing the current at the period's end to rest returns, stays within the
    /// headroom. The current can be brought to rest by coasting (every switch off; see
    /// [`Self::stop_fits`]), by recirculating for as long as it takes (when the back-EMF cannot
    /// drive the recirculating current past the ceiling), or by one period of recirculation
    /// and then coasting. A plan that keeps this leaves [`Self::can_coast`] or one of the
    /// others true at the next tick: the guard always has an exit.
    ///
    /// With `strict` an eighth of the headroom is held back: the guard plans with it and takes
    /// an exit without it, so that the next tick's readings (a back-EMF a little different,
    /// the rounding of the bound) cannot close the exit a plan left open.
    #[allow(clippy::too_many_arguments)] // the period's inputs, as `frame_period`
    pub(crate) fn keeps_bus(
        &self,
        st: &BoundState,
        m: &BridgeModel,
        after_slow: bool,
        plan: (i32, AppliedDecay),
        (rails, emfs): ((u32, u32), (SignedVolts, SignedVolts)),
        (supply, sunk): (Volts, i64),
        (ceiling, strict): (i64, bool),
    ) -> bool {
        let Some((b, now)) = self.bus_now(supply) else {
            return true;
        };
        let mut next = *st;
        let mut periods = [FramePeriod::ZERO; 2];
        for (f, p) in periods.iter_mut().enumerate() {
            let (worst, ends) = self.frame_period(st, f, m, after_slow, plan, rails, emfs);
            for (frames, e) in next.iter_mut().zip(ends).take(self.used) {
                frames[f & 1] = e;
            }
            *p = worst;
        }
        let returned = periods[0]
            .returned
            .saturating_add(periods[1].returned)
            .saturating_sub(sunk)
            .max(0);
        let reserve = if strict { b.headroom >> 3 } else { 0 };
        let left = (b.headroom - reserve)
            .saturating_sub(now)
            .saturating_sub(returned);
        if left < 0 {
            return false;
        }
        if periods
            .iter()
            .all(|p| Self::stop_fits(&b, p.end, p.stop, left))
        {
            return true;
        }
        // Recirculating: each frame heads for its slow asymptote (the back-EMF over the
        // resistance); at or under the ceiling in both, recirculation never passes it.
        let slow = (0, AppliedDecay::Slow);
        let rest: [FramePeriod; 2] =
            core::array::from_fn(|f| self.frame_period(&next, f, m, false, slow, rails, emfs).0);
        let settles = (0..2).all(|f| self.frame(f, 0, m, rails, emfs).slow <= ceiling);
        settles
            || rest
                .iter()
                .all(|p| p.peak <= ceiling && Self::stop_fits(&b, p.end, p.stop, left))
    }

    /// Whether coasting from `st` (every switch off until the current is at rest) keeps the
    /// true rail at or under the maximum: in each frame, what stopping its largest current
    /// returns ([`Self::stop_fits`]) fits in the headroom the rail reading leaves. It covers
    /// the whole stop, so a coast that fits keeps fitting while it lasts.
    pub(crate) fn can_coast(
        &self,
        st: &BoundState,
        m: &BridgeModel,
        (rails, emfs): ((u32, u32), (SignedVolts, SignedVolts)),
        supply: Volts,
    ) -> bool {
        let Some((b, now)) = self.bus_now(supply) else {
            return true;
        };
        let left = b.headroom.saturating_sub(now);
        (0..2).all(|f| {
            let j = st
                .iter()
                .take(self.used)
                .map(|x| x[f & 1])
                .max()
                .unwrap_or(0);
            left >= 0 && Self::stop_fits(&b, j, self.frame(f, 0, m, rails, emfs).stop, left)
        })
    }

    /// Whether stopping a current `j` (raw, in a frame whose stopping voltage is `stop` volt
    /// bits) with every switch off gives the bus at most `left` (Charge bits).
    ///
    /// With every switch off the current falls at least as fast as `U/L` (`U` the stopping
    /// voltage; the resistance only helps), so the charge it gives the bus beyond what the
    /// supply sinks, `∫ max(0, j − I_sink) dt`, is at most `L_hi·(j − I_sink)²/(2U)` (the
    /// triangle under that line; a stop begun later returns the rest of the same triangle).
    /// It is compared without a division: `x²·k ≤ U·left`. A frame whose back-EMF keeps the
    /// current flowing (`U ≤ 0`) fits only at zero.
    fn stop_fits(b: &BoundBus, j: i64, stop: i64, left: i64) -> bool {
        let x = j.saturating_sub(b.sink).max(0);
        if x == 0 {
            return true;
        }
        if stop <= 0 {
            return false;
        }
        // Rounded up to 2¹⁶ raw units: x_s < 2^48, x_s² < 2^96.
        let xs = (x as u128).div_ceil(1 << 16);
        let need = b.stop.apply_u128_full(xs * xs).saturating_add(1);
        // stop < 2^34 (volt bits), left < 2^63: the product < 2^97.
        need <= (stop as u128) * (left.max(0) as u128)
    }
}
