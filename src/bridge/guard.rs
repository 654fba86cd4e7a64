//! The bridge guard: the reversal interlock, the current ceiling, the trip, the supply window
//! and the returned-charge tracker, once per control period.
//!
//! # Protections
//! - **Reversal interlock** (`reversal-hold`): a request in the other direction than the last
//!   drive is held (output off) until the current magnitude is at or below the release current
//!   and then, with the output still off, for the configured dead time, counted from the end of
//!   the period in which the bound (at or above the true magnitude) reached the release level,
//!   so the gap after the true current's crossing is never shorter than configured (it may be
//!   up to one period longer). While it holds, the off part is fast decay whatever the
//!   configured mode (slow decay
//!   would keep a braking current flowing as long as a motor turns), unless `supply-pump` asks
//!   for recirculation. Driving again in the same direction is ordinary
//!   PWM and is not held. After a reset the direction of a possible current is unknown, so
//!   both directions wait.
//! - **Current ceiling** (`current-limit`): the drive part's predicted peak magnitude must stay
//!   at or below the ceiling; otherwise the largest duty that satisfies it is found by
//!   bisection over the counts (at most 16 table evaluations).
//! - **Trip** (`overcurrent`): the current magnitude (now or at the period's extreme) above the
//!   trip current.
//! - **Supply window** (`supply-range`): as for the low-side guard.
//! - **Returned charge** (`supply-pump`, with a bus configured): the charge on the bulk
//!   capacitance above its resting level is tracked per period in the period's order: the
//!   drive part draws first (`q ← max(0, q − drawn)`, the supply sourcing the rest), then the
//!   fast part returns (`q ← q + max(0, returned − I_sink·t_fast)`), with the supply taken as
//!   stiff for the coil (a rising bus returns less, so `q` can only be overstated). Before a
//!   plan is applied, the charge it would return — the coil's current decaying against the
//!   bus, with whatever the back-EMF of a turning rotor adds — is predicted the same way; when
//!   it would take `q` past the headroom `C·(V_max − V_nom)` the condition is raised (it stays
//!   until `q` is back below half of that) and the default response returns nothing: the off
//!   part recirculates (slow decay), with the largest drive that keeps the period under the
//!   ceiling, and no drive at all when recirculation alone passes it (plug braking on a
//!   turning rotor). When no plan keeps both the bus and the ceiling the bus comes first — a
//!   rail past the switches' breakdown destroys them — and `current-limit` says the ceiling
//!   yielded; the trip still guards the current. The firmware should give the guard the
//!   measured bus as its supply, so that `supply-range` sees a rise too. Validation refuses a
//!   breakdown that fast decay at the maximum supply would reach.

//! # Panics
//! None: inputs are clamped, sums saturate, shifts are checked.

use crate::bridge::bound::{BoundState, BridgeBound};
use crate::bridge::drive::PeriodPlan;
use crate::bridge::{AppliedDecay, BridgeCoil, BridgeEstimate, BridgeModel, BridgeParams};
use crate::condition::{Action, Condition, Conditions};
use crate::guard::Retry;
use crate::params::{ConfigError, Conflict, Field};
use crate::thermal::{CoilHeat, CoilReplica, CoilThermal};
use crate::tolerance::Tolerance;
use crate::units::{Charge, Current, SignedVolts, Volts};
use fixed::types::I32F32;

/// What the guard does while `supply-pump` is active.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum PumpResponse {
    /// Flag it only.
    Report,
    /// Use slow decay for the whole off part until it clears (default).
    Recirculate,
}

/// The action of each configurable bridge condition.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct BridgePolicy {
    /// `overcurrent`; default [`Action::Trip`].
    pub overcurrent: Action,
    /// `supply-range` below the minimum; default [`Action::Report`].
    pub supply_low: Action,
    /// `supply-range` above the maximum; default [`Action::Trip`].
    pub supply_high: Action,
    /// `supply-pump`; default [`PumpResponse::Recirculate`].
    pub supply_pump: PumpResponse,
    /// `coil-overheat` (the winding image, with [`BridgeLimits::coil_thermal`]); default
    /// [`Action::Trip`].
    pub coil_overheat: Action,
}

impl Default for BridgePolicy {
    fn default() -> Self {
        Self {
            overcurrent: Action::Trip,
            supply_low: Action::Report,
            supply_high: Action::Trip,
            supply_pump: PumpResponse::Recirculate,
            coil_overheat: Action::Trip,
        }
    }
}

