//! The declared tolerance, and the guard's upper bound of the coil current inside it.
//!
//! Without a current sensor the guard cannot see a coil that differs from its parameters. What
//! it can do is carry, beside its nominal estimate, a current that is provably at or above the
//! true one for every circuit inside a box the user declares ([`Tolerance`]), and act on that.
//!
//! # The box
//! Inductance `L·(1 ± f_L)`, winding resistance `R·(1 ± f_R)` (a resistance spread covers a
//! winding-temperature range: copper changes by 0.393 %/K, IEC 60028), the supply reading within
//! `± f_V` of the true supply, the switch-node capacitance up to `C·(1 + f_C)`, and, for a
//! saturating coil, the saturation current `I_sat·(1 ± f_I)` and saturated inductance
//! `L_sat·(1 ± f_S)`, and the clamp path's voltage `V_p·(1 ± f_P)`. The on-resistance, the
//! clamp's resistance and the switch's breakdown are taken as given (fold an on-resistance
//! spread into the resistance spread: `f_R' = f_R + f_on·R_on/R`).
//!
//! # Construction (proof sketch)
//! Every segment of constant drive is `L(i)·di/dt = V − R_t·i` with `L(i) > 0`, `R_t` the
//! winding plus the on-resistance or the clamp path's. Two facts carry the bound:
//! 1. *Comparison.* If `f_b(t, i) ≥ f(t, i)` wherever the two solutions meet, the solution of
//!    `i' = f_b` from a higher start stays at or above that of `i' = f` (the comparison theorem
//!    for scalar ODEs). So a segment is bounded by the pointwise largest right side over the box:
//!    - switch on, while `V − R_t·i > 0`: the highest supply, the lowest resistance and the
//!      lowest inductance, one physical corner, the *rise corner* `(L_lo, R_lo, V_hi)`; above
//!      the lowest saturation current the inductance can be as low as `min(L_sat,lo, L_lo)`,
//!      so the rise is split there (crossing time rounded toward more saturated time). When the
//!      bound is at or above the rise corner's asymptote it is held (every true current falls).
//!    - switch off: the right side `−(V_p + R_t·i)/L(i)` (freewheel; `(Vs − V_p − R_t·i)/L(i)`
//!      across the switch) is largest with the lowest clamp voltage, the lowest resistance and
//!      the highest inductance, the *fall corner* `(L_hi, R_lo, V_p,lo)`; above the highest
//!      saturation current every coil in the box is saturated, so the decay there runs with the
//!      highest saturated inductance and is split where it passes that current. The same corner
//!      bounds the decay time and the clamp energy (both grow with τ and fall with the
//!      asymptote's magnitude).
//! 2. *Monotone in the start.* A segment's end is an increasing function of its start (the map
//!    `i ↦ A + (i − A)·e^(−t/τ)` has slope `e^(−t/τ) > 0`; the stop at zero keeps it monotone),
//!    so a bound fed through a composition of segment maps stays a bound.
//!
//! *Slices of the inductance range.* Taking the low inductance on every rise and the high one on
//! every fall lets the bound's inductance change from segment to segment, which no real coil
//! does: under PWM the bound would drift far above every true current (by the ratio of the two
//! inductances in the duty balance). So the inductance range is cut into slices `L_a ..= L_b`
//! of at most 8 % each (up to [`SLICES`]), each slice carries its own bound with the rise at
//! `L_a` and the fall at `L_b`, and the guard acts on the largest: each slice's bound holds for
//! every coil in its slice, so the largest holds for the whole box, and the drift shrinks to the
//! slice's width. Event mode, whose segments are long, uses one whole-box bound.
//!
//! 3. *The node's charge at each turn-off.* With capacitance C at the switch node the current
//!    first charges the node to the clamp's voltage `V_n` (`Vs + V_p` for a freewheel path, the
//!    clamp or breakdown voltage across the switch), during which the coil still sees part of
//!    the supply. Replacing that charge time `T_c = C·V_n/i` by the clamped decay, the decay
//!    from a raised start `i + C·V_n²/(2·L·i) + C·V_n·R_t/L` (first order in `T_c/τ`) ends where
//!    the true current ends; the bound raises the start by 1.25 × that while `T_c ≤ τ/8` and
//!    `T_c` fits in the off-time. Whatever the start, the charge can add at most
//!    `(V_hi + 1.5 V)·√(C/L_min)` (energy: the node takes `C·(V − v)` at a voltage below the
//!    supply, at most `½·C·(V + V_bd)²`, with the body diode holding the node above `−V_bd`).
//!    The true end is *not* monotone in the start (a small current charges the node slowly and
//!    gains more), so the bound takes the supremum over every start up to its own: the raise
//!    `x + K/x` is convex, so its largest value is at an end of the interval. After a decay to
//!    zero, the LC ring can leave up to `V_ring·√(C/L)` flowing (energy: the node holds at most
//!    `½·C·V_ring²` at the zero crossing), so the bound does not fall below that.
//! 4. *Nothing across the switch: the ring under breakdown.* With only the node capacitance a
//!    turn-off from a small current rings below the breakdown instead of avalanching: the
//!    current reverses and dies as `e^(−R·t/2L)`, far slower than an avalanche. Its envelope
//!    (the series-RLC closed form, shared/REFERENCES.md §10) is carried beside the bound and
//!    decays with `τ = 2·L_hi/R_lo`; a turn-on waits for it like any other release. Above the
//!    current at which every circuit in the box certainly avalanches, the ring left after the
//!    avalanche (`BV·√(C/L)`) is carried instead.
//!
//! Rounding: every corner is widened by 10⁻⁶ relative, which covers the tables' 2⁻²⁴ and the
//! gains' 2⁻³², and each segment of the bound adds 2 raw units for the truncating products.
//!
//! # Sources and checks
//! Each addition to the model, its source and its check:
//! - two-slope saturation: the RL step per piece (shared/REFERENCES.md §2) with the incremental
//!   inductance of a piecewise-linear magnetisation curve (§11); checked against ngspice with a
//!   flux-integrator coil and against the closed form (`host-sim/tests/soundness.rs`);
//! - the node's charge at turn-off: energy balance of the coil and the node capacitance (§5, §10);
//!   checked against ngspice at 4 % duty with 1 nF (`soundness.rs`);
//! - the unclamped ring under breakdown: the series-RLC closed form and its node peak (§10,
//!   367.06 V), against ngspice (`soundness.rs`);
//! - the clamp's average power: a first-order average of each period's clamp energy against a
//!   declared limit (`ClampPower`; default 0.5 W, common practice for small surface-mount clamps, no
//!   single source), `tests/guard.rs`;
//! - limiting toward a steady duty: a duty that, held, keeps every later period under the ceiling,
//!   so limiting settles (one count in 3200 measured, `tests/guard.rs`).
//!
//! # Panics
//! None: as the estimate (see [`crate::CoilState`]); the node-charge terms divide by an
//! upper-bounding reciprocal table (`qmath::div_up`, no division at run time) with u128
//! products, saturating.

