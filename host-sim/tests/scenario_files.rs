//! Scenario files: the schema's keys, its errors (file, line, key), and the command line's exit
//! statuses. The demo scenarios in examples/scenarios/ must load and behave as their comments
//! say.

use coilward_sim::scenario::Scenario;
use std::path::{Path, PathBuf};
use std::process::Command;

fn demo(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../examples/scenarios")
        .join(name)
}

fn valve_text() -> String {
    std::fs::read_to_string(demo("irrigation-valve.toml")).unwrap()
}

fn refuse(text: &str) -> coilward_sim::scenario::ScenarioError {
    Scenario::parse(Path::new("case.toml"), text).expect_err("must be refused")
}

fn line_of(text: &str, needle: &str) -> usize {
    text.lines()
        .position(|l| l.contains(needle))
        .expect("needle in text")
        + 1
}

#[test]
fn every_demo_scenario_loads() {
    for entry in std::fs::read_dir(demo("")).unwrap() {
        let p = entry.unwrap().path();
        if p.extension().is_some_and(|e| e == "toml") {
            let text = std::fs::read_to_string(&p).unwrap();
            match coilward_sim::scenario::topology_of(&text) {
                coilward_sim::scenario::Topology::LowSide => {
                    Scenario::load(&p).unwrap_or_else(|e| panic!("{e}"));
                }
                coilward_sim::scenario::Topology::FullBridge => {
                    coilward_sim::bridge::scenario::BridgeScenario::load(&p)
                        .unwrap_or_else(|e| panic!("{e}"));
                }
            }
        }
    }
}

#[test]
fn a_value_without_its_unit_names_file_line_and_key() {
    let text = valve_text().replace("voltage = \"24 V\"", "voltage = \"24\"");
    let e = refuse(&text);
    let msg = e.to_string();
    assert_eq!(e.key.as_deref(), Some("supply.voltage"), "{msg}");
    assert_eq!(e.at.unwrap().0, line_of(&text, "voltage = \"24\""), "{msg}");
    assert!(
        msg.starts_with("case.toml:") && msg.contains("no unit"),
        "{msg}"
    );
}

#[test]
fn the_wrong_unit_is_refused() {
    let text = valve_text().replace("inductance = \"40 mH\"", "inductance = \"40 mA\"");
    let e = refuse(&text);
    assert_eq!(e.key.as_deref(), Some("coil.inductance"));
    assert!(e.message.contains("expected a value in H"), "{e}");
}

#[test]
fn an_unknown_key_names_its_line() {
    let text = valve_text().replace("inductance = \"40 mH\"", "inductanse = \"40 mH\"");
    let e = refuse(&text);
    assert_eq!(e.at.unwrap().0, line_of(&text, "inductanse"), "{e}");
    assert!(e.message.contains("inductanse"), "{e}");
    let text = valve_text() + "\n[tolerance.extra]\n";
    let e = refuse(&text);
    assert_eq!(e.at.unwrap().0, line_of(&text, "[tolerance.extra]"));
    assert!(e.to_string().contains("[tolerance.extra]"), "{e}");
}

#[test]
fn a_parameter_the_library_refuses_is_blamed_on_its_key() {
    // The switch must block the maximum supply: a 25 V breakdown under a 28 V maximum.
    let text = valve_text().replace("breakdown = \"60 V\"", "breakdown = \"25 V\"");
    let e = refuse(&text);
    assert_eq!(e.key.as_deref(), Some("switch.breakdown"), "{e}");
    assert_eq!(e.at.unwrap().0, line_of(&text, "breakdown = \"25 V\""));
    assert!(e.message.contains("refused by the library"), "{e}");
    // A release current at or above the trip current.
    let text = valve_text().replace("release_current = \"50 mA\"", "release_current = \"2 A\"");
    assert_eq!(refuse(&text).key.as_deref(), Some("guard.release_current"));
}

#[test]
fn a_model_override_that_the_library_refuses_is_blamed_on_the_model_key() {
    let text = valve_text() + "\n[model]\ninductance = \"-4 mH\"\n";
    let e = refuse(&text);
    assert_eq!(e.key.as_deref(), Some("model.inductance"), "{e}");
    assert_eq!(e.at.unwrap().0, line_of(&text, "\"-4 mH\""));
}

