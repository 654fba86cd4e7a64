//! Co-simulation of the bridge guard against the bridge plant, one control period at a time.
//!
//! Each period k (t_k = k·T): the guard's `tick` gets the requested signed duty, the rail as
//! measured at the period start (the supply, or the bus lifted by the charge the bridge
//! returned) and — when the scenario says the firmware measures the speed — the back-EMF from
//! the plant's speed; its plan is carried out on the plant phase by phase, with the gate dead time at every
//! change of a leg between high and low (the changing leg floats for the dead time). The run
//! starts one period before t = 0 with the bridge off, as for the low-side co-simulation.

use crate::bridge::plant::{BridgePlant, BridgeTally};
use crate::bridge::scenario::BridgeScenario;
use crate::cosim::{EventRecord, Finding};
use crate::plant::PlantError;
use coilward::bridge::{AppliedDecay, BridgeGuard, BridgeInput, LegState};
use coilward::{Condition, Conditions, Speed, Volts};
use serde::Serialize;

/// One control period.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct BridgeRow {
    /// Start of the period, s.
    pub t_s: f64,
    /// Requested signed duty, −1 ..= 1.
    pub duty_requested: f64,
    /// Signed duty the guard applied, −1 ..= 1.
    pub duty_applied: f64,
    /// True coil current at the start of the period, A.
    pub current_a: f64,
    /// Highest true current in the period, A.
    pub peak_current_a: f64,
    /// Lowest true current in the period, A.
    pub least_current_a: f64,
    /// The guard's estimate at the start of the period, A.
    pub estimated_current_a: f64,
    /// Rotor speed at the start of the period, rad/s.
    pub speed_rad_s: f64,
    /// Highest bus voltage in the period, V (the supply when no bus is described).
    pub bus_peak_v: f64,
    /// The guard recirculated in the off part (supply-pump).
    pub recirculated: bool,
    /// The guard's bound of the current's magnitude at the start of the period, A.
    pub bound_a: f64,
    /// Active conditions.
    #[serde(skip)]
    pub conditions: Conditions,
}

/// One end of a drive (the applied duty to zero or to the other direction), as the low side's
/// turn-off table has it.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Stop {
    /// When the drive ended, s.
    pub t_s: f64,
    /// The true current's magnitude then, A.
    pub current_a: f64,
    /// Until the true current's magnitude was at the release level, s (`None`: driven again,
    /// or the run ended, first).
    pub decay_time_s: Option<f64>,
    /// Energy returned to the supply meanwhile, J.
    pub returned_energy_j: f64,
}

/// One change of direction, from the request to the first drive the other way.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Reversal {
    /// When the other direction was first requested, s.
    pub requested_s: f64,
    /// When the guard first drove it, s (`None`: not before the end of the run).
    pub driven_s: Option<f64>,
    /// True current when the other direction was first driven, A.
    pub current_at_drive_a: f64,
    /// From when the true current stayed at or below the release current until the drive, s:
    /// the instant it last came down to the release level (`None`: it never settled).
    pub true_release_s: Option<f64>,
}

/// What a bridge run produced.
#[derive(Debug, Clone, Default)]
pub struct BridgeRun {
    /// Per-period rows (empty unless recorded).
    pub rows: Vec<BridgeRow>,
    /// Guard events.
    pub events: Vec<EventRecord>,
    /// Changes of direction.
    pub reversals: Vec<Reversal>,
    /// Each end of a drive: to zero or to the other direction.
    pub stops: Vec<Stop>,
    /// Limits exceeded and actions taken; empty means pass.
    pub findings: Vec<Finding>,
    /// True peak current magnitude, A.
    pub peak_current_a: f64,
    /// Energy returned to the supply, J (plant, exact).
    pub returned_energy_j: f64,
    /// The guard's returned energy, J: its charge at the rail read after the period, less half
    /// the rise that charge made on the bus it believes in.
    pub estimated_returned_energy_j: f64,
    /// Highest bus voltage, V.
    pub peak_bus_v: f64,
    /// Largest |estimate − true| at the period starts, A.
    pub max_estimate_error_a: f64,
    /// Smallest margin of the magnitude the guard acts on (its bound with a declared tolerance,
    /// else its estimate) over the true magnitude at the period starts, A (negative: below it).
    pub min_bound_margin_a: f64,
    /// Periods in which `reversal-hold` held the output.
    pub held_periods: u64,
    /// Periods in which the applied duty differed from the request.
    pub acted_periods: u64,
}

