//! The guard: limits, holds and trips on the model's estimate, once per control period or on each
//! on/off event.
//!
//! [`Guard`] is the validated, immutable configuration (it owns its [`Model`]); [`GuardState`] is
//! the small per-channel state. One call per period:
//!
//! 1. advance the estimate over the period just ended with the duty the guard applied;
//! 2. feed the thermal replicas (clamp: the energy of the off-segment; winding: I²R);
//! 3. evaluate the conditions and apply their actions (report, hold, trip with latch);
//! 4. decide the duty for the coming period: held while the release interval runs, reduced so
//!    the predicted peak stays at or below the ceiling.
//!
//! # Protections and their formulas
//! - **Release interval** (`release-hold`): after the output has been off, a turn-on is allowed
//!   only once the estimate is at or below the release current; the remaining time is
//!   `τ_off·ln((I + a)/(I_rel + a))` ([`Model::decay_time_us`]).
//! - **Current ceiling** (`current-limit`): the bound must stay at or below the ceiling in the
//!   coming period, and a duty above the *steady duty* must leave the steady duty possible in
//!   the next one; otherwise the largest duty that satisfies both is searched from the last
//!   applied duty (chord steps on the bound's values, no division). The steady duty is the
//!   largest whose period, repeated, keeps every later rise under a level just below the
//!   ceiling (its off-segment's peak, node charge included, at or below the ceiling): held at
//!   it, the bound never leaves the ceiling, so limiting settles within a few counts instead
//!   of swinging between long and short on-parts. It is found when the supply reading or the
//!   stale factor moves (rounded up to 1/64 V and 2⁻¹⁶) and kept in the channel's state. The
//!   ceiling is the lower of the configured one and the current whose turn-off energy at the
//!   maximum supply equals the clamp's single-pulse rating.
//! - **Trip** (`overcurrent`): the estimate (start or peak of the period) above the trip current.
//! - **Clamp energy** (`clamp-pulse`, `clamp-overheat`): each commanded turn-off's energy
//!   ([`Model::turn_off_energy`]) against the rating; the Foster replica fed by every off-segment
//!   (exact energy when the current reaches zero, the chord bound otherwise).
//! - **Winding** (`coil-overheat`): the IEC 60255-149 thermal image, see [`crate::thermal`].
//! - **Supply** (`supply-range`): outside `supply.min ..= supply.max`; below by default only
//!   reported, above by default a trip (the clamp margins are gone).
//!
//! # Timing contract (PWM)
//! - **When to call**: once per PWM period, at the period's boundary (the timer's update
//!   event), with the supply measured during the period that just ended. Each call advances the
//!   estimate and the bound by exactly one period of the duty the guard returned the call
//!   before.
//! - **What the duty is for**: the period that starts at that boundary. Write it to a compare
//!   register with preload (shadow) enabled, so that it takes effect at the next update and the
//!   period the guard models is the period the timer runs; without preload, a duty written
//!   mid-period splits that period between two duties the guard does not know of.
//! - **A late or missed call**: the timer keeps running the last duty written, and the next
//!   call still advances by one period, so the guard falls behind the coil by the periods it
//!   missed. That is outside the declared tolerance (the simulator's fault suite shows what it
//!   costs on the demo valve); a tick must end within its period. The cost per call on three
//!   cores is printed by `cargo xtask target-bench` (README); the limiting path costs far more
//!   than a settled tick.
//! - **Event mode** ([`Guard::event`]) has its own contract: call on every request change and
//!   again within [`Output::next_check_us`].
//!
//! # Cost of a tick
//! A channel may keep a memo beside its state ([`TickMemo`] with [`Guard::tick_with`]): a
//! drive that repeats its duty then evaluates no table, and one settled at one duty and one
//! supply reading (the period's fixed point) takes the period's estimate, bound and energy from
//! it; bit for bit the same results. The coming period is first screened with one slice (the
//! lowest inductance, from the largest start, the off-segment at its highest): far from the
//! ceiling that settles it, near it every slice decides. An off-segment's node-charge terms
//! are shared by the slices of a period. Measured per call by `cargo xtask target-bench`.
//!
//! # Winding temperature and the model's resistance
//! The model is built for one winding temperature. Re-deriving it is a slow call
//! ([`Guard::retuned`], f64 arithmetic) meant for the main loop, not the interrupt: the per-tick
//! path stays integer-only and its cost fixed. While the estimate and the model disagree the
//! guard stays conservative: a model built hotter than the winding overstates R and so
//! understates the current, so every current compared against the ceiling, trip and release
//! levels is first multiplied by `1 + α'·(T_model − T_winding)` (α' = α/(1 + α·(T_amb − T_ref)),
//! an upper bound of the resistance ratio). A model built colder than the winding overstates the
//! current, the decay time and the clamp energy, all on the safe side, and is left alone. Build
//! the model at or below the estimate (see [`Guard::suggested_model_temperature`]).
//!
//! # Panics
//! None: the inputs are clamped (duty to the resolution, currents to the working range), every
//! shift is checked and every sum saturates or is bounded as commented.

use crate::condition::{Action, Condition, Conditions};
use crate::estimate::{CoilState, PeriodEstimate};
use crate::estimate::{SharedLog, Unit};
use crate::model::Model;
use crate::params::{ConfigError, Conflict, Field, Params, positive};
use crate::qmath::Decay;
use crate::qmath::ln_ratio;
use crate::thermal::{
    ClampAverage, ClampHeat, ClampReplica, ClampThermal, CoilHeat, CoilReplica, CoilThermal,
    ThermalSnapshot,
};
use crate::tolerance::{Bound, DutyFactors, OffFrame, SLICES, Tolerance};
use crate::units::{Current, Energy, Volts};
use fixed::types::I32F32;

/// Calls for which `current-limit` stays reported after the last limited one. Peak limiting
/// can alternate limited and unlimited periods (a period after a limited one often fits the
/// full request); the report lingers so that the condition reads as one episode, not a flood of
/// raised/cleared events. The duty itself is never held back by this.
pub const LIMIT_LINGER: u8 = 32;

/// What to do with a turn-on requested during the release interval.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub enum HeldRequest {
    /// Honour it as soon as the interval ends (default).
    Defer,
    /// Drop it: the output stays off until the request goes to zero and comes back.
    Drop,
}

/// The action of each configurable condition.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct Policy {
    /// `overcurrent`; default [`Action::Trip`].
    pub overcurrent: Action,
    /// `clamp-pulse`; default [`Action::Trip`].
    pub clamp_pulse: Action,
    /// `clamp-overheat`; default [`Action::Hold`] (turn-ons wait for the hysteresis).
    pub clamp_overheat: Action,
    /// `clamp-power`; default [`Action::Trip`].
    pub clamp_power: Action,
    /// `coil-overheat`; default [`Action::Trip`].
    pub coil_overheat: Action,
    /// `supply-range` below the minimum; default [`Action::Report`].
    pub supply_low: Action,
    /// `supply-range` above the maximum; default [`Action::Trip`].
    pub supply_high: Action,
    /// A turn-on requested during the release interval; default [`HeldRequest::Defer`].
    pub held_request: HeldRequest,
}

impl Default for Policy {
    fn default() -> Self {
        Self {
            overcurrent: Action::Trip,
            clamp_pulse: Action::Trip,
            clamp_overheat: Action::Hold,
            clamp_power: Action::Trip,
            coil_overheat: Action::Trip,
            supply_low: Action::Report,
            supply_high: Action::Trip,
            held_request: HeldRequest::Defer,
        }
    }
}

/// Automatic retry after a trip.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct Retry {
    /// Wait after the tripping condition has cleared, s (1 µs ..= 4000 s).
    pub cooldown: f32,
    /// Retries allowed before the trip stays latched until [`Guard::clear`].
    pub max_retries: u8,
}

impl Retry {
    /// Retry after `cooldown` seconds, at most `max_retries` times.
    pub const fn new(cooldown: f32, max_retries: u8) -> Self {
        Self {
            cooldown,
            max_retries,
        }
    }
}

/// The clamp's average power limit: checked when no clamp thermal replica is configured, on a
/// first-order average of the energy each period puts into the clamp path (or into the switch
/// in avalanche) with time constant `window`.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct ClampPower {
    /// Highest average power, W (1 µW ..= 10 kW).
    pub max_average: f32,
    /// Averaging time constant, s (1 ms ..= 1000 s).
    pub window: f32,
}

impl ClampPower {
    /// When nothing is declared: 0.5 W over 1 s. Small surface-mount diodes and TVS parts
    /// dissipate about 0.5 ..= 1 W steadily on a typical board (common practice, no single
    /// source); declare the part's own figure, or configure its thermal replica.
    pub const DEFAULT: Self = Self {
        max_average: 0.5,
        window: 1.0,
    };

    /// At most `max_average` W averaged over `window` s.
    pub const fn new(max_average: f32, window: f32) -> Self {
        Self {
            max_average,
            window,
        }
    }
}

/// The guard's limits in SI units (configuration time).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct GuardLimits {
    /// Highest predicted peak the duty may produce, A.
    pub current_ceiling: f32,
    /// Estimate above which the output trips, A (at or above the ceiling).
    pub trip_current: f32,
    /// Current below which a released coil may be turned on again, A (below the trip current).
    pub release_current: f32,
    /// Single-pulse energy rating of the clamp path (or of the switch in avalanche), J.
    pub clamp_pulse_energy: Option<f32>,
    /// Thermal model of the clamp device.
    pub clamp_thermal: Option<ClampThermal>,
    /// The clamp's average power limit, used when `clamp_thermal` is not configured (`None`:
    /// [`ClampPower::DEFAULT`]).
    pub clamp_power: Option<ClampPower>,
    /// Thermal image of the winding.
    pub coil_thermal: Option<CoilThermal>,
    /// What each condition does.
    pub policy: Policy,
    /// Retry after a trip (none: latch until cleared).
    pub retry: Option<Retry>,
    /// The uncertainty of the parameters that the guard's bound covers (default: none).
    pub tolerance: Tolerance,
}

impl GuardLimits {
    /// Ceiling, trip and release currents (A); no clamp rating, no thermal replicas, default
    /// policies, no retry.
    pub fn new(current_ceiling: f32, trip_current: f32, release_current: f32) -> Self {
        Self {
            current_ceiling,
            trip_current,
            release_current,
            clamp_pulse_energy: None,
            clamp_thermal: None,
            clamp_power: None,
            coil_thermal: None,
            policy: Policy::default(),
            retry: None,
            tolerance: Tolerance::EXACT,
        }
    }

    /// The same limits covering the declared `tolerance`.
    #[must_use]
    pub const fn with_tolerance(mut self, tolerance: Tolerance) -> Self {
        self.tolerance = tolerance;
        self
    }
}

/// One period's input.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct Input {
    /// Requested duty for the coming period, counts (clamped to the resolution).
    pub duty: u32,
    /// Supply measured during the period just ended.
    pub supply: Volts,
}

impl Input {
    /// A request of `duty` counts with the measured `supply`.
    pub const fn new(duty: u32, supply: Volts) -> Self {
        Self { duty, supply }
    }
}