#[test]
fn clamp_keys_must_fit_the_path() {
    let text = valve_text().replace("path = \"freewheel\"", "path = \"switch-clamp\"");
    let e = refuse(&text);
    assert!(e.message.contains("does not apply"), "{e}");
    let text = valve_text().replace("forward_voltage = \"0.7 V\"", "");
    assert_eq!(refuse(&text).key.as_deref(), Some("clamp.forward_voltage"));
}

#[test]
fn drive_steps_in_order_and_duty_in_range() {
    let text = valve_text().replace("at = \"140 ms\"", "at = \"100 ms\"");
    assert_eq!(refuse(&text).key.as_deref(), Some("drive[3].at"));
    let text = valve_text().replace("duty = \"35 %\"", "duty = \"135 %\"");
    assert_eq!(refuse(&text).key.as_deref(), Some("drive[1].duty"));
}

#[test]
fn drive_steps_start_on_their_period() {
    let s = Scenario::load(&demo("irrigation-valve.toml")).unwrap();
    // 15 ms / 50 µs = period 300 exactly; the step must not slip to 301 by rounding.
    assert_eq!(s.step_period(0.015), 300);
    assert!((s.duty_in_period(299) - 1.0).abs() < 1e-12);
    assert!((s.duty_in_period(300) - 0.35).abs() < 1e-12);
}

fn sim() -> Command {
    Command::new(env!("CARGO_BIN_EXE_coilward-sim"))
}

