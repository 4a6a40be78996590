"""Live benchmark: the tracking mode on 1-megapixel frames — analysed frames per second, latency, dropped frames,
and the tracked radius against the generated truth.

A seeded bench sequence (the part settling, resting, pressed and released; ringgauge.live.sequence, drawn by
ringgauge.synth) is written as an MJPG video at 1024 × 1024 px (1.05 MP) and played through OpenCV's VideoCapture
twice:

* flat out (every frame analysed as fast as it can be): analysed frames per second and per-frame time;
* as a camera delivers it (the file played at its 25 frames/s, newest frame only): analysed frames per second,
  latency from a frame's arrival to its result, and the frames dropped because the analysis was busy.

The first frame of a run goes through the full engine (it finds the rings from nothing) and is reported
separately; the figures for tracking leave it out. Generation is not timed. Target: ≥ 10 analysed frames/s,
aim 25, on the 2-core machine. Other processes share the machine: the load average is printed beside the figures.

Usage: ``python scripts/bench_live.py [--quick] [--out PATH] [--seed N]``
"""

from __future__ import annotations

import argparse
import datetime as _dt
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from ringgauge import __version__, synth  # noqa: E402
from ringgauge.bench_setup import default_setup  # noqa: E402
from ringgauge.live.sequence import SequencePlan, write_sequence  # noqa: E402
from ringgauge.live.session import LiveSession  # noqa: E402
from ringgauge.live.source import open_source  # noqa: E402

SIZE = 1024
PIXEL_UM = 6.0
RADIUS_MM = 400.0
SOURCE = "mercury-e"
TARGET_FPS, AIM_FPS = 10.0, 25.0


def _pct(xs, q):
    return float(np.percentile(np.asarray(xs, dtype=float), q)) if xs else float("nan")