/// The bridge guard's limits in SI units (configuration time).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct BridgeLimits {
    /// Highest predicted peak magnitude the duty may produce, A.
    pub current_ceiling: f32,
    /// Magnitude above which the output trips, A (at or above the ceiling).
    pub trip_current: f32,
    /// Magnitude at or below which the direction may change, A (> 0, below the trip current).
    pub release_current: f32,
    /// Wait after the current has decayed before the other direction is driven, s
    /// (0 ..= 10).
    pub reversal_dead_time: f32,
    /// What each condition does.
    pub policy: BridgePolicy,
    /// The circuits the guard must be right for (default [`Tolerance::EXACT`]: the parameters
    /// are exact, up to the model's rounding). The guard acts on an upper bound of the current
    /// magnitude for every circuit inside the box: inductance,
    /// resistance, supply reading, back-EMF constant and bulk capacitance (the low side's
    /// node-capacitance, saturation and clamp spreads are refused: the bridge has no such part).
    pub tolerance: Tolerance,
    /// The winding's thermal image (`coil-overheat`), as on the low side
    /// ([`crate::GuardLimits::coil_thermal`]); `None`: no image. It is fed each period with
    /// the bound's largest magnitude over the period, so it never runs cooler than the winding
    /// inside the declared tolerance.
    pub coil_thermal: Option<CoilThermal>,
    /// Automatic retry of latched trips after a cooldown, as on the low side
    /// ([`crate::GuardLimits::retry`]); `None`: latched until [`BridgeGuard::clear`].
    pub retry: Option<Retry>,
}

impl BridgeLimits {
    /// Ceiling, trip and release currents (A) and the reversal dead time (s); default
    /// policies.
    pub fn new(
        current_ceiling: f32,
        trip_current: f32,
        release_current: f32,
        reversal_dead_time: f32,
    ) -> Self {
        Self {
            current_ceiling,
            trip_current,
            release_current,
            reversal_dead_time,
            policy: BridgePolicy::default(),
            tolerance: Tolerance::EXACT,
            coil_thermal: None,
            retry: None,
        }
    }

    /// The same limits covering the declared `tolerance`.
    #[must_use]
    pub const fn with_tolerance(mut self, tolerance: Tolerance) -> Self {
        self.tolerance = tolerance;
        self
    }
}

/// One period's input to the bridge guard.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct BridgeInput {
    /// Requested signed duty for the coming period, counts (positive: current from leg A to
    /// leg B), clamped to ±the resolution.
    pub duty: i32,
    /// Supply measured during the period just ended.
    pub supply: Volts,
    /// Back-EMF during the period just ended (zero: stalled, the worst case for current).
    pub back_emf: SignedVolts,
}

impl BridgeInput {
    /// A request of `duty` counts at the measured `supply`, with the rotor taken as stalled.
    pub const fn new(duty: i32, supply: Volts) -> Self {
        Self {
            duty,
            supply,
            back_emf: SignedVolts::ZERO,
        }
    }

    /// The same input with a measured or estimated back-EMF.
    #[must_use]
    pub const fn with_back_emf(mut self, back_emf: SignedVolts) -> Self {
        self.back_emf = back_emf;
        self
    }
}

/// What the bridge guard decided.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub struct BridgeOutput {
    /// Signed duty for the coming period, counts.
    pub duty: i32,
    /// The off part for the coming period.
    pub decay: AppliedDecay,
    /// The switch states for the coming period.
    pub plan: PeriodPlan,
    /// Conditions active now.
    pub active: Conditions,
    /// Conditions that became active in this call.
    pub raised: Conditions,
    /// Conditions that ended in this call.
    pub cleared: Conditions,
    /// Trips latched.
    pub latched: Conditions,
    /// The estimate over the period just ended.
    pub estimate: BridgeEstimate,
    /// Predicted peak magnitude of the coming period, the bound's: at or above the true one for
    /// every circuit inside the declared tolerance.
    pub predicted_peak: Current,
    /// The current magnitude the interlock acts on now: the bound's largest (at or above the
    /// true magnitude for every circuit inside the declared tolerance).
    pub bound: Current,
    /// While `reversal-hold` is active: the time left, µs (decay plus dead time; `None`: the
    /// current will not decay that far).
    pub reversal_in_us: Option<u32>,
    /// Charge on the bulk capacitance above its resting level (zero without a bus).
    pub bus_charge: Charge,
}

