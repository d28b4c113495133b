#!/usr/bin/env bash
# Deterministic host cost of the receiver pipeline: the instructions callgrind counts inside
# `bench_pipeline::stages::measured_pipeline` (the whole `Receiver::push_block` loop over the
# steady state of a capture, after lock and alignment), per detection, for the three captures of
# `slotwise bench` and both clocks. Instruction counts do not depend on the machine's load, so a
# regression shows on a noisy machine too.
#
# Checks every figure against the committed budget (host-sim/bench-budget.json) with a 10 %
# margin and fails when one is exceeded. Installs valgrind with apt when it is missing; when it
# cannot, prints a notice and skips.
#
# Usage: scripts/bench-pipeline-callgrind.sh [--update]   (--update rewrites the budget file)
set -euo pipefail
cd "$(dirname "$0")/.."
BUDGET=host-sim/bench-budget.json
MARGIN_PCT=10
DETECTIONS=200000
update=0
[ "${1:-}" = --update ] && update=1

as_root() { if [ "$(id -u)" = 0 ]; then "$@"; else sudo -n "$@"; fi; }
if ! command -v valgrind >/dev/null || ! command -v callgrind_annotate >/dev/null; then
  echo "valgrind is missing: installing it with apt"
  { as_root apt-get update -qq &&
    as_root env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends \
      valgrind; } >/dev/null 2>&1 || true
fi
if ! command -v valgrind >/dev/null || ! command -v callgrind_annotate >/dev/null; then
  echo "notice: valgrind (callgrind) could not be installed; host instruction budget skipped"
  exit 0
fi

cargo build --release -q -p slotwise-sim --bin slotwise
bin=target/release/slotwise
out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT

budget_of() { # budget_of KEY: the committed instructions per detection, or nothing
  [ -f "$BUDGET" ] && grep -o "\"$1\": *[0-9]*" "$BUDGET" | grep -o '[0-9]*$' || true
}

failures=0
rows=()
printf '%-14s %-10s %10s %14s %10s %10s  %s\n' capture clock detections instructions per_det \
  budget verdict
for capture in default highrate sparse; do
  # One run per capture: the recovered-clock pass, then the reference-clock pass, each inside its
  # own wrapper (count_recovered, count_reference), read as inclusive costs.
  valgrind --tool=callgrind --collect-atstart=no \
    --toggle-collect='*bench_pipeline*stages*measured_pipeline*' \
    --callgrind-out-file="$out/cg.out" \
    "$bin" bench pipeline --quick --capture "$capture" --count-only \
    --detections "$DETECTIONS" >"$out/lines.json" 2>"$out/log"
  callgrind_annotate --inclusive=yes "$out/cg.out" 2>/dev/null >"$out/annotate.txt"
  for clock in recovered reference; do
    ir="$(grep "bench_pipeline::count_$clock " "$out/annotate.txt" | head -1 |
      grep -o '^ *[0-9,]*' | tr -d ', ')"
    n="$(grep "\"clock\":\"$clock\"" "$out/lines.json" | grep -o '"detections": *[0-9]*' |
      grep -o '[0-9]*$')"
    per="$(awk -v i="$ir" -v n="$n" 'BEGIN { printf "%.1f", i / n }')"
    key="$capture/$clock"
    rows+=("  \"$key\": $(awk -v p="$per" 'BEGIN { printf "%d", p + 0.999 }')")
    b="$(budget_of "$key")"
    verdict="no budget"
    if [ -n "$b" ]; then
      if awk -v p="$per" -v b="$b" -v m="$MARGIN_PCT" 'BEGIN { exit !(p > b * (1 + m / 100)) }'
      then
        verdict="OVER budget by more than $MARGIN_PCT %"
        failures=$((failures + 1))
      elif awk -v p="$per" -v b="$b" -v m="$MARGIN_PCT" 'BEGIN { exit !(p < b * (1 - m / 100)) }'
      then
        verdict="ok (more than $MARGIN_PCT % under: lower the budget with --update)"
      else
        verdict=ok
      fi
    fi
    printf '%-14s %-10s %10s %14s %10s %10s  %s\n' "$capture" "$clock" "$n" "$ir" "$per" \
      "${b:--}" "$verdict"
  done
done

if [ "$update" = 1 ]; then
  {
    echo "{"
    echo "  \"_what\": \"host instructions per detection in Receiver::push_block (steady state), scripts/bench-pipeline-callgrind.sh; checked with a $MARGIN_PCT % margin\","
    (IFS=$'\n'; echo "${rows[*]}" | sed '$!s/$/,/')
    echo "}"
  } >"$BUDGET"
  echo "wrote $BUDGET"
  exit 0
fi
if [ "$failures" != 0 ]; then
  echo "host instruction budget exceeded ($failures figure(s)); see $BUDGET" >&2
  exit 1
fi
echo "host instruction budget met"