use crate::estimate::{SharedLog, Unit, fall, rise, segment};
use crate::model::{Model, PathKind};
use crate::params::{
    ClampPath, ConfigError, Conflict, Field, Params, Problem, Saturation, non_negative,
};
use crate::qmath::{BitTable, DUTY_DIGITS, Decay, DecayTable, Gain, div_up, div_up_wide};

/// The uncertainty the guard is told to cover: each a relative spread around the parameter's
/// nominal value (0.1 = ±10 %). The default, [`Tolerance::EXACT`], trusts the parameters.
///
/// ```
/// use coilward::Tolerance;
/// // Inductance ±20 %, resistance ±10 % (about ±25 K of copper), supply reading ±2 %.
/// let t = Tolerance::EXACT.with_inductance(0.2).with_resistance(0.1).with_supply_reading(0.02);
/// assert_eq!(t.inductance, 0.2);
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct Tolerance {
    /// Inductance spread, ± fraction (0 ..= 0.9).
    pub inductance: f32,
    /// Winding-resistance spread at the model's temperature, ± fraction (0 ..= 0.9).
    pub resistance: f32,
    /// Error of the supply reading against the true supply, ± fraction (0 ..= 0.5).
    pub supply_reading: f32,
    /// Switch-node capacitance up to `coil.node_capacitance·(1 + this)` (0 ..= 10).
    pub node_capacitance: f32,
    /// Saturation-current spread, ± fraction (0 ..= 0.9).
    pub saturation_current: f32,
    /// Saturated-inductance spread, ± fraction (0 ..= 0.9).
    pub saturated_inductance: f32,
    /// Spread of the clamp path's voltage (diode drop, diode + zener, or the clamp across the
    /// switch), ± fraction (0 ..= 0.9). A lower voltage decays slower and puts more energy in
    /// the clamp; the switch's own breakdown is taken as given.
    pub clamp_voltage: f32,
    /// Full bridge: spread of the back-EMF constant, ± fraction (0 ..= 0.9): the true back-EMF
    /// is within this fraction of the one the guard is given (and within the motor's limit).
    pub back_emf_constant: f32,
    /// Full bridge: the bulk capacitance down to `bus.capacitance·(1 − this)` (0 ..= 0.9).
    pub bus_capacitance: f32,
}

impl Tolerance {
    /// No spread: the guard trusts its parameters exactly (its bound then differs from the
    /// nominal estimate by rounding and the node-charge terms only).
    pub const EXACT: Self = Self {
        inductance: 0.0,
        resistance: 0.0,
        supply_reading: 0.0,
        node_capacitance: 0.0,
        saturation_current: 0.0,
        saturated_inductance: 0.0,
        clamp_voltage: 0.0,
        back_emf_constant: 0.0,
        bus_capacitance: 0.0,
    };

    /// With an inductance spread.
    #[must_use]
    pub const fn with_inductance(mut self, f: f32) -> Self {
        self.inductance = f;
        self
    }

    /// With a resistance spread.
    #[must_use]
    pub const fn with_resistance(mut self, f: f32) -> Self {
        self.resistance = f;
        self
    }

    /// With a supply-reading error.
    #[must_use]
    pub const fn with_supply_reading(mut self, f: f32) -> Self {
        self.supply_reading = f;
        self
    }

    /// With a node-capacitance upper spread.
    #[must_use]
    pub const fn with_node_capacitance(mut self, f: f32) -> Self {
        self.node_capacitance = f;
        self
    }

    /// With a clamp-voltage spread.
    #[must_use]
    pub const fn with_clamp_voltage(mut self, f: f32) -> Self {
        self.clamp_voltage = f;
        self
    }

    /// With a back-EMF-constant spread (full bridge).
    #[must_use]
    pub const fn with_back_emf_constant(mut self, f: f32) -> Self {
        self.back_emf_constant = f;
        self
    }

    /// With a bulk-capacitance spread (full bridge; only its low end matters).
    #[must_use]
    pub const fn with_bus_capacitance(mut self, f: f32) -> Self {
        self.bus_capacitance = f;
        self
    }