impl BridgeRun {
    /// What the run amounts to (see [`crate::cosim::Verdict`]).
    pub fn verdict(&self) -> crate::cosim::Verdict {
        crate::cosim::Verdict::of(&self.findings)
    }

    /// Whether no limit was exceeded and the guard never changed the request.
    pub fn passed(&self) -> bool {
        self.verdict() == crate::cosim::Verdict::Pass
    }

    fn find(&mut self, kind: &'static str, t: f64, detail: String) {
        if !self.findings.iter().any(|f| f.kind == kind) {
            self.findings.push(Finding {
                kind,
                t_s: t,
                detail,
            });
        }
    }
}

impl BridgeRun {
    /// The conditions a tick raised or cleared, and whether it changed the request `(counts,
    /// fraction, counts per period)`.
    fn record(
        &mut self,
        out: &coilward::bridge::BridgeOutput,
        t: f64,
        (request, want, n_full): (i32, f64, u32),
    ) {
        if out.duty != request {
            self.acted_periods += 1;
            let applied = f64::from(out.duty) / f64::from(n_full) * 100.0;
            self.find(
                "guard-acted",
                t,
                format!(
                    "applied {applied:.1} % where {:.1} % was requested ({})",
                    want * 100.0,
                    out.active
                ),
            );
        }
        for c in Condition::ALL {
            for (on, detail) in [
                (out.raised.contains(c), "raised"),
                (out.cleared.contains(c), "cleared"),
            ] {
                if on {
                    self.events.push(EventRecord {
                        t_s: t,
                        condition: c.name(),
                        detail: detail.into(),
                    });
                }
            }
        }
    }

    /// The estimate's error, the bound's margin over the true magnitude `i_true`, and the
    /// energy the guard says came back: its charge at the rail it flowed into (the `rail` read
    /// now, less half the rise that charge made on the bus it believes in, `∫V dq`).
    fn account(
        &mut self,
        s: &BridgeScenario,
        m: &coilward::bridge::BridgeModel,
        (state, out): (
            &coilward::bridge::BridgeState,
            &coilward::bridge::BridgeOutput,
        ),
        i_true: f64,
        rail: f64,
    ) {
        let est = f64::from(m.amps(state.current()));
        self.max_estimate_error_a = self.max_estimate_error_a.max((est - i_true).abs());
        let margin = f64::from(m.amps(out.bound)) - i_true.abs();
        self.min_bound_margin_a = self.min_bound_margin_a.min(margin);
        let back = m.coulombs(out.estimate.returned);
        let rise = s
            .params
            .bus
            .map_or(0.0, |b| back / f64::from(b.capacitance));
        self.estimated_returned_energy_j += back * (rail - rise / 2.0);
    }

    /// The other direction first driven at `t` with the true current `i_true`: checked against
    /// the release level and the dead time since the true release, and recorded.
    fn reversed(
        &mut self,
        limits: &coilward::bridge::BridgeLimits,
        pending: Option<Reversal>,
        t: f64,
        i_true: f64,
    ) {
        let release = f64::from(limits.release_current);
        if i_true.abs() > release {
            self.find(
                "reversed-before-decay",
                t,
                format!(
                    "the bridge drove the other way with {i_true:.3} A still flowing (release {release:.3} A)"
                ),
            );
        }
        let dead = f64::from(limits.reversal_dead_time);
        if let Some(settled) = pending.as_ref().and_then(|p| p.true_release_s)
            && t - settled < dead - 1e-9
        {
            self.find(
                "reversed-before-dead-time",
                t,
                format!(
                    "the bridge drove the other way {:.1} µs after the true current fell to the release level (dead time {:.1} µs)",
                    (t - settled) * 1e6,
                    dead * 1e6
                ),
            );
        }
        if let Some(mut p) = pending {
            p.driven_s = Some(t);
            p.current_at_drive_a = i_true;
            self.reversals.push(p);
        }
    }
}