#[test]
fn exit_status_pass_fail_bad_input() {
    let ok = sim()
        .args(["run"])
        .arg(demo("irrigation-valve.toml"))
        .output()
        .unwrap();
    assert_eq!(
        ok.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&ok.stdout)
    );
    assert!(String::from_utf8_lossy(&ok.stdout).contains("verdict: PASS"));
    let acted = sim()
        .args(["run"])
        .arg(demo("unclamped-avalanche.toml"))
        .output()
        .unwrap();
    // The guard cut the current and nothing was exceeded: limited, exit status 3.
    assert_eq!(acted.status.code(), Some(3));
    assert!(String::from_utf8_lossy(&acted.stdout).contains("verdict: LIMITED"));
    // The summary names the ceiling the guard applied, not only the configured one.
    assert!(
        String::from_utf8_lossy(&acted.stdout).contains(
            "ceiling 1.550 A (configured 2.500 A, lowered for the single-pulse energy rating)"
        ),
        "{}",
        String::from_utf8_lossy(&acted.stdout)
    );
    let dir = tempfile::tempdir().unwrap();
    // A guard that believes a coil four times faster lets it on while current still flows:
    // fail, exit status 1.
    let early = dir.path().join("early.toml");
    std::fs::write(
        &early,
        valve_text()
            .replace("at = \"140 ms\"", "at = \"121 ms\"")
            .replace("at = \"155 ms\"", "at = \"136 ms\"")
            + "\n[model]\ninductance = \"10 mH\"\n",
    )
    .unwrap();
    let failed = sim().arg("run").arg(&early).output().unwrap();
    assert_eq!(failed.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&failed.stdout).contains("verdict: FAIL"));
    let bad = dir.path().join("bad.toml");
    std::fs::write(&bad, valve_text().replace("\"24 V\"", "\"24\"")).unwrap();
    let out = sim().arg("run").arg(&bad).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("bad.toml:") && err.contains("supply.voltage"),
        "{err}"
    );
    // Report paths are checked before any work: the same file twice, or a file that cannot be
    // written, is bad input and nothing is simulated.
    let same = dir.path().join("same.out");
    let out = sim()
        .arg("run")
        .arg(demo("relay-zener.toml"))
        .arg("--json")
        .arg(&same)
        .arg("--csv")
        .arg(&same)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--json and --csv name the same file"));
    assert!(out.stdout.is_empty());
    let out = sim()
        .arg("run")
        .arg(demo("relay-zener.toml"))
        .arg("--svg")
        .arg(dir.path().join("no-such-dir").join("p.svg"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(
        out.stdout.is_empty(),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    let check = sim()
        .arg("check")
        .arg(demo("relay-zener.toml"))
        .output()
        .unwrap();
    assert_eq!(check.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&check.stdout).contains("decay to the release current"));
    for cmd in ["run", "check", "sweep"] {
        let help = sim().args([cmd, "--help"]).output().unwrap();
        assert_eq!(help.status.code(), Some(0));
        assert!(
            String::from_utf8_lossy(&help.stdout).contains("Example"),
            "{cmd} --help has examples"
        );
    }
}

#[test]
fn reports_keep_their_contract() {
    let dir = tempfile::tempdir().unwrap();
    let (j, c, s) = (
        dir.path().join("r.json"),
        dir.path().join("r.csv"),
        dir.path().join("r.svg"),
    );
    let out = sim()
        .arg("run")
        .arg(demo("relay-zener.toml"))
        .arg("--json")
        .arg(&j)
        .arg("--csv")
        .arg(&c)
        .arg("--svg")
        .arg(&s)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let v: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&j).unwrap()).unwrap();
    assert_eq!(v["verdict"], "pass");
    for key in [
        "peak_current_a",
        "peak_drain_voltage_v",
        "turn_offs",
        "events",
        "estimate",
    ] {
        assert!(!v[key].is_null(), "{key}");
    }
    let t = &v["turn_offs"][0];
    for key in [
        "t_s",
        "current_a",
        "decay_time_s",
        "clamp_energy_j",
        "peak_drain_voltage_v",
    ] {
        assert!(t.get(key).is_some(), "turn_offs[].{key}");
    }
    assert!(v["estimate"]["max_abs_error_a"].is_f64() && v["estimate"]["rms_error_a"].is_f64());
    assert!(v["ceiling_a"].as_f64().is_some_and(|c| c > 0.0));
    let csv = std::fs::read_to_string(&c).unwrap();
    let header = csv.lines().next().unwrap();
    assert!(header.starts_with(
        "t_s,duty_requested,duty_applied,supply_v,current_a,mean_current_a,peak_current_a,\
         estimated_current_a,estimated_peak_a,drain_peak_v,conditions"
    ));
    assert_eq!(
        csv.lines().count(),
        1 + 1300,
        "a header and one row per period"
    );
    let svg = std::fs::read_to_string(&s).unwrap();
    assert!(svg.starts_with("<svg") && svg.contains("estimate") && svg.contains("verdict: pass"));
    // Both topologies' JSON share one frame: the layout's version, the scenario as an object
    // with its topology, the verdict word and the estimate's error.
    let b = dir.path().join("b.json");
    let out = sim()
        .arg("run")
        .arg(demo("reversing-gear-motor.toml"))
        .arg("--json")
        .arg(&b)
        .output()
        .unwrap();
    assert!(out.status.code().is_some_and(|c| c != 2));
    let w: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&b).unwrap()).unwrap();
    // The bridge's ends of drive, as the low side's turn-offs (and in its summary).
    let stop = &w["stops"][0];
    for key in ["t_s", "current_a", "decay_time_s", "returned_energy_j"] {
        assert!(stop.get(key).is_some(), "stops[].{key}");
    }
    assert!(String::from_utf8_lossy(&out.stdout).contains("drive ends"));
    for (doc, topology) in [(&v, "low-side"), (&w, "full-bridge")] {
        assert_eq!(doc["schema"], 1);
        assert_eq!(doc["scenario"]["topology"], topology);
        assert!(doc["scenario"]["name"].is_string() && doc["scenario"]["file"].is_string());
        assert!(["pass", "limited", "fail"].contains(&doc["verdict"].as_str().unwrap()));
        assert!(doc["estimate"]["max_abs_error_a"].is_f64(), "{topology}");
        assert!(doc["warnings"].is_array() && doc["findings"].is_array());
    }
}

#[test]
fn sweep_shards_reassemble_the_whole_sweep() {
    let s = Scenario::load(&demo("relay-zener.toml")).unwrap();
    let loaded = coilward_sim::scenario::Loaded::LowSide(Box::new(s.clone()));
    use coilward_sim::sweep::{self, Shard, Spec};
    let whole = sweep::run(&loaded, &Spec::uniform(12, 9), || {});
    let mut parts = Vec::new();
    for k in 1..=3 {
        let spec = Spec {
            shard: Shard { k, n: 3 },
            ..Spec::uniform(12, 9)
        };
        parts.extend(sweep::run(&loaded, &spec, || {}));
    }
    parts.sort_by_key(|x| x.index);
    assert_eq!(whole.len(), 12);
    for (a, b) in whole.iter().zip(&parts) {
        assert_eq!(a.index, b.index);
        assert_eq!(a, b);
        assert_eq!(a.parameters, b.parameters);
    }
    // Draws stay inside the spreads.
    for x in &whole {
        for (k, v) in &x.parameters {
            let (knob, spread) = s.tolerance.iter().find(|(kn, _)| kn.name() == k).unwrap();
            let (lo, hi) = spread.bounds(s.plant.get(*knob));
            assert!(*v >= lo && *v <= hi, "{k} {v} outside {lo} ..= {hi}");
        }
    }
}

