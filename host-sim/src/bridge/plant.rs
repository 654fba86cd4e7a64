//! The full bridge simulated exactly: supply, four switches with their on-resistance and body
//! diodes, the coil, and optionally a brushed motor's rotor (back-EMF constant, inertia,
//! viscous friction) or a constant back-EMF.
//!
//! The state is the coil current `i` (positive from leg A to leg B) and the rotor speed `ω`.
//! Each leg is commanded high, low or floating; a floating leg's node is set by whichever body
//! diode the current's sign selects. Between the instants where the current reaches zero (a
//! floating leg's diode stops, or a switch path reverses) or a blocked bridge starts to conduct
//! again, the circuit is linear, `L·di/dt = V₀ − (R + R_x)·i − k·ω`, `J·dω/dt = k·i − b·ω`,
//! and is solved in closed form by [`crate::plant::wave`]: nothing is stepped.
//!
//! With a [`Bus`] the rail is the supply lifted by the capacitance's charge above rest, and it
//! pushes back: the rail is held over steps of at most [`BUS_STEP`] at the value of the step's
//! midpoint (second order; within 0.04 % of ngspice with a real capacitor,
//! `tests/bridge_ngspice.rs`).
//!
//! What this model leaves out, and the library's model too: a switch's body diode in parallel
//! with the switch itself (valid while `R_on·|i|` stays below the diode's drop), the leg nodes'
//! capacitance (nanosecond edges), the bus capacitor's series resistance.

use crate::plant::PlantError;
use crate::plant::wave::Solution;
use coilward::bridge::LegState;

/// Most path changes allowed in one call.
const MAX_EVENTS: usize = 100_000;

/// Longest step over which a bus's rail is held, s.
pub const BUS_STEP: f64 = 0.5e-6;

/// A rotor: the motor's mechanical side.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rotor {
    /// Back-EMF (and torque) constant, V·s/rad.
    pub constant: f64,
    /// Inertia, kg·m².
    pub inertia: f64,
    /// Viscous friction, N·m·s (> 0).
    pub friction: f64,
}

/// The bulk capacitance at the bridge and the supply's ability to sink current.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bus {
    /// Capacitance, F.
    pub capacitance: f64,
    /// Current the supply absorbs while the bus is above its resting level, A.
    pub sink_current: f64,
}

/// The bridge's values (SI units).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BridgeCircuit {
    /// Supply, V.
    pub supply: f64,
    /// Coil inductance, H.
    pub inductance: f64,
    /// Coil (winding) resistance, Ω.
    pub resistance: f64,
    /// On-resistance of each switch, Ω.
    pub on_resistance: f64,
    /// Forward drop of each body diode, V.
    pub diode_drop: f64,
    /// Series resistance of each body diode, Ω.
    pub diode_resistance: f64,
    /// Rotor (none: a locked rotor or a plain coil).
    pub rotor: Option<Rotor>,
    /// A constant back-EMF, V (used when there is no rotor; zero for a coil).
    pub back_emf: f64,
    /// Bus (none: the supply absorbs everything).
    pub bus: Option<Bus>,
}

/// The bridge plant's state.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct BridgeState {
    /// Coil current, A (positive from leg A to leg B).
    pub current: f64,
    /// Rotor speed, rad/s.
    pub speed: f64,
    /// Charge on the bus capacitance above its resting level, C.
    pub bus_charge: f64,
}

/// What happened over an interval.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct BridgeTally {
    /// Time covered, s.
    pub time: f64,
    /// ∫ i dt, C.
    pub charge: f64,
    /// Highest current, A.
    pub peak_current: f64,
    /// Lowest current, A.
    pub least_current: f64,
    /// Charge drawn from the supply, C.
    pub drawn: f64,
    /// Charge returned to the supply, C.
    pub returned: f64,
    /// Energy delivered by the supply less the energy returned, J.
    pub source_energy: f64,
    /// Energy returned to the supply, J.
    pub returned_energy: f64,
    /// Dissipated in the winding, J.
    pub winding_energy: f64,
    /// Dissipated in the switches, J.
    pub switch_energy: f64,
    /// Dissipated in the body diodes, J.
    pub diode_energy: f64,
    /// Delivered to the rotor (k·i·ω), J.
    pub mechanical_energy: f64,
    /// Highest bus charge above rest, C.
    pub peak_bus_charge: f64,
    /// Path changes resolved.
    pub events: u64,
    /// Absolute time at which the tally starts, s.
    pub time_offset: f64,
    /// A magnitude to watch for: the first time |i| is at or below it is recorded.
    pub watch: Option<f64>,
    /// Absolute time at which |i| was first at or below [`watch`](Self::watch), s.
    pub below_at: Option<f64>,
}

