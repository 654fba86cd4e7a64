//! Panic-free by construction: this firmware calls every per-tick entry point of the guard and
//! the configuration, with inputs the optimiser cannot see through, and its panic handler
//! references a symbol that exists nowhere. A release (LTO) build links only if no panic path
//! is left. When it fails, the linker names `coilward_panic_path_is_reachable`; find the caller
//! with `arm-none-eabi-objdump -d` (or `cargo objdump`) and a search for the panic functions
//! (`core::panicking`, `panic_bounds_check`, `panic_const_*`), see DEVELOPERS.md.
#![no_std]
#![no_main]

use coilward::bridge::{AppliedDecay, BridgeGuard, BridgeInput};
use coilward::{
    Current, EventLog, Guard, HoldPhase, Input, PullInHold, SignedVolts, Speed, SupplySense, Volts,
};
use coilward_firmware::trace;
use core::hint::black_box;
use cortex_m_rt::entry;

unsafe extern "C" {
    /// Defined nowhere: any reachable panic makes the link fail.
    fn coilward_panic_path_is_reachable() -> !;
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never called when the link succeeds — the symbol does not exist, so a build that
    // could reach this line does not link at all.
    unsafe { coilward_panic_path_is_reachable() }
}

#[entry]
fn main() -> ! {
    let params = black_box(trace::params());
    let limits = black_box(trace::limits());
    let Ok(guard) = Guard::new(&params, &limits) else {
        loop {
            cortex_m::asm::nop();
        }
    };
    let guard = black_box(guard);
    let model = guard.model();
    let sense = SupplySense::new(black_box(0.0089), black_box(0.0));
    let plan = PullInHold::new(model, black_box(1.0), black_box(0.02), black_box(0.45));
    let mut state = black_box(guard.start_after_reset());
    let mut log = EventLog::<8>::new();
    let mut phase = HoldPhase::default();
    // The full bridge.
    let bridge = BridgeGuard::new(
        &black_box(trace::bridge_params()),
        &black_box(trace::bridge_limits()),
    );
    let mut bridge_state = bridge.as_ref().ok().map(BridgeGuard::start_after_reset);
    // Nothing across the switch: the ring envelope.
    let ring = Guard::new(
        &black_box(trace::ring_params()),
        &black_box(trace::ring_limits()),
    );
    let mut ring_state = ring.as_ref().ok().map(Guard::start_after_reset);
    let mut memo = coilward::TickMemo::EMPTY;
    loop {
        if let (Ok(g), Some(s)) = (&ring, ring_state.as_mut()) {
            let v = Volts::from_bits(black_box(24 << 16));
            let out = g.tick(s, Input::new(black_box(700), v));
            black_box(out.bound);
            let out = g.tick_with(s, &mut memo, Input::new(black_box(701), v));
            black_box(out.bound);
            let out = g.event(s, black_box(false), black_box(4321), v);
            black_box(out.release_in_us);
        }
        if let (Ok(b), Some(s)) = (&bridge, bridge_state.as_mut()) {
            let emf = b
                .model()
                .back_emf_from_speed(black_box(Speed::from_bits(black_box(-1 << 20))));
            let out = b.tick(
                s,
                BridgeInput::new(black_box(-700), Volts::from_bits(black_box(12 << 16)))
                    .with_back_emf(black_box(emf)),
            );
            black_box(out.plan.only_phase());
            black_box(b.model().decay_time_us(
                black_box(out.estimate.end),
                Current::ZERO,
                Volts::from_bits(black_box(12 << 16)),
                black_box(SignedVolts::ZERO),
                black_box(AppliedDecay::Configured),
            ));
        }
        let counts: u16 = black_box(2700);
        let vs = match &sense {
            Ok(s) => s.volts(counts),
            Err(_) => Volts::from_bits(black_box(0)),
        };
        let duty = match &plan {
            Ok(p) => p.duty(model, &mut phase, state.current(), vs),
            Err(_) => black_box(0),
        };
        let out = guard.tick(&mut state, Input::new(black_box(duty), vs));
        log.record(black_box(0), out.raised, out.cleared);
        let out = guard.event(&mut state, black_box(true), black_box(123), vs);
        let i: Current = black_box(out.estimate.peak);
        black_box(model.turn_off_energy(i, vs));
        black_box(model.decay_time_us(i, Current::ZERO, vs));
        black_box(model.peak_drain_voltage(i, vs));
        black_box(model.steady_state(black_box(duty), vs));
        black_box(guard.on_time_to_ceiling_us(&state, vs));
        black_box(log.pop());
        if black_box(false) {
            guard.clear(&mut state);
        }
    }
}
