#!/usr/bin/env bash
# The HIL check: the slotwise core built as firmware for a Cortex-M4F and a RISC-V soft core, run
# under QEMU on captures made by `slotwise simulate` (and one synthetic capture), and compared
# frame by frame with the same core on the host.
#
# Prints one JSON line per target x capture and exits non-zero on any mismatch, on a firmware
# that does not finish, or on a fault handler that does not exit with its own code. Installs the
# rustup targets, llvm-tools and QEMU when they are missing. Regenerates size-report.txt and
# shows how it changed (a changed size is reported, not a failure).
set -euo pipefail
cd "$(dirname "$0")"
HIL="$(pwd)"
TARGETS=(thumbv7em-none-eabihf riscv32imc-unknown-none-elf)
RUNS="${HIL_RUN_DIR:-$HIL/target/hil-runs}"
export HIL_QEMU_TIMEOUT="${HIL_QEMU_TIMEOUT:-120}"

step() { printf '\n== hil: %s\n' "$*"; }
as_root() { if [ "$(id -u)" = 0 ]; then "$@"; else sudo "$@"; fi; }

step "tools"
installed="$(rustup target list --installed 2>/dev/null || true)"
for t in "${TARGETS[@]}"; do
  grep -qx "$t" <<<"$installed" || rustup target add "$t"
done
rustup component list --installed 2>/dev/null | grep -q '^llvm-tools' || rustup component add llvm-tools
if ! command -v qemu-system-arm >/dev/null || ! command -v qemu-system-riscv32 >/dev/null; then
  as_root apt-get update
  as_root env DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends \
    qemu-system-arm qemu-system-misc
fi
qemu-system-arm --version | head -1
# The C interface's check: the Cortex-M4F C compiler with newlib (semihosting I/O), and cbindgen
# at a pinned version so the committed header is compared with what that version writes.
if ! command -v arm-none-eabi-gcc >/dev/null || [ ! -d /usr/lib/arm-none-eabi/newlib ]; then
  as_root apt-get update
  as_root env DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends \
    gcc-arm-none-eabi libnewlib-arm-none-eabi
fi
CBINDGEN_VERSION=0.29.4
if ! cbindgen --version 2>/dev/null | grep -qx "cbindgen $CBINDGEN_VERSION"; then
  cargo install cbindgen --locked --version "$CBINDGEN_VERSION"
fi
LLVM_SIZE="$(find "$(rustc --print sysroot)" -name llvm-size -type f | head -1)"
[ -n "$LLVM_SIZE" ] || { echo "llvm-size not found in the toolchain" >&2; exit 1; }

step "format and lints"
cargo fmt --all -- --check
cargo clippy -p slotwise-hil -p slotwise-hil-host -p slotwise-c --all-targets -- -D warnings
cargo clippy -p slotwise-c --target thumbv7em-none-eabihf --release -- -D warnings
for t in "${TARGETS[@]}"; do
  cargo clippy -p slotwise-hil-firmware --target "$t" --release -- -D warnings
done
cargo clippy -p slotwise-board-example --target thumbv7em-none-eabihf --release -- -D warnings
cargo clippy -p slotwise-board-example --lib --tests -- -D warnings

step "tests (shared driver, C interface, board example)"
cargo test -p slotwise-hil -p slotwise-c
cargo test -p slotwise-board-example --lib

step "build"
cargo build --release -p slotwise-hil-host
for t in "${TARGETS[@]}"; do
  cargo build --release -p slotwise-hil-firmware --target "$t"
done
HOST_TOOL="$HIL/target/release/hil-host"
failures=0
# The defmt build has its own target dir so it never replaces the measured binaries. A failure
# is counted, and the rest of the check still runs.
defmt_built=1
if ! cargo build --release -p slotwise-hil-firmware --target thumbv7em-none-eabihf \
  --features defmt --target-dir target/defmt; then
  echo "the defmt build of the firmware failed (see above)" >&2
  defmt_built=0
  failures=$((failures + 1))
fi
# The board example (STM32F411-class part) is built, never run: it has no QEMU machine here.
cargo build --release -p slotwise-board-example --target thumbv7em-none-eabihf
if ! cargo build --release -p slotwise-board-example --target thumbv7em-none-eabihf \
  --features defmt --target-dir target/defmt; then
  echo "the defmt build of the board example failed (see above)" >&2
  failures=$((failures + 1))