    /// With saturation spreads (current, saturated inductance).
    #[must_use]
    pub const fn with_saturation(mut self, current: f32, inductance: f32) -> Self {
        self.saturation_current = current;
        self.saturated_inductance = inductance;
        self
    }
}

impl Default for Tolerance {
    fn default() -> Self {
        Self::EXACT
    }
}

/// Spreads validated, as f64 fractions.
pub(crate) struct Spreads {
    pub(crate) l: f64,
    pub(crate) r: f64,
    pub(crate) v: f64,
    pub(crate) c: f64,
    pub(crate) i_sat: f64,
    pub(crate) l_sat: f64,
    pub(crate) clamp: f64,
    pub(crate) k: f64,
    pub(crate) bus: f64,
}

pub(crate) fn spreads(t: &Tolerance) -> Result<Spreads, ConfigError> {
    let f = |field, v, max| non_negative(field, v, max).map(f64::from);
    Ok(Spreads {
        l: f(Field::ToleranceInductance, t.inductance, 0.9)?,
        r: f(Field::ToleranceResistance, t.resistance, 0.9)?,
        v: f(Field::ToleranceSupplyReading, t.supply_reading, 0.5)?,
        c: f(Field::ToleranceNodeCapacitance, t.node_capacitance, 10.0)?,
        i_sat: f(Field::ToleranceSaturationCurrent, t.saturation_current, 0.9)?,
        l_sat: f(
            Field::ToleranceSaturatedInductance,
            t.saturated_inductance,
            0.9,
        )?,
        clamp: f(Field::ToleranceClampVoltage, t.clamp_voltage, 0.9)?,
        k: f(Field::ToleranceBackEmfConstant, t.back_emf_constant, 0.9)?,
        bus: f(Field::ToleranceBusCapacitance, t.bus_capacitance, 0.9)?,
    })
}

/// Widening of every corner against rounding (see the module documentation).
pub(crate) const MARGIN: f64 = 1e-6;
/// Raw units added to each segment of the bound for the truncating products.
pub(crate) const ROUNDING: i64 = 2;
/// Body-diode drop allowed below ground at the switch node, V (a silicon body diode drops
/// about 0.7 ..= 1.2 V: common practice, with margin).
const BODY_DIODE: f64 = 1.5;
/// [`BODY_DIODE`] in supply bits (U16F16).
const BODY_BITS: u32 = 98_304;

/// The turn-off node-charge terms (see the module documentation, item 3).
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
struct NodeCharge {
    /// 1.25·C/(2·L·I_fs²)·2⁴⁸: times `V_n bits²` over the current (raw) it gives the first
    /// raise in raw units.
    k1: Gain,
    /// Second raise 1.25·C·V_n,max·R_t/L, raw.
    k2: i64,
    /// Smallest current for which `T_c ≤ τ/8`, raw.
    i_min: i64,
    /// `C·V_n,max` per time unit: the charge completes within `n` units when `i·n` reaches it
    /// (raw·counts, raw·µs).
    charge_counts: u64,
    charge_us: u64,
    /// Raw current per supply bit of `√(C/L_min)`: the most a start can gain while the node
    /// charges is `(V + 1.5 V)·√(C/L)`.
    sqrt_c_over_l: Gain,
    /// `1.5 V` in supply bits.
    body: u32,
    /// `V_n = base (+ supply)`, supply bits.
    node_base: u32,
    node_adds_supply: bool,
    /// Ring left after a decay to zero, raw.
    ring: i64,
}

/// With nothing across the switch and a node capacitance: the ring that a turn-off leaves when
/// the node peaks under the breakdown (see the module documentation, item 4).
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
struct Ring {
    /// At or above this current (raw) every circuit in the box avalanches at turn-off.
    certain: i64,
    /// Raw current per supply bit of `(V + 1.5 V)·√(C/L)/√(1 − α²LC)`: the ring's amplitude is
    /// at most the current at the opening plus this.
    lift: Gain,
    /// The ring left after an avalanche: `BV·√(C/L)/√(1 − α²LC)`, raw.
    residual: i64,
    /// The envelope's decay, `τ = 2·L_hi/R_lo`, per timer count and per µs; τ in µs (Q32.32).
    per_count: DecayTable<DUTY_DIGITS>,
    per_us: BitTable,
    tau_us: u64,
}

/// The guard's bound: the two corner models, the reading error and the node charge.
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub(crate) struct Bound {
    /// The rise corner (L_lo, R_lo, saturation at its lowest), whole box: event mode.
    pub(crate) rise: Model,
    /// The fall corner (L_hi, R_lo, the lowest clamp voltage), whole box: event mode, decay
    /// times and clamp energies.
    pub(crate) fall: Model,
    /// The per-period tables of each slice of the inductance range, and how many are in use
    /// (one without an inductance spread).
    slices: [Slice; SLICES],
    used: usize,
    /// `f_V/(1 − f_V)` (widened): the true supply is at most `reading/(1 − f_V)`.
    reading: Gain,
    node: Option<NodeCharge>,
    ring: Option<Ring>,
}

