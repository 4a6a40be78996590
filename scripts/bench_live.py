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

A second part plays a part on a test plate (ringgauge.live.form_sequence, 1024 × 1024 px, centre and edge
contact) flat out: analysed frames/s of the warm-started form fit, power and astigmatism against the truth on
settled frames, whether every settled frame lies where the generated gap had stopped, and the sign read.

Usage: ``python scripts/bench_live.py [--quick] [--plate-only] [--out PATH] [--seed N]``
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


PLATE_PIXEL_UM = 25.0
PLATE_TD_MM = 16.0


def play_plate(video: str, truth: dict) -> dict:
    """A test-plate video flat out: rate, form against the truth on settled frames, settle and sign checks."""
    from ringgauge.live.form_tracker import open_session
    from ringgauge.live.motion import SETTLE_FRAMES, SETTLE_FRINGES

    setup = default_setup(PLATE_PIXEL_UM, SOURCE, test_diameter_mm=PLATE_TD_MM)
    src = open_source(video)
    s = open_session(src, setup)
    from ringgauge.form.evaluate import evaluate_form
    from ringgauge.imaging import frame_from_array

    from ringgauge.errors import RinggaugeError

    with open_source(video) as pre:  # a settled frame (the end of the rest), as a capture would take
        for _ in range(truth["events"][1]["last"] + 1):
            f0 = pre.read()
    tf = time.perf_counter()
    try:
        evaluate_form([frame_from_array(f0.codes, full_scale=f0.full_scale)], setup)  # full resolution
        full_s = time.perf_counter() - tf
    except RinggaugeError as exc:
        log_fail = str(exc).split(";")[0]
        print(f"bench_live: the full-resolution evaluation failed: {log_fail}", file=sys.stderr)
        full_s = float("nan")
    states, stamps = [], []
    t0 = time.perf_counter()
    for st in s:
        stamps.append(time.perf_counter())
        states.append(st)
    src.close()
    scale = (PLATE_TD_MM / truth["aperture_diameter_mm"]) ** 2
    want_p, want_a = truth["power_fringes"] * scale, truth["astigmatism_fringes"] * scale
    settled = [st for st in states if st.ok and st.settled]
    piston = truth["piston_fringes"]
    early = [st.frame for st in settled
             if max(w := piston[max(0, st.frame - SETTLE_FRAMES + 1): st.frame + 1]) - min(w) > SETTLE_FRINGES + 0.01]
    span = stamps[-1] - stamps[1] if len(stamps) > 2 else float("nan")
    return {
        "first_frame_s": stamps[0] - t0 if stamps else float("nan"), "full_s": full_s,
        "fps": (len(stamps) - 2) / span if span and span > 0 else float("nan"),
        "analysed": len(states), "ok": sum(st.ok for st in states), "settled": len(settled),
        "dp_mean": statistics.fmean(st.power_fringes - want_p for st in settled) if settled else float("nan"),
        "da_mean": statistics.fmean(st.astigmatism_fringes - want_a for st in settled) if settled else float("nan"),
        "U_p": statistics.fmean(2 * st.power_u_fringes for st in settled) if settled else float("nan"),
        "within_U": (sum(abs(st.power_fringes - want_p) <= 2 * st.power_u_fringes for st in settled)
                     / len(settled)) if settled else float("nan"),
        "early": early,
        "sign": s.sign.sign, "sign_truth": truth["power_sign"],
    }


