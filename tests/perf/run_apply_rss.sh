#!/usr/bin/env bash
# Whole-process `fluxtrim apply` on generated CSV survey recordings of
# several sizes: wall time, throughput (MB/s of input CSV; the output CSV,
# input plus three channels, is written to disk) and peak resident memory
# (/usr/bin/time -v "Maximum resident set size"). Goals: >= 100 MB/s,
# peak RSS < 100 MB whatever the file size.
#
#   tests/perf/run_apply_rss.sh [BUILD_DIR] [SIZES_MB...]
#   tests/perf/run_apply_rss.sh build-perf 100 1000
#
# Inputs come from apply_benchmark --write_csv / --write_model (see
# tests/perf/perf_data.h); they live in $FLUXTRIM_PERF_TMP (default /tmp)
# and are deleted at exit, even on failure. Needs about 2.2x the largest
# size of free disk (input + output).
set -euo pipefail

root="$(cd "$(dirname "$0")/../.." && pwd)"
build="${1:-build-perf}"
shift || true
sizes=("$@")
[[ ${#sizes[@]} -gt 0 ]] || sizes=(100 1000)
[[ "$build" = /* ]] || build="$root/$build"
exe="$build/src/fluxtrim"
gen="$build/tests/apply_benchmark"
for f in "$exe" "$gen"; do
  [[ -x "$f" ]] || { echo "missing $f (ninja -C $build fluxtrim apply_benchmark)" >&2; exit 2; }
done
[[ -x /usr/bin/time ]] || { echo "needs /usr/bin/time (apt-get install time)" >&2; exit 2; }

work="$(mktemp -d "${FLUXTRIM_PERF_TMP:-/tmp}/fluxtrim_apply_rss.XXXXXX")"
trap 'rm -rf "$work"' EXIT

"$gen" --write_model="$work/survey.model"
# Bytes per row of the generated CSV, from a 20 000-row sample.
"$gen" --write_csv="$work/probe.csv" --rows=20000
bytes_per_row=$(( $(stat -c %s "$work/probe.csv") / 20000 ))
rm -f "$work/probe.csv"

echo "# $(date -u +%Y-%m-%dT%H:%MZ) $(nproc) cores, load $(cut -d' ' -f1-3 /proc/loadavg)"
printf '%-8s %10s %10s %8s %8s %9s %11s %10s\n' size_MB rows input_MB wall_s cpu_s MB/s MB/cpu_s maxRSS_MB
for mb in "${sizes[@]}"; do
  rows=$(( mb * 1000000 / bytes_per_row ))
  "$gen" --write_csv="$work/in.csv" --rows="$rows"
  in_bytes=$(stat -c %s "$work/in.csv")
  # Drop nothing from the page cache (not allowed here): the input was just
  # written, so it is read from memory when it fits; that is the CPU-bound
  # case this measures.
  /usr/bin/time -v -o "$work/time.txt" \
    "$exe" apply "$work/survey.model" "$work/in.csv" -o "$work/out.csv" >/dev/null
  wall=$(awk -F': ' '/Elapsed \(wall clock\)/ {
           n = split($2, p, ":"); s = 0;
           for (i = 1; i <= n; ++i) s = s * 60 + p[i]; print s }' "$work/time.txt")
  # user + system CPU seconds: the single-core cost, whatever the load.
  cpu=$(awk -F': ' '/User time|System time/ {s += $2} END {print s}' "$work/time.txt")
  rss_kb=$(awk -F': ' '/Maximum resident set size/ {print $2}' "$work/time.txt")
  # One output line per input line (header lines included).
  in_lines=$(wc -l < "$work/in.csv")
  out_lines=$(wc -l < "$work/out.csv")
  if [[ "$out_lines" -ne "$in_lines" ]]; then
    echo "output has $out_lines lines, input $in_lines" >&2
    exit 1
  fi
  awk -v mb="$mb" -v rows="$rows" -v b="$in_bytes" -v w="$wall" -v c="$cpu" -v r="$rss_kb" 'BEGIN {
    printf "%-8s %10d %10.1f %8.2f %8.2f %9.1f %11.1f %10.1f\n",
           mb, rows, b / 1e6, w, c, b / 1e6 / w, b / 1e6 / c, r / 1024 }'
  rm -f "$work/in.csv" "$work/out.csv"
done