/// The decay factors of one duty for every slice in use (`E` of its on-part and of its off-part,
/// per slice's τ): all that a period at that duty reads from the slices' tables. A channel may
/// keep the factors of the duty it applies (with the nominal model's two and the fingerprint of
/// the guard whose tables they are: [`crate::TickMemo`]), so a drive that repeats its duty
/// evaluates no table; any
/// other duty, or a guard with other tables, evaluates afresh. The results are the tables' own,
/// bit for bit: a factor is only ever used for the table and the length it was evaluated at.
/// The fingerprint is a 64-bit hash: two guards with different tables share one with a
/// probability of about 2⁻⁶⁴.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct DutyFactors {
    /// The duty, counts.
    pub(crate) n: u32,
    /// Slices whose factors are evaluated (the first `filled`): a check that fails at a slice
    /// evaluates none after it.
    filled: u8,
    on: [Decay; SLICES],
    off: [Decay; SLICES],
}

impl DutyFactors {
    /// Nothing evaluated yet for duty `n`.
    pub(crate) const fn empty(n: u32) -> Self {
        Self {
            n,
            filled: 0,
            on: [Decay::ZERO; SLICES],
            off: [Decay::ZERO; SLICES],
        }
    }

    /// Slice `j`'s (on, off) factors, evaluated from `bound`'s tables (for a period of `full`
    /// counts) the first time they are asked for.
    #[inline]
    pub(crate) fn slice(&mut self, bound: &Bound, j: usize, full: u32) -> (Decay, Decay) {
        let off_len = full.saturating_sub(self.n);
        let from = usize::from(self.filled);
        if j >= from {
            let slots = self.on.iter_mut().zip(self.off.iter_mut());
            let todo = bound.slices.iter().zip(slots).take(j + 1).skip(from);
            for (sl, (on, off)) in todo {
                *on = sl.on.eval(self.n);
                *off = sl.off.eval(off_len);
            }
            // j < SLICES <= u8::MAX.
            self.filled = (j + 1).min(SLICES) as u8;
        }
        (
            self.on.get(j).copied().unwrap_or(Decay::ZERO),
            self.off.get(j).copied().unwrap_or(Decay::ZERO),
        )
    }

    /// Slice `j`'s (on, off) factors for duty `n` alone, evaluated without keeping them (a
    /// search that probes one slice at many duties).
    pub(crate) fn one(bound: &Bound, j: usize, n: u32, full: u32) -> (Decay, Decay) {
        bound
            .slices
            .get(j)
            .map_or((Decay::ZERO, Decay::ZERO), |sl| {
                (sl.on.eval(n), sl.off.eval(full.saturating_sub(n)))
            })
    }
}

/// Slice `j`'s on-factor for `n` counts alone (the steady duty's rise in the limit's
/// look-ahead, [`crate::Guard`]).
pub(crate) fn on_factor(bound: &Bound, j: usize, n: u32) -> Decay {
    bound.slices.get(j).map_or(Decay::ZERO, |sl| sl.on.eval(n))
}

/// Slices of the inductance range tracked side by side in PWM, at most (see the module
/// documentation).
pub(crate) const SLICES: usize = 8;
/// The widest a slice may be, `L_b/L_a`.
pub(crate) const SLICE_RATIO: f64 = 1.08;

/// One slice `L_a ..= L_b` of the inductance range: its rise and fall tables per timer count.
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
struct Slice {
    /// `τ = L_a/(R_lo + R_on)`.
    on: DecayTable<DUTY_DIGITS>,
    /// `τ = L_b/(R_lo + R_p)`.
    off: DecayTable<DUTY_DIGITS>,
    /// The rise's τ in timer counts, Q32.32 (for the saturation crossing).
    tau_on_counts: u64,
}

/// The corner of `p` with inductance and resistance (at the winding temperature) scaled.
fn corner(p: &Params, l: f64, r: f64, sat: Option<Saturation>) -> Params {
    let mut q = *p;
    q.coil.inductance = (f64::from(p.coil.inductance) * l) as f32;
    q.coil.resistance = (f64::from(p.coil.resistance) * r) as f32;
    q.coil.saturation = sat;
    q
}

/// `p` with the clamp path's voltage scaled by `k`.
fn clamp_scaled(p: &mut Params, k: f64) {
    let s = |v: &mut f32| *v = (f64::from(*v) * k) as f32;
    match &mut p.clamp {
        ClampPath::None => {}
        ClampPath::Freewheel { forward_drop, .. } => s(forward_drop),
        ClampPath::FreewheelZener {
            forward_drop,
            zener_voltage,
            ..
        } => {
            s(forward_drop);
            s(zener_voltage);
        }
        ClampPath::SwitchClamp { clamp_voltage, .. } => s(clamp_voltage),
    }
}

/// Blames a corner's refusal on the spread that produced it.
fn blame(e: ConfigError) -> ConfigError {
    let field = match e.field {
        Field::CoilResistance | Field::CoilWindingTemperature => Field::ToleranceResistance,
        Field::CoilSaturationCurrent => Field::ToleranceSaturationCurrent,
        Field::CoilSaturatedInductance => Field::ToleranceSaturatedInductance,
        _ => Field::ToleranceInductance,
    };
    ConfigError::new(field, Problem::Conflict(Conflict::CornerOutOfRange))
}

