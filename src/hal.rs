//! embedded-hal 1.0 adapters: every duty or switch state goes through the guard.
//!
//! - [`GuardedPwm`] wraps a PWM channel ([`SetDutyCycle`]) driven once per period.
//! - [`GuardedSwitch`] wraps a gate pin ([`OutputPin`], high = switch on) driven on events.
//!
//! If the hardware write fails, the adapter tries to turn the output fully off and keeps the
//! conservative belief — the higher of the old and the new duty — so the estimate can only
//! overstate the current.

use crate::guard::{Guard, GuardState, Input, Output};
use crate::units::Volts;
use embedded_hal::digital::OutputPin;
use embedded_hal::pwm::SetDutyCycle;

/// The outcome of a hardware write: on failure, try `turn_off` and keep the higher of the old and
/// the new duty as the guard's belief (so the estimate can only overstate the current).
fn settle<E>(
    state: &mut GuardState,
    before: u32,
    out: Output,
    written: Result<(), E>,
    turn_off: impl FnOnce(),
) -> Result<Output, E> {
    match written {
        Ok(()) => Ok(out),
        Err(e) => {
            turn_off();
            state.assume_applied(before.max(out.duty));
            Err(e)
        }
    }
}

/// A PWM channel whose duty is always the guard's decision.
///
/// ```
/// use coilward::{ClampPath, CoilParams, ControlParams, Guard, GuardLimits, GuardedPwm, Params,
///                SupplyParams, SwitchParams, Volts};
/// use embedded_hal::pwm::{ErrorType, SetDutyCycle};
///
/// /// A timer channel with 3200 counts (a HAL's PWM channel in real firmware).
/// struct Channel(u16);
/// impl ErrorType for Channel {
///     type Error = core::convert::Infallible;
/// }
/// impl SetDutyCycle for Channel {
///     fn max_duty_cycle(&self) -> u16 {
///         3200
///     }
///     fn set_duty_cycle(&mut self, duty: u16) -> Result<(), Self::Error> {
///         self.0 = duty;
///         Ok(())
///     }
/// }
///
/// let params = Params::new(
///     SupplyParams::new(24.0, 18.0, 30.0),
///     CoilParams::new(0.040, 18.0),
///     SwitchParams::new(0.1, 60.0),
///     ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.05 },
///     ControlParams::new(50e-6, 3200, 2.0),
/// );
/// let guard = Guard::new(&params, &GuardLimits::new(1.0, 1.2, 0.05))?;
/// let mut pwm = GuardedPwm::new(&guard, guard.start_idle(), Channel(0));
/// // Once per period: full duty requested; the guard limits it to hold the 1 A ceiling.
/// let mut out = None;
/// for _ in 0..400 {
///     out = Some(pwm.period(3200, Volts::from_num(24)).unwrap());
/// }
/// let (channel, _state) = pwm.release();
/// assert_eq!(u32::from(channel.0), out.unwrap().duty);
/// assert!(channel.0 < 3200);
/// # Ok::<(), coilward::ConfigError>(())
/// ```
#[derive(Debug)]
pub struct GuardedPwm<'g, P> {
    guard: &'g Guard,
    state: GuardState,
    pwm: P,
}

impl<'g, P: SetDutyCycle> GuardedPwm<'g, P> {
    /// Wraps `pwm`, starting from `state` (see [`Guard::start_idle`], [`Guard::start_after_reset`]).
    pub fn new(guard: &'g Guard, state: GuardState, pwm: P) -> Self {
        Self { guard, state, pwm }
    }

    /// Once per period: `request` (counts of the model's duty resolution) and the measured
    /// supply; the guard's duty is written as the fraction `duty/resolution` of the channel.
    ///
    /// # Errors
    /// The channel's error; the output is then turned fully off if possible.
    pub fn period(&mut self, request: u32, supply: Volts) -> Result<Output, P::Error> {
        let before = self.state.applied();
        let out = self
            .guard
            .tick(&mut self.state, Input::new(request, supply));
        let full = self.guard.model().duty_resolution();
        // Both fit u16: the resolution is validated to 1 ..= 65535 and duty <= resolution.
        let written = self
            .pwm
            .set_duty_cycle_fraction(out.duty as u16, full as u16);
        settle(&mut self.state, before, out, written, || {
            let _ = self.pwm.set_duty_cycle_fully_off();
        })
    }

    /// The guard state.
    pub const fn state(&self) -> &GuardState {
        &self.state
    }

    /// Mutable guard state (e.g. to [`Guard::clear`] a trip).
    pub fn state_mut(&mut self) -> &mut GuardState {
        &mut self.state
    }

    /// Unwraps into the channel and the state.
    pub fn release(self) -> (P, GuardState) {
        (self.pwm, self.state)
    }
}

