"""One line per result for the demo: reads the JSON of `ringgauge analyze --json` on standard input."""

import json
import sys

d = json.load(sys.stdin)
name = (d["image"]["path"] or "").split("/")[-1]
cx, cy = d["centre_px"]
print(
    f"  {name:16s} R = {d['radius_mm']:9.2f} mm, U = {d['radius_U_mm']:.2f} mm (k = {d['k']:.0f}), "
    f"{d['fringes']['rings_used']} rings, centre ({cx:.2f}, {cy:.2f}) px"
)
