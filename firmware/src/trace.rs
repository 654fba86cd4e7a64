//! The golden trace: 10 000 periods of a demo drive (invented for the check) with varying duty
//! and supply, through the full guard, plus event-mode steps and the closed forms. Every
//! period's results are hashed; the host and each emulated core must produce the same hashes.
//!
//! `no_std`, no allocation: the same file is compiled into the firmware and into the host tool.

use coilward::thermal::{ClampThermal, CoilThermal, FosterStage};
use coilward::{
    ClampPath, CoilParams, Condition, ControlParams, Current, Guard, GuardLimits, Input, Params,
    Retry, Saturation, SupplyParams, SupplySense, SwitchParams, Tolerance,
};

/// Periods in the trace.
pub const PERIODS: u32 = 10_000;

/// The full-bridge demo (a small motor winding, mixed decay, a back-EMF input, a bus, 500 ns of
/// gate dead time), shared by
/// the panic-free build, the configuration-only build and the benchmark.
pub fn bridge_params() -> coilward::bridge::BridgeParams {
    use coilward::bridge::{BodyDiode, BridgeParams, BusParams, DecayMode, MotorParams};
    BridgeParams::new(
        coilward::SupplyParams::new(12.0, 10.5, 14.0),
        coilward::CoilParams::new(1.2e-3, 2.0),
        coilward::SwitchParams::new(0.02, 30.0),
        BodyDiode::new(0.8, 0.015),
        DecayMode::Mixed { fast_share: 0.3 },
        coilward::ControlParams::new(50e-6, 1000, 8.0),
    )
    .with_motor(MotorParams::new(10.0, 0.015))
    .with_bus(BusParams::new(470e-6, 2.0))
    .with_gate_dead_time(500e-9)
}

/// The bridge demo's limits: 4 A ceiling, 5 A trip, 50 mA release, 2 ms dead time.
pub fn bridge_limits() -> coilward::bridge::BridgeLimits {
    coilward::bridge::BridgeLimits::new(4.0, 5.0, 0.05, 2e-3)
}

/// The drive: a 24 V valve, 40 mH, 18 Ω at 20 °C, saturating to 12 mH above 0.9 A, zener clamp
/// across the switch, 20 kHz.
pub fn params() -> Params {
    let mut coil = CoilParams::new(0.040, 18.0).with_saturation(Saturation::new(0.9, 0.012));
    coil.node_capacitance = Some(470e-12);
    Params::new(
        SupplyParams::new(24.0, 18.0, 30.0),
        coil,
        SwitchParams::new(0.1, 60.0),
        ClampPath::SwitchClamp {
            clamp_voltage: 45.0,
            resistance: 0.5,
        },
        ControlParams::new(50e-6, 3200, 2.0),
    )
}

/// Every protection switched on, and a declared tolerance (so the bound's slices, saturation
/// splits and node charge are all on the trace).
pub fn limits() -> GuardLimits {
    let mut l = GuardLimits::new(1.1, 1.3, 0.05).with_tolerance(
        Tolerance::EXACT
            .with_inductance(0.2)
            .with_resistance(0.1)
            .with_supply_reading(0.02)
            .with_node_capacitance(0.5)
            .with_saturation(0.1, 0.2)
            .with_clamp_voltage(0.05),
    );
    l.clamp_pulse_energy = Some(0.02);
    l.clamp_thermal = Some(ClampThermal::new(
        [
            FosterStage::new(3.0, 2e-3),
            FosterStage::new(20.0, 0.2),
            FosterStage::UNUSED,
        ],
        40.0,
        120.0,
    ));
    l.coil_thermal = Some(CoilThermal::new(0.5, 0.7, 1.05, 25.0, 60.0));
    l.retry = Some(Retry::new(5e-3, 3));
    l
}

/// The trace's valve as a PWM drive is usually built: the same saturating coil with 470 pF at
/// its node, freewheeling through a diode (0.7 V, 50 mΩ) instead of the 45 V clamp (which under
/// steady PWM takes far more power than its replica allows and trips). For the typical-tick
/// benchmark, with the trace's limits (declared tolerance, both thermal images).
pub fn freewheel_params() -> Params {
    let mut p = params();
    p.clamp = ClampPath::Freewheel {
        forward_drop: 0.7,
        resistance: 0.05,
    };
    p
}

/// A high-resistance coil with nothing across the switch and 22 nF at its node, whose turn-offs
/// ring under the breakdown (the bound's ring envelope), with a declared tolerance: for the
/// panic-free build.
pub fn ring_params() -> Params {
    let mut coil = CoilParams::new(0.05, 100.0);
    coil.node_capacitance = Some(22e-9);
    Params::new(
        SupplyParams::new(24.0, 20.0, 26.0),
        coil,
        SwitchParams::new(0.05, 400.0),
        ClampPath::None,
        ControlParams::new(50e-6, 1000, 0.5),
    )
}

/// The ringing coil's limits.
pub fn ring_limits() -> GuardLimits {
    GuardLimits::new(0.3, 0.35, 0.01)
        .with_tolerance(Tolerance::EXACT.with_inductance(0.1).with_resistance(0.05))
}