#[test]
fn sweep_samples_never_stop_the_plant() {
    // Regression: sample 0 of seed 1 put the node exactly on the freewheel diode's threshold at
    // a turn-off and the two modes disagreed on the sign by one rounding, toggling the diode
    // 100 000 times at one instant.
    let s = coilward_sim::scenario::Loaded::load(&demo("irrigation-valve.toml")).unwrap();
    let r = coilward_sim::sweep::run(&s, &coilward_sim::sweep::Spec::uniform(48, 1), || {});
    for x in &r {
        assert!(
            !x.findings.iter().any(|f| f == "plant-stopped"),
            "sample {}: {:?}",
            x.index,
            x.findings
        );
    }
}

#[test]
fn each_bad_input_blames_the_key_the_user_must_change() {
    // (what, the demo valve edited, exit status of `check`, where the words must appear, words).
    // Status 2 is bad input (stderr names file, line and key); 0 with a warning line naming the
    // key on stdout is a setting accepted that is probably not what was meant.
    let cases: [(&str, String, i32, &str, &[&str]); 9] = [
        (
            "a zero period",
            valve_text().replace("period = \"50 us\"", "period = \"0 s\""),
            2,
            "stderr",
            &["control.period", "above 0 s"],
        ),
        (
            "a mistyped topology",
            format!("topology = \"fullbridge\"\n{}", valve_text()),
            2,
            "stderr",
            &["topology", "low-side, full-bridge"],
        ),
        (
            "a bare number",
            valve_text().replace("inductance = \"40 mH\"", "inductance = 0.04"),
            2,
            "stderr",
            &["coil.inductance", "bare number", "\"40 mH\""],
        ),
        (
            "a count in quotes",
            valve_text().replace("duty_resolution = 3200", "duty_resolution = \"3200\""),
            2,
            "stderr",
            &["control.duty_resolution", "whole number"],
        ),
        (
            "a winding temperature beyond the library's range",
            valve_text().replace("\ntemperature = \"20 °C\"", "\ntemperature = \"400 °C\""),
            2,
            "stderr",
            &["coil.temperature", "-100 °C ..= 300 °C"],
        ),
        (
            "an on-resistance beyond the library's range",
            valve_text().replace("on_resistance = \"0.1 Ω\"", "on_resistance = \"2 kΩ\""),
            2,
            "stderr",
            &["switch.on_resistance", "1000 Ω"],
        ),
        (
            "the ohm sign U+2126",
            valve_text().replace("resistance = \"18 Ω\"", "resistance = \"18 \u{2126}\""),
            0,
            "stdout",
            &["valid"],
        ),
        (
            "a full scale below the trip current",
            valve_text().replace(
                "current_full_scale = \"2 A\"",
                "current_full_scale = \"0.5 A\"",
            ),
            0,
            "stdout",
            &["warning: control.current_full_scale", "guard.trip_current"],
        ),
        (
            "a drive step after the end of the run",
            valve_text().replace("at = \"180 ms\"", "at = \"250 ms\""),
            0,
            "stdout",
            &["warning: drive[5].at", "run.duration"],
        ),
    ];
    let dir = tempfile::tempdir().unwrap();
    for (what, text, status, stream, words) in cases {
        assert_ne!(text, valve_text(), "{what}: the edit must change the demo");
        let file = dir.path().join("case.toml");
        std::fs::write(&file, &text).unwrap();
        let out = sim().arg("check").arg(&file).output().unwrap();
        let shown = String::from_utf8_lossy(if stream == "stderr" {
            &out.stderr
        } else {
            &out.stdout
        })
        .into_owned();
        assert_eq!(out.status.code(), Some(status), "{what}: {shown}");
        for w in words {
            assert!(shown.contains(w), "{what}: `{w}` not in {shown}");
        }
        if status == 2 {
            assert!(
                !shown.contains("expected i64") && !shown.contains("invalid type"),
                "{what}: {shown}"
            );
        }
    }
}