impl Bound {
    /// Builds the corners of `p` for the tolerance `t` (`nominal` is `p` validated).
    pub(crate) fn new(p: &Params, nominal: &Model, t: &Tolerance) -> Result<Self, ConfigError> {
        let s = spreads(t)?;
        for (spread, field) in [
            (s.k, Field::ToleranceBackEmfConstant),
            (s.bus, Field::ToleranceBusCapacitance),
        ] {
            if spread > 0.0 {
                return Err(ConfigError::conflict(field, Conflict::OtherTopology));
            }
        }
        let d = nominal.derived();
        let r_w = f64::from(d.resistance);
        let r_on = f64::from(p.switch.on_resistance);
        let r_p = f64::from(d.path_resistance);
        let r_lo = 1.0 - s.r - MARGIN;
        let (l_lo, l_hi) = (1.0 - s.l - MARGIN, 1.0 + s.l + MARGIN);
        // Rise corner: the largest right side of L·di/dt = V − R_t·i while it is positive.
        let l_nom = f64::from(p.coil.inductance);
        let sat_lo = p.coil.saturation.map(|sat| {
            let ls = (f64::from(sat.inductance) * (1.0 - s.l_sat - MARGIN)).min(l_nom * l_lo);
            Saturation::new(
                (f64::from(sat.current) * (1.0 - s.i_sat - MARGIN)) as f32,
                ls as f32,
            )
        });
        let rise = Model::new(&corner(p, l_lo, r_lo, sat_lo)).map_err(blame)?;
        // Fall corner: the largest (least negative) right side with the switch off. Above the
        // highest saturation current every coil in the box is saturated, so its inductance is at
        // most the highest saturated one there.
        let sat_hi = p.coil.saturation.map(|sat| {
            let ls = (f64::from(sat.inductance) * (1.0 + s.l_sat + MARGIN)).min(l_nom * l_hi);
            Saturation::new(
                (f64::from(sat.current) * (1.0 + s.i_sat + MARGIN)) as f32,
                ls as f32,
            )
        });
        let mut fall = corner(p, l_hi, r_lo, sat_hi);
        clamp_scaled(&mut fall, 1.0 - s.clamp - MARGIN);
        let fall = Model::new(&fall).map_err(|e| match e.field {
            Field::ClampForwardDrop | Field::ClampZenerVoltage | Field::ClampVoltage => {
                ConfigError::new(
                    Field::ToleranceClampVoltage,
                    Problem::Conflict(Conflict::CornerOutOfRange),
                )
            }
            _ => blame(e),
        })?;
        let mut node = p
            .coil
            .node_capacitance
            .map(|c| Self::node_charge(p, nominal, &s, f64::from(c)));
        let ring = match (nominal.path(), p.coil.node_capacitance) {
            (PathKind::Avalanche, Some(c)) => {
                // The ring's envelope replaces the permanent floor on this path.
                if let Some(n) = &mut node {
                    n.ring = 0;
                }
                Some(Self::ring_model(p, nominal, &s, f64::from(c))?)
            }
            _ => None,
        };
        // Slices: L_lo·q^j ..= L_lo·q^(j+1), q = (L_hi/L_lo)^(1/SLICES).
        // As many slices as keep each at most 8 % wide (L_b/L_a ≤ 1.08), up to SLICES: 8 for
        // ±30 %, 3 for ±10 %, 1 without a spread.
        let used =
            (libm::ceil(libm::log(l_hi / l_lo) / libm::log(SLICE_RATIO)) as usize).clamp(1, SLICES);
        let q = libm::pow(l_hi / l_lo, 1.0 / used as f64);
        let count = f64::from(d.period) / f64::from(nominal.duty_resolution());
        let slice = |j: usize| {
            let l_a = l_nom * l_lo * libm::pow(q, j as f64);
            // The last slice ends exactly at L_hi (no rounding gap at the top).
            let l_b = if j + 1 >= used {
                l_nom * l_hi
            } else {
                l_nom * l_lo * libm::pow(q, (j + 1) as f64)
            };
            let tau_on = l_a / (r_w * r_lo + r_on);
            Slice {
                on: DecayTable::new(count / tau_on),
                off: DecayTable::new(count / (l_b / (r_w * r_lo + r_p))),
                tau_on_counts: crate::model::q32(tau_on / count),
            }
        };
        let slices = core::array::from_fn(|j| slice(j.min(used - 1)));
        Ok(Self {
            rise,
            fall,
            slices,
            used,
            // |reading − true| <= f_V·true, so true <= reading/(1 − f_V) = reading·(1 + f_V/(1 − f_V)).
            reading: Gain::new(s.v / (1.0 - s.v) + MARGIN),
            node,
            ring,
        })
    }

    fn node_charge(p: &Params, nominal: &Model, s: &Spreads, c: f64) -> NodeCharge {
        let d = nominal.derived();
        let c_hi = c * (1.0 + s.c + MARGIN);
        let l_nom = f64::from(p.coil.inductance);
        let mut l_min = l_nom * (1.0 - s.l - MARGIN);
        if let Some(sat) = p.coil.saturation {
            l_min = l_min.min(f64::from(sat.inductance) * (1.0 - s.l_sat - MARGIN));
        }
        let fs = f64::from(d.full_scale);
        let raw = 1_099_511_627_776.0 / fs;
        let v_max = f64::from(p.supply.max);
        let v_p = f64::from(d.path_voltage) * (1.0 + s.clamp + MARGIN);
        let adds = !nominal.path().through_supply();
        // The node's highest clamp voltage, at twice the maximum supply (the reading's cap).
        let v_n_max = if adds { 2.0 * v_max + v_p } else { v_p };
        let r_t_hi = f64::from(d.resistance) * (1.0 + s.r + MARGIN) + f64::from(d.path_resistance);
        let count = f64::from(d.period) / f64::from(nominal.duty_resolution());
        // The node rings about the supply from at most V_p above it (freewheel paths) or from at
        // most the clamp or breakdown voltage (paths across the switch): V_p bounds both.
        let ring_v = v_p;
        let k1 = 1.25 * c_hi / (2.0 * l_min * fs * fs);
        NodeCharge {
            k1: Gain::new(k1 * 281_474_976_710_656.0 * (1.0 + MARGIN)),
            k2: libm::ceil(1.25 * c_hi * v_n_max * r_t_hi / l_min * raw) as i64,
            i_min: libm::ceil(8.0 * c_hi * v_n_max * r_t_hi / l_min * raw) as i64,
            charge_counts: libm::ceil(c_hi * v_n_max / count * raw).min(1.8e19) as u64,
            charge_us: libm::ceil(c_hi * v_n_max / 1e-6 * raw).min(1.8e19) as u64,
            sqrt_c_over_l: Gain::new(libm::sqrt(c_hi / l_min) * raw / 65_536.0 * (1.0 + MARGIN)),
            body: crate::model::volts_bits(BODY_DIODE),
            node_base: crate::model::volts_bits(v_p),
            node_adds_supply: adds,
            ring: libm::ceil(ring_v * libm::sqrt(c_hi / l_min) * raw) as i64,
        }
    }