/// FNV-1a over 64-bit words.
#[derive(Clone, Copy)]
pub struct Fnv(pub u64);

impl Fnv {
    /// A fresh hash.
    pub const fn new() -> Self {
        Fnv(0xcbf2_9ce4_8422_2325)
    }

    /// Mixes in one word, byte by byte.
    pub fn word(&mut self, x: u64) {
        for b in x.to_le_bytes() {
            self.0 ^= u64::from(b);
            self.0 = self.0.wrapping_mul(0x0000_0100_0000_01B3);
        }
    }
}

impl Default for Fnv {
    fn default() -> Self {
        Self::new()
    }
}

/// xorshift32: the drive's pseudo-random choices.
struct Rng(u32);

impl Rng {
    fn next(&mut self) -> u32 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 17;
        x ^= x << 5;
        self.0 = x;
        x
    }
}

/// The trace's supply calibration: a 12-bit ADC on 3.3 V behind an 11:1 divider, 50 mV offset.
pub fn sense() -> Option<SupplySense> {
    SupplySense::new(3.3 * 11.0 / 4095.0, 0.05).ok()
}

/// Runs the trace with the guard and calibration configured here; `sink(period, hash)`
/// receives each period's 32-bit hash. Returns the digest of the whole run, or `None` if the
/// configuration was refused (it never is).
pub fn run(sink: impl FnMut(u32, u32)) -> Option<u64> {
    let guard = Guard::new(&params(), &limits()).ok()?;
    Some(run_with(&guard, &sense()?, sink))
}

/// Runs the trace with a guard and calibration made elsewhere (the firmware built with them
/// flashed as bytes); the digest is [`run`]'s when they are [`params`]/[`limits`]/[`sense`]'s.
pub fn run_with(guard: &Guard, sense: &SupplySense, mut sink: impl FnMut(u32, u32)) -> u64 {
    let model = guard.model();
    let mut state = guard.start_after_reset();
    let mut rng = Rng(0x1234_5678);
    let mut digest = Fnv::new();
    let mut duty = 0u32;
    let mut counts: u16 = 2978; // about 24 V
    for k in 0..PERIODS {
        // Duty: held for random stretches, with jumps to 0, 100 % and beyond.
        if rng.next().is_multiple_of(48) {
            duty = match rng.next() % 6 {
                0 => 0,
                1 => 3200,
                2 => 4000,
                _ => rng.next() % 3201,
            };
        }
        // Supply: a slow walk with occasional sags and surges.
        let r = rng.next();
        counts = match r % 400 {
            0 => 2100, // sag to ~17 V
            1 => 3800, // surge to ~31 V
            2..=40 => counts.saturating_add(1).min(3700),
            41..=80 => counts.saturating_sub(1).max(2300),
            _ => counts,
        };
        let vs = sense.volts(counts);
        let out = if k % 1000 < 990 {
            guard.tick(&mut state, Input::new(duty, vs))
        } else {
            // Ten event-mode steps per thousand periods, with a timer that wraps.
            let then = u32::MAX - (rng.next() % 100);
            let now = then.wrapping_add(20 + rng.next() % 2000);
            guard.event(&mut state, duty > 1600, now.wrapping_sub(then), vs)
        };
        if out.latched.contains(Condition::Overcurrent) && k % 500 == 0 {
            guard.clear(&mut state);
        }
        let mut h = Fnv::new();
        h.word(u64::from(out.duty));
        let mut bits = 0u64;
        for (i, c) in Condition::ALL.iter().enumerate() {
            if out.active.contains(*c) {
                bits |= 1 << i;
            }
            if out.latched.contains(*c) {
                bits |= 1 << (i + 16);
            }
        }
        h.word(bits);
        for c in [
            out.estimate.start,
            out.estimate.peak,
            out.estimate.valley,
            out.estimate.end,
            out.predicted_peak,
        ] {
            h.word(c.to_bits() as u64);
        }
        h.word(u64::from(out.release_in_us.unwrap_or(u32::MAX)));
        h.word(
            guard
                .clamp_temperature(&state)
                .map_or(0, |t| t.to_bits() as u64),
        );
        h.word(
            guard
                .winding_temperature(&state)
                .map_or(0, |t| t.to_bits() as u64),
        );
        if k % 10 == 0 {
            // The closed forms on the present estimate.
            let i = out.estimate.peak;
            h.word(model.turn_off_energy(i, vs).to_bits());
            h.word(u64::from(
                model
                    .decay_time_us(i, Current::ZERO, vs)
                    .unwrap_or(u32::MAX),
            ));
            h.word(u64::from(model.peak_drain_voltage(i, vs).to_bits()));
        }
        if k % 100 == 0 {
            let ss = model.steady_state(duty, vs);
            h.word(ss.mean.to_bits() as u64);
            h.word(ss.peak.to_bits() as u64);
        }
        let period_hash = (h.0 ^ (h.0 >> 32)) as u32;
        sink(k, period_hash);
        digest.word(u64::from(period_hash));
    }
    digest.0
}