impl BridgeRun {
    /// A period carried out: the true peak against the trip, the bus against its maximum, and
    /// whether the guard latched or had to recirculate. Returns the bus's peak, V.
    fn judge(
        &mut self,
        s: &BridgeScenario,
        out: &coilward::bridge::BridgeOutput,
        tally: &BridgeTally,
        prev_active: Conditions,
        t: f64,
    ) -> f64 {
        let (r, trip) = (self, f64::from(s.limits.trip_current));
        let (supply, v_max) = (s.circuit.supply, f64::from(s.params.supply.max));
        let peak = tally.peak_current.abs().max(tally.least_current.abs());
        r.peak_current_a = r.peak_current_a.max(peak);
        if peak > trip {
            r.find(
                "current-above-trip",
                t,
                format!("the true current reached {peak:.3} A (trip {trip:.3} A)"),
            );
        }
        r.returned_energy_j += tally.returned_energy;
        let bus_v = s
            .circuit
            .bus
            .map_or(supply, |b| supply + tally.peak_bus_charge / b.capacitance);
        r.peak_bus_v = r.peak_bus_v.max(bus_v);
        if bus_v > v_max {
            r.find(
                "bus-above-max",
                t,
                format!("returned energy lifted the bus to {bus_v:.2} V (max {v_max:.2} V)"),
            );
        }
        let acted = out.latched.union(
            out.active
                .intersection(Conditions::NONE.with(Condition::SupplyPump)),
        );
        if !out.latched.is_empty() {
            r.find(
                "guard-tripped",
                t,
                format!("the guard latched {}", out.latched),
            );
        }
        if acted.contains(Condition::SupplyPump) && !prev_active.contains(Condition::SupplyPump) {
            r.find(
                "guard-recirculated",
                t,
                "supply-pump: the guard turned fast decay into slow decay to protect the bus"
                    .into(),
            );
        }
        bus_v
    }
}

/// Carries out one period's plan on the plant, with the dead time; returns the period's tally.
fn apply(
    p: &mut BridgePlant,
    legs: &mut (LegState, LegState),
    phases: [(u32, LegState, LegState); 3],
    count: f64,
    dead: f64,
    tally: &mut BridgeTally,
) -> Result<(), PlantError> {
    for (counts, a, b) in phases {
        if counts == 0 {
            continue;
        }
        let mut left = f64::from(counts) * count;
        let crosses = |from: LegState, to: LegState| {
            matches!(
                (from, to),
                (LegState::High, LegState::Low) | (LegState::Low, LegState::High)
            )
        };
        if dead > 0.0 && (crosses(legs.0, a) || crosses(legs.1, b)) {
            let t = dead.min(left);
            let da = if crosses(legs.0, a) {
                LegState::Float
            } else {
                a
            };
            let db = if crosses(legs.1, b) {
                LegState::Float
            } else {
                b
            };
            p.run(da, db, t, tally)?;
            left -= t;
        }
        if left > 0.0 {
            p.run(a, b, left, tally)?;
        }
        *legs = (a, b);
    }
    Ok(())
}