/// The direction of the last drive.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
enum Direction {
    /// Not driven yet, no current known.
    None,
    Forward,
    Reverse,
    /// After a reset: a current of unknown sign may flow; both directions wait.
    Unknown,
}

impl Direction {
    const fn of(x: i64) -> Self {
        if x > 0 {
            Direction::Forward
        } else if x < 0 {
            Direction::Reverse
        } else {
            Direction::None
        }
    }
}

/// Per-channel state of the bridge guard.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BridgeState {
    coil: BridgeCoil,
    applied: i32,
    decay: AppliedDecay,
    direction: Direction,
    /// Time since the estimate fell to the release level with the output off since, µs: from
    /// the closed-form crossing inside the period where it fell (rounded toward later), then
    /// whole periods; 0 while driven or above the level.
    quiet_us: u32,
    /// Charge on the bulk capacitance above rest, Charge bits.
    bus: i64,
    /// The supply reading of the last call (U16F16 bits; 0 before the first): the ended
    /// period ran between it and the next one.
    rail: u32,
    /// The back-EMF of the last call (U16F16 bits).
    emf: i32,
    /// The bound's two frames per inductance slice.
    bound: BoundState,
    returned: Charge,
    active: Conditions,
    latched: Conditions,
    /// The winding image (ambient without one).
    coil_heat: CoilHeat,
    /// Retry cooldown left, µs, and retries used.
    cooldown_us: u32,
    retries: u8,
}

impl BridgeState {
    /// The winding image's state (with [`BridgeLimits::coil_thermal`]; save it where a reset
    /// leaves it and start from it with [`BridgeGuard::start_after_reset_restored`]).
    pub const fn coil_heat(&self) -> CoilHeat {
        self.coil_heat
    }

    /// The signed coil current estimate.
    pub const fn current(&self) -> Current {
        self.coil.current()
    }

    /// The duty applied for the current period.
    pub const fn applied(&self) -> i32 {
        self.applied
    }

    /// Conditions active after the last call.
    pub const fn active(&self) -> Conditions {
        self.active
    }

    /// Trips latched.
    pub const fn latched(&self) -> Conditions {
        self.latched
    }

    /// Total charge returned to the supply in fast decay since the start (upper bound).
    pub const fn returned(&self) -> Charge {
        self.returned
    }

    /// Records that the hardware may be applying `duty` (used when a write failed).
    pub(crate) fn assume_applied(&mut self, duty: i32) {
        self.applied = duty;
    }
}

/// The validated bridge guard. See the module documentation.
#[derive(Debug, Clone, PartialEq)]
pub struct BridgeGuard {
    model: BridgeModel,
    ceiling: i64,
    trip: i64,
    release: i64,
    dead_periods: u32,
    /// The reversal dead time, µs (rounded up).
    dead_us: u32,
    period_us: u32,
    policy: BridgePolicy,
    supply_min: u32,
    supply_max: u32,
    worst_current: i64,
    /// The upper bound the decisions act on (over the declared tolerance; with none, over the
    /// model's own rounding).
    bound: BridgeBound,
    /// The winding image.
    coil: Option<CoilReplica>,
    /// Retry of latched trips: cooldown (µs) and count.
    retry: Option<(u32, u8)>,
}

fn amps_to_raw(model: &BridgeModel, field: Field, amps: f32) -> Result<i64, ConfigError> {
    crate::guard::limit_current(model.derived().full_scale, field, amps, |a| {
        model.current_from_amps(a)
    })
}

