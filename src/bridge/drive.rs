//! What the bridge's switches do in a period, and the adapters that write it to hardware.
//!
//! A [`PeriodPlan`] lists the period's three phases (drive, fast decay, slow decay) as a
//! [`LegState`] per leg. A leg's state is one value — floating, high switch on, or low switch
//! on — so no plan can command both switches of a leg at once: shoot-through is ruled out by
//! the type, before any hardware is touched. The dead time between one switch turning off and
//! the other turning on within a period is the timer's (or gate driver's) job; the plan says
//! which switch, never both.
//!
//! - [`BridgeDriver`] is implemented by the firmware for its timer (complementary outputs with
//!   hardware dead time, or a bridge driver's inputs).
//! - [`GatePins`] implements it for four gate pins (embedded-hal [`OutputPin`]) when each period
//!   is a single phase (full drive, or off in one decay mode): every change turns off the
//!   switches that must be off before turning on any switch.
//! - [`GuardedBridge`] runs the guard and writes its plan.

use crate::bridge::guard::{BridgeGuard, BridgeInput, BridgeOutput, BridgeState};
use crate::units::{SignedVolts, Volts};
use embedded_hal::digital::OutputPin;

/// The state of one leg of the bridge.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LegState {
    /// Both switches off: the leg floats (its body diodes may conduct).
    Float,
    /// The high-side switch on, the low-side switch off.
    High,
    /// The low-side switch on, the high-side switch off.
    Low,
}

impl LegState {
    /// Whether the high-side switch is on.
    pub const fn high_on(self) -> bool {
        matches!(self, LegState::High)
    }

    /// Whether the low-side switch is on.
    pub const fn low_on(self) -> bool {
        matches!(self, LegState::Low)
    }
}

/// One phase of a period: how long, and each leg's state.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Phase {
    counts: u32,
    a: LegState,
    b: LegState,
}

impl Phase {
    /// Timer counts of the phase (0: the phase is absent this period).
    pub const fn counts(&self) -> u32 {
        self.counts
    }

    /// Leg A's state.
    pub const fn leg_a(&self) -> LegState {
        self.a
    }

    /// Leg B's state.
    pub const fn leg_b(&self) -> LegState {
        self.b
    }
}

/// A period's switch states, in order: drive, fast decay, slow decay. The counts add up to the
/// duty resolution.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PeriodPlan {
    duty: i32,
    phases: [Phase; 3],
}

impl PeriodPlan {
    /// From the model's split: signed drive counts, fast counts, slow counts.
    pub(crate) const fn from_split((duty, fast, slow): (i32, u32, u32)) -> Self {
        let drive = if duty < 0 {
            (LegState::Low, LegState::High)
        } else {
            (LegState::High, LegState::Low)
        };
        Self {
            duty,
            phases: [
                Phase {
                    counts: duty.unsigned_abs(),
                    a: drive.0,
                    b: drive.1,
                },
                Phase {
                    counts: fast,
                    a: LegState::Float,
                    b: LegState::Float,
                },
                Phase {
                    counts: slow,
                    a: LegState::Low,
                    b: LegState::Low,
                },
            ],
        }
    }

    /// The signed drive counts.
    pub const fn duty(&self) -> i32 {
        self.duty
    }

    /// The three phases (drive, fast decay, slow decay); absent ones have zero counts.
    pub const fn phases(&self) -> [Phase; 3] {
        self.phases
    }

    /// The single phase that fills the whole period, if there is one.
    pub fn only_phase(&self) -> Option<Phase> {
        let mut present = self.phases.iter().filter(|p| p.counts > 0);
        let first = present.next().copied();
        if present.next().is_some() {
            None
        } else {
            first
        }
    }
}

/// Hardware that can carry out a [`PeriodPlan`] each period.
pub trait BridgeDriver {
    /// The hardware's error.
    type Error;

    /// Sets up the coming period.
    ///
    /// # Errors
    /// The hardware's error.
    fn apply(&mut self, plan: &PeriodPlan) -> Result<(), Self::Error>;

    /// Turns every switch off, as far as the hardware still obeys (after an error).
    fn all_off(&mut self);
}

/// Why [`GatePins`] could not carry out a plan.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum GateError<E> {
    /// A pin's error.
    Pin(E),
    /// The plan has more than one phase in the period: it needs a timer, not pins.
    NeedsTimer,
}

/// Four gate pins (high = switch on): leg A high and low, leg B high and low.
#[derive(Debug)]
pub struct GatePins<AH, AL, BH, BL> {
    a_high: AH,
    a_low: AL,
    b_high: BH,
    b_low: BL,
}

