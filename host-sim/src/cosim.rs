//! Co-simulation: the real `coilward` guard at the control period against the [`crate::plant`].
//!
//! Each control period k (t_k = k·T):
//! 1. the ADC reads the supply rail (the coil's supply terminal, after the source resistance) at
//!    t_k — exact by default, or quantised with offset and seeded Gaussian noise;
//! 2. the guard's `tick` is called with the drive's requested duty and that reading, exactly as
//!    firmware calls it: it accounts for the period just ended and returns the duty to apply;
//! 3. the switch is on for duty × T from t_k (edge-aligned PWM), then off until t_{k+1}; the
//!    plant resolves every path change inside the period.
//!
//! The run begins one period before t = 0 with the switch off from the start state (a coil at
//! rest, or carrying the start current), so the guard's first update accounts for a period the
//! plant really had. Rows and events are reported from t = 0.

use crate::plant::{Circuit, Plant, PlantError, State, Tally};
use crate::scenario::{Calls, Scenario, duty_in_period, duty_span};
use coilward::{Condition, Conditions, Guard, Input, Volts};
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use serde::Serialize;

/// One control period, as the CSV report has it.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Row {
    /// Start of the period, s.
    pub t_s: f64,
    /// Requested duty, 0 ..= 1.
    pub duty_requested: f64,
    /// Duty the guard applied, 0 ..= 1.
    pub duty_applied: f64,
    /// True supply rail at the start of the period, V.
    pub supply_v: f64,
    /// True coil current at the start of the period, A.
    pub current_a: f64,
    /// True mean current over the period, A.
    pub mean_current_a: f64,
    /// True peak current over the period, A.
    pub peak_current_a: f64,
    /// The guard's estimate of the current at the start of the period, A.
    pub estimated_current_a: f64,
    /// The guard's predicted peak for the period, A.
    pub estimated_peak_a: f64,
    /// Highest switch-node voltage in the period, V.
    pub drain_peak_v: f64,
    /// Active conditions (bit set; names via [`Conditions`]).
    #[serde(skip)]
    pub conditions: Conditions,
    /// Supply as the guard read it, V.
    pub supply_read_v: f64,
    /// Energy taken by the clamp path and the switch in avalanche in the period, J.
    pub clamp_energy_j: f64,
    /// The guard's bound of the current at the start of the period (at or above the true current
    /// for every circuit inside the declared tolerance), A.
    pub bound_a: f64,
    /// The guard was called at the start of this period (always, unless it is called on
    /// events; between calls the guard's figures are those of its last call).
    #[serde(skip)]
    pub called: bool,
}

/// One turn-off: a drive step to duty 0, or the guard forcing the output off.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct TurnOff {
    /// When the switch opened, s.
    pub t_s: f64,
    /// True current at that instant, A.
    pub current_a: f64,
    /// Time until the true current was below the release current, s (`None`: not reached
    /// before the next turn-on or the end of the run).
    pub decay_time_s: Option<f64>,
    /// Energy absorbed by the clamp path and by the switch in avalanche until the next turn-on
    /// or the end of the run, J.
    pub clamp_energy_j: f64,
    /// Of which the switch in avalanche, J.
    pub avalanche_energy_j: f64,
    /// Highest switch-node voltage after the opening, V.
    pub peak_drain_voltage_v: f64,
    /// Whether the guard forced it (the drive still requested a duty).
    pub forced: bool,
}

/// A guard condition raised or cleared.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EventRecord {
    /// When, s.
    pub t_s: f64,
    /// The condition's stable name.
    pub condition: &'static str,
    /// What happened.
    pub detail: String,
}

/// A limit the run exceeded, or an action the guard had to take.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Finding {
    /// Stable identifier: `current-above-trip`, `clamp-pulse-above-rating`,
    /// `avalanche-with-clamp`, `on-before-release`, `on-into-ringing-node`, `guard-acted`,
    /// `plant-stopped` (the bridge adds its own; those in [`ACTED`] make a run limited, any
    /// other makes it fail).
    pub kind: &'static str,
    /// First time it happened, s.
    pub t_s: f64,
    /// Human-readable detail.
    pub detail: String,
}

