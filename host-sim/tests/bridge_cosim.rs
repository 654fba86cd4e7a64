//! The bridge guard against the bridge plant, end to end: the reversing gear-motor demo and
//! variations of it. What is checked against the plant (the exact circuit) rather than the
//! guard's own beliefs: the true current when the other direction is first driven, the true
//! peak against the trip level, the true bus voltage against its maximum, and the returned
//! energy the guard counts against the plant's exact figure.

use coilward::Condition;
use coilward_sim::bridge::cosim::run;
use coilward_sim::bridge::scenario::BridgeScenario;
use coilward_sim::cosim::Verdict;
use std::path::{Path, PathBuf};
use std::process::Command;

fn demo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/scenarios/reversing-gear-motor.toml")
}

fn text() -> String {
    std::fs::read_to_string(demo()).unwrap()
}

fn scenario(text: &str) -> BridgeScenario {
    BridgeScenario::parse(Path::new("motor.toml"), text).unwrap_or_else(|e| panic!("{e}"))
}

#[test]
fn the_reversing_motor_demo_runs_end_to_end_with_the_interlock() {
    let s = scenario(&text());
    let r = run(&s, true);
    // Limited, not failed: no limit exceeded, and the guard's only action is changing the
    // request (the interlock's hold, the ceiling in plug braking).
    assert_eq!(r.verdict(), Verdict::Limited, "{:?}", r.findings);
    assert!(
        r.findings.iter().all(|f| f.kind == "guard-acted"),
        "{:?}",
        r.findings
    );
    assert_eq!(r.reversals.len(), 1);
    let v = r.reversals[0];
    let driven = v.driven_s.expect("the reversal happens");
    let dead = f64::from(s.limits.reversal_dead_time);
    // The other direction is driven only after the dead time, with the true current at or
    // below the release level.
    assert!(driven - v.requested_s >= dead, "{v:?}");
    assert!(v.current_at_drive_a.abs() <= f64::from(s.limits.release_current));
    let settled = v.true_release_s.expect("the true current settled");
    assert!(driven - settled >= dead - 1e-9, "{v:?}");
    // The hold is in the rows (what the plot shades) and raised once.
    let held: Vec<_> = r
        .rows
        .iter()
        .filter(|x| x.conditions.contains(Condition::ReversalHold))
        .collect();
    assert_eq!(held.len() as u64, r.held_periods);
    assert!(held.iter().all(|x| x.duty_applied == 0.0));
    assert!(held.first().unwrap().t_s >= v.requested_s);
    assert_eq!(
        r.events
            .iter()
            .filter(|e| e.condition == "reversal-hold" && e.detail == "raised")
            .count(),
        1
    );
    // The plug braking after the reversal is held at the ceiling, within the estimate error.
    let ceiling = f64::from(s.limits.current_ceiling);
    assert!(r.peak_current_a <= ceiling + r.max_estimate_error_a + 0.05);
    // The guard's returned energy against the plant's exact figure (the guard ignores the
    // gate dead time, in which the diodes conduct; within 5 % here).
    let rel = (r.estimated_returned_energy_j - r.returned_energy_j).abs() / r.returned_energy_j;
    assert!(
        rel < 0.05,
        "{} vs {}",
        r.estimated_returned_energy_j,
        r.returned_energy_j
    );
}

#[test]
fn the_plot_shades_the_hold() {
    let s = scenario(&text());
    let r = run(&s, true);
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("motor.svg");
    coilward_sim::bridge::report::svg(&s, &r, &path).unwrap();
    let svg = std::fs::read_to_string(&path).unwrap();
    assert!(svg.contains("reversal-hold"));
    assert!(
        svg.contains("held 2.05 ms"),
        "the hold's length is written on the plot"
    );
}

#[test]
fn without_speed_feedback_plugging_is_underestimated_and_caught() {
    // Without the speed, the guard takes the rotor as stalled; driving against a turning rotor
    // then draws more than it predicts. The simulator shows it (the reason the demo feeds the
    // speed): the true current passes the trip level, or the guard trips on its own estimate.
    let t = text().replace("speed_feedback = true", "speed_feedback = false");
    let r = run(&scenario(&t), false);
    assert!(!r.passed());
    assert!(
        r.findings
            .iter()
            .any(|f| f.kind == "current-above-trip" || f.kind == "guard-tripped"),
        "{:?}",
        r.findings
    );
}