impl BridgeTally {
    /// An empty tally starting from `s`.
    pub fn starting(s: BridgeState) -> Self {
        Self {
            peak_current: s.current,
            least_current: s.current,
            peak_bus_charge: s.bus_charge,
            ..Self::default()
        }
    }
}

/// How the current flows in a segment.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Flow {
    /// Positive (A to B).
    Forward,
    /// Negative.
    Reverse,
    /// Zero, held there by the diodes of a floating leg.
    Blocked,
}

/// A leg's contribution: node voltage `v = e + r·i`, whether it conducts to the supply rail,
/// how many switches and diodes carry the current.
#[derive(Debug, Clone, Copy)]
struct Leg {
    e: f64,
    r: f64,
    to_rail: bool,
    switches: u8,
    diodes: u8,
}

/// The bridge with its state.
#[derive(Debug, Clone, Copy)]
pub struct BridgePlant {
    /// Circuit values.
    pub circuit: BridgeCircuit,
    /// State.
    pub state: BridgeState,
    /// The bus charge the rail is held at over a step (`None`: the state's).
    rail_charge: Option<f64>,
}

impl BridgePlant {
    /// A plant in state `state`.
    pub fn new(circuit: BridgeCircuit, state: BridgeState) -> Self {
        Self {
            circuit,
            state,
            rail_charge: None,
        }
    }

    /// Leg A (the current leaves its node) in state `s` for a current of sign `flow`.
    fn leg_a(&self, s: LegState, flow: Flow) -> Leg {
        let c = &self.circuit;
        let rail = self.rail();
        match (s, flow) {
            (LegState::High, _) => Leg {
                e: rail,
                r: -c.on_resistance,
                to_rail: true,
                switches: 1,
                diodes: 0,
            },
            (LegState::Low, _) => Leg {
                e: 0.0,
                r: -c.on_resistance,
                to_rail: false,
                switches: 1,
                diodes: 0,
            },
            (LegState::Float, Flow::Forward) => Leg {
                e: -c.diode_drop,
                r: -c.diode_resistance,
                to_rail: false,
                switches: 0,
                diodes: 1,
            },
            (LegState::Float, _) => Leg {
                e: rail + c.diode_drop,
                r: -c.diode_resistance,
                to_rail: true,
                switches: 0,
                diodes: 1,
            },
        }
    }

    /// Leg B (the current enters its node): the mirror of leg A.
    fn leg_b(&self, s: LegState, flow: Flow) -> Leg {
        let c = &self.circuit;
        let rail = self.rail();
        match (s, flow) {
            (LegState::High, _) => Leg {
                e: rail,
                r: c.on_resistance,
                to_rail: true,
                switches: 1,
                diodes: 0,
            },
            (LegState::Low, _) => Leg {
                e: 0.0,
                r: c.on_resistance,
                to_rail: false,
                switches: 1,
                diodes: 0,
            },
            (LegState::Float, Flow::Forward) => Leg {
                e: rail + c.diode_drop,
                r: c.diode_resistance,
                to_rail: true,
                switches: 0,
                diodes: 1,
            },
            (LegState::Float, _) => Leg {
                e: -c.diode_drop,
                r: c.diode_resistance,
                to_rail: false,
                switches: 0,
                diodes: 1,
            },
        }
    }

    /// `v_AB` at zero current for a current about to flow with sign `flow`, less the
    /// back-EMF: positive pushes a forward current.
    fn push(&self, a: LegState, b: LegState, flow: Flow) -> ([f64; 2], f64) {
        let (la, lb) = (self.leg_a(a, flow), self.leg_b(b, flow));
        match self.circuit.rotor {
            Some(r) => ([0.0, -r.constant], la.e - lb.e),
            None => ([0.0, 0.0], la.e - lb.e - self.circuit.back_emf),
        }
    }