fi
elf() { echo "$HIL/target/$1/release/slotwise-hil-firmware"; }
profile_elf() { echo "$HIL/target/$1/release/slotwise-hil-profile"; }
acquire_elf() { echo "$HIL/target/$1/release/slotwise-hil-acquire"; }
full_elf() { echo "$HIL/target/$1/release/slotwise-hil-full"; }
auth_elf() { echo "$HIL/target/$1/release/slotwise-hil-auth"; }
BOARD_ELF="$HIL/target/thumbv7em-none-eabihf/release/slotwise-board-example"

step "fault handlers exit with their own code"
for t in "${TARGETS[@]}"; do
  d="$RUNS/fault-exit-$t"
  rm -rf "$d" && mkdir -p "$d" && touch "$d/fault.trigger"
  set +e
  ./qemu-run.sh "$(elf "$t")" "$d" >/dev/null 2>&1
  rc=$?
  set -e
  if [ "$rc" = 71 ]; then echo "$t: exit 71 as expected"; else
    echo "$t: fault exit code $rc, expected 71" >&2; failures=$((failures + 1)); fi
done

step "captures (slotwise simulate)"
# The root workspace's simulator makes the captures: the default scenario, shortened, and a fault
# scenario (32-bit TDC wrapping every 4.3 ms, heavy afterpulsing, noisy detectors, channel
# skews). The board runs the configured clock, which numbers every slot, so the default scenario
# is simulated without its public marker (the simulator's reference clock would skip those slots).
(cd "$HIL/.." && cargo build --release -p slotwise-sim --bin slotwise)
ROOT="$(cd "$HIL/.." && pwd)"
SLOTWISE="$ROOT/target/release/slotwise"
mkdir -p "$RUNS/scenarios"
DEFAULT_SCENARIO="$ROOT/scenarios/bench-100mhz-30km.toml"
if grep -q '^marker' "$DEFAULT_SCENARIO"; then
  sed 's/^marker.*/marker = false/' "$DEFAULT_SCENARIO" >"$RUNS/scenarios/default.toml"
else
  { cat "$DEFAULT_SCENARIO"; echo; echo "marker = false"; } >"$RUNS/scenarios/default.toml"
fi
"$SLOTWISE" simulate "$RUNS/scenarios/default.toml" -o "$RUNS/default.cap" --duration-s 0.1
"$SLOTWISE" simulate "$ROOT/scenarios/fault-wrap-32bit-afterpulse.toml" -o "$RUNS/fault.cap" \
  --duration-s 0.05
# The whole receiver (recovered clock numbered through the marker, link endpoint, monitor) runs
# on the default scenario as it is, marker on.
"$SLOTWISE" simulate "$DEFAULT_SCENARIO" -o "$RUNS/default-full.cap" --duration-s 0.1
CAPTURES=(default fault synthetic-fault default-full)
for c in default fault; do
  "$HOST_TOOL" prepare --from "$RUNS/$c.cap" --name "$c" --out "$RUNS/$c"
  echo "$c: $(cat "$RUNS/$c/host-summary.json")"
done
"$HOST_TOOL" prepare --full --from "$RUNS/default-full.cap" --name default-full \
  --out "$RUNS/default-full"
echo "default-full: $(cat "$RUNS/default-full/host-summary.json")"
# Transport faults the simulator does not model: a detector blackout, reordered neighbours, an
# unknown channel and counter values wider than the TDC.
"$HOST_TOOL" prepare --synthetic fault --slots 10000000 --name synthetic-fault \
  --out "$RUNS/synthetic-fault"
echo "synthetic-fault: $(cat "$RUNS/synthetic-fault/host-summary.json")"