/// The guard's estimate against the true current.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct EstimateError {
    /// Largest |estimate − true| at the period starts, A.
    pub max_abs_error_a: f64,
    /// RMS of the same, A.
    pub rms_error_a: f64,
    /// Largest (estimate − true) shortfall, A: how far the guard underestimated at worst.
    pub max_underestimate_a: f64,
    /// Smallest (bound − true) at the period starts, A: the guard's bound is sound while this
    /// stays at or above zero (see `coilward::Tolerance`).
    pub min_bound_margin_a: f64,
}

/// What a run produced.
#[derive(Debug, Clone, Default)]
pub struct Run {
    /// Per-period rows (empty unless recorded).
    pub rows: Vec<Row>,
    /// Turn-offs.
    pub turn_offs: Vec<TurnOff>,
    /// Guard events.
    pub events: Vec<EventRecord>,
    /// Limits exceeded and actions taken; empty means pass.
    pub findings: Vec<Finding>,
    /// True peak current over the run, A.
    pub peak_current_a: f64,
    /// True peak switch-node voltage over the run, V.
    pub peak_drain_voltage_v: f64,
    /// Largest single pulse into the clamp path: one PWM off-segment, or one whole turn-off, J.
    pub max_pulse_energy_j: f64,
    /// Total energy into the clamp path and avalanche, J.
    pub clamp_energy_total_j: f64,
    /// Estimate error.
    pub estimate: EstimateError,
    /// Steps simulated: control periods (in on-events runs, the steps between calls, each at
    /// most one period).
    pub periods: u64,
    /// Path changes resolved by the plant.
    pub plant_events: u64,
    /// Periods in which the applied duty differed from the request.
    pub acted_periods: u64,
    /// Guard calls (one a period, or one an event).
    pub calls: u64,
    /// Simulated time, s.
    pub simulated_s: f64,
    /// Periods whose tick was missed (`[ticks] missed`).
    pub missed_ticks: u64,
    /// Periods whose tick came too late for the timer (`[ticks] late`).
    pub late_ticks: u64,
    /// The ceiling the guard applied, A: the configured one, or lower where the clamp's
    /// single-pulse rating lowers it (0 when the guard was refused).
    pub ceiling_a: f64,
    /// The plant sampled over [`Options::wave`]'s window.
    pub wave: Vec<WavePoint>,
}

impl Run {
    /// Records the first finding of `kind` (later ones of the same kind add nothing).
    fn first(&mut self, kind: &'static str, t_s: f64, detail: impl FnOnce() -> String) {
        if !self.findings.iter().any(|f| f.kind == kind) {
            self.findings.push(Finding {
                kind,
                t_s,
                detail: detail(),
            });
        }
    }

    /// What the run amounts to.
    pub fn verdict(&self) -> Verdict {
        Verdict::of(&self.findings)
    }

    /// Whether the profile passed: no limit exceeded and the guard never changed the request.
    pub fn passed(&self) -> bool {
        self.verdict() == Verdict::Pass
    }
}

/// What a run amounts to, the same for both topologies and for each sweep sample.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, serde::Deserialize,
)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    /// No limit exceeded, and the guard never changed the request.
    Pass,
    /// No limit exceeded; the guard changed the request (its findings say how often and why).
    Limited,
    /// The plant exceeded a limit, the load was re-energised or reversed before its current
    /// decayed, or the run could not be carried out.
    Fail,
}

/// Findings that only say the guard changed the request: the run is limited, not failed.
pub const ACTED: [&str; 3] = ["guard-acted", "guard-recirculated", "guard-tripped"];

impl Verdict {
    /// From a run's findings.
    pub fn of(findings: &[Finding]) -> Self {
        if findings.iter().any(|f| !ACTED.contains(&f.kind)) {
            Verdict::Fail
        } else if findings.is_empty() {
            Verdict::Pass
        } else {
            Verdict::Limited
        }
    }

    /// The word reports and JSON use: `pass`, `limited`, `fail`.
    pub fn word(self) -> &'static str {
        match self {
            Verdict::Pass => "pass",
            Verdict::Limited => "limited",
            Verdict::Fail => "fail",
        }
    }

    /// The command's exit status: 0, 3, 1 (2 is for input the simulator refused).
    pub fn exit_status(self) -> u8 {
        match self {
            Verdict::Pass => 0,
            Verdict::Limited => 3,
            Verdict::Fail => 1,
        }
    }
}

