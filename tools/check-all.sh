#!/usr/bin/env bash
# The whole test suite on a fresh machine: installs what it needs, then runs every check.
# The README names this as the one test command; .ci/run calls it with no argument (every stage).
#
# Usage: tools/check-all.sh [STAGE...]   stages, run in the order given:
#   fast    format, lints, docs, the workspace's tests (the everyday loop, a few minutes)
#   target  embedded builds, MSRV, QEMU vectors and panic-free link, the STM32 build, the bench
#   sim     the library's examples, the simulator's demo scenarios, reports, faults, sweep, fit,
#           and the wall-time bench against ngspice
#   fuzz    every cargo-fuzz target for 20 s
#   all     all of the above (the default)
set -euo pipefail
cd "$(dirname "$0")/.."

# The library's own rust-version (in its [package] section; the workspace's is the tools').
MSRV=$(awk '/^\[package\]/{p=1} p && /^rust-version *=/{gsub(/.*= *"|".*/, ""); print; exit}' Cargo.toml)
TARGETS=(thumbv6m-none-eabi thumbv7em-none-eabihf thumbv8m.main-none-eabihf)

step() { printf '\n== %s\n' "$*"; }

# Tests that need ngspice skip without it elsewhere; here its absence is a failure.
export COILWARD_REQUIRE_TOOLS=1

OUT=$(mktemp -d)
trap 'rm -rf "$OUT"' EXIT

as_root() {
    if [ "$(id -u)" -eq 0 ]; then "$@"; else sudo "$@"; fi
}

