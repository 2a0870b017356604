#!/usr/bin/env bash
# The meeting-room demo (invented scenario): plan the rig in the free field and in its room,
# "measure" the room with a SIMULATED measurement (nothing plays; the room's image-source
# responses stand in for the hardware), verify both plans on those responses, and print the
# two plans side by side.
#
#   bash demos/meeting-room/walkthrough.sh [OUT_DIR]      (default: meeting-room-project)
#
# Set ARRAYPLAN to the command to use (default: arrayplan on the PATH, else .venv/bin/arrayplan).
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
rig="$here/rig.toml"
out="${1:-meeting-room-project}"
ap="${ARRAYPLAN:-$(command -v arrayplan || echo .venv/bin/arrayplan)}"
mkdir -p "$out"

echo "== 1. check the rig file (room notes: reverberation guides, cost of the image model)"
"$ap" check-rig "$rig"

echo "== 2. plan in the room (the rig file's [room] table) and, for comparison, in the free field"
"$ap" plan "$rig" --out "$out/plan"
"$ap" plan "$rig" --free-field --out "$out/plan-free-field" --no-figures

echo "== 3. measure the rig: SIMULATED here (nothing plays); the room's responses stand in for it"
"$ap" measure "$rig" --simulate --yes --out "$out/meas" --rate-hz 48000 --duration-s 1 --f1-hz 100 \
    --ir-length-s 0.25 --sim-latency-samples 0 --latency-samples 0 --sim-noise-dbfs -90

echo "== 4. verify both plans on the room's responses (exit status 1 = channels lost)"
for plan in plan plan-free-field; do
    status=0
    "$ap" verify "$out/$plan" "$out/meas/irset" --out "$out/verify-$plan" --channels 1,2 --no-figures || status=$?
    if [ "$status" -gt 1 ]; then exit "$status"; fi
done

echo "== 5. the two plans side by side: strong / usable channels; channel 1 level (dB re 1/m) and channel 2 below it (dB)"
awk -F, 'FNR == 1 { plan = (FILENAME ~ /free-field/) ? "free" : "room"; next }
         FILENAME ~ /summary/ { count[plan, $1] = $3 " / " $4; if (plan == "room") order[++n] = $1; next }
         $2 == 1 { s1[plan, $1] = 20 * log($3) / log(10) }
         $2 == 2 { s2[plan, $1] = $6 }
         END { printf "%9s  %-26s  %-26s\n", "", "room", "free field"
               for (i = 1; i <= n; i++) { f = order[i]
                   printf "%6.0f Hz  %-5s %+6.1f dB %+6.1f dB    %-5s %+6.1f dB %+6.1f dB\n", f,
                          count["room", f], s1["room", f], s2["room", f], count["free", f], s1["free", f], s2["free", f] } }' \
    "$out/plan/summary.csv" "$out/plan/channels.csv" \
    "$out/plan-free-field/summary.csv" "$out/plan-free-field/channels.csv"

echo "== 6. a field map of channel 1 at 500 Hz in the room (walls drawn)"
"$ap" field "$rig" --freq-hz 500 --channel 1 --plane xy --out "$out/field"