/// Options of a run.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Options {
    /// Keep one [`Row`] per period.
    pub rows: bool,
    /// Sample the plant's current and switch node [`WAVE_SAMPLES`] times a period over this
    /// window (s) into [`Run::wave`], for a zoomed plot. The plant runs in the same exact
    /// segments cut at the samples, so its figures may differ from an unsampled run's in the
    /// last bits: take the reports from a run without it.
    pub wave: Option<(f64, f64)>,
}

/// Samples per control period of [`Options::wave`].
pub const WAVE_SAMPLES: u32 = 64;

/// The plant at one instant of a sampled window.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct WavePoint {
    /// Time, s.
    pub t_s: f64,
    /// Coil current, A.
    pub current_a: f64,
    /// Switch-node voltage, V.
    pub node_v: f64,
}

/// The supply ADC.
struct Adc {
    cfg: crate::scenario::Adc,
    rng: rand_chacha::ChaCha8Rng,
}

impl Adc {
    fn read(&mut self, volts: f64) -> f64 {
        if let Some(v) = self.cfg.stuck {
            return v;
        }
        let mut v = volts + self.cfg.offset;
        if self.cfg.noise > 0.0 {
            let n: f64 = StandardNormal.sample(&mut self.rng);
            v += self.cfg.noise * n;
        }
        if let Some(bits) = self.cfg.bits {
            let top = f64::from((1u32 << bits) - 1);
            let code = (v / self.cfg.full_scale * top).round().clamp(0.0, top);
            v = code * self.cfg.full_scale / top;
        }
        v.max(0.0)
    }
}

/// One step of `len` s from `tk` with the switch on for the first `on_time` s: (current at the
/// start, current when the switch opened, on tally, off tally with the release current watched,
/// time the switch opened).
fn run_step(
    plant: &mut Plant,
    (on_time, len, tk): (f64, f64, f64),
    release: f64,
    mut wave: Option<&mut Vec<WavePoint>>,
) -> Result<(f64, f64, Tally, Tally, f64), PlantError> {
    let i_start = plant.state.current;
    let mut on = Tally::starting(plant.state);
    on.time_offset = tk;
    if let Some(w) = wave.as_deref_mut() {
        w.push(WavePoint {
            t_s: tk,
            current_a: plant.state.current,
            node_v: plant.state.node,
        });
    }
    if on_time > 0.0 {
        run_part(
            plant,
            true,
            (tk, on_time, len),
            &mut on,
            wave.as_deref_mut(),
        )?;
    }
    let t_open = tk + on_time;
    let i_open = plant.state.current;
    let mut off = Tally::starting(plant.state);
    off.time_offset = t_open;
    off.watch = Some(release);
    if i_open <= release {
        off.below_at = Some(t_open);
    }
    if on_time < len {
        run_part(plant, false, (t_open, len - on_time, len), &mut off, wave)?;
    }
    Ok((i_start, i_open, on, off, t_open))
}

/// One part of a period (`span` s from `t0` in a period of `len` s), whole, or cut into pieces of
/// `len / WAVE_SAMPLES` with the plant recorded after each.
fn run_part(
    plant: &mut Plant,
    on: bool,
    (t0, span, len): (f64, f64, f64),
    tally: &mut Tally,
    wave: Option<&mut Vec<WavePoint>>,
) -> Result<(), PlantError> {
    let Some(w) = wave else {
        return plant.run(on, span, tally);
    };
    let pieces = (span / len * f64::from(WAVE_SAMPLES)).ceil().max(1.0);
    let piece = span / pieces;
    let mut done = 0.0;
    for k in 1..=pieces as u32 {
        let upto = if f64::from(k) >= pieces {
            span
        } else {
            piece * f64::from(k)
        };
        plant.run(on, upto - done, tally)?;
        done = upto;
        w.push(WavePoint {
            t_s: t0 + done,
            current_a: plant.state.current,
            node_v: plant.state.node,
        });
    }
    Ok(())
}

/// Records the first pulse above the rating.
fn pulse_over(out: &mut Run, rating: Option<f64>, pulse: f64, t: f64) {
    if let Some(r) = rating
        && pulse > r
    {
        out.first("clamp-pulse-above-rating", t, || {
            format!("one turn-off put {pulse:.4e} J into the clamp path (rating {r:.4e} J)")
        });
    }
}

