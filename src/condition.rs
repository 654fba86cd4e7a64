//! The guard's conditions, what each one does, and the event log.
//!
//! Condition names are stable: reports and scripts use them.
//!
//! | condition | name | meaning |
//! |---|---|---|
//! | [`Condition::ReleaseHold`] | `release-hold` | a turn-on is held until the current has decayed below the release current |
//! | [`Condition::CurrentLimit`] | `current-limit` | the duty was reduced to keep the predicted peak at or below the ceiling |
//! | [`Condition::Overcurrent`] | `overcurrent` | the estimate exceeded the trip current |
//! | [`Condition::ClampPulse`] | `clamp-pulse` | a turn-off's energy exceeds the clamp path's single-pulse rating |
//! | [`Condition::ClampOverheat`] | `clamp-overheat` | the clamp device's thermal replica is at or above its ceiling |
//! | [`Condition::CoilOverheat`] | `coil-overheat` | the winding's thermal image reached its trip level |
//! | [`Condition::SupplyRange`] | `supply-range` | the measured supply is outside the configured window |
//! | [`Condition::ReversalHold`] | `reversal-hold` | a bridge's change of direction waits for the current to decay and the dead time to pass |
//! | [`Condition::SupplyPump`] | `supply-pump` | the energy a bridge returns in fast decay would pump the supply above its maximum |

use core::fmt;

/// One protective condition.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Condition {
    /// `release-hold`
    ReleaseHold,
    /// `current-limit`
    CurrentLimit,
    /// `overcurrent`
    Overcurrent,
    /// `clamp-pulse`
    ClampPulse,
    /// `clamp-overheat`
    ClampOverheat,
    /// `coil-overheat`
    CoilOverheat,
    /// `supply-range`
    SupplyRange,
    /// `reversal-hold` (full bridge only)
    ReversalHold,
    /// `supply-pump` (full bridge only)
    SupplyPump,
    /// `clamp-power`: the clamp's average power over its window is above the declared limit
    /// (low side, when no clamp thermal replica is configured)
    ClampPower,
}

impl Condition {
    /// Every condition, in bit order.
    pub const ALL: [Condition; 10] = [
        Condition::ReleaseHold,
        Condition::CurrentLimit,
        Condition::Overcurrent,
        Condition::ClampPulse,
        Condition::ClampOverheat,
        Condition::CoilOverheat,
        Condition::SupplyRange,
        Condition::ReversalHold,
        Condition::SupplyPump,
        Condition::ClampPower,
    ];

    /// The stable name, e.g. `"release-hold"`.
    pub const fn name(self) -> &'static str {
        match self {
            Condition::ReleaseHold => "release-hold",
            Condition::CurrentLimit => "current-limit",
            Condition::Overcurrent => "overcurrent",
            Condition::ClampPulse => "clamp-pulse",
            Condition::ClampOverheat => "clamp-overheat",
            Condition::CoilOverheat => "coil-overheat",
            Condition::SupplyRange => "supply-range",
            Condition::ReversalHold => "reversal-hold",
            Condition::SupplyPump => "supply-pump",
            Condition::ClampPower => "clamp-power",
        }
    }

    const fn bit(self) -> u16 {
        1 << (self as u16)
    }
}

impl fmt::Display for Condition {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A set of conditions (a bit set; `Copy`, two bytes).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Conditions(u16);

impl Conditions {
    /// The empty set.
    pub const NONE: Conditions = Conditions(0);

    /// Whether `c` is in the set.
    pub const fn contains(self, c: Condition) -> bool {
        self.0 & c.bit() != 0
    }

    /// Whether the set is empty.
    pub const fn is_empty(self) -> bool {
        self.0 == 0
    }

    /// The set with `c` added.
    #[must_use]
    pub const fn with(self, c: Condition) -> Self {
        Conditions(self.0 | c.bit())
    }

    /// Adds `c`.
    pub fn insert(&mut self, c: Condition) {
        self.0 |= c.bit();
    }

    /// Removes `c`.
    pub fn remove(&mut self, c: Condition) {
        self.0 &= !c.bit();
    }

    /// Conditions in either set.
    #[must_use]
    pub const fn union(self, other: Conditions) -> Self {
        Conditions(self.0 | other.0)
    }

