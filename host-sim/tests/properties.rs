//! Property tests: the plant on random circuits and drives (no failure, finite states, energy
//! conserved — the first law, no outside source needed), and the readers on arbitrary text (an
//! error, never a panic).

use coilward_sim::capture::{Capture, ReadOptions};
use coilward_sim::plant::{Circuit, ClampKind, Plant, State, Tally};
use coilward_sim::scenario::Scenario;
use proptest::prelude::*;
use std::path::Path;

fn log_uniform(lo: f64, hi: f64) -> impl Strategy<Value = f64> {
    (0.0..1.0f64).prop_map(move |u| lo * (hi / lo).powf(u))
}

fn clamp() -> impl Strategy<Value = ClampKind> {
    prop_oneof![
        Just(ClampKind::None),
        (0.0..2.0f64, 0.0..5.0f64)
            .prop_map(|(drop, resistance)| ClampKind::Freewheel { drop, resistance }),
        (5.0..60.0f64, 0.0..5.0f64).prop_map(|(z, resistance)| ClampKind::Freewheel {
            drop: 0.7 + z,
            resistance
        }),
        (0.0..5.0f64).prop_map(|resistance| ClampKind::Switch {
            voltage: 150.0,
            resistance
        }),
    ]
}

fn circuit() -> impl Strategy<Value = Circuit> {
    (
        (
            1.0..100.0f64,
            0.0..2.0f64,
            log_uniform(1e-6, 10.0),
            log_uniform(1e-3, 1e3),
        ),
        (
            log_uniform(1e-3, 10.0),
            log_uniform(10e-12, 10e-9),
            0.0..1.5f64,
        ),
        (clamp(), proptest::option::of((0.05..5.0f64, 0.1..0.9f64))),
    )
        .prop_map(|((supply, rs, l, r), (ron, c, vb), (clamp, sat))| Circuit {
            supply,
            source_resistance: rs,
            inductance: l,
            saturation: sat.map(|(at, f)| (at, f * l)),
            resistance: r,
            on_resistance: ron,
            capacitance: c,
            breakdown: 200.0,
            avalanche_resistance: 0.0,
            body_diode_drop: vb,
            clamp,
        })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 96, ..ProptestConfig::default() })]

    #[test]
    fn plant_conserves_energy_on_random_circuits(
        c in circuit(),
        period in log_uniform(1e-6, 1e-3),
        duties in proptest::collection::vec(0.0..=1.0f64, 1..40),
    ) {
        let mut p = Plant::new(c, State::at_rest(c.supply));
        let e0 = p.stored_energy();
        let mut t = Tally::starting(p.state);
        t.all_energies = true;
        for d in &duties {
            p.run(true, d * period, &mut t).unwrap();
            p.run(false, (1.0 - d) * period, &mut t).unwrap();
        }
        p.run(false, 10.0 * period, &mut t).unwrap();
        prop_assert!(p.state.current.is_finite() && p.state.node.is_finite());
        let losses = t.winding_energy + t.switch_energy + t.clamp_energy + t.avalanche_energy;
        let scale = t.source_energy.abs() + losses.abs() + e0 + p.stored_energy();
        let imbalance = t.source_energy - (p.stored_energy() - e0 + losses);
        prop_assert!(imbalance.abs() <= 1e-6 * scale + 1e-15, "imbalance {imbalance} of {scale}");
        // The breakdown holds the node: at most 200 V plus the avalanche path's resistance
        // (the 0.1 mΩ floor) times the current.
        let i_max = t.peak_current.abs().max(t.least_current.abs());
        let limit = 200.0 + coilward_sim::plant::MIN_RESISTANCE * i_max + 1e-6;
        prop_assert!(t.peak_node <= limit, "node {} above {limit}", t.peak_node);
    }

    #[test]
    fn scenario_parser_never_panics(text in "\\PC{0,400}") {
        let _ = Scenario::parse(Path::new("any.toml"), &text);
    }

    #[test]
    fn scenario_parser_never_panics_on_edited_demos(at in 0usize..2000, cut in 0usize..40, insert in "[ -~]{0,12}") {
        let demo = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/scenarios/irrigation-valve.toml")).unwrap();
        let mut chars: Vec<char> = demo.chars().collect();
        let at = at.min(chars.len());
        let end = (at + cut).min(chars.len());
        chars.splice(at..end, insert.chars());
        let text: String = chars.into_iter().collect();
        if let Ok(s) = Scenario::parse(Path::new("edited.toml"), &text) {
            // What parses also runs (shortened so the property stays quick).
            let mut s = s;
            s.duration = s.duration.min(5e-3);
            let _ = coilward_sim::cosim::run(&s, coilward_sim::cosim::Options::default());
        }
    }

    #[test]
    fn capture_reader_and_fit_never_panic(text in "[0-9.,;eE+\\- \\n]{0,600}", header in "[a-zA-Z()\\[\\] ,;]{0,30}") {
        let full = format!("{header}\n{text}");
        if let Ok(c) = Capture::parse(Path::new("any.csv"), &full, &ReadOptions {
            time_unit: Some("s".into()),
            current_unit: Some("A".into()),
            time_column: Some("1".into()),
            current_column: Some("2".into()),
            shunt: None,
        }) {
            let _ = coilward_sim::fit::fit(&c, &coilward_sim::fit::FitOptions { supply: 12.0, series_resistance: 0.0, inductance: None });
        }
    }
}