/// What the guard decided.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct Output {
    /// Duty to apply for the coming period, counts (in event mode: the resolution = on, 0 = off).
    pub duty: u32,
    /// Conditions active now.
    pub active: Conditions,
    /// Conditions that became active in this call.
    pub raised: Conditions,
    /// Conditions that ended in this call.
    pub cleared: Conditions,
    /// Trips latched (the output is off until they clear or are cleared).
    pub latched: Conditions,
    /// The estimate over the period (or event) just ended.
    pub estimate: PeriodEstimate,
    /// Predicted peak of the coming period at the applied duty: the bound's, so at or above the
    /// true peak for every circuit inside the declared tolerance.
    pub predicted_peak: Current,
    /// The bound now: at or above the true current inside the declared tolerance. The ceiling,
    /// trip, release hold and clamp checks act on it; `estimate` is the nominal figure.
    pub bound: Current,
    /// While `release-hold` is active: the remaining time, µs (`None`: it will not decay).
    pub release_in_us: Option<u32>,
    /// Event mode with the output on: call [`Guard::event`] again within this many µs, the
    /// earlier of the time the current could reach the ceiling and the time the winding image
    /// could reach its trip at the highest current the box allows (`None`: neither will, or
    /// PWM). The event-mode timing contract: the guard learns of an overload only when it is
    /// called, so the firmware schedules its next call by this.
    pub next_check_us: Option<u32>,
}

/// Per-channel state of the guard.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct GuardState {
    coil: CoilState,
    /// The clamp's average energy per period (see [`ClampPower`]).
    clamp_power: Energy,
    /// The upper bound of the current per slice of the inductance range (see
    /// [`crate::Tolerance`]); the bound is their largest.
    bound: [CoilState; SLICES],
    /// The switch was on at the end of the period (or event) before the one being advanced.
    on_at_end: bool,
    /// With nothing across the switch: the envelope of a ring under the breakdown, part of the
    /// bound (see [`crate::Tolerance`]).
    envelope: CoilState,
    clamp_heat: ClampHeat,
    coil_heat: CoilHeat,
    /// Duty applied during the current period (the one the next call will advance over).
    applied: u32,
    /// Retry cooldown remaining, µs.
    cooldown_us: u32,
    active: Conditions,
    latched: Conditions,
    retries: u8,
    dropped: bool,
    /// Calls left before `current-limit` is reported clear (see [`LIMIT_LINGER`]).
    limit_linger: u8,
    /// The current is an assumption (after a reset), not an estimate from a known start: it
    /// holds the output off but raises no overcurrent or clamp-pulse until it has decayed.
    assumed: bool,
    /// The steady duty last found for the limit, with what it was found for.
    steady: Steady,
}

/// The steady duty a channel's limit uses and its search ([`Guard::steady_kept`]), marked with
/// the low 16 bits of the fingerprint of the guard that found it (0: none) and the rounded
/// supply and stale factor it is for; searched again when any of them differs. 20 bytes, so
/// that the state stays at 160 (a retuned guard whose fingerprint shares the low bits and that
/// meets the same rounded inputs would take another guard's steady duty: its look-ahead would
/// then settle less well, the coming period's check is unaffected).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Steady {
    tag: u16,
    /// The ceiling less the steady level, rounded up, in units of the power of two that puts
    /// the ceiling within 16 bits.
    margin: u16,
    /// The rounded supply, Q16.16.
    vh: u32,
    /// The rounded stale factor, Q16.16.
    f: u32,
    /// The steady duty in use: the duty found before while the first slice is searched, then
    /// the smallest of the slices' largest so far.
    n: u16,
    /// The slice being searched (the slices in use: all searched).
    next: u8,
    /// Its bracket: a count it holds at (0: none probed yet, taken to hold) and one it fails
    /// at (one above the highest count searched: none probed yet).
    lo: u16,
    hi: u16,
}

impl Steady {
    /// None found.
    const NONE: Self = Self {
        tag: 0,
        margin: 0,
        vh: 0,
        f: 0,
        n: 0,
        next: 0,
        lo: 0,
        hi: 0,
    };
}

/// What a channel may keep beside its [`GuardState`] so that a steady drive costs little (see
/// [`Guard::tick_with`]), marked with the fingerprint of the guard that made it (a 64-bit hash
/// of its whole configuration):
/// - the factors its applied duty reads from the model's and the slices' tables, so a drive
///   that repeats its duty reads no table;
/// - the last period, when it left the estimate and the bound as it found them (a drive
///   settled at one duty and one supply reading, about 28 time constants after it last
///   changed), so the next such period is not computed again; only the thermal images, the
///   conditions and the decision run;
/// - the screen of the duty from the bound it last started at.
///
/// The results are the same bit for bit with or without it. It costs 408 bytes of RAM per
/// channel (`size core=… memo=…` from `cargo xtask target-bench`); its gain is `tick` against
/// `tick-no-memo` there. A memo carried to another guard (a retune) is discarded, not used.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TickMemo {
    memo: Memo,
}

impl Default for TickMemo {
    fn default() -> Self {
        Self::EMPTY
    }
}

impl TickMemo {
    /// Nothing kept yet.
    pub const EMPTY: Self = Self { memo: Memo::NONE };
}

impl Memo {
    /// Nothing kept.
    const NONE: Self = Self {
        fingerprint: 0,
        model: None,
        slices: DutyFactors::empty(0),
        settled: None,
        screen: None,
    };
}

impl GuardState {
    /// The coil current estimate (nominal).
    pub const fn current(&self) -> Current {
        self.coil.current()
    }

    /// The bound of the coil current: at or above the true current for every circuit inside the
    /// declared tolerance.
    pub fn bound(&self) -> Current {
        Current::from_bits(self.bound_bits())
    }

    /// Slice `j`'s bound at the start of a period of duty `n` (raw): a turn-on meets a ringing
    /// current at most at its envelope.
    fn slice_start(&self, j: usize, n: u32) -> i64 {
        let b0 = self.bound.get(j).map_or(0, |c| c.current().working_bits());
        if n > 0 {
            b0.max(self.envelope.current().working_bits())
        } else {
            b0
        }
    }

    /// The largest slice bound, or the ring's envelope if larger, raw.
    fn bound_bits(&self) -> i64 {
        self.bound
            .iter()
            .map(|b| b.current().working_bits())
            .fold(self.envelope.current().working_bits(), i64::max)
    }

    /// The winding thermal image.
    pub const fn coil_heat(&self) -> CoilHeat {
        self.coil_heat
    }

    /// The clamp device's thermal state.
    pub const fn clamp_heat(&self) -> ClampHeat {
        self.clamp_heat
    }

    /// Conditions active after the last call.
    pub const fn active(&self) -> Conditions {
        self.active
    }

    /// Trips latched.
    pub const fn latched(&self) -> Conditions {
        self.latched
    }

    /// The duty applied for the current period.
    pub const fn applied(&self) -> u32 {
        self.applied
    }

    /// Records that the hardware may be applying `duty` (used when a write failed).
    pub(crate) fn assume_applied(&mut self, duty: u32) {
        self.applied = duty;
    }

    /// The thermal images, to keep across a reset (see [`ThermalSnapshot`]).
    pub const fn thermal(&self) -> ThermalSnapshot {
        ThermalSnapshot {
            coil: self.coil_heat,
            clamp: self.clamp_heat,
        }
    }

    /// Starts the winding image at `heat` (a hot start).
    #[must_use]
    pub const fn with_coil_heat(mut self, heat: CoilHeat) -> Self {
        self.coil_heat = heat;
        self
    }
}

/// The validated guard: model, limits and replicas. See the module documentation.
#[derive(Debug, Clone, PartialEq, Hash)]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub struct Guard {
    model: Model,
    bound: Bound,
    ceiling: i64,
    trip: i64,
    release: i64,
    pulse_rating: Option<Energy>,
    clamp: Option<ClampReplica>,
    /// The clamp's average power limit (when no replica is configured).
    power: Option<ClampAverage>,
    coil: Option<CoilReplica>,
    policy: Policy,
    retry: Option<(u32, u8)>,
    supply_min: u32,
    supply_max: u32,
    worst_current: i64,
    period_us: u32,
    /// Resistance-ratio bound per kelvin (Q32.32) and the model's temperature (Q32.32 °C).
    stale_per_kelvin: u64,
    model_temperature: i64,
    /// The winding image's θ from which its temperature is at or above the model's, so that
    /// the stale factor is one (0 without an image).
    stale_below: u64,
    /// A 64-bit hash of the duty tables, by which a channel's [`Memo`] knows they are these.
    fingerprint: u64,
}

/// What a channel keeps of the duty it applies: the factors a period at that duty reads from
/// the tables (the nominal model's and every slice's, see
/// [`DutyFactors`](crate::tolerance::DutyFactors)) and the fingerprint of the guard they came
/// from. A drive that repeats its duty reads no table; the results are the same bit for bit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Memo {
    /// The guard's fingerprint (0: nothing kept yet).
    fingerprint: u64,
    /// The nominal model's (on, off) factors for `slices.n`, once evaluated.
    model: Option<(Decay, Decay)>,
    slices: DutyFactors,
    /// The last period at duty `slices.n`, when it left the state as it found it.
    settled: Option<Settled>,
    /// The screen of duty `slices.n` from the bound `.0` at the high supply `.1`: the rise's
    /// end and the second rise's end (raw), before the stale factor.
    screen: Option<(i64, u32, i64, i64)>,
}

/// The part of a channel's state that one period's estimate and bound read and write.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Part {
    coil: CoilState,
    bound: [CoilState; SLICES],
    envelope: CoilState,
    on_at_end: bool,
}

impl Part {
    /// Whether this is `state`'s part (compared in place, nothing copied).
    fn is_of(&self, state: &GuardState) -> bool {
        self.coil == state.coil
            && self.on_at_end == state.on_at_end
            && self.envelope == state.envelope
            && self.bound == state.bound
    }

    fn of(state: &GuardState) -> Self {
        Self {
            coil: state.coil,
            bound: state.bound,
            envelope: state.envelope,
            on_at_end: state.on_at_end,
        }
    }
}

/// What one period yields for the replicas and the decision: the estimate, the bound at its
/// start, its peak and its end (the largest slice's), the bound after it (the largest slice or
/// the ring's envelope; raw), and the off-segment's energy bound.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Period {
    est: PeriodEstimate,
    start: i64,
    peak: i64,
    end: i64,
    now: i64,
    energy: Energy,
    /// The replicas' inputs for the period: the clamp stages' targets and the winding's
    /// heating before its temperature factor.
    clamp_targets: [i64; 3],
    coil_heating: u64,
}

/// A period that left its [`Part`] of the state as it found it — a drive settled at one duty
/// and one supply reading, the fixed point of the period's map — with what it yielded. The
/// period's results are a function of the part, the duty, the supply reading and the guard
/// alone, so the same period from the same part yields the same again: a tick that finds the
/// part and the reading unchanged takes them from here instead of computing them.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Settled {
    supply: Volts,
    part: Part,
    period: Period,
}

fn amps_to_raw(model: &Model, field: Field, amps: f32) -> Result<i64, ConfigError> {
    limit_current(model.derived().full_scale, field, amps, |a| {
        model.current_from_amps(a)
    })
}

/// The largest current whose turn-off through `fall` (the bound's fall corner) at the supply
/// `v_max` stays within the pulse `rating` (the energy grows with current and with supply), by
/// bisection; configuration only.
fn pulse_ceiling(fall: &Model, rating: Energy, v_max: Volts) -> i64 {
    crate::qmath::bisect(0, Current::LIMIT.to_bits(), |i| {
        fall.turn_off_energy(Current::from_bits(i), v_max) <= rating
    })
}

