//! On-target test vectors: the golden trace (every period's hash, then the digest) and checks
//! against reference values, reported over semihosting; the exit status is the verdict.
#![no_std]
#![no_main]

use coilward::{
    ClampPath, CoilParams, ControlParams, Current, GuardState, Params, SupplyParams, SwitchParams,
    Volts,
};
use coilward_firmware::trace;
use core::fmt::Write;
use cortex_m_rt::entry;
use cortex_m_semihosting::hio;

#[panic_handler]
fn panic(info: &core::panic::PanicInfo) -> ! {
    coilward_firmware::report_panic(info)
}

/// One named check: prints `check <name> ok|FAILED` and returns whether it passed.
fn check(out: &mut hio::HostStream, name: &str, pass: bool) -> bool {
    let _ = writeln!(out, "check {name} {}", if pass { "ok" } else { "FAILED" });
    pass
}

#[entry]
fn main() -> ! {
    let mut out = coilward_firmware::host_stdout();
    let mut ok = true;

    // The golden trace, 50 hashes a line.
    let digest = trace::run(|k, h| {
        if k % 50 == 0 {
            let _ = write!(out, "h {k}");
        }
        let _ = write!(out, " {h:08x}");
        if k % 50 == 49 {
            let _ = writeln!(out);
        }
    });
    match digest {
        Some(d) => {
            let _ = writeln!(out, "digest {d:016x}");
        }
        None => ok &= check(&mut out, "trace-configures", false),
    }

    // Reference values on the core itself (shared/REFERENCES.md §3 vector A: t = 0.4055 ms,
    // E = 8.168 mJ; §2 RL rise at one τ 63.2 %).
    let a = Params::new(
        SupplyParams::new(12.0, 12.0, 12.0),
        CoilParams::new(0.010, 10.0),
        SwitchParams::new(0.0, 60.0),
        ClampPath::SwitchClamp {
            clamp_voltage: 36.0,
            resistance: 0.0,
        },
        ControlParams::new(100e-6, 100, 2.0),
    );
    match a.validate() {
        Ok(m) => {
            let vs = Volts::from_num(12);
            let i0 = m.current_from_amps(1.2).unwrap_or(Current::ZERO);
            let t = m.decay_time_us(i0, Current::ZERO, vs).unwrap_or(0);
            ok &= check(&mut out, "vector-a-decay-time", (405..=407).contains(&t));
            let e = m.joules(m.turn_off_energy(i0, vs));
            ok &= check(&mut out, "vector-a-energy", (e - 8.168e-3).abs() < 1e-6);
            let mut s = coilward::CoilState::idle();
            m.advance(&mut s, true, 1000, vs);
            let frac = m.amps(s.current()) / 1.2;
            ok &= check(&mut out, "rl-rise-one-tau", (frac - 0.632_121).abs() < 2e-6);
        }
        Err(_) => ok &= check(&mut out, "vector-a-configures", false),
    }
    let state = core::mem::size_of::<GuardState>();
    let _ = writeln!(out, "state-bytes {state}");
    // The budget was 64 bytes before the guard carried its bound: up to eight slices of the
    // inductance range (64 B), the ring's envelope and the clamp's average power (16 B) and
    // the limit's steady duty (20 B) make the state 160 bytes.
    ok &= check(&mut out, "state-at-most-160-bytes", state <= 160);

    let _ = writeln!(
        out,
        "{}",
        if ok {
            "all checks passed"
        } else {
            "some checks FAILED"
        }
    );
    coilward_firmware::finish(ok)
}
