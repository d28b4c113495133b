#!/usr/bin/env bash
# Deterministic cost of the recovered clock per detection: instructions that callgrind counts
# inside the clock benchmark's two timed loops (cold start until locked, and locked), for one
# cost link at a time. Instruction counts do not depend on the machine's load, unlike the
# nanoseconds of `slotwise bench sync` (figure 5).
#
# Usage: scripts/bench-sync-callgrind.sh [p_slot ...]      (default: 1e-3 1e-5; 25 % noise)
set -euo pipefail
cd "$(dirname "$0")/.."

if ! command -v valgrind >/dev/null || ! command -v callgrind_annotate >/dev/null; then
  echo "skipped: valgrind (callgrind) is not installed"
  exit 0
fi
cargo build --release -q -p slotwise-sim --bin slotwise
bin=target/release/slotwise
out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT

field() { # field NAME FILE: an integer field of the JSON report's first cost row
  grep -o "\"$1\": *[0-9]*" "$2" | head -1 | grep -o '[0-9]*$'
}

links=("$@")
[ ${#links[@]} -gt 0 ] || links=(1e-3 1e-5)
printf '%-8s %-18s %12s %14s %12s\n' p_slot loop detections instructions per_detection
for p in "${links[@]}"; do
  for loop in feed_until_locked feed_locked; do
    valgrind --tool=callgrind --collect-atstart=no \
      --toggle-collect="*bench_sync::cost::$loop*" \
      --callgrind-out-file="$out/cg.out" \
      "$bin" bench sync --only cost --reps 1 --cost-p-slot "$p" --json >"$out/report.json" 2>"$out/log"
    ir="$(callgrind_annotate "$out/cg.out" | grep 'PROGRAM TOTALS' | grep -o '^[0-9,]*' | tr -d ,)"
    if [ "$loop" = feed_until_locked ]; then
      n="$(field acquire_detections "$out/report.json")"
    else
      n="$(field locked_detections "$out/report.json")"
    fi
    printf '%-8s %-18s %12s %14s %12s\n' "$p" "$loop" "$n" "$ir" "$((ir / n))"
  done
done