step "QEMU runs, compared with the host byte for byte"
results=()
for t in "${TARGETS[@]}"; do
  for c in "${CAPTURES[@]}"; do
    d="$RUNS/$t-$c"
    rm -rf "$d" && mkdir -p "$d"
    fw="$(elf "$t")"
    if [ "$c" = default-full ]; then
      fw="$(full_elf "$t")"
      cp "$RUNS/$c"/{setup.bin,board.bin,events.bin,answers-link.bin} "$d/"
      cp "$RUNS/$c"/{frames-host.bin,announce-host.bin} "$d/"
    else
      cp "$RUNS/$c"/{setup.bin,events.bin,answers.bin,frames-host.bin} "$d/"
    fi
    set +e
    ./qemu-run.sh "$fw" "$d" >"$d/qemu-stdout.txt" 2>"$d/qemu-stderr.txt"
    rc=$?
    if [ "$c" = default ] && [ "$rc" = 0 ]; then
      # Clock acquisition: the recovered clock from a cold start until it first locks.
      cp "$RUNS/$c/acquire.bin" "$d/"
      ./qemu-run.sh "$(acquire_elf "$t")" "$d" >>"$d/qemu-stdout.txt" 2>>"$d/qemu-stderr.txt"
      rc=$?
    fi
    line="$("$HOST_TOOL" compare --dir "$d" --target "$t" --capture "$c" --elf "$fw" \
      --qemu-exit "$rc")"
    cmp_rc=$?
    set -e
    echo "$line"
    results+=("$line")
    if [ "$cmp_rc" != 0 ]; then
      failures=$((failures + 1))
      echo "  mismatch or failure; QEMU stderr:" >&2
      sed 's/^/    /' "$d/qemu-stderr.txt" >&2
    fi
  done
done

step "C interface (firmware-c): header current; C replay equal to the Rust station, host and QEMU"
# The header is what cbindgen writes from the crate now.
C_DIR="$ROOT/firmware-c"
header="$(mktemp)"
(cd "$C_DIR" && cbindgen --quiet --config cbindgen.toml --output "$header")
if ! diff -u "$C_DIR/include/slotwise.h" "$header"; then
  echo "firmware-c/include/slotwise.h is not current: regenerate it (firmware-c/README.md)" >&2
  failures=$((failures + 1))
fi
rm -f "$header"
cargo build --release -p slotwise-c
cargo build --release -p slotwise-c --target thumbv7em-none-eabihf
# The receiver profile of the default scenario, compiled with the raw-word layout of the C
# program's TDC (8-byte records: time 0..32, channel 32..40, kind 40..48; 1 = event, 2 = rollover).
WORDS=bytes=8,time=0:32,channel=32:8,kind=40:8,event=1,rollover=2,max-channel=7
d="$RUNS/c-interface"
rm -rf "$d" && mkdir -p "$d"
"$SLOTWISE" profile from-scenario "$DEFAULT_SCENARIO" -o "$d/receiver.toml" 2>/dev/null
"$SLOTWISE" profile compile "$d/receiver.toml" -o "$d/receiver.swblob" --words "$WORDS"
C_FLAGS=(-std=c11 -Wall -Wextra -Werror -O2 -I"$C_DIR/include")
NATIVE_LIBS="$(cargo rustc --release -p slotwise-c --crate-type staticlib -- \
  --print native-static-libs 2>&1 | sed -n 's/.*native-static-libs: //p' | tail -1)"
# shellcheck disable=SC2086 # the native libraries are separate words
cc "${C_FLAGS[@]}" "$C_DIR/examples/replay.c" "$HIL/target/release/libslotwise_c.a" \
  $NATIVE_LIBS -o "$d/replay-host"
arm-none-eabi-gcc "${C_FLAGS[@]}" -mcpu=cortex-m4 -mthumb -mfloat-abi=hard -mfpu=fpv4-sp-d16 \
  --specs=rdimon.specs -nostartfiles -Wl,--no-warn-execstack -T "$C_DIR/examples/mps2/mps2.ld" \
  "$C_DIR/examples/mps2/startup.c" "$C_DIR/examples/replay.c" \
  "$HIL/target/thumbv7em-none-eabihf/release/libslotwise_c.a" -o "$d/replay-m4f.elf"