#[test]
fn a_small_bus_that_cannot_sink_makes_the_guard_recirculate() {
    // 47 µF behind a diode: plug braking in mixed decay returns the rotor's energy to a bus
    // that cannot take it. The guard raises supply-pump and recirculates; the true bus stays
    // below its maximum.
    let t = text()
        .replace("capacitance = \"470 µF\"", "capacitance = \"47 µF\"")
        .replace("sink_current = \"2 A\"", "sink_current = \"0 A\"");
    let s = scenario(&t);
    let r = run(&s, true);
    assert!(r.findings.iter().any(|f| f.kind == "guard-recirculated"));
    assert!(
        !r.findings.iter().any(|f| f.kind == "bus-above-max"),
        "{:?}",
        r.findings
    );
    assert!(r.peak_bus_v <= f64::from(s.params.supply.max));
    assert!(r.rows.iter().any(|x| x.recirculated));
}

#[test]
fn plug_braking_that_no_decay_can_hold_stops_driving_before_the_bus_passes_its_maximum() {
    // 20 µF that cannot sink, and a 3 A ceiling that the rotor's own braking current passes
    // (0.015 V·s/rad × 440 rad/s over 2.04 Ω is 3.2 A): neither decay keeps both the bus and
    // the ceiling. The bus comes first: the guard stops driving against the rotation and
    // recirculates, with supply-pump raised, instead of alternating slow braking with fast
    // periods that the ceiling forced (each of which lifted the rail; the bus then reached
    // 20.6 V, 1.47 × its 14 V maximum). The rail pushes back on the coil and is what the guard
    // reads (the plant's bus is checked against ngspice in bridge_ngspice.rs).
    let t = text()
        .replace("capacitance = \"470 µF\"", "capacitance = \"20 µF\"")
        .replace("sink_current = \"2 A\"", "sink_current = \"0 A\"")
        .replace("current_ceiling = \"4 A\"", "current_ceiling = \"3 A\"");
    let s = scenario(&t);
    let r = run(&s, true);
    let v_max = f64::from(s.params.supply.max);
    eprintln!(
        "CHECK plug braking on 20 µF: bus peak {:.2} V (max {v_max} V, breakdown {} V), current peak {:.2} A",
        r.peak_bus_v, s.params.switch.breakdown, r.peak_current_a
    );
    assert!(r.peak_bus_v <= v_max, "{:?}", r.findings);
    assert!(r.peak_bus_v < f64::from(s.params.switch.breakdown));
    assert!(
        r.events
            .iter()
            .any(|e| e.condition == "supply-pump" && e.detail == "raised")
    );
    assert!(r.peak_current_a < f64::from(s.limits.trip_current));
    assert!(
        !r.findings.iter().any(|f| f.kind == "guard-tripped"),
        "{:?}",
        r.findings
    );
    // No alternation of a drive with fast periods that lift the rail: while supply-pump is
    // active the guard either recirculates or coasts (every switch off, no drive: the charge
    // the stop returns was reserved before the period that led to it).
    let pumped: Vec<_> = r
        .rows
        .iter()
        .filter(|x| x.conditions.contains(Condition::SupplyPump))
        .collect();
    assert!(!pumped.is_empty());
    assert!(
        pumped
            .iter()
            .all(|x| x.recirculated || x.duty_applied == 0.0)
    );
    let coasting = pumped.iter().filter(|x| !x.recirculated).count();
    eprintln!(
        "CHECK plug braking on 20 µF: {} periods with supply-pump, {coasting} of them coasting",
        pumped.len()
    );
    assert!(
        r.peak_current_a <= f64::from(s.limits.current_ceiling),
        "{:?}",
        r.findings
    );
}

#[test]
fn the_command_line_runs_and_checks_a_bridge_scenario() {
    let exe = env!("CARGO_BIN_EXE_coilward-sim");
    let out = Command::new(exe).arg("check").arg(demo()).output().unwrap();
    assert_eq!(out.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&out.stdout).contains("full bridge"));
    let dir = tempfile::tempdir().unwrap();
    let out = Command::new(exe)
        .arg("run")
        .arg(demo())
        .arg("--csv")
        .arg(dir.path().join("m.csv"))
        .arg("--json")
        .arg(dir.path().join("m.json"))
        .output()
        .unwrap();
    // Exit status 3: limited (the interlock held the reversal).
    assert_eq!(
        out.status.code(),
        Some(3),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    let csv = std::fs::read_to_string(dir.path().join("m.csv")).unwrap();
    assert!(csv.starts_with(&coilward_sim::bridge::report::COLUMNS.join(",")));
    assert!(csv.contains("reversal-hold"));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("m.json")).unwrap()).unwrap();
    assert_eq!(json["verdict"], "limited");
    // No [tolerance]: nothing to sweep, and the message says what to add.
    let out = Command::new(exe)
        .args(["sweep", "--samples", "2"])
        .arg(demo())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no [tolerance]"));
    // With one, a bridge sweeps as the low side does: the bus peak among its worst cases,
    // limited samples (the guard brakes within the bus's maximum).
    let door = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../examples/scenarios/door-motor-small-bus.toml");
    let json = dir.path().join("door.json");
    let out = Command::new(exe)
        .args(["sweep", "--samples", "2", "--plan", "latin", "--json"])
        .arg(&json)
        .arg(&door)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(3), "{out:?}");
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(summary["scenario"]["topology"], "full-bridge");
    assert_eq!(summary["limited"], 2);
    assert!(summary["worst"]["bus_peak"]["value"].as_f64().unwrap() < 28.0);
}

