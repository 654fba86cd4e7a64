#!/usr/bin/env bash
# The whole test suite on a fresh machine: installs what it needs, then runs every check.
# The README names this as the one test command; .ci/run calls it.
set -euo pipefail
cd "$(dirname "$0")/.."

MSRV=$(sed -n 's/^rust-version *= *"\(.*\)"/\1/p' Cargo.toml | head -n 1)
TARGETS=(thumbv6m-none-eabi thumbv7em-none-eabihf thumbv8m.main-none-eabihf)

step() { printf '\n== %s\n' "$*"; }

as_root() {
    if [ "$(id -u)" -eq 0 ]; then "$@"; else sudo "$@"; fi
}

step "toolchain: components, embedded targets, MSRV $MSRV"
rustup component add rustfmt clippy
rustup target add "${TARGETS[@]}"
rustup toolchain install "$MSRV" --profile minimal

if ! command -v ngspice >/dev/null 2>&1; then
    step "installing ngspice (Debian package)"
    as_root apt-get update -qq
    DEBIAN_FRONTEND=noninteractive as_root apt-get install -y -qq ngspice
fi

step "format"
cargo fmt --all -- --check

step "lints"
cargo clippy --workspace --all-targets -- -D warnings
cargo clippy -p coilward --target thumbv7em-none-eabihf --features defmt -- -D warnings

step "docs"
RUSTDOCFLAGS="-D warnings" cargo doc --workspace --no-deps

step "embedded builds (no std, no alloc)"
for t in "${TARGETS[@]}"; do
    cargo build -p coilward --release --target "$t"
    cargo build -p coilward --release --target "$t" --features defmt
done

step "minimum supported Rust ($MSRV)"
cargo "+$MSRV" check -p coilward

step "tests"
cargo test --workspace

step "examples"
for ex in demo_coil valve relay; do
    cargo run --quiet --example "$ex" >/dev/null
done

echo
echo "all checks passed"
