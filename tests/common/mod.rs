//! Shared helpers for the integration tests: demo parameter sets and an independent f64
//! reference of the piecewise-exponential coil model.
#![allow(dead_code)]

use coilward::{ClampPath, CoilParams, ControlParams, Params, SupplyParams, SwitchParams};

/// A demo drive (invented for tests): a 24 V valve, 40 mH, 18 Ω, diode freewheel, 20 kHz PWM.
pub fn valve() -> Params {
    Params::new(
        SupplyParams::new(24.0, 18.0, 30.0),
        CoilParams::new(0.040, 18.0),
        SwitchParams::new(0.1, 60.0),
        ClampPath::Freewheel {
            forward_drop: 0.7,
            resistance: 0.05,
        },
        ControlParams::new(50e-6, 3200, 2.0),
    )
}

/// The same drive with another clamp path.
pub fn valve_with(clamp: ClampPath) -> Params {
    let mut p = valve();
    p.clamp = clamp;
    p
}

/// The piecewise-exponential model in f64, written from the circuit equations independently of
/// the library's fixed-point code.
#[derive(Debug, Clone, Copy)]
pub struct Reference {
    pub l: f64,
    pub r: f64,
    pub r_on: f64,
    /// Path voltage V_p and resistance R_p; `across_switch` for clamp/avalanche paths.
    pub v_p: f64,
    pub r_p: f64,
    pub across_switch: bool,
    pub period: f64,
    pub counts: u32,
    pub full_scale: f64,
}

impl Reference {
    pub fn new(p: &Params) -> Self {
        let c = p.coil;
        let r = f64::from(c.resistance)
            * (1.0
                + f64::from(c.temperature_coefficient)
                    * (f64::from(c.winding_temperature) - f64::from(c.reference_temperature)));
        let (v_p, r_p, across_switch) = match p.clamp {
            ClampPath::None => (f64::from(p.switch.breakdown), 0.0, true),
            ClampPath::Freewheel {
                forward_drop,
                resistance,
            } => (f64::from(forward_drop), f64::from(resistance), false),
            ClampPath::FreewheelZener {
                forward_drop,
                zener_voltage,
                resistance,
            } => (
                f64::from(forward_drop) + f64::from(zener_voltage),
                f64::from(resistance),
                false,
            ),
            ClampPath::SwitchClamp {
                clamp_voltage,
                resistance,
            } => (f64::from(clamp_voltage), f64::from(resistance), true),
            _ => unreachable!("every clamp path is listed"),
        };
        Self {
            l: f64::from(c.inductance),
            r,
            r_on: f64::from(p.switch.on_resistance),
            v_p,
            r_p,
            across_switch,
            period: f64::from(p.control.period),
            counts: p.control.duty_resolution,
            full_scale: f64::from(p.control.current_full_scale),
        }
    }

    pub fn tau_on(&self) -> f64 {
        self.l / (self.r + self.r_on)
    }

    pub fn tau_off(&self) -> f64 {
        self.l / (self.r + self.r_p)
    }

    pub fn a_on(&self, vs: f64) -> f64 {
        vs / (self.r + self.r_on)
    }

    pub fn a_off(&self, vs: f64) -> f64 {
        if self.across_switch {
            (vs - self.v_p) / (self.r + self.r_p)
        } else {
            -self.v_p / (self.r + self.r_p)
        }
    }

    /// Exact segment toward `a`, stopping at zero.
    pub fn segment(i: f64, a: f64, t: f64, tau: f64) -> f64 {
        let next = a + (i - a) * (-t / tau).exp();
        next.max(0.0)
    }

    /// One period of duty `n` counts at supply `vs`: (peak, valley, end) in amperes.
    pub fn step(&self, i0: f64, n: u32, vs: f64) -> (f64, f64, f64) {
        let n = n.min(self.counts);
        let t_on = self.period * f64::from(n) / f64::from(self.counts);
        let t_off = self.period - t_on;
        let i1 = Self::segment(i0, self.a_on(vs), t_on, self.tau_on());
        let i2 = Self::segment(i1, self.a_off(vs), t_off, self.tau_off());
        (i0.max(i1).max(i2), i0.min(i1).min(i2), i2)
    }
}

/// A small deterministic generator (xorshift64*), so long runs need no extra dependency.
pub struct Rng(pub u64);

impl Rng {
    pub fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x >> 12;
        x ^= x << 25;
        x ^= x >> 27;
        self.0 = x;
        x.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }

    /// Uniform in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
}