/// A gate pin (high = switch on) whose state is always the guard's decision.
///
/// # Timing contract (event mode)
/// Call [`GuardedSwitch::update`] on every change of the request, with the µs since the previous
/// call. While the pin is high, call [`GuardedSwitch::check`] again no later than
/// [`GuardedSwitch::next_check_us`] after the last call (a one-shot timer is enough): that is
/// when the current could reach the ceiling or the winding image its trip level. Calls in
/// between (a housekeeping poll) are welcome and never needed for soundness.
///
/// ```
/// # use coilward::{ClampPath, CoilParams, ControlParams, Guard, GuardLimits, GuardedSwitch,
/// #                Params, SupplyParams, SwitchParams, Volts};
/// # use embedded_hal::digital::{ErrorType, OutputPin};
/// # struct Gate;
/// # impl ErrorType for Gate { type Error = core::convert::Infallible; }
/// # impl OutputPin for Gate {
/// #     fn set_low(&mut self) -> Result<(), Self::Error> { Ok(()) }
/// #     fn set_high(&mut self) -> Result<(), Self::Error> { Ok(()) }
/// # }
/// # let params = Params::new(
/// #     SupplyParams::new(24.0, 18.0, 30.0),
/// #     CoilParams::new(0.040, 18.0),
/// #     SwitchParams::new(0.1, 60.0),
/// #     ClampPath::Freewheel { forward_drop: 0.7, resistance: 0.05 },
/// #     ControlParams::new(50e-6, 3200, 2.0),
/// # );
/// let guard = Guard::new(&params, &GuardLimits::new(1.0, 1.2, 0.05))?;
/// let mut switch = GuardedSwitch::new(&guard, guard.start_idle(), Gate);
/// let vs = Volts::from_num(24);
/// switch.update(true, 0, vs).unwrap(); // the request turns on: the pin goes high
/// // 24 V across 18.1 Ω would reach 1.33 A: the guard asks to be looked at no later than the
/// // 1 A ceiling (3.1 ms), and the checks it asks for turn the pin low there.
/// let mut on_for = 0;
/// while let Some(wait) = switch.next_check_us() {
///     switch.check(wait.max(1), vs).unwrap();
///     on_for += wait.max(1);
/// }
/// assert!(on_for <= 3_200);
/// assert!(switch.state().active().contains(coilward::Condition::CurrentLimit));
/// # Ok::<(), coilward::ConfigError>(())
/// ```
#[derive(Debug)]
pub struct GuardedSwitch<'g, P> {
    guard: &'g Guard,
    state: GuardState,
    pin: P,
    /// The last request.
    wanted: bool,
    /// The last output's `next_check_us`.
    next_check_us: Option<u32>,
}

impl<'g, P: OutputPin> GuardedSwitch<'g, P> {
    /// Wraps `pin`, starting from `state`.
    pub fn new(guard: &'g Guard, state: GuardState, pin: P) -> Self {
        Self {
            guard,
            state,
            pin,
            wanted: false,
            next_check_us: None,
        }
    }

    /// On each event: whether the load should be on, the µs since the previous call (a
    /// wrapping timer difference is fine) and the measured supply.
    ///
    /// # Errors
    /// The pin's error; the pin is then driven low if possible.
    pub fn update(
        &mut self,
        want_on: bool,
        elapsed_us: u32,
        supply: Volts,
    ) -> Result<Output, P::Error> {
        self.wanted = want_on;
        let before = self.state.applied();
        let out = self
            .guard
            .event(&mut self.state, want_on, elapsed_us, supply);
        self.next_check_us = if out.duty > 0 {
            out.next_check_us
        } else {
            None
        };
        let written = if out.duty > 0 {
            self.pin.set_high()
        } else {
            self.pin.set_low()
        };
        settle(&mut self.state, before, out, written, || {
            let _ = self.pin.set_low();
        })
    }

    /// The look the timing contract asks for: [`GuardedSwitch::update`] with the last request.
    ///
    /// # Errors
    /// The pin's error; the pin is then driven low if possible.
    pub fn check(&mut self, elapsed_us: u32, supply: Volts) -> Result<Output, P::Error> {
        self.update(self.wanted, elapsed_us, supply)
    }

    /// With the pin high: the latest time after the last call at which [`GuardedSwitch::check`]
    /// must run, µs (`None`: the pin is low, or nothing can reach a limit at this supply).
    pub const fn next_check_us(&self) -> Option<u32> {
        self.next_check_us
    }

    /// The guard state.
    pub const fn state(&self) -> &GuardState {
        &self.state
    }

    /// Mutable guard state.
    pub fn state_mut(&mut self) -> &mut GuardState {
        &mut self.state
    }

    /// Unwraps into the pin and the state.
    pub fn release(self) -> (P, GuardState) {
        (self.pin, self.state)
    }
}