# Three runs: the clean capture; its raw words damaged (one malformed record, one lost
# rollover), whose ingest-fault alarms must reach the record stream; and the classical channel
# round-authenticated (auth.bin, refill-link.bin), whose rounds must all verify.
for run in clean faults auth; do
  r="$d/$run"
  extra=()
  if [ "$run" = faults ]; then extra=(--faults); fi
  if [ "$run" = auth ]; then extra=(--auth); fi
  "$HOST_TOOL" station --profile "$d/receiver.swblob" --from "$RUNS/default-full.cap" --out "$r" \
    "${extra[@]}"
  for how in host qemu; do
    rm -f "$r/frames-c.bin" "$r/announce-c.bin"
    set +e
    if [ "$how" = host ]; then (cd "$r" && "$d/replay-host"); else
      ./qemu-run.sh "$d/replay-m4f.elf" "$r"; fi
    rc=$?
    set -e
    if [ "$rc" != 0 ]; then
      echo "C replay ($run, $how) exited with $rc" >&2; failures=$((failures + 1))
    elif cmp "$r/frames-c.bin" "$r/frames-ref.bin" &&
      cmp "$r/announce-c.bin" "$r/announce-ref.bin"; then
      echo "C replay ($run, $how): records and announce frames equal the Rust station's byte for byte"
    else
      echo "C replay ($run, $how): bytes differ from the Rust station's" >&2
      failures=$((failures + 1))
    fi
  done
  # What the post-processing host reads: the board's record stream, every CRC checked.
  if [ -f "$r/frames-c.bin" ]; then
    cp "$r/frames-c.bin" "$r/board.swkey"
    if "$SLOTWISE" inspect "$r/board.swkey" >"$r/inspect.txt"; then head -4 "$r/inspect.txt"; else
      cat "$r/inspect.txt"; echo "the C replay's record stream ($run) did not inspect clean" >&2
      failures=$((failures + 1)); fi
    if [ "$run" = faults ] && ! grep -q 'IngestFault.*raised' "$r/inspect.txt"; then
      echo "the damaged words raised no ingest-fault alarm record" >&2; failures=$((failures + 1))
    fi
    if [ "$run" = auth ] &&
      ! grep -Eq '^round verdicts +[1-9][0-9]* rounds verified.*, 0 failed' "$r/inspect.txt"; then
      echo "the authenticated run's records show no verified rounds, or failed ones" >&2
      failures=$((failures + 1))
    fi
  fi
done

step "where the instructions go (default capture; whole receiver on default-full)"
for t in "${TARGETS[@]}"; do
  d="$RUNS/$t-profile"
  rm -rf "$d" && mkdir -p "$d" && cp "$RUNS/default"/{setup.bin,events.bin} "$d/"
  full="$(printf '%s\n' "${results[@]}" | grep "\"target\":\"$t\"" | grep '"capture":"default"' |
    sed -n 's/.*"instructions_per_detection":\([0-9.]*\).*/\1/p')"
  if ./qemu-run.sh "$(profile_elf "$t")" "$d" >/dev/null 2>&1; then
    "$HOST_TOOL" profile --dir "$d" --target "$t" ${full:+--full "$full"}
  else
    echo "$t: profile run failed" >&2; failures=$((failures + 1))
  fi
  # The whole receiver, part by part.
  d="$RUNS/$t-profile-full"
  rm -rf "$d" && mkdir -p "$d"
  cp "$RUNS/default-full"/{setup.bin,board.bin,events.bin,answers-link.bin} "$d/"
  if ./qemu-run.sh "$(profile_elf "$t")" "$d" >/dev/null 2>&1; then
    "$HOST_TOOL" profile --dir "$d" --target "$t"
  else
    echo "$t: whole-receiver profile run failed" >&2; failures=$((failures + 1))
  fi
done

step "link authentication: instructions per tag (reported)"
for t in "${TARGETS[@]}"; do
  d="$RUNS/$t-auth"
  rm -rf "$d" && mkdir -p "$d"
  if ./qemu-run.sh "$(auth_elf "$t")" "$d" >/dev/null 2>&1; then
    awk -v t="$t" '{ v[$1] = $2 } END {
      k = v["calib_instructions"] / v["calib_counts"] / v["tags"]
      printf "%s: instructions per tag (seal / verify): 15-byte payload %d / %d, 76 bytes %d / %d, 1056 bytes %d / %d; LinkAuth<96> %d bytes\n",
        t, v["seal_counts_15"] * k, v["verify_counts_15"] * k, v["seal_counts_76"] * k,
        v["verify_counts_76"] * k, v["seal_counts_1056"] * k, v["verify_counts_1056"] * k,
        v["link_auth_bytes"]
      printf "%s: round mode: digest of a 64-announcement frame %d, outcome entry %d, round tag %d instructions; RoundLedger %d bytes\n",
        t, v["digest_counts_64"] * k, v["outcome_add_counts"] * k, v["round_tag_counts"] * k,
        v["round_ledger_bytes"] }' "$d/auth-fw.txt"
  else
    echo "$t: authentication cost run failed" >&2; failures=$((failures + 1))
  fi
