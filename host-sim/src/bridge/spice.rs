//! The bridge as an ngspice netlist, for the cross-checks.
//!
//! Each switch is a voltage-controlled switch with the on-resistance (1 TΩ off); each body diode
//! is the same drop-plus-resistance element as the low-side netlist (a DC source, a resistor and
//! a near-ideal diode). The gates are pulse trains: drive for `duty·T` from each period start,
//! then the decay mode's switches (none for fast decay, both low-side switches for slow decay,
//! the fast share first for mixed decay). After the last period every gate follows the decay
//! mode at zero duty. A constant back-EMF is a DC source in series with the coil. A bus is a
//! capacitor fed from the supply through a near-ideal diode, with its sink as a current that
//! switches on a millivolt above the supply.

use crate::bridge::plant::{BridgeCircuit, BridgePlant, BridgeState, BridgeTally};
use crate::plant::PlantError;
use coilward::bridge::LegState;
use std::fmt::Write as _;

/// A bridge drive for a cross-check: forward PWM at `duty` for `periods` periods from rest,
/// then zero duty in the same decay mode for `rest`.
#[derive(Debug, Clone, Copy)]
pub struct BridgeCase {
    /// Name (the netlist's file name).
    pub name: &'static str,
    /// The circuit (no rotor: a coil with an optional constant back-EMF; optionally a bus).
    pub c: BridgeCircuit,
    /// Share of the off part in fast decay: 1 fast, 0 slow, between: mixed.
    pub fast_share: f64,
    /// PWM period, s.
    pub period: f64,
    /// Duty, 0 < duty < 1.
    pub duty: f64,
    /// Periods of PWM.
    pub periods: u32,
    /// Time after the PWM, s.
    pub rest: f64,
    /// Current the decay time is measured to, A.
    pub release: f64,
    /// Gate dead time at each change of a leg between high and low, s (the changing leg
    /// floats).
    pub dead: f64,
}

impl BridgeCase {
    /// The end of the PWM, s.
    pub fn t_off(&self) -> f64 {
        f64::from(self.periods) * self.period
    }

    /// The three phases of a PWM period: (seconds, leg A, leg B).
    pub fn phases(&self, duty: f64) -> [(f64, LegState, LegState); 3] {
        let t_on = duty * self.period;
        let off = self.period - t_on;
        let fast = off * self.fast_share;
        [
            (t_on, LegState::High, LegState::Low),
            (fast, LegState::Float, LegState::Float),
            (off - fast, LegState::Low, LegState::Low),
        ]
    }
}

/// A gate pulse train: on from `from` for `width` in each period, for `count` periods from
/// `start`, or always off when `width` is zero.
fn gate(name: &str, start: f64, from: f64, width: f64, period: f64, count: u32) -> String {
    if width <= 0.0 || count == 0 {
        return format!("V{name} {name} 0 DC 0\n");
    }
    if width >= period {
        let end = start + f64::from(count) * period;
        return format!(
            "V{name} {name} 0 PWL(0 0 {start} 0 {} 1 {end} 1 {} 0)\n",
            start + 1e-9,
            end + 1e-9
        );
    }
    // PULSE(V1 V2 TD TR TF PW PER NP)
    format!(
        "V{name} {name} 0 PULSE(0 1 {} 1n 1n {} {period} {count})\n",
        start + from,
        width - 1e-9
    )
}