    /// Conditions in both sets.
    #[must_use]
    pub const fn intersection(self, other: Conditions) -> Self {
        Conditions(self.0 & other.0)
    }

    /// Conditions in `self` but not in `other`.
    #[must_use]
    pub const fn minus(self, other: Conditions) -> Self {
        Conditions(self.0 & !other.0)
    }

    /// The conditions in the set, in bit order.
    pub fn iter(self) -> impl Iterator<Item = Condition> {
        Condition::ALL
            .into_iter()
            .filter(move |c| self.contains(*c))
    }
}

impl fmt::Display for Conditions {
    /// The names separated by spaces (empty for none).
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut first = true;
        for c in self.iter() {
            if !first {
                f.write_str(" ")?;
            }
            f.write_str(c.name())?;
            first = false;
        }
        Ok(())
    }
}

/// What a condition does to the output while it is active.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
#[cfg_attr(feature = "flash", derive(serde::Serialize, serde::Deserialize))]
pub enum Action {
    /// Flag it; the output is unchanged.
    Report,
    /// Hold the output off while the condition lasts; resume by itself when it clears.
    Hold,
    /// Turn the output off and latch until [`Guard::clear`](crate::Guard::clear), or until a
    /// configured retry after a cooldown.
    Trip,
}

/// The conditions one tick finds and what their actions ask, gathered as each is raised: a
/// hold holds the output off for the tick, a trip latches its condition in the channel's state.
/// The one condition evaluator of the low-side and the bridge guard.
pub(crate) struct Found<'a> {
    active: Conditions,
    hold: bool,
    latched: &'a mut Conditions,
}

impl<'a> Found<'a> {
    /// Nothing found yet; trips latch into `latched`.
    #[inline]
    pub(crate) fn new(latched: &'a mut Conditions) -> Self {
        Self {
            active: Conditions::NONE,
            hold: false,
            latched,
        }
    }

    /// Raises `c` when it is `present`, and carries out its action `a`.
    #[inline]
    pub(crate) fn raise(&mut self, present: bool, c: Condition, a: Action) {
        if !present {
            return;
        }
        self.active.insert(c);
        match a {
            Action::Report => {}
            Action::Hold => self.hold = true,
            Action::Trip => self.latched.insert(c),
        }
    }

    /// `supply-range` for the supply bits `vs` against the window `min ..= max`: action
    /// `low` below it, `high` above it.
    #[inline]
    pub(crate) fn supply(
        &mut self,
        vs: u32,
        (min, max): (u32, u32),
        (low, high): (Action, Action),
    ) {
        let action = if vs > max {
            Some(high)
        } else if vs < min {
            Some(low)
        } else {
            None
        };
        if let Some(a) = action {
            self.raise(true, Condition::SupplyRange, a);
        }
    }

    /// `coil-overheat` from the winding image `coil` (none configured: never), with hysteresis:
    /// once raised (active in `prev`, the conditions before this tick) it clears only at the
    /// reset level.
    #[inline]
    pub(crate) fn winding(
        &mut self,
        coil: Option<&crate::thermal::CoilReplica>,
        heat: crate::thermal::CoilHeat,
        prev: Conditions,
        a: Action,
    ) {
        let raised = prev.contains(Condition::CoilOverheat);
        let hot = coil.is_some_and(|c| c.overheated(&heat, raised));
        self.raise(hot, Condition::CoilOverheat, a);
    }

    /// The conditions found, and whether an action holds the output off.
    #[inline]
    pub(crate) fn done(self) -> (Conditions, bool) {
        (self.active, self.hold)
    }
}

/// The retry of latched trips, shared by the low-side and the bridge guard: once every latched
/// condition is gone and the cooldown (`cooldown_us`, counted down by the caller in real time;
/// restarted while any of them is still present) has run out, the latches clear, at most
/// `max` times until the firmware clears them itself.
#[inline]
pub(crate) fn retry_latched(
    latched: &mut Conditions,
    active: Conditions,
    (cooldown_us, retries): (&mut u32, &mut u8),
    (cooldown, max): (u32, u8),
) {
    if latched.is_empty() {
        return;
    }
    if latched.intersection(active).is_empty() {
        if *cooldown_us == 0 && *retries < max {
            *retries = retries.saturating_add(1);
            *latched = Conditions::NONE;
        }
    } else {
        *cooldown_us = cooldown;
    }
}