/// A guard's current limit (A, positive, 10⁻⁶ ..= 2²¹ full scale) as raw current, through the
/// model's own conversion `to_current`. Shared by the low-side and the bridge guard.
pub(crate) fn limit_current(
    fs: f32,
    field: Field,
    amps: f32,
    to_current: impl Fn(f32) -> Option<Current>,
) -> Result<i64, ConfigError> {
    let a = positive(field, amps, fs * 1e-6, fs * 2_097_152.0)?;
    to_current(a).map(Current::to_bits).ok_or(ConfigError::new(
        field,
        crate::Problem::OutOfRange {
            min: fs * 1e-6,
            max: fs * 2_097_152.0,
        },
    ))
}

/// A retry's cooldown in µs and its count, validated (both guards).
pub(crate) fn retry_of(retry: Option<Retry>) -> Result<Option<(u32, u8)>, ConfigError> {
    match retry {
        Some(r) => {
            let s = positive(Field::GuardRetryCooldown, r.cooldown, 1e-6, 4000.0)?;
            Ok(Some(((f64::from(s) * 1e6) as u32, r.max_retries)))
        }
        None => Ok(None),
    }
}

/// The winding image, with the box's slowest decay and fastest rise for its events, and the
/// stale-temperature gain per kelvin (Q32) for the image's resistance factor.
fn coil_image(
    params: &Params,
    limits: &GuardLimits,
    bound: &Bound,
    d: &crate::model::Derived,
) -> Result<(Option<CoilReplica>, u64), ConfigError> {
    // The slowest decay of the box (the fall corner), or the ring's envelope, for the
    // winding image's off-events.
    let fall = f64::from(bound.fall.derived().tau_off);
    let decay_tau = if bound.has_ring() { 2.0 * fall } else { fall };
    // The fastest rise of the box, for its on-events: the rise corner, saturated where it
    // saturates.
    let tau_on = f64::from(bound.rise.derived().tau_on);
    let tau_rise = match &bound.rise.saturation {
        Some(sat) => (sat.tau_us as f64 / 4_294_967_296.0 * 1e-6).min(tau_on),
        None => tau_on,
    };
    Ok(match &limits.coil_thermal {
        Some(c) => {
            let alpha = f64::from(params.coil.temperature_coefficient);
            let t_ref = f64::from(params.coil.reference_temperature);
            let bound = alpha / (1.0 + alpha * (f64::from(c.ambient) - t_ref)).max(1e-3);
            let mut replica = CoilReplica::new(
                c,
                d.period,
                d.full_scale,
                params.coil.reference_temperature,
                params.coil.temperature_coefficient,
            )?;
            replica.set_decay(decay_tau);
            replica.set_rise(tau_rise);
            (Some(replica), crate::model::q32(bound))
        }
        None => (None, 0),
    })
}

impl Guard {
    /// Validates the drive and the limits.
    ///
    /// # Errors
    /// The first problem found, naming its field (drive fields first, then the guard's).
    pub fn new(params: &Params, limits: &GuardLimits) -> Result<Self, ConfigError> {
        let model = params.validate()?;
        let bound = Bound::new(params, &model, &limits.tolerance)?;
        let ceiling = amps_to_raw(&model, Field::GuardCurrentCeiling, limits.current_ceiling)?;
        let trip = amps_to_raw(&model, Field::GuardTripCurrent, limits.trip_current)?;
        if trip < ceiling {
            return Err(ConfigError::conflict(
                Field::GuardTripCurrent,
                Conflict::TripBelowCeiling,
            ));
        }
        let release = if limits.release_current == 0.0 {
            0
        } else {
            amps_to_raw(&model, Field::GuardReleaseCurrent, limits.release_current)?
        };
        if release >= trip {
            return Err(ConfigError::conflict(
                Field::GuardReleaseCurrent,
                Conflict::ReleaseNotBelowTrip,
            ));
        }
        if bound.ring() > 0 && release <= bound.ring() + 8 {
            return Err(ConfigError::conflict(
                Field::GuardReleaseCurrent,
                Conflict::ReleaseBelowRing,
            ));
        }
        let v_max = Volts::from_bits((f64::from(params.supply.max) * 65_536.0) as u32);
        // The highest true supply while the reading is at most the maximum.
        let v_max_hi = Volts::from_bits(bound.supply_hi(v_max.to_bits()));
        let v_min = Volts::from_bits((f64::from(params.supply.min) * 65_536.0) as u32);
        let (pulse_rating, ceiling) = match limits.clamp_pulse_energy {
            Some(j) => {
                let j = positive(Field::GuardClampPulseEnergy, j, 1e-12, 1e6)?;
                let rating = model.energy_from_joules(j).ok_or(ConfigError::new(
                    Field::GuardClampPulseEnergy,
                    crate::Problem::OutOfRange {
                        min: 1e-12,
                        max: 1e6,
                    },
                ))?;
                (
                    Some(rating),
                    ceiling.min(pulse_ceiling(&bound.fall, rating, v_max_hi)),
                )
            }
            None => (None, ceiling),
        };
        let d = *model.derived();
        let clamp = match &limits.clamp_thermal {
            Some(c) => Some(ClampReplica::new(c, d.period, d.energy_unit)?),
            None => None,
        };
        let power = match (&clamp, limits.clamp_power) {
            (Some(_), _) => None,
            (None, p) => Some(ClampAverage::new(
                p.unwrap_or(ClampPower::DEFAULT),
                d.period,
                d.energy_unit,
            )?),
        };
        let (coil, stale_per_kelvin) = coil_image(params, limits, &bound, &d)?;
        let retry = retry_of(limits.retry)?;
        // Worst-case current after a reset: the steady on-current at the maximum supply, or the
        // trip current if higher.
        let worst_current = bound.rise.on_asymptote(v_max_hi.to_bits()).max(trip);
        let model_temperature =
            crate::model::q32_signed(f64::from(params.coil.winding_temperature));
        let stale_below = coil
            .as_ref()
            .map_or(0, |c| c.colder_than(model_temperature));
        let mut guard = Self {
            fingerprint: 0,
            ceiling,
            trip,
            release,
            pulse_rating,
            clamp,
            power,
            coil,
            policy: limits.policy,
            retry,
            supply_min: v_min.to_bits(),
            supply_max: v_max.to_bits(),
            worst_current,
            period_us: (libm::round(f64::from(d.period) * 1e6) as u32).max(1),
            stale_per_kelvin,
            model_temperature,
            stale_below,
            model,
            bound,
        };
        guard.fingerprint = guard.hashed();
        Ok(guard)
    }

    /// The whole configuration hashed with the fingerprint 0 (as it is while [`Guard::new`]
    /// computes it); never 0 in practice (0 marks an empty memo).
    fn hashed(&self) -> u64 {
        let mut h = crate::qmath::Fnv::new();
        core::hash::Hash::hash(self, &mut h);
        core::hash::Hasher::finish(&h).max(1)
    }

    /// Whether the stored fingerprint is the configuration's (a guard loaded from bytes).
    #[cfg(feature = "flash")]
    pub(crate) fn fingerprint_holds(&mut self) -> bool {
        let stored = core::mem::replace(&mut self.fingerprint, 0);
        let computed = self.hashed();
        self.fingerprint = stored;
        stored == computed
    }

    /// The same limits with the model rebuilt for winding temperature `temperature` (°C).
    /// A slow call (f64, table construction) for the main loop; swap the result in between
    /// ticks. The guard's state carries over unchanged.
    ///
    /// # Errors
    /// As [`Guard::new`].
    pub fn retuned(
        params: &Params,
        limits: &GuardLimits,
        temperature: f32,
    ) -> Result<Self, ConfigError> {
        let mut p = *params;
        p.coil.winding_temperature = temperature;
        Self::new(&p, limits)
    }

    /// The model the guard runs.
    pub const fn model(&self) -> &Model {
        &self.model
    }

    /// The effective current ceiling (the lower of the configured one and the clamp's).
    pub const fn ceiling(&self) -> Current {
        Current::from_bits(self.ceiling)
    }

    /// State for a coil known to carry no current.
    pub fn start_idle(&self) -> GuardState {
        GuardState {
            coil: CoilState::idle(),
            clamp_power: Energy::ZERO,
            bound: [CoilState::idle(); SLICES],
            on_at_end: false,
            envelope: CoilState::idle(),
            clamp_heat: ClampHeat::default(),
            coil_heat: CoilHeat::default(),
            applied: 0,
            cooldown_us: 0,
            active: Conditions::NONE,
            latched: Conditions::NONE,
            retries: 0,
            dropped: false,
            limit_linger: 0,
            assumed: false,
            steady: Steady::NONE,
        }
    }

    /// Whether `memo` is for duty `n` and for this guard's tables.
    fn is_for(&self, memo: &Memo, n: u32) -> bool {
        memo.fingerprint == self.fingerprint && memo.slices.n == n
    }

    /// An empty memo for duty `n` (`n <= duty_full`): its factors are evaluated as they are
    /// asked for.
    fn fresh(&self, n: u32) -> Memo {
        Memo {
            fingerprint: self.fingerprint,
            model: None,
            slices: DutyFactors::empty(n),
            settled: None,
            screen: None,
        }
    }

    /// The memo for duty `n`: a copy of the channel's own when it is for `n`, else a fresh one.
    fn recall(&self, kept: &Memo, n: u32) -> Memo {
        if self.is_for(kept, n) {
            *kept
        } else {
            self.fresh(n)
        }
    }

    /// State after a reset, when the coil may still carry the worst-case current (the higher of
    /// the trip current and the steady on-current at the maximum supply): the output stays off
    /// for the full decay time to the release current. The assumed current raises no
    /// `overcurrent` or `clamp-pulse`; it is a belief, not an observation.
    ///
    /// The thermal images start at their worst credible state: the winding at its trip level and
    /// the clamp device at its ceiling, so `coil-overheat` and `clamp-overheat` hold the output
    /// off until they have cooled to their reset levels. A reset therefore never shortens an
    /// overload. To resume from the images as they were, save [`GuardState::thermal`] where the
    /// reset leaves it and use [`Guard::start_after_reset_restored`].
    pub fn start_after_reset(&self) -> GuardState {
        self.start_after_reset_restored(None)
    }

    /// As [`Guard::start_after_reset`], with the thermal images restored from a snapshot saved
    /// before the reset (`None`: the worst credible state). The images have cooled since, so the
    /// restored state errs hot.
    ///
    /// ```
    /// use coilward::thermal::ThermalSnapshot;
    /// use coilward::{ClampPath, CoilParams, ControlParams, Guard, GuardLimits, Params,
    ///                SupplyParams, SwitchParams};
    /// # let params = Params::new(SupplyParams::new(24.0, 18.0, 30.0), CoilParams::new(0.04, 18.0),
    /// #     SwitchParams::new(0.1, 60.0), ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.05 },
    /// #     ControlParams::new(50e-6, 3200, 2.0));
    /// let guard = Guard::new(&params, &GuardLimits::new(1.2, 1.4, 0.05))?;
    /// // Before the reset (each period, or on a brown-out warning): keep the bytes.
    /// let kept = guard.start_idle().thermal().to_bytes();
    /// // After it: memory that was never written fails the check and starts hot.
    /// let state = guard.start_after_reset_restored(ThermalSnapshot::from_bytes(&kept));
    /// # let _ = state;
    /// # Ok::<(), coilward::ConfigError>(())
    /// ```
    pub fn start_after_reset_restored(&self, saved: Option<ThermalSnapshot>) -> GuardState {
        let (coil_heat, clamp_heat) = match saved {
            Some(s) => (s.coil, s.clamp),
            None => (
                self.coil
                    .as_ref()
                    .map_or(CoilHeat::default(), CoilReplica::hot),
                self.clamp
                    .as_ref()
                    .map_or(ClampHeat::default(), ClampReplica::hot),
            ),
        };
        GuardState {
            assumed: true,
            coil_heat,
            clamp_heat,
            ..self.start_with_current(Current::from_bits(self.worst_current))
        }
    }

