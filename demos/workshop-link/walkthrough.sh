#!/usr/bin/env bash
# A guided first run on the workshop-link demo rig (invented scenario), with a
# simulated measurement so that nothing plays.  The simulated rig is the rig
# as built, not as drawn: every element a few millimetres off its place, small
# gain and phase errors, and a floor under the bars.  The walkthrough shows
# both outcomes of a verification:
#
#   * the free-field plan's filters lose isolation on that rig (exit status 1
#     from verify, expected here);
#   * a re-plan from the measurement, with filters designed from it, keeps the
#     isolation when its FIR filters are verified on a second measurement.
#
#   bash demos/workshop-link/walkthrough.sh [OUT_DIR]      (default: workshop-project)
#
# Set ARRAYPLAN to the command to use (default: arrayplan on the PATH, else .venv/bin/arrayplan).
# It takes a few minutes on a laptop.  On real hardware drop --simulate and the --sim-* options,
# and start any playback at a low level: the filters feed loudspeakers.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
rig="$here/rig.toml"
out="${1:-workshop-project}"
ap="${ARRAYPLAN:-$(command -v arrayplan || echo .venv/bin/arrayplan)}"
mkdir -p "$out"

# exit status 0 pass, 1 some channel fails (shown, not fatal here), 2 bad input (stop)
allow_fail() { local s=0; "$@" || s=$?; if [ "$s" -gt 1 ]; then exit "$s"; fi; return 0; }

# The simulated rig as built: 5 mm placement errors per coordinate, 0.5 dB gain and 3 degree
# phase errors per element (seed 7), and a floor at z = 0 absorbing 30 % of the sound energy.
as_built=(--sim-placement-error-mm 5 --sim-gain-error-db 0.5 --sim-phase-error-deg 3
          --sim-floor-absorption 0.3 --sim-error-seed 7)
measure_opts=(--simulate --yes --rate-hz 48000 --duration-s 1 --f1-hz 200 --sim-latency-samples 0 --latency-samples 0
              --sim-noise-dbfs -90)

echo "== 1. check the rig file"
"$ap" check-rig "$rig"

echo "== 2. plan the channels in the free field (tables, weights, figures)"
"$ap" plan "$rig" --out "$out/plan"

echo "== 3. FIR filters from that plan, checked through its own (free-field) kernel"
allow_fail "$ap" filters "$out/plan" --rate-hz 48000 --band-hz 500 8000 --crosstalk-limit-db -20 --out "$out/filters"

echo "== 4. measure the rig: SIMULATED here (nothing plays), the rig as built"
"$ap" measure "$rig" "${measure_opts[@]}" "${as_built[@]}" --sim-seed 1 --out "$out/meas"

echo "== 5. verify the free-field filters on the rig as built: expect lost isolation (FAIL)"
allow_fail "$ap" verify "$out/filters" "$out/meas/irset" --window-ms 30 --out "$out/verify-free-field"

echo "== 6. plan again from the measured responses"
"$ap" plan "$rig" --irset "$out/meas/irset" --window-ms 30 --out "$out/replan"

echo "== 7. filters from the measured plan; --taps auto doubles the length until the check meets the limit"
allow_fail "$ap" filters "$out/replan" --irset "$out/meas/irset" --window-ms 30 --rate-hz 48000 --band-hz 500 8000 \
    --taps auto --crosstalk-limit-db -20 --out "$out/refilters"

echo "== 8. a second simulated measurement of the same rig (new noise), and the filters verified on it"
"$ap" measure "$rig" "${measure_opts[@]}" "${as_built[@]}" --sim-seed 2 --out "$out/meas2"
allow_fail "$ap" verify "$out/refilters" "$out/meas2/irset" --window-ms 30 --out "$out/verify-refilters"

echo "== 9. one HTML report of everything"
"$ap" report "$out"
