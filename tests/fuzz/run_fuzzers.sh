#!/usr/bin/env bash
# Builds every tests/fuzz/*_fuzzer.cc with clang, libFuzzer, AddressSanitizer
# and UBSan (build dir build-fuzz, or $FLUXTRIM_FUZZ_BUILD_DIR) and runs each
# for SECONDS (default 20) on a temporary copy of its seed corpus
# tests/fuzz/corpus/<name>/ (the committed corpus is never grown here), with
# tests/fuzz/<name>.dict when present.
# Exits non-zero when a fuzzer finds a crash, a leak, undefined behaviour or
# a timeout; the input that did it is saved as tests/fuzz/artifacts/<name>-*.
# Usage: tests/fuzz/run_fuzzers.sh [SECONDS]
set -euo pipefail

seconds=${1:-20}
case "$seconds" in
  ''|*[!0-9]*) echo "usage: $0 [SECONDS]" >&2; exit 2 ;;
esac
root=$(cd "$(dirname "$0")/../.." && pwd)
build=${FLUXTRIM_FUZZ_BUILD_DIR:-$root/build-fuzz}
cd "$root"

# The library is instrumented for coverage (fuzzer-no-link) and checked
# (address, undefined); the fuzz targets add -fsanitize=fuzzer themselves.
flags="-fsanitize=fuzzer-no-link,address,undefined -fno-sanitize-recover=undefined -fno-omit-frame-pointer"
cmake -S . -B "$build" -G Ninja \
  -DCMAKE_C_COMPILER=clang -DCMAKE_CXX_COMPILER=clang++ \
  -DCMAKE_BUILD_TYPE=RelWithDebInfo \
  -DBUILD_TESTING=OFF -DFLUXTRIM_BENCHMARKS=OFF -DFLUXTRIM_FUZZ=ON \
  -DCMAKE_C_FLAGS="$flags" -DCMAKE_CXX_FLAGS="$flags" >/dev/null

fuzzers=()
for src in tests/fuzz/*_fuzzer.cc; do
  [ -e "$src" ] || continue
  fuzzers+=("$(basename "$src" .cc)")
done
if [ ${#fuzzers[@]} -eq 0 ]; then
  echo "no fuzzers in tests/fuzz" >&2
  exit 1
fi
cmake --build "$build" --target "${fuzzers[@]}"

mkdir -p tests/fuzz/artifacts
status=0
for fuzzer in "${fuzzers[@]}"; do
  name=${fuzzer%_fuzzer}
  work=$(mktemp -d)
  if [ -d "tests/fuzz/corpus/$name" ]; then
    cp -R "tests/fuzz/corpus/$name/." "$work/"
  fi
  extra=()
  if [ -f "tests/fuzz/$name.dict" ]; then extra+=("-dict=tests/fuzz/$name.dict"); fi
  echo "== $fuzzer: ${seconds} s, $(ls "$work" | wc -l) seeds"
  if ASAN_OPTIONS=detect_leaks=1 \
     UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 \
     "$build/tests/$fuzzer" -max_total_time="$seconds" -timeout=10 \
       -rss_limit_mb=2048 -print_final_stats=1 \
       -artifact_prefix="tests/fuzz/artifacts/$name-" "${extra[@]}" "$work"; then
    echo "== $fuzzer: no problem found"
  else
    echo "!! $fuzzer found a problem; the input is in tests/fuzz/artifacts/" >&2
    status=1
  fi
  rm -rf "$work"
done
exit $status