done

step "defmt logs"
if [ "$defmt_built" = 1 ]; then
  d="$RUNS/defmt"
  rm -rf "$d" && mkdir -p "$d" && cp "$RUNS/fault"/{setup.bin,events.bin,answers.bin} "$d/"
  DEFMT_ELF="$HIL/target/defmt/thumbv7em-none-eabihf/release/slotwise-hil-firmware"
  set +e
  ./qemu-run.sh "$DEFMT_ELF" "$d" >"$d/defmt.bin"
  rc=$?
  set -e
  if [ "$rc" != 0 ]; then
    echo "defmt firmware exited with $rc" >&2; failures=$((failures + 1))
  elif command -v defmt-print >/dev/null; then
    defmt-print -e "$DEFMT_ELF" stdin <"$d/defmt.bin"
  else
    echo "defmt-print not installed: the defmt build ran ($(wc -c <"$d/defmt.bin") bytes of" \
      "frames in $d/defmt.bin); 'cargo install defmt-print --locked' to decode them"
  fi
else
  echo "skipped: the defmt build failed"
fi

step "size report"
size_line() {
  # Allocated sections by kind; the stack and heap regions reserve RAM but are not program data.
  # Arguments: ELF, row label.
  "$LLVM_SIZE" -A "$1" | awk -v t="$2" '
    $1 ~ /^\.(vector_table|text|rodata|srodata|init|trap|eh_frame|got)/ { text += $2 }
    $1 ~ /^\.(data|sdata)/ { data += $2 }
    $1 ~ /^\.(bss|sbss|uninit)/ { bss += $2 }
    END { printf "%-37s %8d %8d %8d\n", t, text, data, bss }'
}
new="$(mktemp)"
{
  echo "# HIL firmware sizes in bytes (release build), regenerated by hil/check.sh."
  echo "# text = code + read-only data + vector table; bss excludes the stack and heap regions."
  echo "# (full) = slotwise-hil-full, the whole receiver; the other rows the configured-clock build."
  echo "# (C replay) = firmware-c/examples/replay.c with the static library and newlib's stdio."
  echo "# (board example) = slotwise-board-example, the whole receiver on an STM32F411-class board."
  printf '%-37s %8s %8s %8s\n' "# target" text data bss
  for t in "${TARGETS[@]}"; do size_line "$(elf "$t")" "$t"; done
  for t in "${TARGETS[@]}"; do size_line "$(full_elf "$t")" "$t (full)"; done
  size_line "$RUNS/c-interface/replay-m4f.elf" "thumbv7em (C replay, newlib)"
  size_line "$BOARD_ELF" "thumbv7em-none-eabihf (board example)"
} >"$new"
if [ -f size-report.txt ] && ! diff -q size-report.txt "$new" >/dev/null; then
  echo "size report changed:"
  diff -u size-report.txt "$new" || true
fi
cp "$new" size-report.txt && rm -f "$new"
cat size-report.txt

step "budgets: the board's targets (reported), the committed figures (enforced, 10 % margin)"
# HIL_UPDATE_BUDGET=1 rewrites hil/budget.json from this run (commit it after a deliberate change).
if [ "${HIL_UPDATE_BUDGET:-0}" = 1 ]; then
  printf '%s\n' "${results[@]}" | "$HOST_TOOL" budgets --committed budget.json --update
elif ! printf '%s\n' "${results[@]}" | "$HOST_TOOL" budgets --committed budget.json; then
  echo "a figure grew more than 10 % over hil/budget.json" >&2
  failures=$((failures + 1))
fi

if [ "$failures" != 0 ]; then
  step "FAILED: $failures problem(s)"
  exit 1
fi
step "all HIL checks passed"