    /// The unclamped ring's constants (configuration time, f64).
    ///
    /// Series RLC after the switch opens with the node at 0 (shared/REFERENCES.md §10):
    /// `i(t) = e^(−αt)·[I0·cos ωd·t + B·sin ωd·t]`, so `|i| ≤ e^(−αt)·√(I0² + B²)` with
    /// `B = ((Vs − R·I0)/L + α·I0)/ωd ≤ Vs/(L·ωd)`. Avalanche is certain when the energy at the
    /// opening, less what the resistance can dissipate before the node peaks (at most
    /// `R·M²·π/ωd`, M the amplitude), exceeds `½·C·BV²` (the node's energy at breakdown with the
    /// supply at its least help, 0 V).
    fn ring_model(p: &Params, nominal: &Model, s: &Spreads, c: f64) -> Result<Ring, ConfigError> {
        let d = nominal.derived();
        let l_nom = f64::from(p.coil.inductance);
        let (l_lo, l_hi) = (l_nom * (1.0 - s.l - MARGIN), l_nom * (1.0 + s.l + MARGIN));
        let c_hi = c * (1.0 + s.c + MARGIN);
        let r_w = f64::from(d.resistance);
        let (r_lo, r_hi) = (r_w * (1.0 - s.r - MARGIN), r_w * (1.0 + s.r + MARGIN));
        // Underdamped at every corner, with margin: 1 − α²LC ≥ 0.1.
        let damp = 1.0 - r_hi * r_hi * c_hi / (4.0 * l_lo);
        if damp < 0.1 {
            return Err(ConfigError::conflict(
                Field::CoilNodeCapacitance,
                Conflict::RingOverdamped,
            ));
        }
        let k = libm::sqrt(c_hi / l_lo) / libm::sqrt(damp);
        let fs = f64::from(d.full_scale);
        let raw = 1_099_511_627_776.0 / fs;
        let bv = f64::from(p.switch.breakdown);
        let v_hi = 2.0 * f64::from(p.supply.max) + BODY_DIODE;
        let omega_d = libm::sqrt(damp / (l_hi * c_hi));
        let excess = |i: f64| {
            let m = i + v_hi * k;
            0.5 * l_lo * i * i
                - r_hi * m * m * core::f64::consts::PI / omega_d
                - 0.5 * c_hi * bv * bv
        };
        // Smallest current with a certain avalanche (the excess grows once ½·L dominates).
        let top = fs * 2_097_152.0;
        let certain = if excess(top) < 0.0 {
            i64::MAX
        } else {
            let (mut lo, mut hi) = (0.0, top);
            for _ in 0..200 {
                let mid = 0.5 * (lo + hi);
                if excess(mid) >= 0.0 {
                    hi = mid;
                } else {
                    lo = mid;
                }
            }
            libm::ceil(hi * raw).min(2.3e18) as i64
        };
        let tau = 2.0 * l_hi / r_lo;
        let count = f64::from(d.period) / f64::from(nominal.duty_resolution());
        Ok(Ring {
            certain,
            lift: Gain::new(k * raw / 65_536.0 * (1.0 + MARGIN)),
            residual: libm::ceil(bv * k * raw).min(2.3e18) as i64,
            per_count: DecayTable::new(count / tau),
            per_us: BitTable::new(1e-6 / tau),
            tau_us: crate::model::q32(tau * 1e6),
        })
    }

    /// The ring envelope after an off-segment of `len` units: the envelope `e` before it decays
    /// by `e^(−αt)`; a turn-off (`opened`) from `i1` adds its own ring (from the opening, so it
    /// decays over the whole segment) or, for a current that certainly avalanches, the residual
    /// ring (from the avalanche's end, so it is not decayed). Zero on other paths.
    #[inline]
    pub(crate) fn ring_after_off(
        &self,
        e: i64,
        i1: i64,
        len: u32,
        vh: u32,
        opened: bool,
        unit: Unit,
    ) -> i64 {
        let Some(r) = &self.ring else { return 0 };
        let table = |start: i64| {
            let d = match unit {
                Unit::Count => r.per_count.eval(len),
                Unit::Micro => r.per_us.eval(len),
            };
            segment(start, 0, d) + ROUNDING
        };
        let mut out = if e > 0 { table(e) } else { 0 };
        if opened {
            out = out.max(if i1 < r.certain {
                let lift = r.lift.apply(vh.saturating_add(BODY_BITS)) as i64;
                table(i1.saturating_add(lift))
            } else {
                r.residual
            });
        }
        out
    }

