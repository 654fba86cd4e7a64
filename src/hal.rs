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
#[derive(Debug)]
pub struct GuardedSwitch<'g, P> {
    guard: &'g Guard,
    state: GuardState,
    pin: P,
}

impl<'g, P: OutputPin> GuardedSwitch<'g, P> {
    /// Wraps `pin`, starting from `state`.
    pub fn new(guard: &'g Guard, state: GuardState, pin: P) -> Self {
        Self { guard, state, pin }
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
        let before = self.state.applied();
        let out = self
            .guard
            .event(&mut self.state, want_on, elapsed_us, supply);
        let written = if out.duty > 0 {
            self.pin.set_high()
        } else {
            self.pin.set_low()
        };
        settle(&mut self.state, before, out, written, || {
            let _ = self.pin.set_low();
        })
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
