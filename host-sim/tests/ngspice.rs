//! The plant against ngspice (a general-purpose SPICE; Debian package `ngspice`, run as
//! `ngspice -b`), on the same circuits written as netlists by this test: source with its
//! resistance, RL coil, a voltage-controlled switch with the on-resistance, the switch-node
//! capacitance, the body diode, the clamp path, and the switch's avalanche. Every
//! piecewise-linear element is a DC source plus a resistor plus a near-ideal diode
//! (`IS=1e-14 N=0.002`: its own drop moves by well under 1 mV over these currents), which is
//! the drop-plus-resistance element the plant solves exactly (shared/REFERENCES.md §9 for the
//! diode law).
//!
//! Agreement required by the simulator's contract: peak current, mean current, decay time and
//! clamp energy within 2 %; peak switch-node voltage within 3 %.

use coilward_sim::plant::{Circuit, ClampKind};
use coilward_sim::spice::{Case, netlist};

fn ngspice(name: &str, netlist: &str) -> std::collections::HashMap<String, f64> {
    coilward_sim::spice::ngspice(name, netlist).unwrap_or_else(|e| panic!("{e}"))
}

fn close(what: &str, got: f64, want: f64, tol: f64) {
    let rel = (got - want).abs() / want.abs();
    eprintln!(
        "CHECK {what}: plant {got:.6e}, ngspice {want:.6e} ({:.3} %)",
        rel * 100.0
    );
    assert!(
        rel <= tol,
        "{what}: plant {got}, ngspice {want} ({:.3} %)",
        rel * 100.0
    );
}

fn base() -> Circuit {
    coilward_sim::spice::demo_valve()
}

fn cases() -> Vec<Case> {
    let relay = Circuit {
        supply: 12.0,
        source_resistance: 0.0,
        inductance: 0.150,
        resistance: 90.0,
        on_resistance: 0.5,
        capacitance: 220e-12,
        breakdown: 40.0,
        clamp: ClampKind::Freewheel {
            drop: 18.7,
            resistance: 1.0,
        },
        ..base()
    };
    let solenoid = Circuit {
        supply: 12.0,
        source_resistance: 0.0,
        inductance: 0.010,
        resistance: 6.0,
        on_resistance: 0.05,
        capacitance: 1e-9,
        breakdown: 40.0,
        clamp: ClampKind::None,
        ..base()
    };
    vec![
        Case {
            name: "valve-freewheel-pwm",
            c: base(),
            period: 50e-6,
            on: 17.5e-6,
            periods: 600,
            rest: 15e-3,
            release: 0.05,
        },
        Case {
            name: "valve-freewheel-on",
            c: base(),
            period: 50e-6,
            on: 50e-6,
            periods: 200,
            rest: 20e-3,
            release: 0.05,
        },
        Case {
            name: "relay-zener",
            c: relay,
            period: 100e-6,
            on: 100e-6,
            periods: 300,
            rest: 4e-3,
            release: 0.01,
        },
        Case {
            name: "valve-switch-clamp-pwm",
            c: Circuit {
                clamp: ClampKind::Switch {
                    voltage: 45.0,
                    resistance: 0.5,
                },
                ..base()
            },
            period: 50e-6,
            on: 40e-6,
            periods: 400,
            rest: 4e-3,
            release: 0.01,
        },
        Case {
            name: "solenoid-avalanche",
            c: solenoid,
            period: 50e-6,
            on: 50e-6,
            periods: 200,
            rest: 2e-3,
            release: 0.02,
        },
    ]
}

#[test]
fn plant_agrees_with_ngspice() {
    for k in cases() {
        let m = ngspice(k.name, &netlist(&k));
        let (ipk, imean, tdec, energy, vpk) = coilward_sim::spice::plant(&k).unwrap();
        close(&format!("{} peak current", k.name), ipk, m["ipk"], 0.02);
        if k.on < k.period {
            close(&format!("{} mean current", k.name), imean, m["imean"], 0.02);
        }
        let t_off = k.t_off();
        close(
            &format!("{} decay time", k.name),
            tdec.expect("decays") - t_off,
            m["tdec"],
            0.02,
        );
        close(
            &format!("{} clamp energy", k.name),
            energy,
            m["ecl"] + m["eav"],
            0.02,
        );
        close(&format!("{} switch-node peak", k.name), vpk, m["vpk"], 0.03);
    }
}

#[test]
fn unclamped_ring_peak_agrees_with_ngspice() {
    // Nothing across the coil and a breakdown far above the ring: the node rings with the coil
    // and its capacitance, V_peak ≈ V_s + I·√(L/C) (shared/REFERENCES.md §5), and the body diode
    // catches the swing below ground.
    let c = Circuit {
        supply: 12.0,
        source_resistance: 0.0,
        inductance: 0.010,
        resistance: 6.0,
        on_resistance: 0.05,
        capacitance: 1e-9,
        breakdown: 200.0,
        clamp: ClampKind::None,
        ..base()
    };
    let k = Case {
        name: "ring",
        c,
        period: 20e-6,
        on: 20e-6,
        periods: 1,
        rest: 200e-6,
        release: 1e-6,
    };
    let m = ngspice(k.name, &netlist(&k));
    let (ipk, _, _, _, vpk) = coilward_sim::spice::plant(&k).unwrap();
    close("ring peak current", ipk, m["ipk"], 0.02);
    close("ring switch-node peak", vpk, m["vpk"], 0.03);
    let textbook = 12.0 + ipk * (0.010f64 / 1e-9).sqrt();
    assert!(
        (vpk - textbook).abs() < 0.02 * textbook,
        "{vpk} vs {textbook}"
    );
}
