#!/usr/bin/env bash
# A guided first run on the workshop-link demo rig (invented scenario), with a
# simulated measurement so that nothing plays: check the rig, plan it, design
# the filters, "measure" the rig, verify the plan against the measurement and
# write one HTML report of it all.
#
#   bash demos/workshop-link/walkthrough.sh [OUT_DIR]      (default: workshop-project)
#
# Set ARRAYPLAN to the command to use (default: arrayplan on the PATH, else .venv/bin/arrayplan).
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
rig="$here/rig.toml"
out="${1:-workshop-project}"
ap="${ARRAYPLAN:-$(command -v arrayplan || echo .venv/bin/arrayplan)}"
mkdir -p "$out"

echo "== 1. check the rig file"
"$ap" check-rig "$rig"

echo "== 2. plan the channels (tables, weights, figures)"
"$ap" plan "$rig" --out "$out/plan"

echo "== 3. FIR filters for the strong channels, checked on the simulated rig"
"$ap" filters "$rig" --rate-hz 48000 --band-hz 500 8000 --out "$out/filters"

echo "== 4. measure the rig: SIMULATED here (nothing plays); on real hardware drop --simulate"
"$ap" measure "$rig" --simulate --yes --out "$out/meas" --rate-hz 48000 --duration-s 1 --f1-hz 200 \
    --sim-latency-samples 0 --latency-samples 0 --sim-noise-dbfs -90

echo "== 5. verify the plan against the measured impulse responses"
status=0
"$ap" verify "$out/plan" "$out/meas/irset" --out "$out/verify" --window-ms 30 || status=$?
if [ "$status" -gt 1 ]; then exit "$status"; fi
[ "$status" -eq 1 ] && echo "   (exit status 1: some wanted channels are lost; the report shows which)"

echo "== 6. one HTML report of everything"
"$ap" report "$out"