/// Runs a scenario with its own circuit.
pub fn run(s: &Scenario, opts: Options) -> Run {
    run_with(s, &s.plant.circuit(), opts)
}

/// Runs a scenario's guard, beliefs and drive against `circuit` (a sweep's sample).
pub fn run_with(s: &Scenario, circuit: &Circuit, opts: Options) -> Run {
    let mut out = Run::default();
    let guard = match s.guard() {
        Ok(g) => g,
        Err(e) => {
            out.findings.push(Finding {
                kind: "plant-stopped",
                t_s: 0.0,
                detail: format!("guard refused: {e}"),
            });
            return out;
        }
    };
    out.ceiling_a = f64::from(guard.model().amps(guard.ceiling()));
    if let Err(e) = simulate(s, &guard, circuit, opts, &mut out) {
        // The step in which the plant stopped.
        let t_s = out.simulated_s;
        out.first("plant-stopped", t_s, || format!("the run stopped: {e}"));
    }
    out
}

/// The fixed figures of a run.
struct Limits {
    /// Control period, s.
    t: f64,
    /// Timer counts per period.
    res: f64,
    release: f64,
    trip: f64,
    rating: Option<f64>,
    has_clamp: bool,
    breakdown: f64,
    supply: f64,
}

/// What the walk through a run carries from one step to the next.
#[derive(Default)]
struct Walk {
    prev_applied: u32,
    /// The open turn-off record (its decay watched in the off steps that follow).
    open: Option<usize>,
    /// The last opening of the switch: (time, current, off-segment tally).
    last_open: Option<(f64, f64, Tally)>,
    /// Inside a release (after a turn-off record opened): whether the current has been below
    /// the release current since (for the report; the turn-on check looks at the current).
    releasing: Option<bool>,
    sum_sq: f64,
    count: u64,
}

/// When the guard is called and how long each step of the run lasts.
enum Pace {
    /// One call per control period; the drive's duty `held` until period `until` (the
    /// timeline is searched again only when a step may begin).
    Periodic {
        k: u64,
        n: u64,
        until: u64,
        held: f64,
    },
    /// Calls at request changes, at `next_check_us` and every `poll_us`; steps of at most one
    /// control period between them (so rows and plots keep the period's resolution).
    Events {
        now_us: u64,
        end_us: u64,
        period_us: u64,
        poll_us: u64,
        next_call_us: u64,
        last_call_us: u64,
    },
}

impl Pace {
    fn new(s: &Scenario) -> Self {
        match s.calls {
            Calls::EveryPeriod => Pace::Periodic {
                k: 0,
                n: (s.duration / s.period).round().max(1.0) as u64,
                until: 0,
                held: 0.0,
            },
            Calls::OnEvents { poll_us } => Pace::Events {
                now_us: 0,
                end_us: (s.duration * 1e6).round().max(1.0) as u64,
                period_us: (s.period * 1e6).round().max(1.0) as u64,
                poll_us,
                next_call_us: 0,
                // The run's lead-in period is the first call's elapsed time.
                last_call_us: 0,
            },
        }
    }

    /// The next step: (start, s; requested duty; whether the guard is called, with the µs since
    /// its last call); `None` at the end. [`Pace::advance`] then ends the step.
    fn step(&mut self, s: &Scenario) -> Option<(f64, f64, Option<u32>)> {
        match self {
            Pace::Periodic { k, n, until, held } => {
                if *k >= *until {
                    (*held, *until) = duty_span(&s.drive, |d| (d.at, d.duty), s.period, *k);
                }
                let tk = *k as f64 * s.period;
                (*k < *n).then_some((tk, *held, Some(0)))
            }
            Pace::Events {
                now_us,
                end_us,
                period_us,
                next_call_us,
                last_call_us,
                ..
            } => {
                if *now_us >= *end_us {
                    return None;
                }
                let call = (*now_us == *next_call_us).then(|| {
                    let elapsed = if *now_us == 0 {
                        *period_us
                    } else {
                        *now_us - *last_call_us
                    };
                    *last_call_us = *now_us;
                    u32::try_from(elapsed).unwrap_or(u32::MAX)
                });
                let duty = duty_in_period(&s.drive, |d| (d.at, d.duty), 1e-6, *now_us);
                Some((*now_us as f64 * 1e-6, duty, call))
            }
        }
    }

