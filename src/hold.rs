//! Pull-in and hold for valves and relays: full on until the estimate reaches the pull-in
//! current (or the pull-in time has passed), then the duty whose steady mean is the hold current
//! at the measured supply.
//!
//! Hold currents of 30–50 % of the pull-in current are usual (common practice, no single
//! source). The hold duty comes from the model's exact PWM steady state
//! ([`Model::steady_state`]), which divides: it is planned for the lower edge of a band of 1/128
//! of the supply and recomputed only when the supply leaves that band, so most periods cost a
//! comparison. The steady mean rises with the supply at a fixed duty, so planning at the band's
//! lower edge keeps the mean at or above the hold current anywhere in the band: a slowly
//! sagging supply never takes it below.

use crate::model::Model;
use crate::params::{ConfigError, Field, positive};
use crate::units::{Current, Volts};

/// A pull-in-and-hold plan (validated against a model).
///
/// ```
/// use coilward::{ClampPath, CoilParams, CoilState, ControlParams, HoldPhase, Params,
///                PullInHold, SupplyParams, SwitchParams, Volts};
/// let model = Params::new(
///     SupplyParams::new(24.0, 18.0, 30.0),
///     CoilParams::new(0.040, 18.0),
///     SwitchParams::new(0.1, 60.0),
///     ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.05 },
///     ControlParams::new(50e-6, 3200, 2.0),
/// )
/// .validate()?;
/// // Pull in to 1.2 A (for at most 20 ms), then hold at 0.4 A.
/// let plan = PullInHold::new(&model, 1.2, 0.02, 0.4)?;
/// let (mut phase, mut coil) = (HoldPhase::default(), CoilState::idle());
/// let vs = Volts::from_num(24);
/// for _ in 0..2000 {
///     let duty = plan.duty(&model, &mut phase, coil.current(), vs);
///     model.step(&mut coil, duty, vs);
/// }
/// assert!(phase.holding());
/// // Held by PWM at (just above) the hold current.
/// let amps = model.amps(coil.current());
/// assert!(amps > 0.39 && amps < 0.45, "{amps}");
/// # Ok::<(), coilward::ConfigError>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PullInHold {
    pull_in: Current,
    pull_in_periods: u32,
    hold: Current,
}

/// Progress through a plan (per channel).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct HoldPhase {
    periods: u32,
    holding: bool,
    /// The supply the cached duty was planned for: the lower edge of its band.
    cached_supply: u32,
    cached_duty: u32,
}

impl HoldPhase {
    /// Whether the plan has moved on to holding.
    pub const fn holding(&self) -> bool {
        self.holding
    }
}

impl PullInHold {
    /// A plan: pull in to `pull_in_current` (A) or for at most `pull_in_time` (s), then hold at
    /// `hold_current` (A, below the pull-in current).
    ///
    /// # Errors
    /// [`Field::HoldPullInCurrent`], [`Field::HoldPullInTime`] or [`Field::HoldCurrent`].
    pub fn new(
        model: &Model,
        pull_in_current: f32,
        pull_in_time: f32,
        hold_current: f32,
    ) -> Result<Self, ConfigError> {
        let fs = model.derived().full_scale;
        let pi = positive(
            Field::HoldPullInCurrent,
            pull_in_current,
            fs * 1e-6,
            fs * 1e3,
        )?;
        let t = positive(Field::HoldPullInTime, pull_in_time, 1e-6, 3600.0)?;
        let h = positive(Field::HoldCurrent, hold_current, fs * 1e-6, pi)?;
        let periods = libm::ceil(f64::from(t) / f64::from(model.derived().period));
        let to_current = |a: f32| model.current_from_amps(a).unwrap_or(Current::ZERO);
        Ok(Self {
            pull_in: to_current(pi),
            pull_in_periods: periods.min(f64::from(u32::MAX)) as u32,
            hold: to_current(h),
        })
    }

    /// The duty to request for the coming period, from the present estimate.
    pub fn duty(
        &self,
        model: &Model,
        phase: &mut HoldPhase,
        estimate: Current,
        supply: Volts,
    ) -> u32 {
        if !phase.holding {
            if estimate < self.pull_in && phase.periods < self.pull_in_periods {
                phase.periods += 1;
                return model.duty_resolution();
            }
            phase.holding = true;
        }
        let vs = supply.to_bits();
        let edge = phase.cached_supply;
        // Inside the band [edge, edge + edge/128] the cached duty holds at least the hold
        // current; below it, it may not; above it, it holds more than needed.
        let outside = vs < edge || vs - edge > edge >> 7;
        if phase.cached_duty == 0 || outside {
            let planned = vs - (vs >> 8);
            phase.cached_duty = self.hold_duty(model, Volts::from_bits(planned));
            phase.cached_supply = planned;
        }
        phase.cached_duty
    }

    /// The smallest duty whose steady mean current reaches the hold current at `supply`
    /// (bisection over the counts; the full resolution if even 100 % falls short).
    pub fn hold_duty(&self, model: &Model, supply: Volts) -> u32 {
        let full = model.duty_resolution();
        if model.steady_state(full, supply).mean < self.hold {
            return full;
        }
        // The largest duty whose mean falls short, and one more.
        let short = |n| model.steady_state(n, supply).mean < self.hold;
        crate::qmath::bisect(0, full, short) + 1
    }
}
