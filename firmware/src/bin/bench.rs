//! Instruction-count benchmark: each operation runs between two marker functions, and the
//! counting QEMU plugin of `cargo xtask target-bench` counts the instructions executed between
//! the markers. The operation names go out over semihosting in the same order.
#![no_std]
#![no_main]

use coilward::{Current, Guard, Input, Volts};
use coilward_firmware::trace;
use core::fmt::Write;
use core::hint::black_box;
use cortex_m_rt::entry;
use cortex_m_semihosting::hio;

#[panic_handler]
fn panic(info: &core::panic::PanicInfo) -> ! {
    coilward_firmware::report_panic(info)
}

/// Counting starts at this function's first instruction.
#[unsafe(no_mangle)]
#[inline(never)]
pub extern "C" fn coilward_bench_start() {
    black_box(0x5354_4152u32);
}

/// Counting stops at this function's first instruction.
#[unsafe(no_mangle)]
#[inline(never)]
pub extern "C" fn coilward_bench_end() {
    black_box(0x454e_4421u32);
}

fn measure<R>(out: &mut hio::HostStream, name: &str, f: impl FnOnce() -> R) -> R {
    let _ = writeln!(out, "op {name}");
    coilward_bench_start();
    let r = black_box(f());
    coilward_bench_end();
    r
}

#[entry]
fn main() -> ! {
    let mut out = coilward_firmware::host_stdout();
    measure(&mut out, "empty", || ());
    let p = black_box(trace::params());
    let l = black_box(trace::limits());
    let Ok(guard) = measure(&mut out, "configure", || Guard::new(&p, &l)) else {
        coilward_firmware::finish(false)
    };
    typical(&mut out, &guard, &l);
    worst(&mut out, &guard);
    bridge(&mut out);
    let _ = writeln!(
        out,
        "bridge-state-bytes {}",
        core::mem::size_of::<coilward::bridge::BridgeState>()
    );

    let _ = writeln!(
        out,
        "state-bytes {}",
        core::mem::size_of::<coilward::GuardState>()
    );
    let _ = writeln!(
        out,
        "memo-bytes {}",
        core::mem::size_of::<coilward::TickMemo>()
    );
    let _ = writeln!(out, "bench done");
    coilward_firmware::finish(true)
}

/// The estimator step and the low-side ticks a steady drive takes.
fn typical(out: &mut hio::HostStream, guard: &Guard, l: &coilward::GuardLimits) {
    let m = guard.model();
    let vs = Volts::from_num(24);
    // Estimator step in steady PWM at 65 % (about 0.85 A, continuous conduction; low enough
    // that the guard's bound over the trace's declared tolerance stays under the 1.1 A ceiling,
    // so "tick" is a tick that does not limit).
    let typical = 2080;
    let mut coil = coilward::CoilState::idle();
    for _ in 0..2000 {
        m.step(&mut coil, typical, vs);
    }
    measure(out, "step", || {
        m.step(black_box(&mut coil), black_box(typical), black_box(vs))
    });

    // Guard tick, held: a valve held in steady PWM at 55 % through its freewheel diode
    // (about 0.7 A, continuous conduction; its bound stays under the 1.1 A ceiling with the
    // declared tolerance), every replica running, nothing raised. The same duty as the period before.
    let held = 1760;
    let fp = black_box(trace::freewheel_params());
    let Ok(hold) = Guard::new(&fp, l) else {
        coilward_firmware::finish(false)
    };
    let (mut s, mut memo) = (hold.start_idle(), coilward::TickMemo::EMPTY);
    for _ in 0..2000 {
        hold.tick_with(&mut s, &mut memo, Input::new(held, vs));
    }
    let check = hold.tick(&mut s.clone(), Input::new(held, vs));
    if check.duty != held || !check.active.is_empty() {
        let _ = writeln!(out, "the held tick is not a plain drive: {check:?}");
        coilward_firmware::finish(false)
    }
    // The channel keeps its memo (`tick_with`): the repeated duty reads no table.
    let mut plain = s;
    measure(out, "tick", || {
        hold.tick_with(
            black_box(&mut s),
            black_box(&mut memo),
            Input::new(black_box(held), black_box(vs)),
        )
    });
    // The same period through `tick`, which keeps nothing between calls.
    measure(out, "tick-no-memo", || {
        hold.tick(
            black_box(&mut plain),
            Input::new(black_box(held), black_box(vs)),
        )
    });

    // A new duty (the request moved by one count): the tables are read afresh.
    measure(out, "tick-new-duty", || {
        hold.tick_with(
            black_box(&mut s),
            black_box(&mut memo),
            Input::new(black_box(held + 1), black_box(vs)),
        )
    });

    // The 45 V clamp of the trace's valve under steady PWM: its replica trips within the 2 000
    // periods, so this is a latched guard at duty 0 whose bound rests at its floor.
    let mut d = guard.start_idle();
    for _ in 0..2000 {
        guard.tick(&mut d, Input::new(typical, vs));
    }
    measure(out, "tick-tripped", || {
        guard.tick(
            black_box(&mut d),
            Input::new(black_box(typical), black_box(vs)),
        )
    });

    // Discontinuous conduction of the bound (at 20 % the 45 V clamp empties the coil every
    // period): the off-segment's energy is then the exact turn-off energy. Taken before the
    // clamp's replica trips.
    let mut d = guard.start_idle();
    for _ in 0..200 {
        guard.tick(&mut d, Input::new(640, vs));
    }
    let check = guard.tick(&mut d.clone(), Input::new(640, vs));
    if check.duty != 640 || !check.active.is_empty() {
        let _ = writeln!(
            out,
            "the discontinuous tick is not a plain drive: {check:?}"
        );
        coilward_firmware::finish(false)
    }
    measure(out, "tick-dcm", || {
        guard.tick(black_box(&mut d), Input::new(black_box(640), black_box(vs)))
    });
}