    /// Ends the step [`Pace::step`] began: its length, s (at most one control period, and in
    /// on-events runs up to the next call).
    fn advance(&mut self, s: &Scenario) -> f64 {
        match self {
            Pace::Periodic { k, .. } => {
                *k += 1;
                s.period
            }
            Pace::Events {
                now_us,
                end_us,
                period_us,
                next_call_us,
                ..
            } => {
                // `next_call_us` is after `now_us` once the call of this step has been made.
                let stop = (*now_us + *period_us).min(*next_call_us).min(*end_us);
                let len = stop.saturating_sub(*now_us).max(1);
                *now_us += len;
                len as f64 * 1e-6
            }
        }
    }

    /// After a call at `t_s` that left the output on or off: when the firmware calls next.
    fn called(&mut self, s: &Scenario, o: &coilward::Output) {
        if let Pace::Events {
            now_us,
            poll_us,
            next_call_us,
            ..
        } = self
        {
            let mut next = *now_us + *poll_us;
            let change = s
                .drive
                .iter()
                .map(|d| (d.at * 1e6).round() as u64)
                .find(|&at| at > *now_us);
            if let Some(at) = change {
                next = next.min(at);
            }
            if o.duty > 0
                && let Some(us) = o.next_check_us
            {
                next = next.min(*now_us + u64::from(us.max(1)));
            }
            *next_call_us = next;
        }
    }
}

/// The plant and the guard at the start of a run: a coil at rest or carrying the start current,
/// a guard told of it or started as after a reset.
fn begin(s: &Scenario, guard: &Guard, circuit: &Circuit) -> (Plant, coilward::GuardState) {
    let start = State {
        current: s.start.current,
        node: if s.start.current > 0.0 {
            0.0
        } else {
            circuit.supply
        },
    };
    let gs = if !s.start.guard_told {
        guard.start_after_reset()
    } else {
        match guard.model().current_from_amps(s.start.current as f32) {
            Some(c) if s.start.current > 0.0 => guard.start_with_current(c),
            _ => guard.start_idle(),
        }
    };
    (Plant::new(*circuit, start), gs)
}

/// One report row: a step `(start, length, requested and applied duty)` with the plant's
/// `(rail, reading, current at the start)` and tallies, and the guard's figures (between calls,
/// those it last gave).
fn row(
    model: &coilward::Model,
    o: Option<&coilward::Output>,
    last: Option<&Row>,
    (tk, len, duty_req, duty_applied): (f64, f64, f64, f64),
    (rail, read, i_start): (f64, f64, f64),
    (on, off): (&Tally, &Tally),
    pulse: f64,
) -> Row {
    let (est, est_peak, conditions, bound) = match o {
        Some(o) => (
            f64::from(model.amps(o.estimate.end)),
            f64::from(model.amps(o.predicted_peak)),
            o.active,
            f64::from(model.amps(o.bound)),
        ),
        None => last.map_or((0.0, 0.0, Conditions::NONE, 0.0), |r| {
            (
                r.estimated_current_a,
                r.estimated_peak_a,
                r.conditions,
                r.bound_a,
            )
        }),
    };
    Row {
        t_s: tk,
        duty_requested: duty_req,
        duty_applied,
        supply_v: rail,
        current_a: i_start,
        mean_current_a: (on.charge + off.charge) / len,
        peak_current_a: on.peak_current.max(off.peak_current),
        estimated_current_a: est,
        estimated_peak_a: est_peak,
        drain_peak_v: on.peak_node.max(off.peak_node),
        conditions,
        supply_read_v: read,
        clamp_energy_j: pulse,
        bound_a: bound,
        called: o.is_some(),
    }
}