impl BridgeGuard {
    /// Validates the drive and the limits.
    ///
    /// # Errors
    /// The first problem found, naming its field (drive fields first, then the guard's).
    pub fn new(params: &BridgeParams, limits: &BridgeLimits) -> Result<Self, ConfigError> {
        let model = params.validate()?;
        let ceiling = amps_to_raw(&model, Field::GuardCurrentCeiling, limits.current_ceiling)?;
        let trip = amps_to_raw(&model, Field::GuardTripCurrent, limits.trip_current)?;
        if trip < ceiling {
            return Err(ConfigError::conflict(
                Field::GuardTripCurrent,
                Conflict::TripBelowCeiling,
            ));
        }
        let release = amps_to_raw(&model, Field::GuardReleaseCurrent, limits.release_current)?;
        if release >= trip {
            return Err(ConfigError::conflict(
                Field::GuardReleaseCurrent,
                Conflict::ReleaseNotBelowTrip,
            ));
        }
        let dead = crate::params::non_negative(
            Field::GuardReversalDeadTime,
            limits.reversal_dead_time,
            10.0,
        )?;
        let period = f64::from(model.derived().period);
        // Whole periods, rounded up; a dead time within 10⁻⁶ of a whole number of periods is
        // that number (1 ms at 50 µs is 20 periods, whatever the f32 rounding of either).
        let dead_periods = libm::ceil(f64::from(dead) / period - 1e-6).max(0.0) as u32;
        let v_max = Volts::from_bits((f64::from(params.supply.max) * 65_536.0) as u32);
        let v_min = Volts::from_bits((f64::from(params.supply.min) * 65_536.0) as u32);
        // Worst-case magnitude after a reset: the steady current at full drive, maximum supply
        // and the back-EMF helping, or the trip current if higher.
        let helping =
            SignedVolts::from_bits(-((f64::from(params.motor.back_emf_limit) * 65_536.0) as i32));
        let worst_current = model.steady_drive(v_max, helping).max(trip);
        let bound = BridgeBound::new(params, &model, &limits.tolerance, trip)?;
        let coil = match &limits.coil_thermal {
            Some(c) => Some(CoilReplica::new(
                c,
                model.derived().period,
                model.derived().full_scale,
                params.coil.reference_temperature,
                params.coil.temperature_coefficient,
            )?),
            None => None,
        };
        Ok(Self {
            ceiling,
            trip,
            release,
            dead_periods,
            dead_us: libm::ceil(f64::from(dead) * 1e6 - 1e-3).max(0.0) as u32,
            period_us: (libm::round(period * 1e6) as u32).max(1),
            policy: limits.policy,
            supply_min: v_min.to_bits(),
            supply_max: v_max.to_bits(),
            worst_current,
            model,
            bound,
            coil,
            retry: crate::guard::retry_of(limits.retry)?,
        })
    }

    /// The model the guard runs.
    pub const fn model(&self) -> &BridgeModel {
        &self.model
    }

    /// How many slices of the inductance range the bound tracks (1 with no inductance spread
    /// declared).
    pub fn bound_slices(&self) -> usize {
        self.bound.slices()
    }

    /// The reversal dead time in whole periods (rounded up): the most periods it can hold a
    /// reversal after the period in which the current fell to the release level.
    pub const fn dead_periods(&self) -> u32 {
        self.dead_periods
    }

    /// The reversal dead time, µs (rounded up), counted from the instant the estimate fell to
    /// the release level.
    pub const fn dead_time_us(&self) -> u32 {
        self.dead_us
    }

    /// State for a coil known to carry no current.
    pub fn start_idle(&self) -> BridgeState {
        BridgeState {
            coil: BridgeCoil::idle(),
            applied: 0,
            // Before the first tick every switch is off: the coil sees fast decay (a slow decay
            // would brake a turning rotor, and ends with both low switches on).
            decay: AppliedDecay::Fast,
            direction: Direction::None,
            quiet_us: u32::MAX,
            bus: 0,
            rail: 0,
            emf: 0,
            bound: [[0; 2]; crate::bridge::bound::BRIDGE_SLICES],
            returned: Charge::ZERO,
            active: Conditions::NONE,
            latched: Conditions::NONE,
            coil_heat: CoilHeat::default(),
            cooldown_us: 0,
            retries: 0,
        }
    }

    /// State for a coil known to carry `current` (signed) now, output off: a drive against
    /// that current is a reversal.
    pub fn start_with_current(&self, current: Current) -> BridgeState {
        BridgeState {
            coil: BridgeCoil::with_current(current),
            direction: Direction::of(current.to_bits()),
            quiet_us: 0,
            bound: BridgeBound::start(current.to_bits()),
            ..self.start_idle()
        }
    }

    /// State after a reset: the coil may carry the worst-case current in either direction, so
    /// both directions wait for its full decay and the dead time; the winding image starts at
    /// its trip level (as the low side's: a reset never shortens an overload).
    pub fn start_after_reset(&self) -> BridgeState {
        let hot = self
            .coil
            .as_ref()
            .map_or(CoilHeat::default(), CoilReplica::hot);
        self.start_after_reset_restored(Some(hot))
    }