    /// State for a coil known to carry `current` now (e.g. measured at start-up), output off.
    pub fn start_with_current(&self, current: Current) -> GuardState {
        GuardState {
            coil: CoilState::with_current(current),
            bound: [CoilState::with_current(current); SLICES],
            // The output is off with current flowing: the switch has just opened.
            on_at_end: current.working_bits() > 0,
            ..self.start_idle()
        }
    }

    /// Clears latched trips (and the retry count). Conditions still present trip again.
    pub fn clear(&self, state: &mut GuardState) {
        state.latched = Conditions::NONE;
        state.retries = 0;
        state.cooldown_us = 0;
    }

    /// Estimated winding temperature (°C), when a winding image is configured.
    pub fn winding_temperature(&self, state: &GuardState) -> Option<I32F32> {
        self.coil.as_ref().map(|c| c.temperature(&state.coil_heat))
    }

    /// Estimated clamp-device temperature (°C), when a clamp replica is configured.
    pub fn clamp_temperature(&self, state: &GuardState) -> Option<I32F32> {
        self.clamp
            .as_ref()
            .map(|c| c.temperature(&state.clamp_heat))
    }

    /// A model temperature that keeps the protections on the safe side: the winding estimate
    /// rounded down to whole `step` kelvin (°C; `None` without a winding image).
    pub fn suggested_model_temperature(&self, state: &GuardState, step: u32) -> Option<i32> {
        let t = self.winding_temperature(state)?.to_num::<i32>();
        let step = step.max(1) as i32;
        Some(t.div_euclid(step) * step)
    }

    /// Factor (Q32.32, ≥ 1) by which currents are raised while the model is hotter than the
    /// winding estimate.
    fn stale_factor(&self, state: &GuardState) -> u64 {
        let one = 1u64 << 32;
        let Some(c) = &self.coil else {
            return one;
        };
        if state.coil_heat.theta() >= self.stale_below {
            return one;
        }
        let t = c.temperature(&state.coil_heat).to_bits();
        let gap = self.model_temperature.saturating_sub(t);
        if gap <= 0 {
            return one;
        }
        one.saturating_add(crate::qmath::mul_q32(gap as u64, self.stale_per_kelvin))
    }

    /// `i·f` for a stale factor f (Q32.32).
    fn raised(i: i64, f: u64) -> i64 {
        if f == 1 << 32 {
            return i;
        }
        crate::qmath::mul_q32(i.max(0) as u64, f).min(Current::LIMIT.to_bits() as u64) as i64
    }

    /// Whether the duty of `memo` keeps every slice's bound at or below the ceiling in the
    /// coming period, and leaves the steady duty `steady` possible in the next one (see
    /// [`Guard::steady_duty`]); if so the bound's peak in the coming period (raw), if not the
    /// first slice that does not hold. Monotone in the duty, slice by slice (every segment map
    /// of the bound is monotone in its start and length), so the duties that hold are those at
    /// or below the smallest of the slices' largest.
    fn check(
        &self,
        state: &GuardState,
        memo: &mut Memo,
        (vh, f, steady): (u32, u64, (u32, i64)),
    ) -> Result<i64, usize> {
        #[cfg(test)]
        tests::count(1);
        let n = memo.slices.n;
        let fr = self.frame(state, n, vh);
        let rise_log = SharedLog::new(None);
        let mut peak = 0;
        for j in 0..self.bound.used() {
            let factors = memo.slices.slice(&self.bound, j, self.model.duty_full);
            let (b1, v) = self.slice_at(
                state,
                (j, n, vh),
                factors,
                (Some(&fr), &rise_log),
                (f, steady),
            );
            if v > self.ceiling {
                return Err(j);
            }
            peak = peak.max(b1);
        }
        Ok(peak)
    }

    /// The off-segment's frame of a period of duty `n` from `state`.
    fn frame(&self, state: &GuardState, n: u32, vh: u32) -> OffFrame {
        let full = self.model.duty_full;
        let opened = n < full && (n > 0 || state.on_at_end);
        self.bound.off_frame(full - n, vh, opened, Unit::Count)
    }

    /// Slice `j` at duty `n` with its factors, one piece for [`Guard::check`] and the limit's
    /// search: its bound's rise in the coming period (raw), and the highest of that rise raised
    /// and, when it is at or below the ceiling, of the off-segment's peak and, for a duty above
    /// the steady one, the rise of a period at the steady duty after it (raised). The slice
    /// holds exactly when the second is at or below the ceiling. A duty at or below the steady
    /// one needs no look-ahead: from a rise at or below the ceiling, its next rise is too.
    /// `fr`: the period's off-frame when the caller shares one across slices, else it is
    /// computed here once the rise holds.
    fn slice_at(
        &self,
        state: &GuardState,
        (j, n, vh): (usize, u32, u32),
        (e_on, e_off): (Decay, Decay),
        (fr, rise_log): (Option<&OffFrame>, &SharedLog),
        (f, steady): (u64, (u32, i64)),
    ) -> (i64, i64) {
        let b = &self.bound;
        let b0 = state.slice_start(j, n);
        let b1 = b.on_slice((j, b0), (n, vh), e_on, rise_log).max(b0);
        let r1 = Self::raised(b1, f);
        if r1 > self.ceiling {
            return (b1, r1);
        }
        let own;
        let fr = if let Some(fr) = fr {
            fr
        } else {
            own = self.frame(state, n, vh);
            &own
        };
        let (off_peak, b2) = b.off_slice(j, b1, fr, e_off);
        let v = r1.max(Self::raised(off_peak, f));
        let (sn, level) = steady;
        if n <= sn {
            return (b1, v);
        }
        // Above the steady duty: the next rise at the steady duty must end at or below the
        // steady level (shifted so that the value compares with the ceiling).
        let e = crate::tolerance::on_factor(b, j, sn);
        let b3 = b.on_slice((j, b2), (sn, vh), e, rise_log);
        (
            b1,
            v.max(b3.saturating_sub(level).saturating_add(self.ceiling)),
        )
    }

    /// [`Guard::slice_at`]'s value for slice `j` alone at duty `n` (a probe of the limit's
    /// search, a sixth of a full check with six slices).
    fn slice_value(
        &self,
        state: &GuardState,
        (j, n): (usize, u32),
        vh: u32,
        (f, steady): (u64, (u32, i64)),
    ) -> i64 {
        #[cfg(test)]
        tests::count(0);
        let factors = DutyFactors::one(&self.bound, j, n, self.model.duty_full);
        let rise_log = SharedLog::new(None);
        self.slice_at(state, (j, n, vh), factors, (None, &rise_log), (f, steady))
            .1
    }

    /// Slice `j`'s steady test at duty `n` from the steady `level` (raw): a period's
    /// off-segment from the level (its peak, raised) and the next rise at the same duty (its
    /// excess over the level, shifted so that the value compares with the ceiling). When the
    /// value is at or below the ceiling, a drive held at `n` whose rise ends at or below the
    /// level keeps every later rise there (each period's map from one rise's end to the next
    /// is monotone in its start) and every off-segment's peak at or below the ceiling. Rising
    /// in `n`.
    fn steady_value(&self, (j, n): (usize, u32), (vh, f): (u32, u64), level: i64) -> i64 {
        let b = &self.bound;
        let full = self.model.duty_full;
        let (e_on, e_off) = DutyFactors::one(b, j, n, full);
        let fr = b.off_frame(full - n, vh, n > 0 && n < full, Unit::Count);
        let rise_log = SharedLog::new(None);
        let (off_peak, b2) = b.off_slice(j, level, &fr, e_off);
        let b3 = b.on_slice((j, b2), (n, vh), e_on, &rise_log);
        Self::raised(off_peak.max(level), f)
            .max(b3.saturating_sub(level).saturating_add(self.ceiling))
    }

    /// The steady level at the high supply `vh` and the stale factor `f` (raw): the ceiling
    /// less the stale factor's share and less what a turn-off's node charge adds to the peak
    /// (the same for every start, slice and length that decays), so that a rise ending there
    /// keeps its raised peak and its off-segment's at or below the ceiling; checked, and
    /// lowered by the excess when the check fails. 0 when nothing holds.
    fn steady_level(&self, vh: u32, f: u64) -> i64 {
        let c = self.ceiling;
        // c·(2 − f) <= c/f for f >= 1.
        let share = crate::qmath::mul_q32(c.max(0) as u64, f.saturating_sub(1 << 32));
        let mut y = c.saturating_sub(share.min(c.max(0) as u64) as i64);
        let full = self.model.duty_full;
        let b = &self.bound;
        let fr = b.off_frame(full - 1, vh, true, Unit::Count);
        let e = DutyFactors::one(b, 0, 1, full).1;
        for _ in 0..3 {
            let (peak, _) = b.off_slice(0, y, &fr, e);
            let excess = Self::raised(peak.max(y), f).saturating_sub(c);
            if excess <= 0 {
                return y;
            }
            y = y.saturating_sub(excess).max(0);
        }
        0
    }

    /// The steady duty and level at the high supply `vh` and the stale factor `f`: the largest
    /// duty below the full one that every slice's steady test ([`Guard::steady_value`])
    /// passes from the steady level ([`Guard::steady_level`]), so that a drive held at it whose
    /// rise ends at or below the level stays under the ceiling in every later period (0 when
    /// none passes): where [`Guard::steady_kept`] arrives, a probe a call.
    #[cfg(test)]
    fn steady_duty(&self, vh: u32, f: u64) -> (u32, i64) {
        let mut kept = Steady::NONE;
        let mut found = self.steady_kept(&mut kept, vh, f);
        for _ in 0..10_000 {
            if usize::from(kept.next) >= self.bound.used() {
                break;
            }
            found = self.steady_kept(&mut kept, vh, f);
        }
        found
    }

    /// The steady duty's inputs rounded up: the supply to 1/64 V (Q16.16), the stale factor to
    /// 2⁻¹⁶ (Q32.32).
    const fn steady_key(vh: u32, f: u64) -> (u32, u64) {
        (vh | 0x3ff, f | 0xffff)
    }