fn simulate(
    s: &Scenario,
    guard: &Guard,
    circuit: &Circuit,
    opts: Options,
    out: &mut Run,
) -> Result<(), PlantError> {
    let model = guard.model();
    let lim = Limits {
        t: s.period,
        res: f64::from(s.duty_resolution),
        release: f64::from(s.limits.release_current),
        trip: f64::from(s.limits.trip_current),
        rating: s.limits.clamp_pulse_energy.map(f64::from),
        has_clamp: s.plant.path != crate::scenario::PathName::None,
        breakdown: circuit.breakdown,
        supply: circuit.supply,
    };
    let (mut plant, mut gs) = begin(s, guard, circuit);
    let mut adc = Adc {
        cfg: s.adc,
        rng: rand_chacha::ChaCha8Rng::seed_from_u64(s.adc.seed),
    };
    let mut tick_rng = rand_chacha::ChaCha8Rng::seed_from_u64(s.ticks.seed);
    let mut lead = Tally::starting(plant.state);
    plant.run(false, lim.t, &mut lead)?;

    out.peak_current_a = plant.state.current;
    out.peak_drain_voltage_v = plant.state.node;
    let mut walk = Walk::default();
    let mut pace = Pace::new(s);
    // As a firmware keeps it per channel: the same results as without, fewer instructions.
    let mut memo = coilward::TickMemo::EMPTY;
    while let Some((tk, duty_req, call)) = pace.step(s) {
        if !s.supply_profile.is_constant() {
            plant.set_supply(s.supply_profile.at(tk, s.plant.voltage, circuit.supply));
        }
        let rail = plant.rail();
        let read = adc.read(rail);
        let counts = (duty_req * lim.res).round() as u32;
        let supply = Volts::saturating_from_num(read);
        let (o, applied) = match (&pace, call) {
            (Pace::Periodic { .. }, _) => {
                let fault: f64 = if s.ticks.missed + s.ticks.late > 0.0 {
                    tick_rng.random()
                } else {
                    1.0
                };
                // A missed tick: no interrupt this period, the timer repeats the last duty, the
                // guard learns nothing and its next update accounts for one period where two
                // passed. A late one: the write came after the timer's update.
                if fault < s.ticks.missed {
                    out.missed_ticks += 1;
                    (None, walk.prev_applied)
                } else {
                    let o = guard.tick_with(&mut gs, &mut memo, Input::new(counts, supply));
                    if fault < s.ticks.missed + s.ticks.late {
                        out.late_ticks += 1;
                        (Some(o), walk.prev_applied)
                    } else {
                        let applied = o.duty.min(s.duty_resolution);
                        (Some(o), applied)
                    }
                }
            }
            (Pace::Events { .. }, Some(elapsed)) => {
                let o = guard.event(&mut gs, counts > 0, elapsed, supply);
                pace.called(s, &o);
                let applied = if o.duty > 0 { s.duty_resolution } else { 0 };
                (Some(o), applied)
            }
            (Pace::Events { .. }, None) => (None, walk.prev_applied),
        };
        if let Some(o) = &o {
            out.calls += 1;
            walk.record(
                out,
                model,
                o,
                tk,
                (counts, duty_req, lim.res),
                plant.state.current,
            );
        }
        walk.switch(out, &lim, &plant, tk, applied, counts);
        let len = pace.advance(s);
        let on_time = f64::from(applied) / lim.res * len;
        let sampled = opts.wave.is_some_and(|(a, b)| tk + len > a && tk < b);
        let (i_start, i_open, on, off, t_open) = run_step(
            &mut plant,
            (on_time, len, tk),
            lim.release,
            sampled.then_some(&mut out.wave),
        )?;
        let pulse = walk.account(out, &lim, applied, (&on, &off), t_open, i_open);
        if opts.rows {
            let r = row(
                model,
                o.as_ref(),
                out.rows.last(),
                (tk, len, duty_req, f64::from(applied) / lim.res),
                (rail, read, i_start),
                (&on, &off),
                pulse,
            );
            out.rows.push(r);
        }
        out.periods += 1;
        out.simulated_s = tk + len;
    }
    finish(out, &lim, &walk);
    Ok(())
}

/// After the last period: the largest clamp pulse and those over the rating, the estimate's
/// RMS error, the findings in time order.
fn finish(out: &mut Run, lim: &Limits, walk: &Walk) {
    for i in 0..out.turn_offs.len() {
        let t = out.turn_offs[i];
        out.max_pulse_energy_j = out.max_pulse_energy_j.max(t.clamp_energy_j);
        pulse_over(out, lim.rating, t.clamp_energy_j, t.t_s);
    }
    if walk.count > 0 {
        out.estimate.rms_error_a = (walk.sum_sq / walk.count as f64).sqrt();
    }
    out.findings.sort_by(|a, b| a.t_s.total_cmp(&b.t_s));
}