    /// [`BridgeGuard::start_after_reset`] with the winding image as it was saved before the
    /// reset ([`BridgeState::coil_heat`]; `None`: at its trip level).
    pub fn start_after_reset_restored(&self, saved: Option<CoilHeat>) -> BridgeState {
        let s = self.start_with_current(Current::from_bits(self.worst_current));
        let hot = self
            .coil
            .as_ref()
            .map_or(CoilHeat::default(), CoilReplica::hot);
        BridgeState {
            direction: Direction::Unknown,
            bound: self.bound.after_reset(),
            coil_heat: saved.unwrap_or(hot),
            ..s
        }
    }

    /// The winding image's temperature, °C (`None` without one).
    pub fn winding_temperature(&self, state: &BridgeState) -> Option<I32F32> {
        self.coil.as_ref().map(|c| c.temperature(&state.coil_heat))
    }

    /// The bus charge above rest after a period of `duty` and `decay` that drew and returned
    /// these charges, from `bus`: the drive part draws first (the capacitor gives back its extra
    /// charge before the supply sources the rest), then the fast part returns, less what the
    /// supply sinks meanwhile.
    fn bus_after(
        &self,
        bus: i64,
        duty: i32,
        decay: AppliedDecay,
        drawn: Charge,
        returned: Charge,
    ) -> i64 {
        let Some(b) = self.model.bus else { return 0 };
        let (_, fast, _) = self.model.split(duty, decay);
        let sunk = b.sink_per_count.saturating_mul(i64::from(fast));
        let gain = returned.to_bits().saturating_sub(sunk).max(0);
        bus.saturating_sub(drawn.to_bits().max(0))
            .max(0)
            .saturating_add(gain)
    }

    /// A plan that keeps the bus (`keeps`, strictly or not) and the ceiling, in this order of
    /// preference: the off part in slow decay with the largest duty (of `duty`'s sign, at most
    /// its magnitude) that keeps both strictly; coasting when `coast` says the bus can take the
    /// whole stop (every switch off: the current stops on the diodes; every strict plan has
    /// left room for it or for one more period of recirculation first); and otherwise slow
    /// decay with no drive — that recirculation, or, when nothing keeps both (the guard started
    /// not knowing the current, or the circuit is outside its tolerance), the bus first, since
    /// a rail past the switches' breakdown destroys them, and the trip still guards the
    /// current.
    fn spare_the_bus(
        &self,
        duty: i32,
        magnitude: &dyn Fn(i32, AppliedDecay) -> i64,
        keeps: &dyn Fn(i32, AppliedDecay, bool) -> bool,
        coast: bool,
    ) -> (i32, AppliedDecay) {
        let slow = AppliedDecay::Slow;
        let fits =
            |c: i32, decay, strict| magnitude(c, decay) <= self.ceiling && keeps(c, decay, strict);
        if fits(duty, slow, true) {
            return (duty, slow);
        }
        let d = duty.signum();
        let lo =
            crate::qmath::largest_count(duty.unsigned_abs(), |c| fits(d * c as i32, slow, true));
        // lo <= 65535.
        if lo > 0 || fits(0, slow, true) {
            return (d * lo as i32, slow);
        }
        if coast && magnitude(0, AppliedDecay::Fast) <= self.ceiling {
            return (0, AppliedDecay::Fast);
        }
        (0, slow)
    }

    /// Clears latched trips (and the retry count). Conditions still present trip again.
    pub fn clear(&self, state: &mut BridgeState) {
        state.latched = Conditions::NONE;
        state.retries = 0;
        state.cooldown_us = 0;
    }

    /// The period just ended: the estimate's step with the duty and decay applied, the bound's
    /// advance over it (the rail and the back-EMF between the two readings that frame it), and
    /// the bus. Returns the estimate, the bound's magnitude before the period, and whether the
    /// bus is still recovering from a pump.
    fn advance(&self, state: &mut BridgeState, input: BridgeInput) -> (BridgeEstimate, i64, bool) {
        let m = &self.model;
        let after_slow_then = state.coil.after_slow();
        let est = m.step_with(
            &mut state.coil,
            state.applied,
            input.supply,
            input.back_emf,
            state.decay,
        );
        state.returned = state.returned.saturating_add(est.returned);
        // The bound over the same period: the rail and the back-EMF between the two readings
        // that frame it.
        let bound_before = self.bound.magnitude(&state.bound);
        let now = m.supply_bits(input.supply);
        let before = if state.rail == 0 { now } else { state.rail };
        let period_peak = self.bound.advance(
            &mut state.bound,
            m,
            after_slow_then,
            (state.applied, state.decay),
            (before.min(now), before.max(now)),
            (SignedVolts::from_bits(state.emf), input.back_emf),
        );
        // The winding image heats with the bound's largest magnitude over the period as its
        // whole period's current: at or above the true mean square inside the box.
        if let Some(c) = &self.coil {
            let top = Current::from_bits(period_peak.clamp(0, Current::LIMIT.to_bits()));
            c.period(&mut state.coil_heat, top, top);
        }
        state.rail = now;
        state.emf = input.back_emf.to_bits();
        // The bus: the period just ended, then whether it is still recovering from a pump.
        let mut pump = false;
        if let Some(b) = m.bus {
            state.bus = self.bus_after(
                state.bus,
                state.applied,
                state.decay,
                est.drawn,
                est.returned,
            );
            pump = state.active.contains(Condition::SupplyPump) && state.bus > b.headroom >> 1;
        }
        (est, bound_before, pump)
    }

