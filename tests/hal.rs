//! The embedded-hal 1.0 adapters against embedded-hal-mock: every duty and pin state the
//! hardware sees is the guard's decision.

mod common;

use coilward::{Condition, Guard, GuardLimits, GuardedPwm, GuardedSwitch, Volts};
use embedded_hal_mock::eh1::MockError;
use embedded_hal_mock::eh1::digital::{Mock as PinMock, State, Transaction as PinT};
use embedded_hal_mock::eh1::pwm::{Mock as PwmMock, Transaction as PwmT};

fn guard() -> Guard {
    Guard::new(&common::valve(), &GuardLimits::new(1.0, 1.2, 0.05)).unwrap()
}

#[test]
fn pwm_writes_the_guard_duty_scaled_to_the_channel() {
    let g = guard();
    // The channel counts to 1600; the model's resolution is 3200: 3200 → 1600, 1600 → 800.
    let mut expect = Vec::new();
    for d in [1600u16, 800, 0] {
        expect.push(PwmT::max_duty_cycle(1600));
        expect.push(PwmT::set_duty_cycle(d));
    }
    let mut pwm = GuardedPwm::new(&g, g.start_idle(), PwmMock::new(&expect));
    let vs = Volts::from_num(24);
    assert_eq!(pwm.period(3200, vs).unwrap().duty, 3200);
    assert_eq!(pwm.period(1600, vs).unwrap().duty, 1600);
    assert_eq!(pwm.period(0, vs).unwrap().duty, 0);
    let (mut mock, _) = pwm.release();
    mock.done();
}

#[test]
fn pwm_limited_duty_reaches_the_hardware() {
    let g = guard();
    let vs = Volts::from_num(24);
    // Find the first limited period with a plain guard run, then replay it through the mock.
    let mut s = g.start_idle();
    let mut duties = Vec::new();
    loop {
        let out = g.tick(&mut s, coilward::Input::new(3200, vs));
        duties.push(out.duty);
        if out.active.contains(Condition::CurrentLimit) {
            break;
        }
    }
    let expect: Vec<PwmT> = duties
        .iter()
        .flat_map(|&d| [PwmT::max_duty_cycle(3200), PwmT::set_duty_cycle(d as u16)])
        .collect();
    let mut pwm = GuardedPwm::new(&g, g.start_idle(), PwmMock::new(&expect));
    let mut last = None;
    for _ in &duties {
        last = Some(pwm.period(3200, vs).unwrap());
    }
    let last = last.unwrap();
    assert!(last.duty < 3200 && last.active.contains(Condition::CurrentLimit));
    let (mut mock, _) = pwm.release();
    mock.done();
}

#[test]
fn a_failed_pwm_write_turns_the_output_off_and_keeps_the_worst_belief() {
    let g = guard();
    let expect = [
        PwmT::max_duty_cycle(3200),
        PwmT::set_duty_cycle(3200).with_error(MockError::Io(std::io::ErrorKind::Other)),
        PwmT::set_duty_cycle(0),
    ];
    let mut pwm = GuardedPwm::new(&g, g.start_idle(), PwmMock::new(&expect));
    assert!(pwm.period(3200, Volts::from_num(24)).is_err());
    // The guard assumes the full duty may be applied (the higher belief).
    assert_eq!(pwm.state().applied(), 3200);
    let (mut mock, _) = pwm.release();
    mock.done();
}

#[test]
fn switch_follows_the_guard_and_holds_for_the_release() {
    let g = guard();
    let vs = Volts::from_num(24);
    let expect = [
        PinT::set(State::High), // on
        PinT::set(State::Low),  // at the ceiling: refused
        PinT::set(State::Low),  // off, decaying
        PinT::set(State::Low),  // request during the release interval: held
        PinT::set(State::High), // after the decay: on again
    ];
    let mut sw = GuardedSwitch::new(&g, g.start_idle(), PinMock::new(&expect));
    assert_eq!(sw.update(true, 0, vs).unwrap().duty, 3200);
    let out = sw.update(true, 5_000, vs).unwrap(); // 5 ms on: past the 1 A ceiling (3.1 ms)
    assert!(out.active.contains(Condition::CurrentLimit));
    sw.update(false, 10, vs).unwrap();
    let out = sw.update(true, 10, vs).unwrap();
    assert!(out.active.contains(Condition::ReleaseHold));
    let wait = out.release_in_us.unwrap();
    let out = sw.update(true, wait + 10, vs).unwrap();
    assert_eq!(out.duty, 3200);
    let (mut pin, _) = sw.release();
    pin.done();
}

/// A gate that remembers its level.
struct Gate(bool);

impl embedded_hal::digital::ErrorType for Gate {
    type Error = core::convert::Infallible;
}

impl embedded_hal::digital::OutputPin for Gate {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        self.0 = false;
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        self.0 = true;
        Ok(())
    }
}

#[test]
fn a_switch_checked_when_it_asks_trips_the_winding_image_at_the_iec_time() {
    // The timing contract through the adapter: the request turns on once, and the firmware's
    // only other calls are `check` at `next_check_us`. At 1.5 × the basic current the IEC
    // 60255-149 cold trip time is τ·ln(I²/(I² − k²)) = 60·ln(2.25/1.1475) = 40.40 s (computed;
    // shared/REFERENCES.md §7); the pin must go low within 2 % of it.
    let mut p = common::valve();
    p.coil.temperature_coefficient = 0.0;
    let mut l = GuardLimits::new(1.45, 1.5, 0.05);
    l.coil_thermal = Some(coilward::thermal::CoilThermal::new(
        60.0,
        24.0 / 18.1 / 1.5,
        1.05,
        20.0,
        60.0,
    ));
    let g = Guard::new(&p, &l).unwrap();
    let vs = Volts::from_num(24);
    let mut sw = GuardedSwitch::new(&g, g.start_idle(), Gate(false));
    sw.update(true, 0, vs).unwrap();
    let (mut t, mut calls) = (0.0, 0);
    while let Some(us) = sw.next_check_us() {
        let us = us.max(1);
        sw.check(us, vs).unwrap();
        t += f64::from(us) * 1e-6;
        calls += 1;
        assert!(calls < 1000, "no trip after {calls} checks");
    }
    let want = 60.0 * (2.25f64 / 1.1475).ln();
    let (pin, state) = sw.release();
    assert!(!pin.0, "the pin is low");
    assert!(state.active().contains(Condition::CoilOverheat));
    eprintln!(
        "CHECK GuardedSwitch left on at 1.5 x I_B: low at {t:.3} s after {calls} checks, IEC {want:.3} s"
    );
    assert!((t - want).abs() < 0.02 * want, "{t} vs {want}");
}
