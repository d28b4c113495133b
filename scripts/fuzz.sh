#!/usr/bin/env bash
# Run every cargo-fuzz target in fuzz/ for a set time each (default 60 s), starting from the
# committed seed corpus. Needs a nightly toolchain and cargo-fuzz (`cargo install cargo-fuzz
# --locked`). New corpus entries go to a scratch copy, so the committed corpus stays small;
# crashes land in fuzz/artifacts/<target>/ and make the script fail.
#
#   scripts/fuzz.sh [seconds] [target...]
set -euo pipefail
cd "$(dirname "$0")/../fuzz"

secs="${1:-60}"
shift || true
targets=("$@")
if [ ${#targets[@]} -eq 0 ]; then
  mapfile -t targets < <(cargo +nightly fuzz list)
fi

work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
status=0
for t in "${targets[@]}"; do
  mkdir -p "$work/$t"
  cp -r "corpus/$t/." "$work/$t/" 2>/dev/null || true
  printf '== fuzz %s for %s s\n' "$t" "$secs"
  if ! cargo +nightly fuzz run -O "$t" "$work/$t" -- -max_total_time="$secs" -rss_limit_mb=2048 \
      -print_final_stats=1 2>&1 | grep -E '^(stat::number_of_executed_units|stat::peak_rss_mb|==|SUMMARY|thread|Done)' ; then
    :
  fi
  if [ -n "$(ls -A "artifacts/$t" 2>/dev/null)" ]; then
    printf '!! %s: crash artifacts in fuzz/artifacts/%s\n' "$t" "$t"
    status=1
  fi
done
exit "$status"
