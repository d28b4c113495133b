#!/usr/bin/env bash
# The whole check, as CI and a person run it: formatting, lints, every test, the no_std cross
# builds, and the docs. Installs the rustup targets it needs when they are missing.
set -euo pipefail
cd "$(dirname "$0")"

step() { printf '\n== %s\n' "$*"; }

step "toolchain"
rustc --version
cargo --version
installed="$(rustup target list --installed 2>/dev/null || true)"
for t in thumbv7em-none-eabihf riscv32imc-unknown-none-elf; do
  if ! grep -qx "$t" <<<"$installed"; then
    rustup target add "$t"
  fi
done
rustup component list --installed 2>/dev/null | grep -q '^clippy' || rustup component add clippy
rustup component list --installed 2>/dev/null | grep -q '^rustfmt' || rustup component add rustfmt

step "format"
cargo fmt --all -- --check

step "clippy (host, all targets, warnings are errors)"
cargo clippy --workspace --all-targets -- -D warnings
cargo clippy -p slotwise --all-targets --all-features -- -D warnings

step "fuzz targets compile (stable check; running them needs nightly, see below)"
cargo check --manifest-path fuzz/Cargo.toml --bins --target-dir target

step "clippy (firmware-core for thumbv7em, defmt, embedded-hal and embedded-hal-async on)"
cargo clippy -p slotwise --target thumbv7em-none-eabihf --features defmt,embedded-hal-async -- -D warnings

step "tests"
cargo test --workspace
cargo test -p slotwise --features embedded-hal-async --lib ingest   # the SPI sources against the mock

step "no_std cross builds of firmware-core"
cargo build -p slotwise --target thumbv7em-none-eabihf --release
cargo build -p slotwise --target riscv32imc-unknown-none-elf --release

step "docs (warnings are errors)"
RUSTDOCFLAGS="-D warnings" cargo doc --workspace --no-deps

step "host instructions per detection against the committed budget (callgrind)"
bash scripts/bench-pipeline-callgrind.sh

step "fuzz smoke (20 s per target, needs nightly and cargo-fuzz)"
if [ "${SLOTWISE_FUZZ_SMOKE:-1}" = 0 ]; then
  echo "skipped: SLOTWISE_FUZZ_SMOKE=0 (the proptest forms of the same properties ran above)"
elif rustup toolchain list 2>/dev/null | grep -q '^nightly' && cargo +nightly fuzz --version >/dev/null 2>&1; then
  scripts/fuzz.sh 20
else
  echo "skipped: no nightly toolchain or no cargo-fuzz here; the proptest forms of the same"
  echo "properties ran with the tests above (run scripts/fuzz.sh where both are installed)"
fi

if [ -x hil/check.sh ]; then
  step "firmware under QEMU, bit for bit against the host"
  hil/check.sh
fi

step "all checks passed"