    /// The steady duty and level in use, from what the channel keeps, after one step of the
    /// search for the steady duty at `vh` and `f` rounded up ([`Guard::steady_key`], which
    /// lowers the answer, if at all, by what that much more supply or staleness costs, and
    /// lets a reading that moves by less keep what was found). At other inputs (or for another
    /// guard) the level is found again and the slices start over, the first from the duty in
    /// use. A step is one probe of one slice's steady test, so a moving supply reading never
    /// costs a whole search in one period; until the last slice is searched the duty in use
    /// may be above the steady one, which only makes the look-ahead settle less well (the
    /// coming period's check does not depend on it).
    ///
    /// Each slice searches the counts up to the one above its top (below the full duty for the
    /// first slice — a period without a turn-off adds no node charge, so the test can pass at
    /// the full duty and fail just below it —, the duty in use for the others), from the duty
    /// in use `g`: one count above it first, then, after a pass, upward by doubling steps
    /// from it, after a failure, downward by doubling steps from it, and bisection once the
    /// count it holds at and the one it fails at are both known.
    fn steady_kept(&self, kept: &mut Steady, vh: u32, f: u64) -> (u32, i64) {
        let (vq, fq) = Self::steady_key(vh, f);
        // The rounded factor's low 16 bits are all ones: the high ones say it all (saturated
        // past 65 536, where the level is 0 anyway).
        let fk = (fq >> 16).min(u64::from(u32::MAX)) as u32;
        // The low bits of the fingerprint, as a tag (truncation intended).
        let tag = self.fingerprint as u16;
        let full = self.model.duty_full;
        // The margin's unit: the power of two that puts the ceiling within 16 bits.
        let shift = 48u32.saturating_sub(self.ceiling.max(1).leading_zeros());
        if kept.tag != tag || tag == 0 || kept.vh != vq || kept.f != fk {
            let g = if kept.tag == tag && tag != 0 {
                u32::from(kept.n)
            } else {
                full / 2
            };
            let below = self
                .ceiling
                .saturating_sub(self.steady_level(vq, fq))
                .max(0);
            let unit = (1i64 << shift) - 1;
            let margin = (below.saturating_add(unit) >> shift).min(i64::from(u16::MAX));
            // duty_full <= 65 535 (validated); margin clamped to u16.
            *kept = Steady {
                tag,
                margin: margin as u16,
                vh: vq,
                f: fk,
                n: g as u16,
                next: 0,
                lo: 0,
                hi: full as u16,
            };
        }
        let level = self
            .ceiling
            .saturating_sub(i64::from(kept.margin) << shift)
            .max(0);
        let j = usize::from(kept.next);
        if j < self.bound.used() {
            self.steady_step(kept, j, (vq, fq), level);
        }
        (u32::from(kept.n), level)
    }

    /// One probe of slice `j`'s search (see [`Guard::steady_kept`]); when its bracket closes,
    /// its largest becomes the duty in use and the next slice starts below it.
    fn steady_step(&self, kept: &mut Steady, j: usize, key: (u32, u64), level: i64) {
        let g = u32::from(kept.n);
        let top = if j == 0 {
            self.model.duty_full.saturating_sub(1)
        } else {
            g
        };
        let (mut lo, mut hi) = (u32::from(kept.lo), u32::from(kept.hi));
        if lo + 1 < hi {
            let p = if lo == 0 && hi == top + 1 {
                // Nothing probed yet.
                (g + 1).min(top)
            } else if hi == top + 1 {
                // Passed only: up by doubling steps from the duty in use.
                lo + lo.saturating_sub(g).max(1)
            } else if lo == 0 {
                // Failed only: down by doubling steps from one above it.
                hi.saturating_sub((g + 1).saturating_sub(hi).max(1))
            } else {
                u32::midpoint(lo, hi)
            };
            // Inside the bracket (not `clamp`: its assertion would be a panic path).
            let p = p.max(lo + 1).min(hi - 1);
            if self.steady_value((j, p), key, level) <= self.ceiling {
                lo = p;
            } else {
                hi = p;
            }
        }
        // lo < hi <= duty_full <= 65 535; j < SLICES <= 255.
        if lo + 1 >= hi {
            kept.n = lo as u16;
            kept.next = (j + 1) as u8;
            kept.lo = 0;
            kept.hi = (lo + 1) as u16;
        } else {
            (kept.lo, kept.hi) = (lo as u16, hi as u16);
        }
    }

    /// A sufficient test for [`Guard::check`] with one slice instead of all, and an upper bound
    /// of the bound's peak in the coming period: the first slice's rise (the lowest inductance,
    /// so at or above every slice's from the same start) from the largest start, the
    /// off-segment at its highest ([`Bound::off_top`]) and the rise again at the same duty (at
    /// or above the check's look-ahead, which rises at the steady duty, shorter, if at all). Far
    /// from the ceiling it settles a period in two segments instead of three per slice; near
    /// it, it fails and the slices decide.
    /// `b0` is the bound now (the largest slice, or the ring's envelope): at or above every
    /// slice's start.
    fn screen(&self, b0: i64, memo: &mut Memo, vh: u32, f: u64) -> Option<i64> {
        let (b1, b3) = match memo.screen {
            Some((from, at, b1, b3)) if from == b0 && at == vh => (b1, b3),
            _ => {
                let n = memo.slices.n;
                let b = &self.bound;
                let (e, _) = memo.slices.slice(b, 0, self.model.duty_full);
                let rise_log = SharedLog::new(None);
                let b1 = b.on_slice((0, b0), (n, vh), e, &rise_log).max(b0);
                let b3 = b.on_slice((0, b.off_top(b1, vh)), (n, vh), e, &rise_log);
                memo.screen = Some((b0, vh, b1, b3));
                (b1, b3)
            }
        };
        (Self::raised(b3, f) <= self.ceiling).then_some(b1)
    }

    /// The requested `duty`, or the largest one below it that holds the bound under the ceiling
    /// (`check` is monotone in the duty), with its memo and the bound's peak in the coming
    /// period; duty 0 when none does. `steady`: the channel's kept steady duty.
    ///
    /// Held at the ceiling, the answer is the last duty or near it, so the search starts one
    /// count above it, with the last slice (the highest inductance, which binds the look-ahead
    /// most often) and the first (the lowest, which binds the rise): a slice failing there is
    /// searched from the last duty (two probes when that is the answer). When the last period
    /// was limited too, that comes before the request is tried (a slice failing one count above
    /// the last duty fails the request as well). (Searched from the first failing slice at the
    /// request alone, the check at its answer fails at the next slice most of the time, and
    /// each failure costs a search and a check.)
    fn limit(
        &self,
        (state, b0): (&GuardState, i64),
        (kept, steady): (&mut Memo, &mut Steady),
        duty: u32,
        vh: u32,
        f: u64,
    ) -> (u32, Option<i64>) {
        let (last, top) = (state.applied, self.bound.used().saturating_sub(1));
        let up = last + 1 < duty;
        let early = up && state.active.contains(Condition::CurrentLimit);
        // The steady duty, once a call: each call takes one step of its search.
        let mut got = None;
        if early {
            let sn = *got.get_or_insert_with(|| self.steady_kept(steady, vh, f));
            for j in [top, 0] {
                let v = self.slice_value(state, (j, last + 1), vh, (f, sn));
                if v > self.ceiling {
                    return self.search(state, kept, (vh, f, sn), (j, last + 1, Some(v), None));
                }
            }
        }
        // The requested duty: in the channel's memo when it is for that duty (a steady drive:
        // nothing copied), else in a fresh one that replaces it if the duty holds. The steady
        // duty is found only when the screen fails.
        let mut passes = |memo: &mut Memo| {
            if let Some(p) = self.screen(b0, memo, vh, f) {
                return Ok(p);
            }
            let sn = *got.get_or_insert_with(|| self.steady_kept(steady, vh, f));
            self.check(state, memo, (vh, f, sn))
        };
        let failed = if self.is_for(kept, duty) {
            match passes(kept) {
                Ok(p) => return (duty, Some(p)),
                Err(j) => j,
            }
        } else {
            let mut other = self.fresh(duty);
            match passes(&mut other) {
                Ok(p) => {
                    *kept = other;
                    return (duty, Some(p));
                }
                Err(j) => j,
            }
        };
        let sn = got.unwrap_or_else(|| self.steady_kept(steady, vh, f));
        if !up {
            return self.search(state, kept, (vh, f, sn), (failed, duty, None, None));
        }
        // One count above the last duty: the two slices (unless probed above), then the slice
        // that failed the request. When all hold, the answer rose: that slice is probed one
        // count higher and searched from there or from the request.
        let u = last + 1;
        for (k, j) in [top, 0, failed].into_iter().enumerate() {
            let seen = (k == 1 && top == 0) || (k == 2 && (failed == top || failed == 0));
            if seen || (early && (j == top || j == 0)) {
                continue;
            }
            let v = self.slice_value(state, (j, u), vh, (f, sn));
            if v > self.ceiling {
                return self.search(state, kept, (vh, f, sn), (j, u, Some(v), None));
            }
        }
        if u + 1 < duty {
            let v = self.slice_value(state, (failed, u + 1), vh, (f, sn));
            if v > self.ceiling {
                return self.search(state, kept, (vh, f, sn), (failed, u + 1, Some(v), Some(u)));
            }
            return self.search(state, kept, (vh, f, sn), (failed, duty, None, Some(u + 1)));
        }
        self.search(state, kept, (vh, f, sn), (failed, duty, None, Some(u)))
    }

    /// The limit's search from slice `failing` failing at `lo` (its value when `known`; a
    /// count below `lo` it holds at when `holds`): the slice's largest duty, then every slice
    /// checked there; a check that fails names the next slice to search, below the answer
    /// (each slice fails at most once: it holds below its largest). The check that passes
    /// proves the answer is the smallest of the slices' largest and fills the memo.
    fn search(
        &self,
        state: &GuardState,
        kept: &mut Memo,
        (vh, f, sn): (u32, u64, (u32, i64)),
        (mut failing, mut lo, mut known, mut holds): (usize, u32, Option<i64>, Option<u32>),
    ) -> (u32, Option<i64>) {
        let last = state.applied;
        let value = |j: usize, n: u32| self.slice_value(state, (j, n), vh, (f, sn));
        for _ in 0..=SLICES {
            let v = known.take().unwrap_or_else(|| value(failing, lo));
            if v <= self.ceiling {
                // The check and the probe disagree (they compute the same values): give up
                // toward the safe side.
                break;
            }
            lo = match holds.take() {
                // Failing one count above a count it holds at: that count is its largest.
                Some(h) if h + 1 == lo => h,
                h => {
                    let guess = h.unwrap_or(if last < lo {
                        last
                    } else {
                        lo.saturating_sub(1)
                    });
                    crate::qmath::largest_count_to_level(lo, v, guess, self.ceiling, |n| {
                        value(failing, n)
                    })
                }
            };
            let mut memo = self.recall(kept, lo);
            match self.check(state, &mut memo, (vh, f, sn)) {
                Ok(peak) => {
                    *kept = memo;
                    return (lo, Some(peak));
                }
                Err(j) if lo > 0 => failing = j,
                Err(_) => break,
            }
        }
        *kept = self.recall(kept, 0);
        (0, None)
    }

    /// Advances the bound over one period of duty `n`: returns its peak and end (the largest
    /// over the slices) and updates the state.
    fn advance_period(&self, state: &mut GuardState, memo: &mut Memo, vh: u32) -> (i64, i64) {
        let full = self.model.duty_full;
        let n = memo.slices.n;
        let b = &self.bound;
        // A turn-off: the switch opens inside the period, or at its start after being on.
        let opened = n < full && (n > 0 || state.on_at_end);
        let (mut peak, mut end) = (0, 0);
        let e0 = state.envelope.current().working_bits();
        let mut opened_at = 0;
        let fr = b.off_frame(full - n, vh, opened, Unit::Count);
        let rise_log = SharedLog::new(None);
        for j in 0..b.used() {
            let (e_on, e_off) = memo.slices.slice(b, j, full);
            let b0 = state.slice_start(j, n);
            let b1 = b.on_slice((j, b0), (n, vh), e_on, &rise_log);
            opened_at = opened_at.max(b1);
            let (off_peak, b2) = b.off_slice(j, b1, &fr, e_off);
            if let Some(slot) = state.bound.get_mut(j) {
                *slot = CoilState::with_current(Current::from_bits(b2));
            }
            peak = peak.max(b0).max(b1).max(off_peak);
            end = end.max(b2);
        }
        // Slots past the slices in use follow the first, so that the largest is the bound.
        let first = state.bound[0];
        for slot in state.bound.iter_mut().skip(b.used()) {
            *slot = first;
        }
        // The ring: switching on ends it (the switch shorts the node); a turn-off may start one.
        let e_on = if n > 0 { 0 } else { e0 };
        let e1 = b.ring_after_off(e_on, opened_at, full - n, vh, opened, Unit::Count);
        state.envelope = CoilState::with_current(Current::from_bits(e1));
        if opened {
            peak = peak.max(b.ring_peak(opened_at, vh));
        }
        state.on_at_end = n >= full;
        (peak.max(end).max(e1), end.max(e1))
    }