    /// The flow that starts from zero current.
    fn flow_from_rest(&self, a: LegState, b: LegState) -> Flow {
        let x = [0.0, self.state.speed];
        let eval = |(c, d): ([f64; 2], f64)| c[0] * x[0] + c[1] * x[1] + d;
        let floating = a == LegState::Float || b == LegState::Float;
        let fwd = eval(self.push(a, b, Flow::Forward));
        let rev = eval(self.push(a, b, Flow::Reverse));
        if !floating {
            // The switches conduct both ways: one value decides.
            return if fwd > 0.0 {
                Flow::Forward
            } else if fwd < 0.0 {
                Flow::Reverse
            } else {
                Flow::Blocked
            };
        }
        if fwd > 0.0 {
            Flow::Forward
        } else if rev < 0.0 {
            Flow::Reverse
        } else {
            Flow::Blocked
        }
    }

    /// x′ = A·x + b for the flow, with x = (i, ω) (ω is a spare, decaying state without a
    /// rotor), and the legs.
    fn system(&self, a: LegState, b: LegState, flow: Flow) -> ([[f64; 2]; 2], [f64; 2], Leg, Leg) {
        let c = &self.circuit;
        let (la, lb) = (self.leg_a(a, flow), self.leg_b(b, flow));
        let (k, j, fr) = match c.rotor {
            Some(r) => (r.constant, r.inertia, r.friction),
            None => (0.0, 1.0, 1.0),
        };
        let emf = if c.rotor.is_some() { 0.0 } else { c.back_emf };
        let mech = [k / j, -fr / j];
        if flow == Flow::Blocked {
            // i stays at zero: a decoupled, stable first row.
            return ([[-1.0, 0.0], mech], [0.0, 0.0], la, lb);
        }
        let l = c.inductance;
        let r_total = c.resistance + lb.r - la.r;
        (
            [[-r_total / l, -k / l], mech],
            [(la.e - lb.e - emf) / l, 0.0],
            la,
            lb,
        )
    }

    /// The rail the high-side switches and diodes connect to: the supply, lifted by the bus
    /// capacitance's charge above its resting level, V.
    pub fn rail(&self) -> f64 {
        let c = &self.circuit;
        let q = self.rail_charge.unwrap_or(self.state.bus_charge);
        c.supply + c.bus.map_or(0.0, |b| q / b.capacitance)
    }

    /// Runs the plant for `duration` seconds with the legs in states `a` and `b`.
    ///
    /// With a bus the rail moves with the charge the bridge returns or draws: the interval is
    /// cut into steps of at most [`BUS_STEP`], each run at the rail of its midpoint (predicted
    /// by a first pass over the step at its starting rail, then run again): second order in
    /// the step, checked against an ngspice circuit with a real capacitor bus.
    ///
    /// # Errors
    /// A singular segment or a stuck event loop.
    pub fn run(
        &mut self,
        a: LegState,
        b: LegState,
        duration: f64,
        tally: &mut BridgeTally,
    ) -> Result<(), PlantError> {
        if self.circuit.bus.is_none() {
            return self.run_at_rail(a, b, duration, tally);
        }
        let mut left = duration;
        while left > 0.0 {
            let step = left.min(BUS_STEP);
            let mut trial = *self;
            let mut scratch = *tally;
            trial.run_at_rail(a, b, step, &mut scratch)?;
            // The step at the rail of its midpoint; the bus's charge is followed from the true
            // start (`account`).
            self.rail_charge = Some(0.5 * (self.state.bus_charge + trial.state.bus_charge));
            let run = self.run_at_rail(a, b, step, tally);
            self.rail_charge = None;
            run?;
            left -= step;
        }
        Ok(())
    }