def play(video: str, *, pace: bool) -> dict:
    setup = default_setup(PIXEL_UM, SOURCE)
    locked = None
    if pace:
        # a camera runs before and after the part: lock onto the rings first (the full engine on one frame, timed
        # in the flat-out run), then deliver the file at its frame rate to a tracker that is already following
        with open_source(video) as pre:
            ps = LiveSession(pre, setup)
            ps.step()
            locked = ps.tracker
    src = open_source(video, pace=pace)
    s = LiveSession(src, setup)
    if locked is not None:
        s.tracker = locked
    t_first = None
    states, stamps = [], []
    t0 = time.perf_counter()
    c0 = time.process_time()
    for st in s:
        now = time.perf_counter()
        if t_first is None:
            t_first = now - t0
        states.append(st)
        stamps.append(now)
    wall = time.perf_counter() - t0
    cpu = time.process_time() - c0
    src.close()
    tracked = states[1:]
    span = stamps[-1] - stamps[0] if len(stamps) > 1 else float("nan")
    lat = [st.latency_ms for st in tracked if st.latency_ms is not None]
    ok = [st for st in states if st.ok]
    settled = [st for st in ok if st.settled]
    err_ppm = [1e6 * (st.radius_mm - RADIUS_MM) / RADIUS_MM for st in settled]
    within = [abs(st.radius_mm - RADIUS_MM) <= st.radius_U_mm for st in ok]
    return {
        "frames_in_file": src.frame_count,
        "analysed": len(states),
        "tracked_ok": len(ok),
        "first_frame_s": t_first,
        "tracking_fps": (len(tracked) / span) if tracked and span > 0 else float("nan"),
        "latency_med_ms": _pct(lat, 50),
        "latency_p95_ms": _pct(lat, 95),
        "latency_max_ms": max(lat) if lat else float("nan"),
        "dropped": src.dropped,
        "wall_s": wall,
        "cpu_s": cpu,
        "settled_frames": len(settled),
        "err_ppm_mean": statistics.fmean(err_ppm) if err_ppm else float("nan"),
        "err_ppm_sd": statistics.pstdev(err_ppm) if len(err_ppm) > 1 else float("nan"),
        "U_ppm_mean": statistics.fmean(1e6 * st.radius_U_mm / RADIUS_MM for st in settled) if settled else float("nan"),
        "within_U": sum(within) / len(within) if within else float("nan"),
        "sign": states[-1].power_sign if states else "unknown",
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Live benchmark: tracking mode on 1-megapixel frames.")
    ap.add_argument("--quick", action="store_true", help="a shorter sequence for a smoke run")
    ap.add_argument("--out", default=str(ROOT / "resources" / "bench_live_latest.md"),
                    help="Markdown file for the figures (default: resources/bench_live_latest.md)")
    ap.add_argument("--seed", type=int, default=20261202, help="sequence seed")
    args = ap.parse_args(argv)

    def log(msg):
        print(msg, file=sys.stderr, flush=True)

    plan = (SequencePlan(radius_mm=RADIUS_MM, settle_frames=24, rest_frames=12, press_frames=12, after_frames=12)
            if args.quick else SequencePlan(radius_mm=RADIUS_MM))
    started = _dt.datetime.now(_dt.timezone.utc)
    load0 = os.getloadavg()
    with tempfile.TemporaryDirectory(prefix="rg-bench-live-") as tmp:
        video = str(Path(tmp) / "bench-live.avi")
        log(f"bench_live: writing {plan.n_frames} frames of {SIZE}×{SIZE} px (not timed) ...")
        write_sequence(video, plan, source=SOURCE, camera=synth.Camera(width=SIZE, height=SIZE, pixel_um=PIXEL_UM),
                       rng=args.seed)
        log("bench_live: playing flat out ...")
        flat = play(video, pace=False)
        log("bench_live: playing as a camera at 25 frames/s ...")
        cam = play(video, pace=True)
    load1 = os.getloadavg()

    rows = [
        ("frames in the file", f"{flat['frames_in_file']}", f"{cam['frames_in_file']}"),
        ("frames analysed", f"{flat['analysed']}", f"{cam['analysed']}"),
        ("first frame (full engine finds the rings), s", f"{flat['first_frame_s']:.2f}",
         "– (locked on before)"),
        ("tracking: analysed frames/s", f"{flat['tracking_fps']:.1f}", f"{cam['tracking_fps']:.1f}"),
        ("latency median / p95 / max, ms",
         f"{flat['latency_med_ms']:.0f} / {flat['latency_p95_ms']:.0f} / {flat['latency_max_ms']:.0f}",
         f"{cam['latency_med_ms']:.0f} / {cam['latency_p95_ms']:.0f} / {cam['latency_max_ms']:.0f}"),
        ("frames dropped (analysis busy when a newer frame came)", "– (a file waits)",
         f"{cam['dropped']} of {cam['frames_in_file']}"),
        ("wall / CPU time of the run, s", f"{flat['wall_s']:.1f} / {flat['cpu_s']:.1f}",
         f"{cam['wall_s']:.1f} / {cam['cpu_s']:.1f}"),
        ("settled frames", f"{flat['settled_frames']}", f"{cam['settled_frames']}"),
        ("settled ΔR mean ± sd, ppm", f"{flat['err_ppm_mean']:+.0f} ± {flat['err_ppm_sd']:.0f}",
         f"{cam['err_ppm_mean']:+.0f} ± {cam['err_ppm_sd']:.0f}"),
        ("expanded U (k = 2) of a settled frame, ppm", f"{flat['U_ppm_mean']:.0f}", f"{cam['U_ppm_mean']:.0f}"),
        ("tracked frames with |ΔR| ≤ U", f"{100 * flat['within_U']:.0f} %", f"{100 * cam['within_U']:.0f} %"),
        ("sign read from the motion (truth +)", flat["sign"], cam["sign"]),
    ]
    header = [
        f"ringgauge {__version__} live benchmark, {started:%Y-%m-%d %H:%M} UTC" + (" (--quick)" if args.quick else ""),
        f"machine: {os.cpu_count()} CPUs; load average {load0[0]:.2f} at start, {load1[0]:.2f} at end — other "
        "processes share this machine, so the rates are lower than on an idle one",
        f"sequence: {SIZE}×{SIZE} px ({SIZE * SIZE / 1e6:.2f} MP) MJPG, {plan.n_frames} frames at {plan.fps:g} "
        f"frames/s, {SOURCE}, {PIXEL_UM:g} µm/px (given exact), R = {RADIUS_MM:g} mm centre contact, settling then "
        "a press (seed {args.seed})".replace("{args.seed}", str(args.seed)),
        "latency: from a decoded frame's arrival to its result (the wait for the analysis to be free is included "
        "when played as a camera); the first frame is left out of rates and latency; played as a camera, the tracker "
        "has locked onto the rings before the file starts, as on a camera that runs continuously",
        f"target: ≥ {TARGET_FPS:g} analysed frames/s (aim {AIM_FPS:g}); ratio = tracking rate flat out / target",
    ]
    width = max(len(r[0]) for r in rows)
    text = "\n".join(header) + "\n\n" + f"{'':{width}}  {'flat out':>22}  {'as a camera (25/s)':>22}\n"
    text += "\n".join(f"{a:{width}}  {b:>22}  {c:>22}" for a, b, c in rows)
    text += f"\n\nratio tracking rate / target: {flat['tracking_fps'] / TARGET_FPS:.2f} (flat out), " \
            f"{cam['tracking_fps'] / TARGET_FPS:.2f} (as a camera, capped by the 25 frames/s the file delivers)"
    print(text, flush=True)
    md = ["# Live benchmark: latest figures", "", *[f"- {h}" for h in header], "",
          "| | flat out | as a camera (25 frames/s) |", "|---|---|---|",
          *[f"| {a} | {b} | {c} |" for a, b, c in rows], "",
          f"Ratio tracking rate / target: {flat['tracking_fps'] / TARGET_FPS:.2f} (flat out), "
          f"{cam['tracking_fps'] / TARGET_FPS:.2f} (as a camera).", ""]
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text("\n".join(md), encoding="utf-8")
    log(f"bench_live: figures written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
