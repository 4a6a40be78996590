#!/usr/bin/env bash
# `make demo`: the main job on the bundled sample data (sample_images/, an invented shop and lot).
set -uo pipefail
cd "$(dirname "$0")/.."
RG=".venv/bin/ringgauge"
S=sample_images
# The demo keeps its own ringgauge folder (invented shop, its own signing key, records, bench profile), so it
# never writes into the shop's real settings or records store; a fresh one each run keeps the output repeatable.
export RINGGAUGE_HOME="$PWD/demo_output/home"
rm -rf "$RINGGAUGE_HOME"; mkdir -p "$RINGGAUGE_HOME"
hr() { printf '\n== %s ==\n' "$1"; }

hr "Safety at the bench (follow your shop's procedures and local regulations)"
$RG sources | sed -n '/Safety/,$p' | tail -n +2

hr "1. Calibrate bench 2 from a crossed-grid reticle (100 µm pitch: x, y and squareness)"
$RG calibrate "$S/calibration/grid-reticle-100um.png" --grating-pitch 100 --pitch-u 0.05 \
    --target-id RG-3 --bench demo-bench-2 --operator "M. Ashdown" --source sodium-d || exit 1

hr "2. Radius of curvature of lens FH2604-01 on the optical flat (full report)"
$RG analyze "$S/lot-FH2604/FH2604-01.png" --bench demo-bench-2 || exit 1

hr "3. The rest of lot FH-2604, one line each (truth for the demo only: $S/lot-FH2604/truth-for-demo-only.json)"
for f in "$S"/lot-FH2604/FH2604-0*.png; do
  out=$($RG analyze "$f" --bench demo-bench-2 --json --quiet 2>&1)
  if [ $? -eq 0 ]; then
    printf '%s' "$out" | .venv/bin/python scripts/demo_summary.py
  else
    printf '  %-16s refused: %s\n' "$(basename "$f")" "${out#ringgauge: }"
  fi
done

hr "4. Part A-0093 against test plate TP-0517: two frames with the gap changed, tolerance 3/2(0.5)"
$RG analyze "$S"/testplate/PCC-51-A_frame1.png "$S"/testplate/PCC-51-A_frame2.png \
    --source mercury-e --pixel-size 25 --pixel-size-u 0.02 --test-diameter 18 --tolerance "3/2(0.5)" \
    --test-plate-radius 51.68 --test-plate-radius-u 0.002 --test-plate-kind convex || exit 1

if [ -f scripts/demo_records.py ]; then
  hr "5. Lot FH-2604 into the records store, certificates and lot report"
  .venv/bin/python scripts/demo_records.py "$S/lot-FH2604" || exit 1
fi
printf '\nDemo finished.\n'