/// A latching valve (no motor) switched one way, then the other, in fast decay: a circuit of
/// our own.
fn latching_valve(period: &str, dead: &str) -> String {
    format!(
        r#"name = "latching valve"
topology = "full-bridge"
[supply]
voltage = "12 V"
min = "10 V"
max = "14 V"
[coil]
inductance = "8 mH"
resistance = "12 Ω"
[switch]
on_resistance = "50 mΩ"
breakdown = "30 V"
[body_diode]
forward_voltage = "0.8 V"
resistance = "20 mΩ"
[decay]
mode = "fast"
[control]
period = "{period}"
duty_resolution = 1000
current_full_scale = "2 A"
[guard]
current_ceiling = "1.2 A"
trip_current = "1.5 A"
release_current = "20 mA"
reversal_dead_time = "{dead}"
[[drive]]
at = "0 ms"
duty = "100 %"
[[drive]]
at = "5 ms"
duty = "-100 %"
[[drive]]
at = "12 ms"
duty = "0 %"
[run]
duration = "14 ms"
"#
    )
}

#[test]
fn a_reversal_waits_the_whole_dead_time_from_the_true_release() {
    // The dead time runs from the instant the current reached the release level inside its
    // period, so the true gap (the plant's located crossing to the first drive the other way)
    // is never below the configured dead time, and exceeds it by less than a period plus the
    // estimate's lead. Counting the crossing's period as a whole quiet period let this drive
    // go up to one period early.
    for (period, dead) in [
        ("50 us", "500 us"),
        ("100 us", "500 us"),
        ("100 us", "480 us"),
        ("70 us", "525 us"),
    ] {
        let s = scenario(&latching_valve(period, dead));
        let r = run(&s, false);
        // The interlock's hold is the guard's only action.
        assert_eq!(
            r.verdict(),
            Verdict::Limited,
            "{period} {dead}: {:?}",
            r.findings
        );
        assert!(
            r.findings.iter().all(|f| f.kind == "guard-acted"),
            "{:?}",
            r.findings
        );
        let v = r.reversals[0];
        let gap = v.driven_s.expect("driven") - v.true_release_s.expect("settled");
        let (t, d) = (s.period, f64::from(s.limits.reversal_dead_time));
        eprintln!(
            "CHECK latching valve, period {period}, dead time {dead}: true gap {:.1} µs",
            gap * 1e6
        );
        assert!(gap >= d - 1e-9, "{gap} < {d}");
        assert!(gap < d + 2.0 * t, "{gap} vs {d}");
    }
}

/// The bridge's winding image from the scenario's `[guard]` keys (the low side's): the latching
/// valve held on for 12 ms with a 5 ms image and a basic current of a third of its 1 A raises
/// `coil-overheat` and the guard holds the output off (limited, nothing exceeded); a key
/// missing from the set is named.
#[test]
fn bridge_winding_image_from_the_scenario() {
    let text = latching_valve("50 us", "1 ms").replace(
        "[guard]\n",
        "[guard]\ncoil_time_constant = \"5 ms\"\ncoil_basic_current = \"0.3 A\"\ncoil_ambient = \"25 °C\"\ncoil_rise = \"60 K\"\n",
    );
    let s = scenario(&text);
    assert!(s.limits.coil_thermal.is_some());
    let r = run(&s, false);
    assert!(
        r.events.iter().any(|e| e.condition == "coil-overheat"),
        "{:?}",
        r.events
    );
    assert_eq!(r.verdict(), Verdict::Limited, "{:?}", r.findings);
    // The retry keys, as on the low side.
    let retrying = text.replace(
        "[guard]\n",
        "[guard]\nretry_cooldown = \"1 ms\"\nmax_retries = 1\n",
    );
    assert!(scenario(&retrying).limits.retry.is_some());
    let missing = text.replace("coil_rise = \"60 K\"\n", "");
    let e = BridgeScenario::parse(Path::new("valve.toml"), &missing).unwrap_err();
    assert_eq!(e.key.as_deref(), Some("guard.coil_rise"), "{e}");
}