/// The netlist, measuring `imean` (mean current over the last PWM period), `iend` (current at
/// the end of the PWM), `tdec` (from the end of the PWM to the release current) and `eret`
/// (energy returned to the supply over the whole run).
pub fn netlist(k: &BridgeCase) -> String {
    let c = &k.c;
    let r = |x: f64| x.max(crate::plant::MIN_RESISTANCE);
    let t_off = k.t_off();
    let t_end = t_off + k.rest;
    let mut n = String::new();
    writeln!(n, "coilward-sim bridge cross-check: {}", k.name).unwrap();
    writeln!(n, "V1 src 0 DC {}", c.supply).unwrap();
    match c.bus {
        // The supply behind a near-ideal diode, the bus capacitance, and the sink: a current
        // that switches on over a millivolt above the supply.
        Some(b) => {
            writeln!(n, "Dsup src vs dideal").unwrap();
            writeln!(n, "Cbus vs 0 {} IC={}", b.capacitance, c.supply).unwrap();
            if b.sink_current > 0.0 {
                writeln!(
                    n,
                    "Bsink vs 0 I={}*(1+tanh((v(vs)-{}-1m)/0.25m))/2",
                    b.sink_current, c.supply
                )
                .unwrap();
            }
        }
        None => writeln!(n, "Vwire src vs DC 0").unwrap(),
    }
    // The bridge's rail, through a current sense.
    writeln!(n, "Vis vs vr DC 0").unwrap();
    for (sw, a, b, g) in [
        ("ah", "vr", "na", "gah"),
        ("al", "na", "0", "gal"),
        ("bh", "vr", "nb", "gbh"),
        ("bl", "nb", "0", "gbl"),
    ] {
        writeln!(n, "S{sw} {a} {b} {g} 0 swmod").unwrap();
    }
    // Body diodes: from each leg node up to the supply, and from ground up to each leg node.
    for leg in ["na", "nb"] {
        writeln!(n, "Vh{leg} {leg} h1{leg} DC {}", c.diode_drop).unwrap();
        writeln!(n, "Rh{leg} h1{leg} h2{leg} {}", r(c.diode_resistance)).unwrap();
        writeln!(n, "Dh{leg} h2{leg} vr dideal").unwrap();
        writeln!(n, "Vl{leg} 0 l1{leg} DC {}", c.diode_drop).unwrap();
        writeln!(n, "Rl{leg} l1{leg} l2{leg} {}", r(c.diode_resistance)).unwrap();
        writeln!(n, "Dl{leg} l2{leg} {leg} dideal").unwrap();
    }
    writeln!(n, "L1 na c1 {} IC=0", c.inductance).unwrap();
    writeln!(n, "Vsense c1 c2 DC 0").unwrap();
    writeln!(n, "Rcoil c2 c3 {}", c.resistance).unwrap();
    writeln!(n, "Vemf c3 nb DC {}", c.back_emf).unwrap();
    // Gates: the PWM periods, then zero duty in the same mode until the end.
    let t = k.period;
    let on = k.duty * t;
    let off = t - on;
    let fast = off * k.fast_share;
    let slow = off - fast;
    let rest_periods = (k.rest / t).ceil() as u32;
    // The gate dead time: leg A changes from low to high at each period start after a slow
    // part, and from high to low where the slow part follows the drive directly.
    let dead_in = if slow > 0.0 { k.dead } else { 0.0 };
    let dead_out = if fast <= 0.0 { k.dead } else { 0.0 };
    n.push_str(&gate("gah", 0.0, dead_in, on - dead_in, t, k.periods));
    // Leg B's low switch: on while driving and in the slow part (off in the fast part).
    // Leg A's low switch: on in the slow part.
    n.push_str(&gate(
        "gal",
        0.0,
        on + fast + dead_out,
        slow - dead_out,
        t,
        k.periods,
    ));
    n.push_str(&gate("gbh", 0.0, 0.0, 0.0, t, 0));
    // gbl = drive pulse + slow pulse: two sources in series add.
    n.push_str(&gate("gbl1", 0.0, 0.0, on, t, k.periods));
    n.push_str(&gate("gbl2", 0.0, on + fast, slow, t, k.periods));
    // After the PWM: the decay mode at zero duty: fast share first, then slow.
    let fast0 = t * k.fast_share;
    n.push_str(&gate("gal3", t_off, fast0, t - fast0, t, rest_periods));
    n.push_str(&gate("gbl3", t_off, fast0, t - fast0, t, rest_periods));
    writeln!(n, "Bgbl gbl 0 V=v(gbl1)+v(gbl2)+v(gbl3)").unwrap();
    writeln!(n, "Bgal2 gal2 0 V=v(gal)+v(gal3)").unwrap();
    // The low switch of leg A is driven by the sum.
    let text = n.replace("Sal na 0 gal 0 swmod", "Sal na 0 gal2 0 swmod");
    let mut n = text;
    writeln!(
        n,
        ".model swmod SW(VT=0.5 VH=0 RON={} ROFF=1e12)",
        r(c.on_resistance)
    )
    .unwrap();
    writeln!(n, ".model dideal D(IS=1e-14 N=0.002)").unwrap();
    // Returned power: the rail's voltage times the current flowing back into it.
    writeln!(n, "Bret ret 0 V=v(vr)*(-i(Vis))*u(-i(Vis))").unwrap();
    writeln!(n, ".options reltol=1e-5 abstol=1e-10 vntol=1e-7").unwrap();
    let step = t / 400.0;
    writeln!(n, ".tran {step} {t_end} 0 {step} uic").unwrap();
    let last = t_off - t;
    writeln!(n, ".meas tran imean AVG i(Vsense) from={last} to={t_off}").unwrap();
    writeln!(n, ".meas tran iend FIND i(Vsense) AT={t_off}").unwrap();
    writeln!(
        n,
        ".meas tran tdec TRIG AT={t_off} TARG i(Vsense) VAL={} FALL=1 TD={t_off}",
        k.release
    )
    .unwrap();
    writeln!(n, ".meas tran eret INTEG v(ret) from=0 to={t_end}").unwrap();
    writeln!(n, ".meas tran vbus MAX v(vs) from=0 to={t_end}").unwrap();
    writeln!(n, ".end").unwrap();
    n
}