    /// Advances the bound over one event (on or off for `us` µs) with the whole box's corners:
    /// every slice continues from the largest.
    fn advance_event(&self, state: &mut GuardState, on: bool, us: u32, vh: u32) -> (i64, i64) {
        let b = &self.bound;
        let b0 = state.bound_bits();
        let e0 = state.envelope.current().working_bits();
        let opened = !on && state.on_at_end;
        let (peak, end, e1) = if on {
            let b1 = b.on_event_or_whole(b0, us, vh, Unit::Micro);
            (b1, b1, 0)
        } else {
            let bb = state
                .bound
                .iter()
                .map(|c| c.current().working_bits())
                .fold(0, i64::max);
            let (p, e) = b.off_event_or_whole(bb, us, vh, opened, Unit::Micro);
            let ring = b.ring_after_off(e0, bb, us, vh, opened, Unit::Micro);
            let rp = if opened { b.ring_peak(bb, vh) } else { 0 };
            (p.max(rp), e, ring)
        };
        state.bound = [CoilState::with_current(Current::from_bits(end)); SLICES];
        state.envelope = CoilState::with_current(Current::from_bits(e1));
        state.on_at_end = on;
        (peak.max(b0).max(end).max(e1), end.max(e1))
    }

    /// One control period. `input.duty` is the request for the coming period; the guard
    /// advances over the period just ended with the duty it applied then.
    ///
    /// ```
    /// use coilward::{ClampPath, CoilParams, ControlParams, Guard, GuardLimits, Input, Params,
    ///                SupplyParams, SwitchParams, Volts};
    /// let params = Params::new(
    ///     SupplyParams::new(24.0, 18.0, 30.0),
    ///     CoilParams::new(0.040, 18.0),
    ///     SwitchParams::new(0.1, 60.0),
    ///     ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.05 },
    ///     ControlParams::new(50e-6, 3200, 2.0),
    /// );
    /// let guard = Guard::new(&params, &GuardLimits::new(1.0, 1.2, 0.05))?;
    /// let mut state = guard.start_idle();
    /// let mut limited = 0;
    /// for _ in 0..400 {
    ///     // Full duty requested: it would reach 1.33 A.
    ///     let out = guard.tick(&mut state, Input::new(3200, Volts::from_num(24)));
    ///     assert!(out.predicted_peak <= guard.ceiling()); // never above the 1 A ceiling
    ///     if out.active.contains(coilward::Condition::CurrentLimit) {
    ///         limited += 1;
    ///     }
    /// }
    /// assert!(limited > 100);
    /// # Ok::<(), coilward::ConfigError>(())
    /// ```
    pub fn tick(&self, state: &mut GuardState, input: Input) -> Output {
        // A memo for the duty being advanced over, used for this call alone (no settled period
        // is stored in it).
        let mut fresh = self.fresh(state.applied.min(self.model.duty_full));
        self.tick_in(state, &mut fresh, input, false)
    }

    /// [`Guard::tick`] with the channel's [`TickMemo`]: the same result bit for bit; a duty
    /// repeated from the period before reads no table, and a drive settled at one duty and one
    /// supply reading computes no period. Keep one memo per channel beside its state (a memo
    /// from another guard is ignored and replaced). A supply reading that moves every period
    /// (an unfiltered ADC's last bits) never settles: filter it before the call to keep the
    /// settled path (a filter's lag or a coarser step belongs in the supply reading's declared
    /// tolerance, [`crate::Tolerance::with_supply_reading`]).
    ///
    /// ```
    /// # use coilward::{ClampPath, CoilParams, ControlParams, Guard, GuardLimits, Input, Params,
    /// #                SupplyParams, SwitchParams, TickMemo, Volts};
    /// # let params = Params::new(SupplyParams::new(24.0, 18.0, 30.0), CoilParams::new(0.04, 18.0),
    /// #     SwitchParams::new(0.1, 60.0), ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.05 },
    /// #     ControlParams::new(50e-6, 3200, 2.0));
    /// let guard = Guard::new(&params, &GuardLimits::new(1.0, 1.2, 0.05))?;
    /// let (mut state, mut memo) = (guard.start_idle(), TickMemo::EMPTY);
    /// let mut plain = guard.start_idle();
    /// // Long enough to settle (about 28 time constants of 2.2 ms).
    /// for _ in 0..2000 {
    ///     let input = Input::new(1600, Volts::from_num(24));
    ///     assert_eq!(guard.tick_with(&mut state, &mut memo, input), guard.tick(&mut plain, input));
    /// }
    /// # Ok::<(), coilward::ConfigError>(())
    /// ```
    pub fn tick_with(&self, state: &mut GuardState, kept: &mut TickMemo, input: Input) -> Output {
        self.tick_in(state, &mut kept.memo, input, true)
    }

    /// A tick with `memo`; `keep`: the memo outlives the call, so a settled period is stored.
    fn tick_in(&self, state: &mut GuardState, memo: &mut Memo, input: Input, keep: bool) -> Output {
        let m = &self.model;
        let vs = m.supply(input.supply);
        let n_full = m.duty_full;
        // 1. The period just ended.
        let was = state.applied.min(n_full);
        if !self.is_for(memo, was) {
            *memo = self.fresh(was);
        }
        let vh = self.bound.supply_hi(vs);
        let p = match &memo.settled {
            Some(k) if k.supply == input.supply && k.part.is_of(state) => k.period,
            _ => self.period(state, memo, (input.supply, vh), keep),
        };
        let energy = p.energy;
        // 2. Replicas, fed by the bound.
        if let Some(c) = &self.clamp {
            c.period_toward(&mut state.clamp_heat, &p.clamp_targets);
        }
        if let Some(w) = &self.power {
            state.clamp_power = w.period(state.clamp_power, energy);
        }
        if let Some(c) = &self.coil {
            c.period_gained(&mut state.coil_heat, p.coil_heating);
        }
        // Retry cooldown runs in real time.
        state.cooldown_us = state.cooldown_us.saturating_sub(self.period_us);
        let request = input.duty.min(n_full);
        self.decide(
            state,
            p.est,
            (vs, vh),
            request,
            (energy, p.now, p.peak),
            Some(memo),
        )
    }

    /// The clamp's energy bound for the off-segment of a period of duty `was` whose bound peaked
    /// at `peak` and ended at `end` (raw): the whole turn-off when the bound decayed from above
    /// its floor to it (a release), else the chord bound (the bound's decay is convex, so the
    /// chord from its peak to its end lies above it and above every true current; a bound
    /// resting at its floor costs no logarithm). It always has a consumer: the clamp replica,
    /// or else the average-power watch.
    fn off_energy(&self, was: u32, (peak, end): (i64, i64), vh: u32) -> Energy {
        let n_full = self.model.duty_full;
        if was >= n_full {
            return Energy::ZERO;
        }
        let f = &self.bound.fall;
        let floor = self.bound.ring() + 2;
        if end <= floor && peak > floor {
            f.turn_off_energy(Current::from_bits(peak), Volts::from_bits(vh))
        } else {
            f.off_segment_energy_bound(
                Current::from_bits(peak),
                Current::from_bits(end),
                n_full - was,
            )
        }
    }

    /// The period just ended at the memo's duty (`n <= duty_full`), computed: the estimate's
    /// step, the bound's advance and the off-segment's energy. Kept in the memo as settled when
    /// it left the state's [`Part`] as it found it (`keep`: the memo outlives the call).
    fn period(
        &self,
        state: &mut GuardState,
        memo: &mut Memo,
        (supply, vh): (Volts, u32),
        keep: bool,
    ) -> Period {
        let m = &self.model;
        let was = memo.slices.n;
        let before = keep.then(|| Part::of(state));
        let factors = *memo.model.get_or_insert_with(|| m.duty_factors(was));
        let est = m.step_with(&mut state.coil, was, supply, factors);
        let start = state.bound_bits();
        let (peak, end) = self.advance_period(state, memo, vh);
        let energy = self.off_energy(was, (peak, end), vh);
        let p = Period {
            est,
            start,
            peak,
            end,
            now: state.bound_bits(),
            energy,
            clamp_targets: self.clamp.as_ref().map_or([0; 3], |c| c.targets(energy)),
            coil_heating: self.coil.as_ref().map_or(0, |c| {
                c.gained(Current::from_bits(peak), Current::from_bits(start.min(end)))
            }),
        };
        memo.settled = match before {
            Some(part) if part.is_of(state) => Some(Settled {
                supply,
                part,
                period: p,
            }),
            _ => None,
        };
        p
    }

    /// One on/off event: the output held its previous state for `elapsed_us` µs (pass the
    /// wrapping difference of two free-running timer readings); `request_on` is wanted from now.
    ///
    /// In event mode the ceiling cannot shorten an on-time that has already started, so a turn-on
    /// is refused (`current-limit`) when the bound is at or above the ceiling.
    ///
    /// # Timing contract
    /// The guard sees the load only when it is called. With the output on, call again within
    /// [`Output::next_check_us`]: the earlier of the time the current could reach the ceiling
    /// and the time the winding image could reach its trip. Called that way, a load left on
    /// trips at the thermal image's time whatever the spacing of the real events. An on-event is
    /// heated by the closed-form `∫i²` of the exponential that bounds its current from above
    /// and an off-event cools exponentially (with the decay's own small heating), so the image
    /// never runs cool.
    pub fn event(
        &self,
        state: &mut GuardState,
        request_on: bool,
        elapsed_us: u32,
        supply: Volts,
    ) -> Output {
        let m = &self.model;
        let vs = m.supply(supply);
        let was_on = state.applied > 0;
        let est = m.advance(&mut state.coil, was_on, elapsed_us, supply);
        let vh = self.bound.supply_hi(vs);
        let b_start = state.bound_bits();
        let (b_peak, b_end) = self.advance_event(state, was_on, elapsed_us, vh);
        let energy = if was_on {
            Energy::ZERO
        } else {
            let f = &self.bound.fall;
            let v = Volts::from_bits(vh);
            let full = f.turn_off_energy(Current::from_bits(b_peak), v);
            let left = if b_end <= self.bound.ring() + 2 {
                Energy::ZERO
            } else {
                f.turn_off_energy(Current::from_bits(b_end), v)
            };
            Energy::from_bits(full.to_bits().saturating_sub(left.to_bits()))
        };
        if let Some(c) = &self.clamp {
            c.event(&mut state.clamp_heat, energy, elapsed_us);
        }
        if let Some(w) = &self.power {
            state.clamp_power = w.event(state.clamp_power, energy, elapsed_us);
        }
        if let Some(c) = &self.coil {
            if was_on {
                let top = self.bound.rise.on_asymptote(vh);
                c.event_on(
                    &mut state.coil_heat,
                    Current::from_bits(b_start),
                    Current::from_bits(top),
                    elapsed_us,
                );
            } else {
                c.event_off(
                    &mut state.coil_heat,
                    Current::from_bits(b_start),
                    elapsed_us,
                );
            }
        }
        state.cooldown_us = state.cooldown_us.saturating_sub(elapsed_us);
        let request = if request_on { m.duty_full } else { 0 };
        let b_now = state.bound_bits();
        self.decide(state, est, (vs, vh), request, (energy, b_now, b_peak), None)
    }

