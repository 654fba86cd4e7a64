use coilward_sim::spice::{self, Case};
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
    let t0 = std::time::Instant::now();
    for _ in 0..10 {
        std::hint::black_box(spice::plant(&case).unwrap());
    }
    println!("{:.4} s per run", t0.elapsed().as_secs_f64() / 10.0);
}