/// Runs the scenario. Rows are kept when `rows` is set.
pub fn run(s: &BridgeScenario, rows: bool) -> BridgeRun {
    let mut r = BridgeRun {
        min_bound_margin_a: f64::INFINITY,
        ..BridgeRun::default()
    };
    let guard: BridgeGuard = match s.guard() {
        Ok(g) => g,
        Err(e) => {
            r.find("plant-stopped", 0.0, format!("guard refused: {e}"));
            return r;
        }
    };
    let m = guard.model();
    let n_full = m.duty_resolution();
    let count = s.period / f64::from(n_full);
    let release = f64::from(s.limits.release_current);
    let supply = s.circuit.supply;
    let vs = Volts::saturating_from_num(supply);
    let mut plant = BridgePlant::new(s.circuit, s.start);
    // A coil that may carry current the guard was not told of: it starts as after a reset.
    let mut state = if s.start.current == 0.0 {
        guard.start_idle()
    } else {
        guard.start_after_reset()
    };
    let mut legs = (LegState::Float, LegState::Float);
    // The period before t = 0: off.
    let mut tally = BridgeTally::starting(plant.state);
    let emf_of = |speed: f64| {
        if s.speed_feedback {
            m.back_emf_from_speed(Speed::saturating_from_num(speed))
        } else {
            coilward::SignedVolts::ZERO
        }
    };
    let pre = guard.tick(
        &mut state,
        BridgeInput::new(0, vs).with_back_emf(emf_of(plant.state.speed)),
    );
    // What it raises (a supply outside its window, say) belongs to the run.
    r.record(&pre, -s.period, (0, 0.0, n_full));
    let phases = |o: &coilward::bridge::BridgeOutput| {
        o.plan
            .phases()
            .map(|ph| (ph.counts(), ph.leg_a(), ph.leg_b()))
    };
    if let Err(e) = apply(
        &mut plant,
        &mut legs,
        phases(&pre),
        count,
        s.dead_time,
        &mut tally,
    ) {
        r.find("plant-stopped", -s.period, e.to_string());
        return r;
    }
    let periods = (s.duration / s.period).round() as u64;
    let mut reversals = Reversals::default();
    let mut prev_active = Conditions::NONE;
    let mut stops = Stops::default();
    for k in 0..periods {
        let t = k as f64 * s.period;
        let want = s.duty_in_period(k);
        let request = (want * f64::from(n_full)).round() as i32;
        let emf = emf_of(plant.state.speed);
        let i_true = plant.state.current;
        // The firmware measures the rail it drives from: the bus, lifted by what came back
        // (read with the scenario's reading error, zero unless the fault suite sets one).
        let rail = plant.rail();
        let vs = Volts::saturating_from_num((rail + s.reading_offset).max(0.0));
        let out = guard.tick(&mut state, BridgeInput::new(request, vs).with_back_emf(emf));
        r.account(s, m, (&state, &out), i_true, rail);
        r.record(&out, t, (request, want, n_full));
        if out.active.contains(Condition::ReversalHold) {
            r.held_periods += 1;
        }
        reversals.asked(&mut r, &s.limits, (request, out.duty), t, i_true);
        // The period on the plant.
        let mut tally = BridgeTally::starting(plant.state);
        tally.time_offset = t;
        tally.watch = Some(release);
        if let Err(e) = apply(
            &mut plant,
            &mut legs,
            phases(&out),
            count,
            s.dead_time,
            &mut tally,
        ) {
            r.find("plant-stopped", t, format!("the plant stopped: {e}"));
            break;
        }
        let end = plant.state.current;
        reversals.settled(&tally, (t, i_true, end), (release, s.period));
        let bus_v = r.judge(s, &out, &tally, prev_active, t);
        prev_active = out.active;
        stops.period(
            &mut r,
            (out.duty, t, i_true, end),
            &tally,
            (release, s.period),
        );
        if rows {
            let at = (t, want, n_full, i_true, plant.state.speed, bus_v);
            r.rows.push(row(m, &out, &tally, at));
        }
    }
    if let Some(p) = reversals.pending {
        r.reversals.push(p);
    }
    stops.finish(&mut r);
    r
}

/// The row of the period starting at `t`: the request `want` (of `n_full` counts), the guard's
/// output, and the plant's tally, true current at the start, speed and highest bus voltage.
fn row(
    m: &coilward::bridge::BridgeModel,
    out: &coilward::bridge::BridgeOutput,
    tally: &BridgeTally,
    (t, want, n_full, i_true, speed, bus_v): (f64, f64, u32, f64, f64, f64),
) -> BridgeRow {
    BridgeRow {
        t_s: t,
        duty_requested: want,
        duty_applied: f64::from(out.duty) / f64::from(n_full),
        current_a: i_true,
        peak_current_a: tally.peak_current,
        least_current_a: tally.least_current,
        estimated_current_a: f64::from(m.amps(out.estimate.end)),
        speed_rad_s: speed,
        bus_peak_v: bus_v,
        recirculated: out.decay == AppliedDecay::Slow,
        bound_a: f64::from(m.amps(out.bound)),
        conditions: out.active,
    }
}