    /// Time from the present estimate until the on-current would reach the ceiling, µs
    /// (`None`: it never will at this supply). `τ_on·ln((A_on − i)/(A_on − C))`.
    pub fn on_time_to_ceiling_us(&self, state: &GuardState, supply: Volts) -> Option<u32> {
        let r = &self.bound.rise;
        let a = r.on_asymptote(self.bound.supply_hi(r.supply(supply)));
        let i = Self::raised(state.bound_bits(), self.stale_factor(state));
        if a <= self.ceiling {
            return None;
        }
        if i >= self.ceiling {
            return Some(0);
        }
        let ln = ln_ratio((a - i) as u64, (a - self.ceiling) as u64);
        // Rounded down: an event scheduled at this time finds the current at most at the ceiling.
        // A saturating coil: the saturated time constant, the shorter one, throughout.
        let tau = match &r.saturation {
            Some(s) if self.ceiling > s.at => s.tau_us,
            _ => r.tau_on_us,
        };
        let t = crate::clamp::time_q64(ln, tau) >> 64;
        Some(t.min(u128::from(u32::MAX)) as u32)
    }

    /// The earlier of the time to the ceiling and the winding image's time to trip, with the
    /// output on at the high supply `vh` (event mode).
    fn next_check_us(&self, state: &GuardState, vh: Volts) -> Option<u32> {
        let r = &self.bound.rise;
        let ceiling = self.on_time_to_ceiling_us(state, vh);
        let heat = self.coil.as_ref().and_then(|c| {
            let top = Current::from_bits(r.on_asymptote(r.supply(vh)).max(0));
            c.time_to_trip_us(&state.coil_heat, top)
        });
        match (ceiling, heat) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        }
    }

    /// The conditions present now and their actions (`hold`: an action holds the output off;
    /// trips are latched in the state): the supply window, the trip level, the clamp's pulse,
    /// temperature and average power, and the winding image. An assumed current (after a reset)
    /// stops being one once the bound is at the release level.
    fn conditions(
        &self,
        state: &mut GuardState,
        vs: u32,
        (i_now, i_peak): (i64, i64),
        energy: Energy,
        prev: Conditions,
    ) -> (Conditions, bool) {
        let pol = self.policy;
        let mut found = crate::condition::Found::new(&mut state.latched);
        found.supply(
            vs,
            (self.supply_min, self.supply_max),
            (pol.supply_low, pol.supply_high),
        );
        if state.assumed && i_now <= self.release {
            state.assumed = false;
        }
        let observed = !state.assumed;
        found.raise(
            observed && i_now.max(i_peak) > self.trip,
            Condition::Overcurrent,
            pol.overcurrent,
        );
        // Clamp pulse: the off-segment just ended, and any turn-off about to be commanded below.
        found.raise(
            observed && self.pulse_rating.is_some_and(|r| energy > r),
            Condition::ClampPulse,
            pol.clamp_pulse,
        );
        // Clamp device temperature, with hysteresis.
        found.raise(
            self.clamp.as_ref().is_some_and(|c| {
                c.over_ceiling(&state.clamp_heat)
                    || (prev.contains(Condition::ClampOverheat) && !c.cooled(&state.clamp_heat))
            }),
            Condition::ClampOverheat,
            pol.clamp_overheat,
        );
        // Clamp average power (no replica configured).
        found.raise(
            self.power
                .as_ref()
                .is_some_and(|w| w.over(state.clamp_power)),
            Condition::ClampPower,
            pol.clamp_power,
        );
        found.winding(self.coil.as_ref(), state.coil_heat, prev, pol.coil_overheat);
        found.done()
    }

    /// Trips are latched until cleared, or retried once every latched condition has been gone
    /// for the whole cooldown (the cooldown restarts while any of them is still present).
    fn retry_latched(&self, state: &mut GuardState, active: Conditions) {
        if let Some(r) = self.retry {
            let counters = (&mut state.cooldown_us, &mut state.retries);
            crate::condition::retry_latched(&mut state.latched, active, counters, r);
        }
    }

    /// The request after the holds: a latch or a holding action, a dropped request (until the
    /// request goes to zero), and the release interval (a turn-on from off waits for the decay,
    /// whose remaining time is returned).
    fn held(
        &self,
        state: &mut GuardState,
        (request, hold): (u32, bool),
        (i_now, vh): (i64, u32),
        active: &mut Conditions,
    ) -> (u32, Option<u32>) {
        let pol = self.policy;
        let mut duty = request;
        let mut release_in = None;
        if !state.latched.is_empty() || hold {
            duty = 0;
        }
        // A dropped request waits for the request to go to zero.
        if request == 0 {
            state.dropped = false;
        }
        if duty > 0 && state.dropped {
            duty = 0;
            active.insert(Condition::ReleaseHold);
        }
        // Release interval: a turn-on from off waits for the decay.
        if duty > 0 && state.applied == 0 && i_now > self.release {
            duty = 0;
            active.insert(Condition::ReleaseHold);
            if pol.held_request == HeldRequest::Drop {
                state.dropped = true;
            }
            let decay = self.bound.fall.decay_time_us(
                Current::from_bits(i_now),
                Current::from_bits(self.release),
                Volts::from_bits(vh),
            );
            let ring = self
                .bound
                .ring_time_us(state.envelope.current().working_bits(), self.release);
            release_in = decay.zip(ring).map(|(a, b)| a.max(b));
        }
        (duty, release_in)
    }

    /// Conditions, actions and the duty for the coming period.
    fn decide(
        &self,
        state: &mut GuardState,
        est: PeriodEstimate,
        (vs, vh): (u32, u32),
        request: u32,
        (energy, i0, b_peak): (Energy, i64, i64),
        memo: Option<&mut Memo>,
    ) -> Output {
        // PWM (a tick, with the duty's memo) or an event.
        let pwm = memo.is_some();
        let f = self.stale_factor(state);
        // `i0`: the bound now, after the period or event (decide changes no slice).
        let i_now = Self::raised(i0, f);
        let i_peak = Self::raised(b_peak, f);
        let prev = state.active;
        let (mut active, hold) = self.conditions(state, vs, (i_now, i_peak), energy, prev);
        self.retry_latched(state, active);
        let (mut duty, release_in) = self.held(state, (request, hold), (i_now, vh), &mut active);
        // Ceiling.
        let mut predicted = i0;
        if duty > 0 {
            if let Some(kept) = memo {
                let mut steady = state.steady;
                let (limited, peak) = self.limit((state, i0), (kept, &mut steady), duty, vh, f);
                state.steady = steady;
                if limited != duty {
                    duty = limited;
                    active.insert(Condition::CurrentLimit);
                }
                predicted = peak.unwrap_or(i0);
            } else if i_now >= self.ceiling {
                duty = 0;
                active.insert(Condition::CurrentLimit);
            }
        }
        if active.contains(Condition::CurrentLimit) {
            state.limit_linger = LIMIT_LINGER;
        } else if state.limit_linger > 0 {
            state.limit_linger -= 1;
            active.insert(Condition::CurrentLimit);
        }
        // A commanded turn-off (from on to off) against the single-pulse rating.
        if duty == 0
            && state.applied > 0
            && let Some(r) = self.pulse_rating
            && self
                .bound
                .fall
                .turn_off_energy(Current::from_bits(i_now), Volts::from_bits(vh))
                > r
        {
            active.insert(Condition::ClampPulse);
            if self.policy.clamp_pulse == Action::Trip {
                state.latched.insert(Condition::ClampPulse);
            }
        }
        active = active.union(state.latched);

        state.applied = duty;
        state.active = active;
        Output {
            duty,
            active,
            raised: active.minus(prev),
            cleared: prev.minus(active),
            latched: state.latched,
            estimate: est,
            predicted_peak: Current::from_bits(predicted),
            bound: Current::from_bits(i0),
            next_check_us: if !pwm && duty > 0 {
                self.next_check_us(state, Volts::from_bits(vh))
            } else {
                None
            },
            release_in_us: release_in,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::params::SwitchParams;

    std::thread_local! {
        /// The limit's slice probes and whole-period checks on this thread.
        static EVALUATIONS: core::cell::Cell<[u32; 2]> = const { core::cell::Cell::new([0; 2]) };
    }

    /// Counts a slice probe (0) or a whole-period check (1).
    pub(super) fn count(k: usize) {
        EVALUATIONS.with(|c| {
            let mut v = c.get();
            v[k & 1] += 1;
            c.set(v);
        });
    }

    /// The limit's search costs a few slice probes and checks a limiting period, and the
    /// limited duty settles: the valve of the golden trace (saturating, 470 pF, switch clamp,
    /// six slices) asked for full duty for 4 000 periods from rest (`cargo xtask
    /// target-profile tick-limit` shows the instructions following them). Prints the means and
    /// the spread of the limited duty over the last 400 limiting periods; the bounds are
    /// today's figures rounded up. (With a look-ahead of one period at the same duty instead
    /// of the steady duty, and half steps while rising, this drive swung 2138 ↔ 2701 counts
    /// in a cycle of four periods, at 6.28 probes and 2.83 checks a period.)
    #[test]
    fn limiting_takes_few_evaluations() {
        let g = hard_guard(CLAMPS[1], 20.0);
        let mut s = g.start_idle();
        let (mut periods, mut probes, mut checks, mut most) = (0u32, 0u32, 0u32, 0u32);
        let mut duties = std::vec::Vec::new();
        for _ in 0..4000 {
            EVALUATIONS.with(|c| c.set([0; 2]));
            let o = g.tick(&mut s, Input::new(3200, Volts::from_num(24)));
            let [p, c] = EVALUATIONS.with(core::cell::Cell::get);
            // Every probe and check counts, also those of a period that turns out not to limit.
            probes += p;
            checks += c;
            most = most.max(p + 4 * c);
            if o.duty < 3200 && o.duty > 0 {
                periods += 1;
                duties.push(o.duty);
            }
        }
        let (mp, mc) = (
            f64::from(probes) / f64::from(periods),
            f64::from(checks) / f64::from(periods),
        );
        let settled = &duties[duties.len().saturating_sub(400)..];
        let lo = settled.iter().copied().min().unwrap_or(0);
        let hi = settled.iter().copied().max().unwrap_or(0);
        std::println!(
            "limiting periods {periods}: {mp:.2} probes and {mc:.2} checks each; at most {most} probes + 4 x checks; last 400 limited to {lo} ..= {hi} of 3200"
        );
        assert!(periods > 1000, "the drive must limit most of the time");
        assert!(mp <= 2.5 && mc <= 1.15, "{mp:.2} probes, {mc:.2} checks");
        assert!(hi - lo <= 2 && lo > 2000, "{lo} ..= {hi}");
    }

    /// A slice of valve drives held at the steady duty from rest is never limited: the steady
    /// duty keeps every later period under the ceiling (the property the limit's look-ahead
    /// relies on), at any supply in the range, with either clamp path.
    #[test]
    fn the_steady_duty_is_never_limited() {
        for clamp in CLAMPS {
            let g = hard_guard(clamp, 20.0);
            for volts in [18.0, 21.0, 24.0, 27.0, 30.0] {
                let vs = Volts::from_num(volts);
                let vh = g.bound.supply_hi(g.model.supply(vs));
                let (sn, level) = g.steady_duty(vh, g.stale_factor(&g.start_idle()));
                assert!(sn > 0 && level > 0 && level <= g.ceiling, "{sn} {level}");
                let mut s = g.start_idle();
                let mut peak = Current::ZERO;
                for k in 0..3000 {
                    let o = g.tick(&mut s, Input::new(sn, vs));
                    assert!(
                        !o.active.contains(Condition::CurrentLimit),
                        "{volts} V: steady duty {sn} limited at period {k}: {o:?}"
                    );
                    peak = peak.max(o.predicted_peak);
                }
                std::println!(
                    "{volts} V: steady duty {sn} of 3200, predicted peak {:.4} A under {:.4} A",
                    g.model().amps(peak),
                    g.model().amps(g.ceiling())
                );
                assert!(peak <= g.ceiling());
            }
        }
    }

    use crate::params::{ClampPath, CoilParams, ControlParams, Saturation, SupplyParams};

    /// A valve that exercises every part of the bound: saturating, 470 pF at its node, a
    /// declared tolerance (six slices), both clamp paths.
    fn hard_guard(clamp: ClampPath, temperature: f32) -> Guard {
        let mut coil = CoilParams::new(0.040, 18.0).with_saturation(Saturation::new(0.9, 0.012));
        coil.node_capacitance = Some(470e-12);
        coil.winding_temperature = temperature;
        let p = Params::new(
            SupplyParams::new(24.0, 18.0, 30.0),
            coil,
            SwitchParams::new(0.1, 60.0),
            clamp,
            ControlParams::new(50e-6, 3200, 2.0),
        );
        let l = GuardLimits::new(1.1, 1.3, 0.05).with_tolerance(
            Tolerance::EXACT
                .with_inductance(0.2)
                .with_resistance(0.1)
                .with_supply_reading(0.02)
                .with_node_capacitance(0.5)
                .with_saturation(0.1, 0.2),
        );
        Guard::new(&p, &l).expect("valid guard")
    }

    const CLAMPS: [ClampPath; 2] = [
        ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05,
        },
        ClampPath::SwitchClamp {
            clamp_voltage: 45.0,
            resistance: 0.5,
        },
    ];

    /// The memo's size as [`TickMemo`]'s documentation states it.
    #[test]
    fn the_memo_is_the_size_documented() {
        assert_eq!(core::mem::size_of::<TickMemo>(), 408);
    }

    /// A drive held at one duty and one supply reading reaches the fixed point of its period
    /// (about 28 time constants: the error shrinks below the current's last bit), after which
    /// the tick takes the period from the memo; a reading one count away computes it again.
    #[test]
    fn a_held_drive_settles() {
        let g = hard_guard(
            ClampPath::Freewheel {
                forward_drop: 0.7,
                resistance: 0.05,
            },
            20.0,
        );
        let (mut s, mut memo) = (g.start_idle(), TickMemo::EMPTY);
        let vs = Volts::from_num(24);
        let first = (0..3000).find(|_| {
            g.tick_with(&mut s, &mut memo, Input::new(1760, vs));
            memo.memo.settled.is_some()
        });
        assert!(
            matches!(first, Some(k) if k > 100),
            "settled after {first:?} ticks"
        );
        let out = g.tick_with(&mut s, &mut memo, Input::new(1760, vs));
        assert_eq!(out.duty, 1760);
        assert!(memo.memo.settled.is_some());
        let other = Volts::from_bits(vs.to_bits() + 1);
        g.tick_with(&mut s, &mut memo, Input::new(1760, other));
        assert!(memo.memo.settled.is_none_or(|k| k.supply == other));
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]

        /// The memo changes no result: a channel that keeps it and one that forgets it before
        /// every tick give the same outputs and states, bit for bit, also across a guard
        /// retuned to another winding temperature (other tables, so another fingerprint).
        #[test]
        fn the_memo_changes_no_result(
            clamp in 0usize..2,
            steps in proptest::collection::vec((0u32..3400, 0u32..4, 16.0f32..32.0), 1..120),
        ) {
            let a = hard_guard(CLAMPS[clamp % 2], 20.0);
            let b = hard_guard(CLAMPS[clamp % 2], 60.0);
            proptest::prop_assert_ne!(a.fingerprint, b.fingerprint);
            let (mut kept, mut memo) = (a.start_idle(), TickMemo::EMPTY);
            let mut forgot = a.start_idle();
            for (k, &(request, hold, supply)) in steps.iter().enumerate() {
                // The request repeats for a while (the memo's case) and then moves.
                let duty = request - request % 64 + hold;
                let g = if k < steps.len() / 2 { &a } else { &b };
                let input = Input::new(duty, Volts::from_num(supply));
                let x = g.tick_with(&mut kept, &mut memo, input);
                let y = g.tick(&mut forgot, input);
                proptest::prop_assert_eq!(x, y);
                proptest::prop_assert_eq!(kept, forgot);
            }
        }

        /// A settled period taken from the memo is the period computed: drives held long
        /// enough to settle (a duty and a supply reading kept for hundreds of periods, then
        /// moved by as little as one count; about half the cases settle in some stretch) give
        /// the same outputs and states with the memo as without, bit for bit.
        #[test]
        fn a_settled_period_is_the_period_computed(
            clamp in 0usize..2,
            stretches in proptest::collection::vec((0u32..3300, 0u32..3, 50usize..600), 1..6),
        ) {
            let g = hard_guard(CLAMPS[clamp % 2], 20.0);
            let (mut kept, mut memo) = (g.start_idle(), TickMemo::EMPTY);
            let mut forgot = g.start_idle();
            for &(duty, supply, len) in &stretches {
                let input = Input::new(duty, Volts::from_bits((24 << 16) + supply));
                for _ in 0..len {
                    let x = g.tick_with(&mut kept, &mut memo, input);
                    let y = g.tick(&mut forgot, input);
                    proptest::prop_assert_eq!(x, y);
                    proptest::prop_assert_eq!(kept, forgot);
                }
            }
        }

        /// The limit's search slice by slice finds what a scan of every duty with every slice
        /// finds: the largest duty at or below the request that holds, with the slices' peak
        /// when it limits; and it keeps the steady duty it found.
        #[test]
        fn the_limit_is_the_largest_duty_that_holds(
            clamp in 0usize..2,
            pushed in 0u32..3000,
            steps in proptest::collection::vec((0u32..3400, 16.0f32..32.0), 1..8),
            request in 1600u32..3201,
        ) {
            let g = hard_guard(CLAMPS[clamp % 2], 20.0);
            let mut s = g.start_idle();
            // Driven hard for a while, so the request meets the ceiling in most cases.
            for _ in 0..pushed {
                g.tick(&mut s, Input::new(3200, Volts::from_num(24)));
            }
            for &(duty, supply) in &steps {
                g.tick(&mut s, Input::new(duty, Volts::from_num(supply)));
            }
            let vs = Volts::from_num(steps.last().map_or(24.0, |x| x.1));
            let vh = g.bound.supply_hi(g.model.supply(vs));
            let f = g.stale_factor(&s);
            // What the limit's one step of the steady duty's search finds from nothing kept.
            let mut fresh = Steady::NONE;
            let sn = g.steady_kept(&mut fresh, vh, f);
            let holds = |n: u32| g.check(&s, &mut g.recall(&Memo::NONE, n), (vh, f, sn));
            let expected = (0..=request).rev().find(|&n| holds(n).is_ok()).unwrap_or(0);
            let (mut memo, mut kept) = (Memo::NONE, Steady::NONE);
            let (duty, peak) =
                g.limit((&s, s.bound_bits()), (&mut memo, &mut kept), request, vh, f);
            proptest::prop_assert_eq!(duty, expected);
            proptest::prop_assert!(kept.tag == 0 || kept == fresh);
            // A request that holds may take the screen's peak (an upper bound); a limited
            // duty takes the slices'.
            if expected < request {
                proptest::prop_assert_eq!(peak, holds(expected).ok());
            }
        }

        /// The steady duty, searched a slice a call from the duty found at another supply, is
        /// the largest duty below the full one that every slice's steady test passes, whatever
        /// was found before: every slice passes at it, one fails a count above, and a duty
        /// picked at random below the full one passes exactly when it is at or below it (the
        /// tests are monotone in the duty there).
        #[test]
        fn the_steady_duty_is_the_largest_every_slice_passes(
            clamp in 0usize..2,
            before in 16.0f32..32.0,
            supply in 16.0f32..32.0,
            probe in 0u32..3200,
        ) {
            let g = hard_guard(CLAMPS[clamp % 2], 20.0);
            let f = 1u64 << 32;
            let vh_of = |v: f32| g.bound.supply_hi(g.model.supply(Volts::from_num(v)));
            // Searched to the end at one supply, then at another; the probes a search takes.
            let settle = |kept: &mut Steady, v: f32| {
                let mut calls = 0u32;
                let mut found = g.steady_kept(kept, vh_of(v), f);
                while usize::from(kept.next) < g.bound.used() && calls < 10_000 {
                    found = g.steady_kept(kept, vh_of(v), f);
                    calls += 1;
                }
                (found, calls + 1)
            };
            let mut kept = Steady::NONE;
            settle(&mut kept, before);
            let (found, calls) = settle(&mut kept, supply);
            proptest::prop_assert!(calls <= 200, "{calls} calls");
            proptest::prop_assert_eq!(found, g.steady_duty(vh_of(supply), f));
            let (n, level) = found;
            let (vq, fq) = Guard::steady_key(vh_of(supply), f);
            let passes = |m: u32| {
                (0..g.bound.used()).all(|j| g.steady_value((j, m), (vq, fq), level) <= g.ceiling)
            };
            proptest::prop_assert!(passes(n), "{n}");
            proptest::prop_assert!(n == 3199 || !passes(n + 1), "{n}");
            let probe = probe.min(3199);
            proptest::prop_assert_eq!(passes(probe), probe <= n, "{} against {}", probe, n);
        }

        /// The screen is sufficient and its peak is an upper bound: whenever it passes a duty,
        /// the slices pass it too, with a peak at or below the screen's.
        #[test]
        fn the_screen_never_passes_what_the_slices_refuse(
            clamp in 0usize..2,
            steps in proptest::collection::vec((0u32..3400, 16.0f32..32.0), 1..60),
            probe in 0u32..3201,
        ) {
            let g = hard_guard(CLAMPS[clamp % 2], 20.0);
            let mut s = g.start_idle();
            for &(duty, supply) in &steps {
                g.tick(&mut s, Input::new(duty, Volts::from_num(supply)));
                let vh = g.bound.supply_hi(g.model.supply(Volts::from_num(supply)));
                let f = g.stale_factor(&s);
                let mut memo = g.recall(&Memo::NONE, probe);
                if let Some(p) = g.screen(s.bound_bits(), &mut memo, vh, f) {
                    let q = g.check(&s, &mut memo, (vh, f, g.steady_duty(vh, f)));
                    proptest::prop_assert!(q.is_ok(), "the screen passed {probe}, the slices did not");
                    proptest::prop_assert!(q.unwrap_or(i64::MAX) <= p, "{q:?} > {p}");
                }
            }
        }
    }
}