def plate_part(args, log) -> tuple[list, list]:
    from ringgauge.live.form_sequence import FormPlan, write_form_sequence

    base = (SequencePlan(settle_frames=24, rest_frames=12, press_frames=12, after_frames=12) if args.quick
            else SequencePlan())
    res = {}
    with tempfile.TemporaryDirectory(prefix="rg-bench-plate-") as tmp:
        for contact, seed in (("centre", args.seed + 1), ("edge", args.seed + 2)):
            video = str(Path(tmp) / f"plate-{contact}.avi")
            log(f"bench_live: writing a {contact}-contact test-plate sequence, {base.n_frames} frames (not timed) ...")
            _v, tpath = write_form_sequence(video, FormPlan(contact=contact, base=base), source=SOURCE,
                                            camera=synth.Camera(width=SIZE, height=SIZE, pixel_um=PLATE_PIXEL_UM),
                                            rng=seed)
            import json

            log(f"bench_live: playing the {contact}-contact test-plate sequence flat out ...")
            res[contact] = play_plate(video, json.loads(Path(tpath).read_text()))
    c, e = res["centre"], res["edge"]
    rows = [
        ("one-frame form evaluation at full resolution (as at capture), s", f"{c['full_s']:.2f}",
         f"{e['full_s']:.2f}"),
        ("first live frame (that evaluation on a 2×2 block-averaged copy), s", f"{c['first_frame_s']:.2f}",
         f"{e['first_frame_s']:.2f}"),
        ("warm-started form fit: analysed frames/s", f"{c['fps']:.1f}", f"{e['fps']:.1f}"),
        ("frames analysed / fitted / settled", f"{c['analysed']} / {c['ok']} / {c['settled']}",
         f"{e['analysed']} / {e['ok']} / {e['settled']}"),
        ("settled power − truth, mean, fringe", f"{c['dp_mean']:+.4f}", f"{e['dp_mean']:+.4f}"),
        ("expanded U (k = 2) of the power, mean, fringe", f"{c['U_p']:.3f}", f"{e['U_p']:.3f}"),
        ("settled frames with |power − truth| ≤ U", f"{100 * c['within_U']:.0f} %", f"{100 * e['within_U']:.0f} %"),
        ("settled astigmatism − truth, mean, fringe", f"{c['da_mean']:+.4f}", f"{e['da_mean']:+.4f}"),
        ("settled frames while the generated gap still moved", f"{len(c['early'])}", f"{len(e['early'])}"),
        ("sign read / truth", f"{c['sign']} / {c['sign_truth']}", f"{e['sign']} / {e['sign_truth']}"),
    ]
    header = (f"test plate: {SIZE}×{SIZE} px MJPG, {base.n_frames} frames, {SOURCE}, {PLATE_PIXEL_UM:g} µm/px, "
              f"20 mm part with 2.5 fringes of power and 0.6 of astigmatism, read over a {PLATE_TD_MM:g} mm test "
              "diameter (truth scaled by the diameter squared), played flat out")
    return rows, [header]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Live benchmark: tracking mode on 1-megapixel frames.")
    ap.add_argument("--quick", action="store_true", help="a shorter sequence for a smoke run")
    ap.add_argument("--out", default=str(ROOT / "resources" / "bench_live_latest.md"),
                    help="Markdown file for the figures (default: resources/bench_live_latest.md)")
    ap.add_argument("--seed", type=int, default=20261202, help="sequence seed")
    ap.add_argument("--plate-only", action="store_true", help="only the test-plate part (printed, not written)")
    args = ap.parse_args(argv)

    def log(msg):
        print(msg, file=sys.stderr, flush=True)

    if args.plate_only:
        rows, header = plate_part(args, log)
        width = max(len(r[0]) for r in rows)
        print(header[0] + f"\nload average {os.getloadavg()[0]:.2f}\n\n{'':{width}}  {'centre contact':>16}  "
              f"{'edge contact':>16}\n" + "\n".join(f"{a:{width}}  {b:>16}  {c:>16}" for a, b, c in rows))
        return 0
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
    plate_rows, plate_header = plate_part(args, log)
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
    pw = max(len(r[0]) for r in plate_rows)
    text += "\n\n" + plate_header[0] + f"\n{'':{pw}}  {'centre contact':>16}  {'edge contact':>16}\n"
    text += "\n".join(f"{a:{pw}}  {b:>16}  {c:>16}" for a, b, c in plate_rows)
    print(text, flush=True)
    md = ["# Live benchmark: latest figures", "", *[f"- {h}" for h in header], "",
          "| | flat out | as a camera (25 frames/s) |", "|---|---|---|",
          *[f"| {a} | {b} | {c} |" for a, b, c in rows], "",
          f"Ratio tracking rate / target: {flat['tracking_fps'] / TARGET_FPS:.2f} (flat out), "
          f"{cam['tracking_fps'] / TARGET_FPS:.2f} (as a camera).", "",
          "## Against a test plate", "", *[f"- {h}" for h in plate_header], "",
          "| | centre contact | edge contact |", "|---|---|---|",
          *[f"| {a} | {b} | {c} |" for a, b, c in plate_rows], ""]
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text("\n".join(md), encoding="utf-8")
    log(f"bench_live: figures written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