/// Whether the condition's event is its start or its end.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Edge {
    /// The condition became active.
    Raised,
    /// The condition is no longer active.
    Cleared,
}

/// One logged event.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Event {
    /// Time given by the firmware when it recorded the event (any unit; µs is usual).
    pub time: u64,
    /// The condition.
    pub condition: Condition,
    /// Raised or cleared.
    pub edge: Edge,
}

impl fmt::Display for Event {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let edge = match self.edge {
            Edge::Raised => "raised",
            Edge::Cleared => "cleared",
        };
        write!(f, "{} {} {}", self.time, self.condition.name(), edge)
    }
}

/// A fixed-capacity ring of the most recent events. When full the oldest event is dropped and
/// counted, so nothing is lost silently.
///
/// ```
/// use coilward::{Condition, Conditions, EventLog};
/// let mut log = EventLog::<2>::new();
/// let limit = Conditions::NONE.with(Condition::CurrentLimit);
/// log.record(100, limit, Conditions::NONE); // raised at t = 100 (the firmware's clock)
/// log.record(250, Conditions::NONE, limit); // cleared
/// log.record(900, Conditions::NONE.with(Condition::Overcurrent), Conditions::NONE);
/// // Two slots: the oldest was dropped, and counted.
/// assert_eq!((log.len(), log.dropped()), (2, 1));
/// let first = log.pop().unwrap();
/// assert_eq!(format!("{first}"), "250 current-limit cleared");
/// ```
#[derive(Debug, Clone)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct EventLog<const N: usize> {
    ring: heapless::Deque<Event, N>,
    dropped: u32,
}

impl<const N: usize> Default for EventLog<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> EventLog<N> {
    /// An empty log. `N` must be at least 1 (checked at compile time).
    pub const fn new() -> Self {
        const { assert!(N > 0, "an event log needs room for at least one event") };
        Self {
            ring: heapless::Deque::new(),
            dropped: 0,
        }
    }

    /// Adds one event, dropping (and counting) the oldest when full.
    pub fn push(&mut self, event: Event) {
        if self.ring.is_full() {
            self.ring.pop_front();
            self.dropped = self.dropped.saturating_add(1);
        }
        // Room was made above, so this cannot fail; the result is ignored by design.
        let _ = self.ring.push_back(event);
    }

    /// Records the edges of one guard output at `time`.
    pub fn record(&mut self, time: u64, raised: Conditions, cleared: Conditions) {
        for c in raised.iter() {
            self.push(Event {
                time,
                condition: c,
                edge: Edge::Raised,
            });
        }
        for c in cleared.iter() {
            self.push(Event {
                time,
                condition: c,
                edge: Edge::Cleared,
            });
        }
    }

    /// Events dropped because the ring was full (saturating).
    pub const fn dropped(&self) -> u32 {
        self.dropped
    }

    /// The events, oldest first.
    pub fn iter(&self) -> impl Iterator<Item = &Event> {
        self.ring.iter()
    }

    /// Number of events held.
    pub fn len(&self) -> usize {
        self.ring.len()
    }

    /// Whether the log holds no events.
    pub fn is_empty(&self) -> bool {
        self.ring.is_empty()
    }

    /// Removes and returns the oldest event.
    pub fn pop(&mut self) -> Option<Event> {
        self.ring.pop_front()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_stable() {
        let names: [&str; 10] = Condition::ALL.map(Condition::name);
        assert_eq!(
            names,
            [
                "release-hold",
                "current-limit",
                "overcurrent",
                "clamp-pulse",
                "clamp-overheat",
                "coil-overheat",
                "supply-range",
                "reversal-hold",
                "supply-pump",
                "clamp-power"
            ]
        );
    }

    #[test]
    fn a_full_log_counts_what_it_drops() {
        let mut log = EventLog::<2>::new();
        let set = Conditions::NONE
            .with(Condition::Overcurrent)
            .with(Condition::SupplyRange);
        log.record(5, set, Conditions::NONE);
        log.record(6, Conditions::NONE, set);
        assert_eq!(log.len(), 2);
        assert_eq!(log.dropped(), 2);
        let first = log.pop().unwrap();
        assert_eq!(
            (first.time, first.condition, first.edge),
            (6, Condition::Overcurrent, Edge::Cleared)
        );
    }
}