setup() {
step "toolchain: components, embedded targets, MSRV $MSRV"
rustup component add rustfmt clippy
rustup target add "${TARGETS[@]}"
rustup toolchain install "$MSRV" --profile minimal

missing=()
command -v ngspice >/dev/null 2>&1 || missing+=(ngspice)
command -v qemu-system-arm >/dev/null 2>&1 || missing+=(qemu-system-arm)
command -v cc >/dev/null 2>&1 || missing+=(gcc)
# SciPy for the sweep's failure bound (host-sim/tests/statistics.rs), in python3 or the system's.
python3 -c 'import scipy.stats' >/dev/null 2>&1 || /usr/bin/python3 -c 'import scipy.stats' \
    >/dev/null 2>&1 || missing+=(python3-scipy)
if [ ${#missing[@]} -gt 0 ]; then
    step "installing Debian packages: ${missing[*]}"
    as_root apt-get update -qq
    DEBIAN_FRONTEND=noninteractive as_root apt-get install -y -qq "${missing[@]}"
fi

}

fast() {
step "format"
cargo fmt --all -- --check
(cd firmware && cargo fmt --all -- --check)
(cd fuzz && cargo fmt --all -- --check)

step "lints"
cargo clippy --workspace --all-targets -- -D warnings
cargo clippy -p coilward --target thumbv7em-none-eabihf --features defmt -- -D warnings
cargo clippy -p coilward --all-targets --features defmt,flash -- -D warnings
(cd firmware && cargo clippy --release --target thumbv7em-none-eabihf --workspace \
    --exclude coilward-rp2040-valve --bins -- -D warnings)
(cd firmware && cargo clippy --release --target thumbv6m-none-eabi -p coilward-rp2040-valve -- -D warnings)

step "docs"
RUSTDOCFLAGS="-D warnings" cargo doc --workspace --no-deps
RUSTDOCFLAGS="-D warnings" cargo doc -p coilward --no-deps --features defmt,flash

step "tests"
cargo test --workspace
cargo test -p coilward --features flash --lib flash
cargo test -p coilward --features flash --doc flash
}

target() {
step "embedded builds (no std, no alloc)"
for t in "${TARGETS[@]}"; do
    cargo build -p coilward --release --target "$t"
    cargo build -p coilward --release --target "$t" --features defmt
    cargo build -p coilward --release --target "$t" --features flash
done

step "minimum supported Rust ($MSRV)"
cargo "+$MSRV" check -p coilward
cargo "+$MSRV" check -p coilward --features defmt,flash

step "on the emulated cores (QEMU): test vectors, golden trace, panic-free link"
cargo xtask target-test

step "the package as published (the library, its tests and examples)"
cargo publish --dry-run --allow-dirty -p coilward

step "example firmware for real chips, from the timer's interrupt (STM32F401, RP2040; builds only)"
(cd firmware && cargo build --release --target thumbv7em-none-eabihf -p coilward-stm32f4-valve)
(cd firmware && cargo build --release --target thumbv6m-none-eabi -p coilward-rp2040-valve)

step "instruction counts and sizes on the emulated cores"
cargo xtask target-bench

step "where the worst tick's instructions go (M4F, by function)"
cargo xtask target-profile tick-limit m4f

}

sim() {
step "examples"
for ex in demo_coil valve relay; do
    cargo run --quiet --example "$ex" >/dev/null
done

step "simulator: the demo scenarios, their reports, a sweep, a fit"
cargo build --quiet --release -p coilward-sim
SIM=target/release/coilward-sim
expect() { # expect STATUS COMMAND...: the command must exit with STATUS
    local want=$1 got=0
    shift
    "$@" >"$OUT/last.txt" 2>&1 || got=$?
    if [ "$got" -ne "$want" ]; then
        cat "$OUT/last.txt"
        echo "expected exit status $want from: $*, got $got" >&2
        exit 1
    fi
}
for f in examples/scenarios/*.toml; do
    expect 0 "$SIM" check "$f"
done
# The README's main command: the valve passes and its plot is written.
expect 0 "$SIM" run examples/scenarios/irrigation-valve.toml --svg "$OUT/valve.svg" \
    --json "$OUT/valve.json" --csv "$OUT/valve.csv"
test -s "$OUT/valve.svg" && test -s "$OUT/valve.json" && test -s "$OUT/valve.csv"
expect 0 "$SIM" run examples/scenarios/relay-zener.toml
# A relay switched by a GPIO, the guard called on events: it passes and its plot is written.
expect 0 "$SIM" run examples/scenarios/relay-on-events.toml --svg "$OUT/relay-events.svg" \
    --json "$OUT/relay-events.json"
grep -q '"guard_calls"' "$OUT/relay-events.json"
# The full bridge: the gear motor reverses through the interlock (limited: the guard held it); its plot is written.
expect 3 "$SIM" run examples/scenarios/reversing-gear-motor.toml --svg "$OUT/motor.svg" \
    --json "$OUT/motor.json" --csv "$OUT/motor.csv"
test -s "$OUT/motor.svg" && grep -q "reversal-hold" "$OUT/motor.csv"
# Nothing across the coil: the guard has to cut the current, so the verdict is limited.
expect 3 "$SIM" run examples/scenarios/unclamped-avalanche.toml
# Driven to the ceiling on purpose (the fault suite's base): the guard acts, so the verdict is limited.
expect 3 "$SIM" run examples/scenarios/valve-at-ceiling.toml
cargo run --quiet --release -p coilward-sim --example fault_table >"$OUT/faults.md"
# The small-bus door motor: supply-pump, coasting, then braking (limited); its plot is written.
expect 3 "$SIM" run examples/scenarios/door-motor-small-bus.toml --svg "$OUT/door.svg"
test -s "$OUT/door.svg"
# The fault suite over each demo's declared tolerance (both topologies): nothing inside it is
# exceeded.
for f in irrigation-valve relay-zener relay-on-events unclamped-avalanche valve-at-ceiling \
    reversing-gear-motor door-motor-small-bus; do
    expect 0 "$SIM" faults "examples/scenarios/$f.toml" --json "$OUT/faults-$f.json"
    grep -q '"inside_tolerance": true' "$OUT/faults-$f.json"
done
expect 0 "$SIM" sweep examples/scenarios/relay-zener.toml --samples 200 --json "$OUT/sweep.json"
grep -q '"failure_upper_95"' "$OUT/sweep.json"
# Shards with records (exit 0: their findings are in the records), merged (limited: exit 3).
for k in 1 2; do
    expect 0 "$SIM" sweep examples/scenarios/valve-at-ceiling.toml --samples 40 --plan latin \
        --shard "$k/2" --records "$OUT/part$k.jsonl"
done
expect 3 "$SIM" merge "$OUT/part1.jsonl" "$OUT/part2.jsonl" --json "$OUT/merged.json"
expect 0 "$SIM" fit examples/captures/valve-pull-in.csv --supply "24 V" --on-resistance "0.1 Ω" \
    --svg "$OUT/fit.svg"
test -s "$OUT/fit.svg"


step "simulator against ngspice: wall time for 1 s of 20 kHz PWM, and the sweep goal"
cargo bench --quiet -p coilward-sim --bench plant_vs_ngspice
}

fuzz() {
step "fuzzing (cargo-fuzz on nightly): each target for 20 s, seeded with the demo files"
rustup toolchain install nightly --profile minimal
command -v cargo-fuzz >/dev/null 2>&1 || cargo install cargo-fuzz --locked
for t in params guard_ticks bridge_ticks scenario capture; do mkdir -p "$OUT/corpus/$t"; done
cp examples/scenarios/*.toml "$OUT/corpus/scenario/"
cp examples/captures/*.csv "$OUT/corpus/capture/"
for t in params guard_ticks bridge_ticks scenario capture; do
    rc=0
    (cd fuzz && cargo +nightly fuzz run -O "$t" "$OUT/corpus/$t" -- \
        -max_total_time=20 -rss_limit_mb=4096 -max_len=8192) >"$OUT/fuzz-$t.log" 2>&1 || rc=$?
    echo "$t: $(grep -E '^Done [0-9]+ runs' "$OUT/fuzz-$t.log" | tail -n 1)"
    if [ "$rc" -ne 0 ]; then
        tail -n 60 "$OUT/fuzz-$t.log"
        echo "fuzz target $t failed (exit $rc); the crashing input is in fuzz/artifacts/$t/" >&2
        exit 1
    fi
done
}

stages=("$@")
[ ${#stages[@]} -eq 0 ] && stages=(all)
for st in "${stages[@]}"; do
    case "$st" in
    fast | target | sim | fuzz | all) ;;
    *)
        echo "unknown stage '$st' (fast, target, sim, fuzz or all)" >&2
        exit 2
        ;;
    esac
done
setup
for st in "${stages[@]}"; do
    case "$st" in
    all)
        fast
        target
        sim
        fuzz
        ;;
    *) "$st" ;;
    esac
done

echo
echo "checks passed: ${stages[*]}"