impl<E, AH, AL, BH, BL> GatePins<AH, AL, BH, BL>
where
    AH: OutputPin<Error = E>,
    AL: OutputPin<Error = E>,
    BH: OutputPin<Error = E>,
    BL: OutputPin<Error = E>,
{
    /// Takes the four pins and drives them all low (every switch off).
    ///
    /// # Errors
    /// The first pin error.
    pub fn new(a_high: AH, a_low: AL, b_high: BH, b_low: BL) -> Result<Self, E> {
        let mut g = Self {
            a_high,
            a_low,
            b_high,
            b_low,
        };
        g.a_high.set_low()?;
        g.a_low.set_low()?;
        g.b_high.set_low()?;
        g.b_low.set_low()?;
        Ok(g)
    }

    /// Sets both legs. Every switch that must be off is turned off first, then the ones that
    /// must be on, so no instant has both switches of a leg on.
    ///
    /// # Errors
    /// The first pin error (the pins written so far stay written).
    pub fn set(&mut self, a: LegState, b: LegState) -> Result<(), E> {
        if !a.high_on() {
            self.a_high.set_low()?;
        }
        if !a.low_on() {
            self.a_low.set_low()?;
        }
        if !b.high_on() {
            self.b_high.set_low()?;
        }
        if !b.low_on() {
            self.b_low.set_low()?;
        }
        if a.high_on() {
            self.a_high.set_high()?;
        }
        if a.low_on() {
            self.a_low.set_high()?;
        }
        if b.high_on() {
            self.b_high.set_high()?;
        }
        if b.low_on() {
            self.b_low.set_high()?;
        }
        Ok(())
    }

    /// Gives the pins back.
    pub fn release(self) -> (AH, AL, BH, BL) {
        (self.a_high, self.a_low, self.b_high, self.b_low)
    }
}

impl<E, AH, AL, BH, BL> BridgeDriver for GatePins<AH, AL, BH, BL>
where
    AH: OutputPin<Error = E>,
    AL: OutputPin<Error = E>,
    BH: OutputPin<Error = E>,
    BL: OutputPin<Error = E>,
{
    type Error = GateError<E>;

    fn apply(&mut self, plan: &PeriodPlan) -> Result<(), Self::Error> {
        let Some(p) = plan.only_phase() else {
            return Err(GateError::NeedsTimer);
        };
        self.set(p.leg_a(), p.leg_b()).map_err(GateError::Pin)
    }

    fn all_off(&mut self) {
        let _ = self.a_high.set_low();
        let _ = self.a_low.set_low();
        let _ = self.b_high.set_low();
        let _ = self.b_low.set_low();
    }
}

/// A bridge whose switches always follow the bridge guard's plan.
#[derive(Debug)]
pub struct GuardedBridge<'g, D> {
    guard: &'g BridgeGuard,
    state: BridgeState,
    driver: D,
}

impl<'g, D: BridgeDriver> GuardedBridge<'g, D> {
    /// Wraps `driver`, starting from `state`.
    pub fn new(guard: &'g BridgeGuard, state: BridgeState, driver: D) -> Self {
        Self {
            guard,
            state,
            driver,
        }
    }

    /// Once per period: the signed request (counts), the measured supply and back-EMF.
    ///
    /// # Errors
    /// The driver's error. Every switch is then turned off if possible, and the guard keeps
    /// believing the larger of the old and the new drive (so the estimate can only overstate
    /// the current).
    pub fn period(
        &mut self,
        request: i32,
        supply: Volts,
        back_emf: SignedVolts,
    ) -> Result<BridgeOutput, D::Error> {
        let before = self.state.applied();
        let out = self.guard.tick(
            &mut self.state,
            BridgeInput::new(request, supply).with_back_emf(back_emf),
        );
        match self.driver.apply(&out.plan) {
            Ok(()) => Ok(out),
            Err(e) => {
                self.driver.all_off();
                let keep = if before.unsigned_abs() > out.duty.unsigned_abs() {
                    before
                } else {
                    out.duty
                };
                self.state.assume_applied(keep);
                Err(e)
            }
        }
    }

    /// The guard state.
    pub const fn state(&self) -> &BridgeState {
        &self.state
    }

    /// Mutable guard state (e.g. to [`BridgeGuard::clear`] a trip).
    pub fn state_mut(&mut self) -> &mut BridgeState {
        &mut self.state
    }

    /// Unwraps into the driver and the state.
    pub fn release(self) -> (D, BridgeState) {
        (self.driver, self.state)
    }
}