impl Walk {
    /// A guard call's output: the estimate against the true current `i`, whether the guard
    /// changed the request, and the conditions it raised or cleared.
    fn record(
        &mut self,
        out: &mut Run,
        model: &coilward::Model,
        o: &coilward::Output,
        tk: f64,
        (counts, duty_req, res): (u32, f64, f64),
        i: f64,
    ) {
        let est_now = f64::from(model.amps(o.estimate.end));
        let err = est_now - i;
        out.estimate.max_abs_error_a = out.estimate.max_abs_error_a.max(err.abs());
        out.estimate.max_underestimate_a = out.estimate.max_underestimate_a.max(-err);
        let margin = f64::from(model.amps(o.bound)) - i;
        out.estimate.min_bound_margin_a = if self.count == 0 {
            margin
        } else {
            out.estimate.min_bound_margin_a.min(margin)
        };
        self.sum_sq += err * err;
        self.count += 1;
        if o.duty != counts {
            out.acted_periods += 1;
            out.first("guard-acted", tk, || {
                format!(
                    "applied {:.1} % where {:.1} % was requested ({})",
                    f64::from(o.duty) / res * 100.0,
                    duty_req * 100.0,
                    o.active
                )
            });
        }
        for c in Condition::ALL {
            let (raised, cleared) = (o.raised.contains(c), o.cleared.contains(c));
            if !(raised || cleared) {
                continue;
            }
            let detail = if raised {
                let mut d = format!(
                    "raised: estimate {est_now:.4} A, predicted peak {:.4} A",
                    model.amps(o.predicted_peak)
                );
                if o.latched.contains(c) {
                    d.push_str(", latched");
                }
                if let (Condition::ReleaseHold, Some(us)) = (c, o.release_in_us) {
                    d.push_str(&format!(", release in {us} µs"));
                }
                d
            } else {
                "cleared".to_string()
            };
            out.events.push(EventRecord {
                t_s: tk,
                condition: c.name(),
                detail,
            });
        }
    }

    /// The switch's state changes at `tk`: a turn-off opens a record, a turn-on is checked
    /// against the release and the node.
    fn switch(
        &mut self,
        out: &mut Run,
        lim: &Limits,
        plant: &Plant,
        tk: f64,
        applied: u32,
        counts: u32,
    ) {
        // A turn-off: the switch stays off this step after being on in the last one.
        if applied == 0
            && self.prev_applied > 0
            && let Some((t_open, i_open, tally)) = self.last_open
        {
            out.turn_offs.push(TurnOff {
                t_s: t_open,
                current_a: i_open,
                decay_time_s: tally.below_at.map(|x| x - t_open),
                clamp_energy_j: tally.clamp_energy + tally.avalanche_energy,
                avalanche_energy_j: tally.avalanche_energy,
                peak_drain_voltage_v: tally.peak_node,
                forced: counts > 0,
            });
            self.open = Some(out.turn_offs.len() - 1);
            self.releasing = Some(tally.below_at.is_some());
        }
        if applied > 0 {
            // Turning on again: before the current has decayed? Judged on its magnitude at the
            // turn-on, not on a first crossing: with nothing across the switch the current can
            // ring through zero and back.
            let i = plant.state.current;
            let release = lim.release;
            if self.releasing.is_some() && i.abs() > release {
                out.first("on-before-release", tk, || {
                    format!("switched on with {i:.4} A still flowing (release current {release} A)")
                });
            }
            // Switching on into a node still ringing far above the supply: the switch takes the
            // node capacitance's charge at that voltage (a hard turn-on).
            let (v, rail) = (plant.state.node, lim.supply);
            if self.releasing.is_some() && v > 1.5 * rail + 1.0 {
                out.first("on-into-ringing-node", tk, || {
                    format!("switched on with the node still at {v:.1} V (supply {rail:.1} V)")
                });
            }
            self.open = None;
            self.releasing = None;
        }
    }