/// Watches each change of direction from its request until the drive the other way.
#[derive(Default)]
struct Reversals {
    /// The direction of the last drive (0 before any).
    direction: i32,
    /// The reversal asked for and not yet driven.
    pending: Option<Reversal>,
}

impl Reversals {
    /// At a tick: a `request` against the last drive's direction opens a reversal; the applied
    /// `duty` the other way closes it (with the true current `i_true` then).
    fn asked(
        &mut self,
        r: &mut BridgeRun,
        limits: &coilward::bridge::BridgeLimits,
        (request, duty): (i32, i32),
        t: f64,
        i_true: f64,
    ) {
        let asked = request.signum();
        if asked != 0 && self.direction != 0 && asked != self.direction && self.pending.is_none() {
            self.pending = Some(Reversal {
                requested_s: t,
                driven_s: None,
                current_at_drive_a: 0.0,
                true_release_s: None,
            });
        }
        if duty != 0 {
            let d = duty.signum();
            if d != self.direction && self.direction != 0 {
                r.reversed(limits, self.pending.take(), t, i_true);
            }
            self.direction = d;
        }
    }

    /// After a period starting at `t` with the true current `i_true` and ending at `end`: when the
    /// current settled at or below the `release` level (since the period's start, since the
    /// plant's located crossing inside it, or not: still or again above it at the end).
    fn settled(
        &mut self,
        tally: &BridgeTally,
        (t, i_true, end): (f64, f64, f64),
        (release, period): (f64, f64),
    ) {
        let Some(p) = self.pending.as_mut() else {
            return;
        };
        let peak = tally.peak_current.abs().max(tally.least_current.abs());
        if peak <= release {
            p.true_release_s.get_or_insert(t);
        } else if end.abs() <= release {
            // From above: the plant's located crossing. From below and back (above in
            // between): the end of the period, the latest it can have been.
            p.true_release_s = if i_true.abs() > release {
                tally.below_at
            } else {
                Some(t + period)
            };
        } else {
            p.true_release_s = None;
        }
    }
}

/// Watches each end of a drive until its current is at the release level.
#[derive(Default)]
struct Stops {
    /// The drive applied in the period before.
    last_duty: i32,
    /// The stop being watched, with the returned energy before its period.
    open: Option<(Stop, f64)>,
}

impl Stops {
    /// After a period (its applied duty, start, and the true current at its start and end;
    /// `tally` its plant's tally, watching for `release` A; `period` s long).
    fn period(
        &mut self,
        r: &mut BridgeRun,
        (duty, t, i_true, end): (i32, f64, f64, f64),
        tally: &BridgeTally,
        (release, period): (f64, f64),
    ) {
        let returned = tally.returned_energy;
        let released = if i_true.abs() <= release {
            Some(t)
        } else if end.abs() <= release {
            tally.below_at.or(Some(t + period))
        } else {
            None
        };
        let ended = self.last_duty != 0 && duty.signum() != self.last_duty.signum();
        if ended || duty != 0 {
            // Driven again (or ended again) before the release: the open stop never decayed.
            if let Some((stop, from)) = self.open.take() {
                r.stops.push(Stop {
                    returned_energy_j: r.returned_energy_j - returned - from,
                    ..stop
                });
            }
        }
        if ended {
            let stop = Stop {
                t_s: t,
                current_a: i_true.abs(),
                decay_time_s: None,
                returned_energy_j: 0.0,
            };
            self.open = Some((stop, r.returned_energy_j - returned));
        }
        self.last_duty = duty;
        if let (Some((stop, from)), Some(at)) = (self.open, released) {
            r.stops.push(Stop {
                decay_time_s: Some(at - stop.t_s),
                returned_energy_j: r.returned_energy_j - from,
                ..stop
            });
            self.open = None;
        }
    }

    /// At the end of the run: a stop still watched is listed as not released.
    fn finish(self, r: &mut BridgeRun) {
        if let Some((stop, from)) = self.open {
            r.stops.push(Stop {
                returned_energy_j: r.returned_energy_j - from,
                ..stop
            });
        }
    }
}
