//! Runs that repeat: a drive held at one duty brings the plant to a state that the next period
//! returns to bit for bit (the demo valve at 35 % does after about 1 400 of its 20 kHz periods),
//! and from there every period is the same sequence of segments. The plant keeps the last few
//! runs it computed, keyed by everything a run's results depend on, and replays a match instead
//! of solving it again: each segment's contributions are added to the tally in the order and
//! with the values the computation added them, so a replayed run and a computed one leave the
//! same tally and the same state, bit for bit (`Plant::reuse` switches it off; the unit test
//! `a_replayed_run_is_the_run_computed` compares the two).

use super::{Circuit, ClampKind, Mode, State, Tally};

/// What one segment adds to a [`Tally`], each term as `Plant::account` computes it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Figures {
    pub t: f64,
    pub charge: f64,
    /// Highest and lowest current, highest node voltage.
    pub ihi: f64,
    pub ilo: f64,
    pub vhi: f64,
    /// Where in the segment the current first fell below the watched level (when it was
    /// watched and not yet found).
    pub below: Option<f64>,
    pub winding: Option<f64>,
    pub switch_on: Option<f64>,
    pub switch_body: Option<f64>,
    pub avalanche: Option<f64>,
    pub clamp_switch: Option<f64>,
    pub clamp_freewheel: Option<f64>,
    pub source: Option<f64>,
}

impl Figures {
    /// Adds the segment to `tally`, in the order the terms are computed.
    pub fn add_to(&self, tally: &mut Tally) {
        if let (Some(x), None) = (self.below, tally.below_at) {
            tally.below_at = Some(tally.time_offset + tally.time + x);
        }
        tally.time += self.t;
        tally.charge += self.charge;
        tally.peak_current = tally.peak_current.max(self.ihi);
        tally.least_current = tally.least_current.min(self.ilo);
        tally.peak_node = tally.peak_node.max(self.vhi);
        let add = |sum: &mut f64, term: Option<f64>| {
            if let Some(x) = term {
                *sum += x;
            }
        };
        add(&mut tally.winding_energy, self.winding);
        add(&mut tally.switch_energy, self.switch_on);
        add(&mut tally.switch_energy, self.switch_body);
        if let Some(e) = self.avalanche {
            tally.avalanche_energy += e;
            tally.avalanche_time += self.t;
        }
        add(&mut tally.clamp_energy, self.clamp_switch);
        add(&mut tally.clamp_energy, self.clamp_freewheel);
        add(&mut tally.source_energy, self.source);
    }
}

/// Everything a run's results depend on, as bits: the circuit, the conduction mode and the
/// state it starts from, the switch, the duration and what the tally asks for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) struct RunKey {
    // The state first: keys of one circuit differ there, so comparisons end early.
    state: [u64; 2],
    circuit: [u64; 14],
    mode: Mode,
    on: bool,
    duration: u64,
    all_energies: bool,
    /// The watched level while the fall below it is still to be found.
    watching: Option<u64>,
}

impl RunKey {
    pub fn new(
        c: &Circuit,
        (mode, state): (Mode, State),
        (on, duration): (bool, f64),
        tally: &Tally,
    ) -> Self {
        let (sat_at, sat_l) = c.saturation.map_or((f64::NAN, f64::NAN), |s| s);
        let (kind, v, r) = match c.clamp {
            ClampKind::None => (0.0, 0.0, 0.0),
            ClampKind::Freewheel { drop, resistance } => (1.0, drop, resistance),
            ClampKind::Switch {
                voltage,
                resistance,
            } => (2.0, voltage, resistance),
        };
        let circuit = [
            c.supply,
            c.source_resistance,
            c.inductance,
            sat_at,
            sat_l,
            c.resistance,
            c.on_resistance,
            c.capacitance,
            c.breakdown,
            c.avalanche_resistance,
            c.body_diode_drop,
            kind,
            v,
            r,
        ]
        .map(f64::to_bits);
        Self {
            circuit,
            mode,
            state: [state.current.to_bits(), state.node.to_bits()],
            on,
            duration: duration.to_bits(),
            all_energies: tally.all_energies,
            watching: match (tally.watch, tally.below_at) {
                (Some(w), None) => Some(w.to_bits()),
                _ => None,
            },
        }
    }
}

impl RunKey {
    /// A 64-bit digest of the key's words (multiply-rotate), for [`Runs::seen_before`].
    fn digest(&self) -> u64 {
        let flags = u64::from(self.on)
            | u64::from(self.all_energies) << 1
            | u64::from(self.watching.is_some()) << 2
            | u64::from(self.mode.0) << 8;
        let last = [self.duration, flags, self.watching.unwrap_or(0)];
        let words = self.state.iter().chain(&self.circuit).chain(&last);
        words.fold(0u64, |h, &w| {
            (h.rotate_left(5) ^ w).wrapping_mul(0x9E37_79B9_7F4A_7C15)
        })
    }
}

/// A run computed once: its key, the mode and state it left the plant in, what each of its
/// segments added and how many path changes it resolved.
#[derive(Debug, Clone)]
pub(super) struct Run {
    pub key: RunKey,
    pub end: (Mode, State),
    pub segments: Vec<Figures>,
    pub events: u64,
}

/// Runs kept: a steady drive alternates an on-run and an off-run; four cover a drive that
/// alternates between two duties.
const KEPT: usize = 4;

/// Runs with more segments than this are not kept (a ring that changes paths many times is
/// rarely repeated, and its record would be large).
pub(super) const MOST_SEGMENTS: usize = 64;

/// Digests of the last keys run: a settled drive's runs come round within a few, a drive
/// still moving toward its settled state never does.
const SIGHTINGS: usize = 8;

/// The last runs computed, oldest replaced first, and the digests of the last keys run.
#[derive(Debug, Clone, Default)]
pub(super) struct Runs {
    kept: Vec<Run>,
    next: usize,
    sightings: [u64; SIGHTINGS],
    next_sighting: usize,
}

impl Runs {
    /// The run kept for `key`, if any.
    pub fn find(&self, key: &RunKey) -> Option<&Run> {
        self.kept.iter().find(|r| r.key == *key)
    }

    /// Whether `key`'s digest is among the last keys' (noting it either way). Only runs seen
    /// before are kept: a drive that has not settled does not pay for copying its segments. A
    /// digest that collides only keeps a run that will not be found; a replay still needs the
    /// whole key to match.
    pub fn seen_before(&mut self, key: &RunKey) -> bool {
        let d = key.digest();
        let seen = self.sightings.contains(&d);
        if !seen {
            self.sightings[self.next_sighting % SIGHTINGS] = d;
            self.next_sighting = self.next_sighting.wrapping_add(1);
        }
        seen
    }

    /// Keeps a computed run (in the oldest slot once all are in use, reusing its buffer).
    pub fn keep(&mut self, key: RunKey, end: (Mode, State), segments: &[Figures], events: u64) {
        if self.kept.len() < KEPT {
            self.kept.push(Run {
                key,
                end,
                segments: segments.to_vec(),
                events,
            });
            return;
        }
        let slot = &mut self.kept[self.next % KEPT];
        self.next = self.next.wrapping_add(1);
        slot.key = key;
        slot.end = end;
        slot.segments.clear();
        slot.segments.extend_from_slice(segments);
        slot.events = events;
    }
}