    /// After a step: the turn-off record, the run's peaks and energies, and the findings the
    /// step raised. Returns the energy the clamp path took in the step, J.
    fn account(
        &mut self,
        out: &mut Run,
        lim: &Limits,
        applied: u32,
        (on, off): (&Tally, &Tally),
        t_open: f64,
        i_open: f64,
    ) -> f64 {
        if applied > 0 {
            self.last_open = Some((t_open, i_open, *off));
        } else if let Some(idx) = self.open {
            let r = &mut out.turn_offs[idx];
            r.clamp_energy_j += off.clamp_energy + off.avalanche_energy;
            r.avalanche_energy_j += off.avalanche_energy;
            r.peak_drain_voltage_v = r.peak_drain_voltage_v.max(off.peak_node);
            if r.decay_time_s.is_none() {
                r.decay_time_s = off.below_at.map(|x| x - r.t_s);
            }
            if off.below_at.is_some() {
                self.releasing = Some(true);
            }
        }
        self.prev_applied = applied;

        let pulse = off.clamp_energy + off.avalanche_energy;
        out.max_pulse_energy_j = out.max_pulse_energy_j.max(pulse);
        out.clamp_energy_total_j += pulse + on.clamp_energy + on.avalanche_energy;
        let peak_i = on.peak_current.max(off.peak_current);
        let peak_v = on.peak_node.max(off.peak_node);
        out.peak_current_a = out.peak_current_a.max(peak_i);
        out.peak_drain_voltage_v = out.peak_drain_voltage_v.max(peak_v);
        out.plant_events += on.events + off.events;
        let trip = lim.trip;
        if peak_i > trip {
            out.first("current-above-trip", on.time_offset, || {
                format!("true current reached {peak_i:.4} A (trip current {trip} A)")
            });
        }
        // A PWM period's off-segment is one pulse into the clamp; a release's pulse is the
        // whole turn-off, checked once it is complete.
        if applied > 0 {
            pulse_over(out, lim.rating, pulse, t_open);
        }
        if lim.has_clamp && on.avalanche_time + off.avalanche_time > 0.0 {
            let bv = lim.breakdown;
            out.first("avalanche-with-clamp", t_open, || {
                format!("the switch avalanched at {bv:.1} V although a clamp path is fitted")
            });
        }
        pulse + on.clamp_energy + on.avalanche_energy
    }
}
/// The largest first-order average of the clamp path's power over a run, W: each row's clamp
/// energy through `P̄ ← P̄ + (E/Δt − P̄)·Δt/τ`, the same average the guard keeps for
/// `clamp-power` (`window` = τ). A row lasts until the next one starts (the last, `period`): on
/// events, the steps before a call can be shorter than a period.
pub fn worst_average_clamp_power(rows: &[Row], period: f64, window: f64) -> f64 {
    let mut avg: f64 = 0.0;
    let mut worst: f64 = 0.0;
    for (n, r) in rows.iter().enumerate() {
        let dt = rows.get(n + 1).map_or(period, |next| next.t_s - r.t_s);
        if dt <= 0.0 {
            continue;
        }
        let share = (dt / window).min(1.0);
        avg += (r.clamp_energy_j / dt - avg) * share;
        worst = worst.max(avg);
    }
    worst
}

#[cfg(test)]
mod tests {
    use super::{Finding, Verdict};

    fn found(kinds: &[&'static str]) -> Vec<Finding> {
        kinds
            .iter()
            .map(|&kind| Finding {
                kind,
                t_s: 0.0,
                detail: String::new(),
            })
            .collect()
    }

    #[test]
    fn the_verdict_is_limited_only_by_the_guards_own_actions() {
        assert_eq!(Verdict::of(&found(&[])), Verdict::Pass);
        assert_eq!(Verdict::of(&found(&["guard-acted"])), Verdict::Limited);
        assert_eq!(
            Verdict::of(&found(&["guard-recirculated", "guard-tripped"])),
            Verdict::Limited
        );
        assert_eq!(
            Verdict::of(&found(&["guard-acted", "on-before-release"])),
            Verdict::Fail
        );
        assert_eq!(Verdict::of(&found(&["bus-above-max"])), Verdict::Fail);
        assert_eq!(
            [Verdict::Pass, Verdict::Limited, Verdict::Fail].map(Verdict::exit_status),
            [0, 3, 1]
        );
    }
}