    /// [`BridgePlant::run`] with the rail held at its present value.
    fn run_at_rail(
        &mut self,
        a: LegState,
        b: LegState,
        duration: f64,
        tally: &mut BridgeTally,
    ) -> Result<(), PlantError> {
        let mut left = duration;
        let mut events = 0usize;
        let mut flow = if self.state.current > 0.0 {
            Flow::Forward
        } else if self.state.current < 0.0 {
            Flow::Reverse
        } else {
            self.flow_from_rest(a, b)
        };
        while left > 0.0 {
            let (m, v, la, lb) = self.system(a, b, flow);
            let x0 = [self.state.current, self.state.speed];
            let sol = Solution::new(m, v, x0)?;
            // The end of this flow: the current reaching zero, or a blocked bridge unblocking.
            let stop = match flow {
                Flow::Forward => sol.wave([-1.0, 0.0], 0.0).first_rise(left),
                Flow::Reverse => sol.wave([1.0, 0.0], 0.0).first_rise(left),
                Flow::Blocked => {
                    let (cf, df) = self.push(a, b, Flow::Forward);
                    let (cr, dr) = self.push(a, b, Flow::Reverse);
                    let t1 = sol.wave(cf, df).first_rise(left);
                    let t2 = sol.wave([-cr[0], -cr[1]], -dr).first_rise(left);
                    match (t1, t2) {
                        (Some(x), Some(y)) => Some(x.min(y)),
                        (x, y) => x.or(y),
                    }
                }
            };
            let end = stop.unwrap_or(left).min(left);
            let x = sol.at(end);
            self.account(&sol, flow, la, lb, (end, x[0]), tally);
            self.state.current = if flow == Flow::Blocked { 0.0 } else { x[0] };
            self.state.speed = if self.circuit.rotor.is_some() {
                x[1]
            } else {
                0.0
            };
            left -= end;
            if stop.is_some() {
                if flow != Flow::Blocked {
                    self.state.current = 0.0;
                }
                flow = self.flow_from_rest(a, b);
                tally.events += 1;
                events += 1;
                if events > MAX_EVENTS {
                    return Err(PlantError::Stuck);
                }
            }
        }
        Ok(())
    }

    /// Adds one segment to the tally, in closed form.
    fn account(
        &mut self,
        sol: &Solution,
        flow: Flow,
        la: Leg,
        lb: Leg,
        (t, i_end): (f64, f64),
        tally: &mut BridgeTally,
    ) {
        if t <= 0.0 {
            return;
        }
        let c = self.circuit;
        let rail = self.rail();
        let i = sol.wave([1.0, 0.0], 0.0);
        let (hi, lo, q, q2) = if flow == Flow::Blocked {
            (0.0, 0.0, 0.0, 0.0)
        } else {
            let (hi, lo) = i.range_ending(t, i_end);
            (hi, lo, i.integral(t), i.integral_of_product(&i, t))
        };
        if let (Some(thr), None) = (tally.watch, tally.below_at) {
            let when = if flow == Flow::Blocked || self.state.current.abs() <= thr {
                Some(0.0)
            } else if flow == Flow::Forward {
                sol.wave([-1.0, 0.0], thr).first_rise(t)
            } else {
                sol.wave([1.0, 0.0], thr).first_rise(t)
            };
            if let Some(x) = when {
                tally.below_at = Some(tally.time_offset + tally.time + x);
            }
        }
        tally.time += t;
        tally.charge += q;
        tally.peak_current = tally.peak_current.max(hi);
        tally.least_current = tally.least_current.min(lo);
        // Supply current: +i through leg A's rail connection, −i through leg B's.
        let share = f64::from(u8::from(la.to_rail)) - f64::from(u8::from(lb.to_rail));
        let into_bridge = share * q;
        if into_bridge >= 0.0 {
            tally.drawn += into_bridge;
        } else {
            tally.returned -= into_bridge;
            tally.returned_energy -= rail * into_bridge;
        }
        tally.source_energy += rail * into_bridge;
        tally.winding_energy += c.resistance * q2;
        tally.switch_energy += f64::from(la.switches + lb.switches) * c.on_resistance * q2;
        tally.diode_energy +=
            f64::from(la.diodes + lb.diodes) * (c.diode_drop * q.abs() + c.diode_resistance * q2);
        if let Some(r) = c.rotor {
            let w = sol.wave([0.0, 1.0], 0.0);
            tally.mechanical_energy += r.constant * i.integral_of_product(&w, t);
        } else {
            tally.mechanical_energy += c.back_emf * q;
        }
        // The bus: the returned current charges the capacitance while the supply sinks up to
        // its limit; a drawn current is taken from the capacitance's extra charge first.
        if let Some(b) = c.bus {
            let q0 = self.state.bus_charge;
            let returning = into_bridge < 0.0;
            if returning {
                // Net inflow −share·i − I_sink; its peak is where the inflow falls to the sink.
                let net_end = -into_bridge - b.sink_current * t;
                let turn = sol
                    .wave([share, 0.0], b.sink_current)
                    .first_rise(t)
                    .filter(|&x| x > 0.0);
                let peak = match turn {
                    Some(x) => q0 - share * i.integral(x) - b.sink_current * x,
                    None => q0 + net_end,
                };
                tally.peak_bus_charge = tally.peak_bus_charge.max(peak).max(q0 + net_end);
                self.state.bus_charge = (q0 + net_end).max(0.0);
            } else {
                self.state.bus_charge = (q0 - into_bridge - b.sink_current * t).max(0.0);
            }
        }
    }