#[test]
fn new_writes_scenarios_that_run_at_the_first_try() {
    // The two templates check and run as written (the low side passes; the bridge is limited:
    // the guard holds the reversal while the rotor still turns), and an existing file is never
    // overwritten.
    let dir = tempfile::tempdir().unwrap();
    for (flag, status) in [("--low-side", 0), ("--bridge", 3)] {
        let file = dir.path().join(format!("{flag}.toml"));
        let out = sim().args(["new", flag]).arg(&file).output().unwrap();
        assert_eq!(out.status.code(), Some(0), "{flag}");
        let check = sim().arg("check").arg(&file).output().unwrap();
        assert_eq!(
            check.status.code(),
            Some(0),
            "{flag}: {}",
            String::from_utf8_lossy(&check.stderr)
        );
        let run = sim().arg("run").arg(&file).output().unwrap();
        assert_eq!(
            run.status.code(),
            Some(status),
            "{flag}: {}",
            String::from_utf8_lossy(&run.stdout)
        );
        let again = sim().args(["new", flag]).arg(&file).output().unwrap();
        assert_eq!(again.status.code(), Some(2));
        assert!(String::from_utf8_lossy(&again.stderr).contains("already exists"));
    }
    let printed = sim().arg("new").output().unwrap();
    assert!(String::from_utf8_lossy(&printed.stdout).contains("[[drive]]"));
}

#[test]
fn every_missing_section_is_named_at_once() {
    let e = refuse("name = \"first try\"\n[supply]\nvoltage = \"24 V\"\n").to_string();
    for section in [
        "[coil]",
        "[switch]",
        "[clamp]",
        "[control]",
        "[guard]",
        "[run]",
    ] {
        assert!(e.contains(section), "{section} in {e}");
    }
    assert!(
        !e.contains("[supply]") && e.contains("coilward-sim new"),
        "{e}"
    );
}

#[test]
fn plots_show_what_the_guard_did() {
    // The panels and levels a designer reads the run by (each quantity on its own axis), the
    // time axis in the unit that fits a zoomed window, and the bridge's holds and speed panel.
    let dir = tempfile::tempdir().unwrap();
    let low = dir.path().join("low.svg");
    let out = sim()
        .arg("run")
        .arg(demo("valve-at-ceiling.toml"))
        .arg("--svg")
        .arg(&low)
        .args(["--from", "0.5 ms", "--to", "1.5 ms"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(3));
    let svg = std::fs::read_to_string(&low).unwrap();
    for words in [
        "time (µs)",
        "coil current (A)",
        "s error (",
        "s margin (",
        "ceiling applied",
        "release 50.0 mA",
        "switch node (V)",
        "duty (%)",
    ] {
        assert!(
            svg.contains(words) || svg.contains(&words.replace("&apos;", "'")),
            "{words}"
        );
    }
    // Zoomed into the PWM hold, the switch node is its full wave (a second run sampled inside
    // the window), not the per-period envelope.
    let zoom = dir.path().join("zoom.svg");
    let out = sim()
        .arg("run")
        .arg(demo("valve-at-ceiling.toml"))
        .arg("--svg")
        .arg(&zoom)
        .args(["--from", "30 ms", "--to", "30.3 ms"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(3));
    let svg = std::fs::read_to_string(&zoom).unwrap();
    assert!(svg.contains("full wave, 64 samples a period") && svg.contains("time (µs)"));
    let bridge = dir.path().join("bridge.svg");
    let out = sim()
        .arg("run")
        .arg(demo("reversing-gear-motor.toml"))
        .arg("--svg")
        .arg(&bridge)
        .output()
        .unwrap();
    assert!(out.status.code().is_some_and(|c| c != 2));
    let svg = std::fs::read_to_string(&bridge).unwrap();
    for words in [
        "time (ms)",
        "speed (rad/s)",
        "reversal-hold",
        "held ",
        "± ceiling",
        "bus (V)",
        "supply max",
    ] {
        assert!(svg.contains(words), "{words}");
    }
    // A window with no period in it is bad input, said before the plot.
    let out = sim()
        .arg("run")
        .arg(demo("valve-at-ceiling.toml"))
        .arg("--svg")
        .arg(dir.path().join("none.svg"))
        .args(["--from", "2 ms", "--to", "1 ms"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
}