    /// The conditions present now and their actions (`hold`: an action holds the output off;
    /// trips are latched in the state): the supply window at the reading `vs` and the trip level
    /// against the estimate's largest magnitude `top`.
    fn conditions(&self, state: &mut BridgeState, vs: u32, top: i64) -> (Conditions, bool) {
        let pol = self.policy;
        let mut found = crate::condition::Found::new(&mut state.latched);
        found.supply(
            vs,
            (self.supply_min, self.supply_max),
            (pol.supply_low, pol.supply_high),
        );
        // An assumed (after-reset) current is a belief, not an observation: no trip on it.
        found.raise(
            state.direction != Direction::Unknown && top > self.trip,
            Condition::Overcurrent,
            pol.overcurrent,
        );
        found.winding(
            self.coil.as_ref(),
            state.coil_heat,
            state.active,
            pol.coil_overheat,
        );
        found.done()
    }

    /// The interlock: the request after the latches and holds, and held at zero while a reversal
    /// waits for the bound to reach the release level and then for the dead time (meanwhile
    /// the off part decays fast); with the time left when it holds. `i_now` is the estimate,
    /// `held` the bound now and `bound_before` the bound before the period just ended.
    fn interlock(
        &self,
        state: &mut BridgeState,
        (input, hold): (BridgeInput, bool),
        (i_now, held, bound_before): (i64, i64, i64),
        (active, decay): (&mut Conditions, &mut AppliedDecay),
    ) -> (i32, Option<u32>) {
        let m = &self.model;
        let n_full = m.duty_resolution() as i32; // <= 65535
        // The dead time runs from the instant the estimate reached the
        // release level, not from the end of the period in which it did.
        state.quiet_us = if state.applied == 0 && held <= self.release {
            if bound_before <= self.release {
                state.quiet_us.saturating_add(self.period_us)
            } else {
                // The bound fell inside the period just ended: its crossing is taken at the
                // period's end (later than any true crossing).
                0
            }
        } else {
            0
        };
        // Not `clamp`: its min <= max assertion would be a panic path (n_full is positive).
        let request = input.duty.min(n_full).max(-n_full);
        let mut duty = if state.latched.is_empty() && !hold {
            request
        } else {
            0
        };
        let wanted = Direction::of(i64::from(duty));
        let mut reversal_in = None;
        let reversing = duty != 0
            && match state.direction {
                Direction::None => false,
                Direction::Unknown => true,
                d => d != wanted,
            };
        if reversing && (held > self.release || state.quiet_us < self.dead_us) {
            duty = 0;
            active.insert(Condition::ReversalHold);
            // The quickest decay: through the diodes, against the supply. Slow decay would
            // keep a braking current flowing for as long as a motor turns.
            if *decay == AppliedDecay::Configured {
                *decay = AppliedDecay::Fast;
            }
            let dead_left = self.dead_us.saturating_sub(if held > self.release {
                0
            } else {
                state.quiet_us
            });
            // The nominal decay of the magnitude acted on (with a bound: its largest).
            let from = if i_now < 0 { -held } else { held };
            reversal_in = m
                .decay_time_us(
                    Current::from_bits(from),
                    Current::from_bits(self.release),
                    input.supply,
                    input.back_emf,
                    *decay,
                )
                .map(|t| t.saturating_add(dead_left));
        } else if state.direction == Direction::Unknown
            && held <= self.release
            && state.quiet_us >= self.dead_us
        {
            // The assumed current has decayed: nothing is known to flow any more.
            state.direction = Direction::None;
        }

        (duty, reversal_in)
    }