    /// Energy stored in the coil and the rotor now, J.
    pub fn stored_energy(&self) -> f64 {
        let c = &self.circuit;
        let mech = c.rotor.map_or(0.0, |r| {
            0.5 * r.inertia * self.state.speed * self.state.speed
        });
        0.5 * c.inductance * self.state.current * self.state.current + mech
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn coil() -> BridgeCircuit {
        crate::bridge::spice::demo_winding()
    }

    #[test]
    fn forward_drive_rises_as_the_textbook_exponential() {
        // i(t) = V/R·(1 − e^{−t/τ}) with R = R_coil + 2R_on (any circuits text).
        let mut p = BridgePlant::new(coil(), BridgeState::default());
        let r = 4.1;
        let tau = 2e-3 / r;
        let mut t = BridgeTally::starting(p.state);
        p.run(LegState::High, LegState::Low, tau, &mut t).unwrap();
        let want = 12.0 / r * (1.0 - (-1.0f64).exp());
        assert!((p.state.current - want).abs() < 1e-9 * want);
        assert!((t.drawn - t.charge).abs() < 1e-15);
    }

    #[test]
    fn fast_decay_stops_at_zero_and_returns_charge() {
        // Decay to zero through two diodes against the supply: t = τ·ln(1 + I0/a),
        // a = (Vs + 2V_f)/(R + 2R_d) (the RL decay toward a negative asymptote).
        for i0 in [1.5, -1.5] {
            let mut p = BridgePlant::new(
                coil(),
                BridgeState {
                    current: i0,
                    ..BridgeState::default()
                },
            );
            let mut t = BridgeTally::starting(p.state);
            t.watch = Some(1e-9);
            p.run(LegState::Float, LegState::Float, 2e-3, &mut t)
                .unwrap();
            assert_eq!(p.state.current, 0.0);
            let r_f: f64 = 4.04;
            let a = 13.6 / r_f;
            let want = 2e-3 / r_f * (1.0 + 1.5 / a).ln();
            let got = t.below_at.unwrap();
            assert!((got - want).abs() < 1e-9, "{got} vs {want}");
            assert!(t.returned > 0.0 && t.drawn == 0.0);
        }
    }

    #[test]
    fn energy_balances_in_every_mode_with_a_rotor() {
        // Conservation: supply energy = Δ stored (coil and rotor) + winding + switches + diodes
        // + friction; the friction is what the rotor took less what it kept.
        let mut c = coil();
        c.rotor = Some(Rotor {
            constant: 0.02,
            inertia: 2e-6,
            friction: 1e-5,
        });
        let mut p = BridgePlant::new(c, BridgeState::default());
        let e0 = p.stored_energy();
        let mut t = BridgeTally::starting(p.state);
        let phases = [
            (LegState::High, LegState::Low, 30e-6),
            (LegState::Float, LegState::Float, 10e-6),
            (LegState::Low, LegState::Low, 10e-6),
        ];
        for _ in 0..400 {
            for (a, b, d) in phases {
                p.run(a, b, d, &mut t).unwrap();
            }
        }
        for _ in 0..400 {
            p.run(LegState::Low, LegState::High, 40e-6, &mut t).unwrap();
            p.run(LegState::Float, LegState::Float, 10e-6, &mut t)
                .unwrap();
        }
        p.run(LegState::Float, LegState::Float, 5e-3, &mut t)
            .unwrap();
        let mech_kept =
            p.stored_energy() - e0 - 0.5 * c.inductance * p.state.current * p.state.current;
        let friction = t.mechanical_energy - mech_kept;
        assert!(friction > 0.0);
        let losses = t.winding_energy + t.switch_energy + t.diode_energy;
        let coil_kept = 0.5 * c.inductance * p.state.current * p.state.current;
        let lhs = t.source_energy;
        let rhs = coil_kept + losses + t.mechanical_energy;
        assert!((lhs - rhs).abs() < 1e-9 * lhs.abs(), "{lhs} vs {rhs}");
        assert!(t.events > 0);
    }
}