    /// The ring's amplitude at a turn-off from `i1` (its peak), zero on other paths.
    #[inline]
    pub(crate) fn ring_peak(&self, i1: i64, vh: u32) -> i64 {
        self.ring.as_ref().map_or(0, |r| {
            if i1 < r.certain {
                i1.saturating_add(r.lift.apply(vh.saturating_add(BODY_BITS)) as i64)
            } else {
                r.residual
            }
        })
    }

    /// Time for a ring envelope `e` to fall to `to`, µs rounded up (`Some(0)` when it is
    /// already there or there is no ring).
    pub(crate) fn ring_time_us(&self, e: i64, to: i64) -> Option<u32> {
        let Some(r) = &self.ring else { return Some(0) };
        if e <= to || to <= 0 {
            return Some(if e <= to { 0 } else { u32::MAX });
        }
        let ln = crate::qmath::ln_ratio(e as u64, to as u64).saturating_add(16);
        let t = crate::clamp::time_q64(ln, r.tau_us);
        u32::try_from((t >> 64) + 1).ok()
    }

    /// Whether the ring's envelope is carried (nothing across the switch, a node capacitance).
    pub(crate) const fn has_ring(&self) -> bool {
        self.ring.is_some()
    }

    /// The ring floor (raw), zero without a node capacitance.
    pub(crate) fn ring(&self) -> i64 {
        self.node.as_ref().map_or(0, |n| n.ring)
    }

    /// The highest true supply for a reading (supply bits, at most the model's cap).
    #[inline]
    pub(crate) fn supply_hi(&self, vs: u32) -> u32 {
        let up = self.reading.apply(vs).min(u64::from(u32::MAX)) as u32;
        self.rise.supply(crate::Volts::from_bits(
            vs.saturating_add(up).saturating_add(1),
        ))
    }

    /// Slices in use.
    #[inline]
    pub(crate) const fn used(&self) -> usize {
        self.used
    }

    /// Slice `j`'s on-segment of `n` counts from `i0` at the high supply `vh`; `e` is the
    /// slice's on-factor for `n` ([`DutyFactors::slice`]); `shared` the saturation crossing's
    /// logarithm shared by the on-segments at `vh`.
    #[inline]
    pub(crate) fn on_slice(
        &self,
        (j, i0): (usize, i64),
        (n, vh): (u32, u32),
        e: Decay,
        shared: &SharedLog,
    ) -> i64 {
        let Some(sl) = self.slices.get(j) else {
            return self.on_event_or_whole(i0, n, vh, Unit::Count);
        };
        let table = |k| if k == n { e } else { sl.on.eval(k) };
        let tau = sl.tau_on_counts;
        self.on_with(i0, n, vh, table, (tau, Unit::Count), Some(shared))
    }

    /// At or above every slice's off-segment (its peak and its end) from a start at or below
    /// `i1`, for any length: no decay, any asymptote above the start, the node's charge and the
    /// ring floor (the cases of [`Bound::off_with`] each end at or below this).
    #[inline]
    pub(crate) fn off_top(&self, i1: i64, vh: u32) -> i64 {
        let top = i1.max(self.fall.off_asymptote(vh));
        let top = match &self.node {
            Some(n) => top.saturating_add(n.most_added(vh)).max(n.ring),
            None => top,
        };
        top.saturating_add(ROUNDING)
    }

    /// The whole box's on-segment (event mode: `unit` is µs).
    #[inline]
    pub(crate) fn on_event_or_whole(&self, i0: i64, len: u32, vh: u32, unit: Unit) -> i64 {
        let r = &self.rise;
        let tau = match unit {
            Unit::Count => r.saturation.as_ref().map_or(0, |s| s.tau_on_counts),
            Unit::Micro => r.tau_on_us,
        };
        let unsat = |k| match unit {
            Unit::Count => r.on_duty.eval(k),
            Unit::Micro => r.on_event.eval(k),
        };
        self.on_with(i0, len, vh, unsat, (tau, unit), None)
    }

    /// An on-segment with the unsaturated decay `unsat` (its τ in the segment's units `tau`),
    /// split at the rise corner's saturation current when the coil saturates.
    #[inline]
    fn on_with(
        &self,
        i0: i64,
        len: u32,
        vh: u32,
        unsat: impl Fn(u32) -> crate::qmath::Decay,
        (tau, unit): (u64, Unit),
        shared: Option<&SharedLog>,
    ) -> i64 {
        if len == 0 {
            return i0;
        }
        let a = self.rise.on_asymptote(vh);
        if a <= i0 {
            // The true current falls toward an asymptote at or below this one: hold.
            return i0;
        }
        rise(
            i0,
            a,
            len,
            unsat,
            self.rise.saturated(unit, |_| tau),
            shared,
        ) + ROUNDING
    }

    /// What an off-segment of `len` units at the high supply `vh` shares across the slices
    /// (`opened`: the switch opened at its start, a turn-off, which charges the node).
    #[inline]
    pub(crate) fn off_frame(&self, len: u32, vh: u32, opened: bool, unit: Unit) -> OffFrame {
        let node = match &self.node {
            Some(n) if opened && len > 0 => {
                let charge = match unit {
                    Unit::Count => n.charge_counts,
                    Unit::Micro => n.charge_us,
                };
                // x_lo = max(i_min, C·V_n/t_off), the quotient rounded up (no division).
                let q = div_up(charge, u64::from(len));
                let x_lo = n.i_min.max(q.min(1 << 61) as i64);
                let v_n = n
                    .node_base
                    .saturating_add(if n.node_adds_supply { vh } else { 0 });
                // K·V_n², then over x rounded up (x >= x_lo >= 1).
                let kv = n.k1.apply_u128_full(u128::from(v_n) * u128::from(v_n));
                Some(NodeFrame {
                    c: n.most_added(vh),
                    x_lo,
                    kv,
                    h_lo: n.raise(kv, x_lo),
                })
            }
            _ => None,
        };
        OffFrame {
            len,
            a: self.fall.off_asymptote(vh),
            unit,
            node,
            log: SharedLog::new(None),
        }
    }