    /// The bus over the coming period (with a bus configured): the charge the plan would return
    /// against the headroom, before it is returned; when the plan would not keep the bus,
    /// `supply-pump` and, by policy, a plan that spares it. `magnitude` is the bound's largest
    /// magnitude over the coming period for a duty and decay.
    fn keep_bus(
        &self,
        state: &BridgeState,
        (input, i_now, after_slow): (BridgeInput, i64, bool),
        (duty, decay, predicted): (&mut i32, &mut AppliedDecay, &mut i64),
        (active, magnitude): (&mut Conditions, &dyn Fn(i32, AppliedDecay) -> i64),
    ) {
        let m = &self.model;
        let (supply, emf) = (input.supply, input.back_emf);
        let vs = m.supply_bits(supply);
        let rails = (vs, vs);
        if let Some(b) = m.bus {
            let after = |duty: i32, decay: AppliedDecay| -> i64 {
                let p = m.parts(i_now, after_slow, duty, supply, emf, decay);
                let (drawn, returned) = (Charge::from_bits(p.drawn), Charge::from_bits(p.returned));
                self.bus_after(state.bus, duty, decay, drawn, returned)
            };
            // The nominal tracker and the bound's: the charge the rail reading already shows plus
            // the most the plan could return (the drive's draw ignored), and what stopping the
            // current at the period's end would return, against the headroom at the lowest
            // capacitance (`BridgeBound::keeps_bus`).
            let keeps = |duty: i32, decay: AppliedDecay, strict: bool| {
                let (_, fast, _) = m.split(duty, decay);
                let sunk = b.sink_per_count.saturating_mul(i64::from(fast));
                after(duty, decay) <= b.headroom
                    && self.bound.keeps_bus(
                        &state.bound,
                        m,
                        after_slow,
                        (duty, decay),
                        (rails, (emf, emf)),
                        (input.supply, sunk),
                        (self.ceiling, strict),
                    )
            };
            if !keeps(*duty, *decay, true) {
                active.insert(Condition::SupplyPump);
                if self.policy.supply_pump == PumpResponse::Recirculate {
                    let coast =
                        self.bound
                            .can_coast(&state.bound, m, (rails, (emf, emf)), input.supply);
                    (*duty, *decay) = self.spare_the_bus(*duty, magnitude, &keeps, coast);
                    *predicted = magnitude(*duty, *decay);
                    if *predicted > self.ceiling {
                        // Neither decay keeps both the bus and the ceiling: the bus comes first
                        // (a rail past the switches' breakdown destroys them); the trip still
                        // guards the current.
                        active.insert(Condition::CurrentLimit);
                    }
                }
            }
        }
    }