/// The low-side paths that can be the longest, and event mode.
fn worst(out: &mut hio::HostStream, guard: &Guard) {
    let m = guard.model();
    let vs = Volts::from_num(24);
    // Paths that can be the longest: the ceiling's search (full duty asked for, limited) ...
    let mut s = guard.start_idle();
    let mut memo = coilward::TickMemo::EMPTY;
    let (mut limited, mut kept) = (s, memo);
    for _ in 0..4000 {
        let (before, memo_before) = (s, memo);
        let o = guard.tick_with(&mut s, &mut memo, Input::new(3200, vs));
        if o.duty < 3200 && o.duty > 0 {
            (limited, kept) = (before, memo_before);
        }
    }
    let (mut moved, mut with_memo) = (limited, limited);
    measure(out, "tick-limit", || {
        guard.tick(
            black_box(&mut limited),
            Input::new(black_box(3200), black_box(vs)),
        )
    });
    // ... the same period with the channel's memo ...
    measure(out, "tick-limit-memo", || {
        guard.tick_with(
            black_box(&mut with_memo),
            black_box(&mut kept),
            Input::new(black_box(3200), black_box(vs)),
        )
    });
    // ... and with the supply reading moved by 0.1 V, so the steady duty is found again.
    let up = Volts::from_num(24.1);
    measure(out, "tick-limit-supply-moved", || {
        guard.tick(
            black_box(&mut moved),
            Input::new(black_box(3200), black_box(up)),
        )
    });

    // ... a commanded turn-off checked against the clamp's pulse rating ...
    let mut off = s;
    measure(out, "tick-turnoff", || {
        guard.tick(black_box(&mut off), Input::new(black_box(0), black_box(vs)))
    });

    // ... the release interval with its closed-form remaining time ...
    let mut held = off;
    measure(out, "tick-release", || {
        guard.tick(
            black_box(&mut held),
            Input::new(black_box(3200), black_box(vs)),
        )
    });

    // ... and an off-segment that reaches zero (exact turn-off energy).
    let mut dcm = guard.start_with_current(m.current_from_amps(0.004).unwrap_or(Current::ZERO));
    measure(out, "tick-zero", || {
        guard.tick(black_box(&mut dcm), Input::new(black_box(0), black_box(vs)))
    });

    // Event mode.
    let mut e = guard.start_idle();
    guard.event(&mut e, true, 0, vs);
    measure(out, "event", || {
        guard.event(
            black_box(&mut e),
            black_box(true),
            black_box(500),
            black_box(vs),
        )
    });
}

/// The full bridge's step and ticks.
fn bridge(out: &mut hio::HostStream) {
    // The full bridge: the demo motor winding in mixed decay at 60 % with a 4 V back-EMF.
    let bp = black_box(trace::bridge_params());
    let bl = black_box(trace::bridge_limits());
    let Ok(bridge) = measure(out, "bridge-configure", || {
        coilward::bridge::BridgeGuard::new(&bp, &bl)
    }) else {
        coilward_firmware::finish(false)
    };
    let bm = bridge.model();
    let vs12 = Volts::from_num(12);
    let emf = coilward::SignedVolts::from_num(4);
    let mut bc = coilward::bridge::BridgeCoil::idle();
    for _ in 0..2000 {
        bm.step(&mut bc, 600, vs12, emf);
    }
    measure(out, "bridge-step", || {
        bm.step(
            black_box(&mut bc),
            black_box(600),
            black_box(vs12),
            black_box(emf),
        )
    });
    let input = |d: i32| coilward::bridge::BridgeInput::new(d, vs12).with_back_emf(emf);
    let mut bs = bridge.start_idle();
    for _ in 0..2000 {
        bridge.tick(&mut bs, input(600));
    }
    measure(out, "bridge-tick", || {
        bridge.tick(black_box(&mut bs), black_box(input(600)))
    });
    // A reversal request: held, with the decay time.
    let mut held = bs;
    measure(out, "bridge-tick-hold", || {
        bridge.tick(black_box(&mut held), black_box(input(-600)))
    });
    // Plug braking at the ceiling: the bisection over whole-period predictions.
    let mut plug = bridge.start_idle();
    let against = coilward::bridge::BridgeInput::new(-1000, vs12)
        .with_back_emf(coilward::SignedVolts::from_num(8));
    for _ in 0..200 {
        bridge.tick(&mut plug, against);
    }
    measure(out, "bridge-tick-limit", || {
        bridge.tick(black_box(&mut plug), black_box(against))
    });
}
