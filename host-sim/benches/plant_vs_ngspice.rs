//! Wall time of the plant against ngspice for 1 s of 20 kHz PWM on the demo valve circuit
//! (24 V, 40 mH, 18 Ω, diode freewheel, 470 pF at the node), at the agreement the cross-check
//! tests require (2 % on currents, decay time and energy; 3 % on the node peak) — the bench
//! checks that agreement on the very runs it times. Then the sweep goal: 1000 samples of the
//! 200 ms irrigation-valve scenario, all cores.
//!
//! Run: `cargo bench -p coilward-sim --bench plant_vs_ngspice` (ngspice from Debian's package).
//! A benchmark, not a test: the figures go to host-sim/README.md by hand.

use coilward_sim::scenario::Loaded;
use coilward_sim::spice::{self, Case};
use coilward_sim::sweep::{self, Spec};
use std::time::Instant;

fn agree(what: &str, got: f64, want: f64, tol: f64) -> bool {
    let rel = (got - want).abs() / want.abs();
    println!(
        "  {what:<18} plant {got:.6e}  ngspice {want:.6e}  ({:.3} %, limit {:.0} %)",
        rel * 100.0,
        tol * 100.0
    );
    rel <= tol
}

fn main() {
    let case = Case {
        name: "bench-valve-1s",
        c: spice::demo_valve(),
        period: 50e-6,
        on: 17.5e-6,
        periods: 20_000,
        rest: 10e-3,
        release: 0.05,
    };
    // The plant: best of five.
    let mut best = f64::INFINITY;
    let mut m = None;
    for _ in 0..5 {
        let t0 = Instant::now();
        m = Some(spice::plant(&case).expect("plant runs"));
        best = best.min(t0.elapsed().as_secs_f64());
    }
    let (ipk, imean, tdec, energy, vpk) = m.unwrap();
    let t0 = Instant::now();
    let ng = spice::ngspice(case.name, &spice::netlist(&case)).expect("ngspice runs");
    let t_ng = t0.elapsed().as_secs_f64();
    println!("1 s of 20 kHz PWM (35 %) on the valve circuit, then the release:");
    let mut ok = agree("peak current", ipk, ng["ipk"], 0.02);
    ok &= agree("mean current", imean, ng["imean"], 0.02);
    ok &= agree(
        "decay time",
        tdec.expect("decays") - case.t_off(),
        ng["tdec"],
        0.02,
    );
    ok &= agree("clamp energy", energy, ng["ecl"] + ng["eav"], 0.02);
    ok &= agree("node peak", vpk, ng["vpk"], 0.03);
    println!("  plant   {best:.4} s (best of 5)");
    println!("  ngspice {t_ng:.2} s (one run)");
    println!("  ratio   {:.0}× faster", t_ng / best);
    if !ok {
        eprintln!("the plant and ngspice disagree beyond the cross-check tolerances");
        std::process::exit(1);
    }

    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../examples/scenarios/irrigation-valve.toml");
    let s = Loaded::load(&path).expect("demo scenario");
    let t0 = Instant::now();
    let r = sweep::run(&s, &Spec::uniform(1000, 1), || {});
    let t = t0.elapsed().as_secs_f64();
    println!(
        "sweep: 1000 samples of the 200 ms irrigation-valve scenario (guard + plant) on {} threads: {t:.2} s (goal: under 10 s); {} failed",
        rayon::current_num_threads(),
        r.iter()
            .filter(|x| x.verdict == coilward_sim::cosim::Verdict::Fail)
            .count()
    );
}
