#!/usr/bin/env bash
# Whole-process `fluxtrim stream MODEL` throughput, stdin -> stdout, on
# length-delimited protobuf frames and on CSV lines (samples/s, MB/s of
# input). Output goes to /dev/null through a pipe (cat), as it would to a
# consumer. Goal: >= 1 million samples/s on frames.
#
#   tests/perf/run_stream_throughput.sh [BUILD_DIR] [ROWS]
#   tests/perf/run_stream_throughput.sh build-perf 5000000
#
# Inputs come from apply_benchmark --write_frames / --write_csv (see
# tests/perf/perf_data.h) in $FLUXTRIM_PERF_TMP (default /tmp), deleted at
# exit.
set -euo pipefail

root="$(cd "$(dirname "$0")/../.." && pwd)"
build="${1:-build-perf}"
rows="${2:-5000000}"
[[ "$build" = /* ]] || build="$root/$build"
exe="$build/src/fluxtrim"
gen="$build/tests/apply_benchmark"
for f in "$exe" "$gen"; do
  [[ -x "$f" ]] || { echo "missing $f (ninja -C $build fluxtrim apply_benchmark)" >&2; exit 2; }
done

work="$(mktemp -d "${FLUXTRIM_PERF_TMP:-/tmp}/fluxtrim_stream.XXXXXX")"
trap 'rm -rf "$work"' EXIT

"$gen" --write_model="$work/survey.model"
"$gen" --write_frames="$work/in.ftrec" --rows="$rows"
"$gen" --write_csv="$work/in.csv" --rows="$rows"

now() { date +%s.%N; }
echo "# $(date -u +%Y-%m-%dT%H:%MZ) $(nproc) cores, load $(cut -d' ' -f1-3 /proc/loadavg)"
printf '%-7s %10s %10s %9s %12s %9s %10s\n' format rows input_MB wall_s Msamples/s MB/s out_MB
for input in in.ftrec in.csv; do
  format=${input##*.}
  bytes=$(stat -c %s "$work/$input")
  cat "$work/$input" >/dev/null  # into the page cache
  t0=$(now)
  "$exe" stream "$work/survey.model" < "$work/$input" | wc -c > "$work/out_bytes"
  t1=$(now)
  awk -v f="$format" -v rows="$rows" -v b="$bytes" -v t0="$t0" -v t1="$t1" \
      -v o="$(cat "$work/out_bytes")" 'BEGIN { w = t1 - t0;
    printf "%-7s %10d %10.1f %9.2f %12.2f %9.1f %10.1f\n",
           f, rows, b / 1e6, w, rows / 1e6 / w, b / 1e6 / w, o / 1e6 }'
done