    /// Slice `j`'s off-segment from `i1` in the frame `fr` (of `fr.len` counts); `e` is the
    /// slice's off-factor for that length ([`DutyFactors::slice`]). Returns the highest current
    /// inside the segment and its end.
    #[inline]
    pub(crate) fn off_slice(&self, j: usize, i1: i64, fr: &OffFrame, e: Decay) -> (i64, i64) {
        let n = fr.len;
        if let Some(sl) = self.slices.get(j) {
            self.off_with(i1, fr, |k| if k == n { e } else { sl.off.eval(k) })
        } else {
            let f = &self.fall;
            self.off_with(i1, fr, |k| f.off_duty.eval(k))
        }
    }

    /// The whole box's off-segment (event mode: `unit` is µs).
    #[inline]
    pub(crate) fn off_event_or_whole(
        &self,
        i1: i64,
        len: u32,
        vh: u32,
        opened: bool,
        unit: Unit,
    ) -> (i64, i64) {
        let f = &self.fall;
        let fr = self.off_frame(len, vh, opened, unit);
        self.off_with(i1, &fr, |k| match unit {
            Unit::Count => f.off_duty.eval(k),
            Unit::Micro => f.off_event.eval(k),
        })
    }

    /// An off-segment from `i1` in the frame `fr` with the decay `table`.
    #[inline]
    fn off_with(
        &self,
        i1: i64,
        fr: &OffFrame,
        table: impl Fn(u32) -> crate::qmath::Decay,
    ) -> (i64, i64) {
        let len = fr.len;
        if len == 0 {
            return (i1, i1);
        }
        let a = fr.a;
        let decay = |start: i64| {
            if a < start {
                fall(
                    start,
                    a,
                    len,
                    &table,
                    self.fall.saturated_off(fr.unit),
                    Some(&fr.log),
                )
            } else {
                // An asymptote above the start (a supply at or above a clamp across the switch):
                // the current rises at most to it.
                a
            }
        };
        let Some(n) = &self.node else {
            return (i1, decay(i1) + ROUNDING);
        };
        let Some(nf) = &fr.node else {
            // No turn-off: nothing charges the node.
            return (i1, decay(i1).max(n.ring) + ROUNDING);
        };
        // The true end is not monotone in the start (a small current charges the node slowly and
        // gains more), so the bound is the supremum over every start x in 0 ..= i1:
        // - any x: at most x + c, c = (V + V_bd)·√(C/L) (energy);
        // - x >= x_lo (the charge completes early): at most decay(h(x)), h(x) = x + K/x + k2,
        //   convex, so its largest value on x_lo ..= i1 is at an end.
        let c = nf.c;
        if a >= i1 {
            // Not a decay: a supply at or above a clamp across the switch holds the current up,
            // so it rises toward the asymptote; the node's charge adds at most c on top.
            let top = a.max(i1).saturating_add(c);
            return (top, top.max(n.ring) + ROUNDING);
        }
        let peak = i1.saturating_add(c);
        if i1 < nf.x_lo {
            return (peak, peak.max(n.ring) + ROUNDING);
        }
        let y = nf.h_lo.max(n.raise(nf.kv, i1));
        let end = decay(y)
            .min(peak)
            .max(nf.x_lo.saturating_add(c))
            .max(n.ring);
        (peak, end + ROUNDING)
    }
}

/// What an off-segment of one length at one supply shares across the slices: the fall
/// corner's asymptote and, after a turn-off with a node capacitance, the node's terms (the
/// charge's shortest start and its raise there, computed once a period instead of once a slice).
pub(crate) struct OffFrame {
    len: u32,
    a: i64,
    unit: Unit,
    node: Option<NodeFrame>,
    /// The fall's saturation crossing logarithm, shared by the slices.
    log: SharedLog,
}

/// The node's terms of an [`OffFrame`].
#[derive(Clone, Copy)]
struct NodeFrame {
    /// The most the charge can add, `(V + V_bd)·√(C/L)`, raw.
    c: i64,
    /// The smallest start whose charge completes inside the segment, raw.
    x_lo: i64,
    /// `K·V_n²`, the numerator of the raise.
    kv: u128,
    /// `h(x_lo)`.
    h_lo: i64,
}

impl NodeCharge {
    /// The most the node's charge can add to a turn-off's current at the high supply `vh`,
    /// `(V + V_bd)·√(C/L)`, raw.
    #[inline]
    fn most_added(&self, vh: u32) -> i64 {
        self.sqrt_c_over_l.apply(vh.saturating_add(self.body)) as i64
    }

    /// `h(x) = x + K·V_n²/x + k2` for `x >= 1` (`kv` = K·V_n²), the quotient rounded up.
    #[inline]
    fn raise(&self, kv: u128, x: i64) -> i64 {
        let q = div_up_wide(kv, x.max(1) as u64).min(1 << 61) as i64;
        x.saturating_add(q).saturating_add(self.k2)
    }
}
