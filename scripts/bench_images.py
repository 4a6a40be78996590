"""Peak memory of loading images: crafted "bomb" headers (refused before decoding) and genuine large frames.

Each case runs in a fresh process (Linux: the resident high-water mark VmHWM is reset after the imports through
/proc/self/clear_refs) and prints the peak resident memory above the interpreter's own, and its ratio to the
decoded pixel bytes. Run:

    .venv/bin/python scripts/bench_images.py [--quick]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "tests"))

CHILD = r"""
import sys
import numpy, cv2, PIL.Image, tifffile  # imported before the baseline is read
from ringgauge.imaging import load_frame

def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key + ":"):
            return int(line.split()[1])  # kB

with open("/proc/self/clear_refs", "w") as fh:  # reset the high-water mark (VmHWM) to the current RSS
    fh.write("5")
base = status("VmRSS")
try:
    f = load_frame(sys.argv[1], max_megapixels=float(sys.argv[2]))
    what = f"loaded {f.shape[1]}x{f.shape[0]}"
except Exception as exc:
    what = f"refused: {type(exc).__name__}"
print(f"{(status('VmHWM') - base) / 1024:.1f}\t{what}")
"""


def measure(path: Path, budget: float) -> tuple[float, str]:
    r = subprocess.run([sys.executable, "-c", CHILD, str(path), str(budget)], capture_output=True, text=True,
                       cwd=REPO, timeout=600)
    if r.returncode != 0:
        return float("nan"), r.stderr.strip().splitlines()[-1] if r.stderr.strip() else "failed"
    mb, what = r.stdout.strip().split("\t")
    return float(mb), what


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller genuine frames")
    args = ap.parse_args()
    import cv2
    import numpy as np

    from hostile_files import png_bomb, tiff_bomb

    side = 4000 if args.quick else 8000
    rows = []
    with tempfile.TemporaryDirectory(prefix="rg-bench-img-") as tmp:
        d = Path(tmp)
        cases = [
            ("PNG header 16000x16000 8-bit (0.001 MB file)", png_bomb(d / "b1.png", 16000, 16000), 100, 0),
            ("PNG header 20000x20000 16-bit", png_bomb(d / "b2.png", 20000, 20000, bit_depth=16), 100, 0),
            ("TIFF header 30000x30000", tiff_bomb(d / "b3.tif", 30000, 30000), 100, 0),
        ]
        yy, xx = np.mgrid[0:side, 0:side].astype(np.float32)
        rings = (127 + 100 * np.cos(((xx - side / 2) ** 2 + (yy - side / 2) ** 2) / (side * 20.0))).astype(np.uint8)
        del yy, xx
        cv2.imwrite(str(d / "grey.png"), rings)
        cv2.imwrite(str(d / "grey16.png"), rings.astype(np.uint16) * 257)
        cv2.imwrite(str(d / "colour.png"), np.dstack([rings // 4, rings, rings // 3]))
        mp = side * side / 1e6
        cases += [
            (f"genuine {side}x{side} 8-bit grey PNG", d / "grey.png", 100, side * side),
            (f"genuine {side}x{side} 16-bit grey PNG", d / "grey16.png", 100, 2 * side * side),
            (f"genuine {side}x{side} 8-bit colour PNG", d / "colour.png", 100, 3 * side * side),
        ]
        print(f"peak resident memory of load_frame above the interpreter (MB); genuine frames are {mp:.0f} MP; "
              "output frame is float32 (4 bytes per pixel)")
        print(f"{'case':48s} {'peak MB':>8s} {'x raw':>6s}  result")
        for name, path, budget, raw_bytes in cases:
            mb, what = measure(path, budget)
            ratio = f"{mb * 2**20 / raw_bytes:6.2f}" if raw_bytes else "     -"
            rows.append((name, mb, ratio, what))
            print(f"{name:48s} {mb:8.1f} {ratio}  {what}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