    /// One control period. `input.duty` is the request for the coming period; the guard
    /// advances over the period just ended with the duty and decay it applied then.
    ///
    /// ```
    /// use coilward::bridge::{BodyDiode, BridgeGuard, BridgeInput, BridgeLimits, BridgeParams,
    ///                        DecayMode};
    /// use coilward::{CoilParams, Condition, ControlParams, SupplyParams, SwitchParams, Volts};
    /// let params = BridgeParams::new(
    ///     SupplyParams::new(12.0, 10.0, 14.0),
    ///     CoilParams::new(2e-3, 4.0),
    ///     SwitchParams::new(0.05, 40.0),
    ///     BodyDiode::new(0.8, 0.02),
    ///     DecayMode::Fast,
    ///     ControlParams::new(50e-6, 1000, 4.0),
    /// );
    /// // 2.5 A ceiling, 3 A trip, reverse below 0.05 A after 1 ms.
    /// let guard = BridgeGuard::new(&params, &BridgeLimits::new(2.5, 3.0, 0.05, 1e-3))?;
    /// let mut s = guard.start_idle();
    /// let vs = Volts::from_num(12);
    /// for _ in 0..200 {
    ///     guard.tick(&mut s, BridgeInput::new(800, vs));
    /// }
    /// // Reverse: held until the current has decayed and the dead time has passed.
    /// let out = guard.tick(&mut s, BridgeInput::new(-800, vs));
    /// assert_eq!(out.duty, 0);
    /// assert!(out.active.contains(Condition::ReversalHold));
    /// let mut periods = 1;
    /// while guard.tick(&mut s, BridgeInput::new(-800, vs)).duty == 0 {
    ///     periods += 1;
    /// }
    /// assert!(periods > 20); // the 1 ms dead time alone is 20 periods
    /// # Ok::<(), coilward::ConfigError>(())
    /// ```
    pub fn tick(&self, state: &mut BridgeState, input: BridgeInput) -> BridgeOutput {
        let m = &self.model;
        // 1. The period just ended, and the bus over it.
        let (est, bound_before, pump) = self.advance(state, input);
        let vs = m.supply_bits(input.supply);
        let i_now = state.coil.current().to_bits();
        let mag = i_now.unsigned_abs().min(Current::LIMIT.to_bits() as u64) as i64;
        let peak = est.peak_magnitude().to_bits();
        // What the interlock and the ceiling act on: the bound's largest magnitude.
        let held = self.bound.magnitude(&state.bound);

        // 2. The conditions, and the retry of latched trips (its cooldown runs in real time).
        let prev = state.active;
        state.cooldown_us = state.cooldown_us.saturating_sub(self.period_us);
        let (mut active, hold) = self.conditions(state, vs, mag.max(peak));
        if let Some(r) = self.retry {
            let counters = (&mut state.cooldown_us, &mut state.retries);
            crate::condition::retry_latched(&mut state.latched, active, counters, r);
        }
        let mut decay = if pump {
            active.insert(Condition::SupplyPump);
            match self.policy.supply_pump {
                PumpResponse::Recirculate => AppliedDecay::Slow,
                PumpResponse::Report => AppliedDecay::Configured,
            }
        } else {
            AppliedDecay::Configured
        };

        // 3. The interlock.
        let (mut duty, reversal_in) = self.interlock(
            state,
            (input, hold),
            (i_now, held, bound_before),
            (&mut active, &mut decay),
        );

        // 4. The ceiling, over the whole coming period. In the drive's direction the period's
        // highest current grows with the drive counts (more drive time at a voltage beyond
        // either decay's), so the largest duty that fits is found by bisection.
        let emf = input.back_emf;
        let after_slow = state.coil.after_slow();
        let rails = (vs, vs);
        let bounded = |f: usize, duty: i32, decay: AppliedDecay| {
            self.bound
                .frame_period(
                    &state.bound,
                    f,
                    m,
                    after_slow,
                    (duty, decay),
                    rails,
                    (emf, emf),
                )
                .0
        };
        // The peak in the drive's direction.
        let reach =
            |duty: i32, decay: AppliedDecay| bounded(usize::from(duty < 0), duty, decay).peak;
        if duty != 0 {
            let d = duty.signum();
            let n = duty.unsigned_abs();
            if reach(duty, decay) > self.ceiling {
                let lo =
                    crate::qmath::largest_count(n, |c| reach(d * c as i32, decay) <= self.ceiling);
                let fits = reach(d * lo as i32, decay) <= self.ceiling;
                duty = if fits { d * lo as i32 } else { 0 }; // lo <= 65535
                active.insert(Condition::CurrentLimit);
            }
            if duty != 0 {
                state.direction = Direction::of(i64::from(duty));
            }
        }
        // A spinning motor can push the recirculating current past the ceiling whatever the
        // duty (slow decay is a brake): then the off part decays fast instead, through the
        // diodes, against the supply.
        let magnitude = |duty: i32, decay: AppliedDecay| {
            bounded(0, duty, decay)
                .peak
                .max(bounded(1, duty, decay).peak)
        };
        let mut predicted = magnitude(duty, decay);
        if predicted > self.ceiling && decay != AppliedDecay::Fast && m.has_slow_part(decay) {
            decay = AppliedDecay::Fast;
            predicted = magnitude(duty, decay);
            active.insert(Condition::CurrentLimit);
        }
        // 5. The bus over the coming period.
        if m.bus.is_some() {
            self.keep_bus(
                state,
                (input, i_now, after_slow),
                (&mut duty, &mut decay, &mut predicted),
                (&mut active, &magnitude),
            );
        }
        active = active.union(state.latched);
        state.applied = duty;
        state.decay = decay;
        state.active = active;
        BridgeOutput {
            duty,
            decay,
            plan: PeriodPlan::from_split(m.split(duty, decay)),
            active,
            raised: active.minus(prev),
            cleared: prev.minus(active),
            latched: state.latched,
            estimate: est,
            predicted_peak: Current::from_bits(predicted.min(Current::LIMIT.to_bits())),
            bound: Current::from_bits(held.min(Current::LIMIT.to_bits())),
            reversal_in_us: reversal_in,
            bus_charge: Charge::from_bits(state.bus),
        }
    }
}