/// What the plant gives for a case.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BridgeMeasured {
    /// Mean current over the last PWM period, A.
    pub mean: f64,
    /// Current at the end of the PWM, A.
    pub end: f64,
    /// From the end of the PWM until the current is first at the release level, s.
    pub decay: Option<f64>,
    /// Energy returned to the supply over the run, J.
    pub returned: f64,
    /// Highest rail voltage over the run, V.
    pub peak_rail: f64,
}

/// The same drive on the plant.
///
/// # Errors
/// The plant's.
pub fn plant(k: &BridgeCase) -> Result<BridgeMeasured, PlantError> {
    let mut p = BridgePlant::new(k.c, BridgeState::default());
    let mut returned = 0.0;
    let mut peak_bus: f64 = 0.0;
    let mut last = BridgeTally::starting(p.state);
    let mut legs = (LegState::Float, LegState::Float);
    for _ in 0..k.periods {
        last = BridgeTally::starting(p.state);
        for (d, a, b) in k.phases(k.duty) {
            if d > 0.0 {
                // A leg changing between high and low floats for the dead time first.
                let cross = |from: LegState, to: LegState| {
                    k.dead > 0.0
                        && matches!(
                            (from, to),
                            (LegState::High, LegState::Low) | (LegState::Low, LegState::High)
                        )
                };
                let (ca, cb) = (cross(legs.0, a), cross(legs.1, b));
                let mut left = d;
                if ca || cb {
                    let fa = if ca { LegState::Float } else { a };
                    let fb = if cb { LegState::Float } else { b };
                    let x = k.dead.min(d);
                    p.run(fa, fb, x, &mut last)?;
                    left -= x;
                }
                if left > 0.0 {
                    p.run(a, b, left, &mut last)?;
                }
                legs = (a, b);
            }
        }
        returned += last.returned_energy;
        peak_bus = peak_bus.max(last.peak_bus_charge);
    }
    let end = p.state.current;
    // Zero duty in the same mode: the first time the current is at the release level (the
    // decay is monotonic for a coil without back-EMF, and crosses once with one).
    let mut decay = None;
    let mut t = 0.0;
    while t < k.rest - 1e-12 {
        for (d, a, b) in k.phases(0.0) {
            if d <= 0.0 {
                continue;
            }
            let mut tally = BridgeTally::starting(p.state);
            tally.time_offset = t;
            tally.watch = Some(k.release);
            p.run(a, b, d, &mut tally)?;
            returned += tally.returned_energy;
            peak_bus = peak_bus.max(tally.peak_bus_charge);
            if decay.is_none() {
                decay = tally.below_at;
            }
            t += d;
        }
    }
    Ok(BridgeMeasured {
        mean: last.charge / k.period,
        end,
        decay,
        returned,
        peak_rail: k.c.supply + k.c.bus.map_or(0.0, |b| peak_bus / b.capacitance),
    })
}

/// The demo winding used by the cross-checks: 12 V, 2 mH / 4 Ω, 50 mΩ switches, 0.8 V + 20 mΩ
/// body diodes (invented values, in the range of a small motor winding).
pub fn demo_winding() -> BridgeCircuit {
    BridgeCircuit {
        supply: 12.0,
        inductance: 2e-3,
        resistance: 4.0,
        on_resistance: 0.05,
        diode_drop: 0.8,
        diode_resistance: 0.02,
        rotor: None,
        back_emf: 0.0,
        bus: None,
    }
}
