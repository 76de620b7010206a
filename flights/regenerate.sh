#!/usr/bin/env bash
# Rebuilds every demo recording (and its truth table) in this folder from
# its scenario file with the built fluxtrim binary. The output is bit for
# bit the committed files (tests/cli/simulate_cli_test.cc checks it, using
# the `run` lines below).
#
#   flights/regenerate.sh [PATH/TO/fluxtrim]     (default: build/src/fluxtrim)
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
exe="${1:-$here/../build/src/fluxtrim}"
[ -x "$exe" ] || { echo "fluxtrim binary not found: $exe (build it first or pass its path)" >&2; exit 2; }
exe="$(cd "$(dirname "$exe")" && pwd)/$(basename "$exe")"
cd "$here"
mkdir -p truth
run() { "$exe" simulate "$@" --quiet; echo "regenerated: $*"; }

run demo_box.scenario -o demo_box.csv --truth truth/demo_box_truth.csv
run demo_lines.scenario -o demo_lines.csv --truth truth/demo_lines_truth.csv
run demo_validation_box.scenario -o demo_validation_box.csv --truth truth/demo_validation_box_truth.csv
run demo_drone_cal.scenario -o demo_drone_cal.csv --truth truth/demo_drone_cal_truth.csv
run demo_drone_grid.scenario -o demo_drone_grid.dfn --truth truth/demo_drone_grid_truth.csv
run demo_vehicle_loop.scenario -o demo_vehicle_loop.csv --truth truth/demo_vehicle_loop_truth.csv
