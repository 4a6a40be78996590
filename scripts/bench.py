"""Radius benchmark: ringgauge's ``analyse`` against a Hough-circle baseline on generated Newton's rings.

Generates a fixed, seeded set of Newton's-rings images from 0.3 to 5 megapixels with the camera effects the
generator offers (blur, shot and read noise, uneven light, stray light, dust, off-centre contact, contact offset,
several lamps), then measures both methods on every image in the same run: radius error against the generator's
truth, centre error, wall-clock and CPU seconds per image, and peak memory. Image generation is not timed.

Prints a table to stdout (progress goes to stderr) and writes the same table as Markdown (default
``resources/bench_latest.md``). When ``scripts/bench_form.py`` exists it is run at the end (``--quick`` passed on;
left out of a quick run if it has no such option, and by ``--skip-form``).

Usage: ``python scripts/bench.py [--quick] [--out PATH] [--seed N] [--per-class N] [--skip-form]``
"""

from __future__ import annotations

import argparse
import datetime as _dt
import math
import os
import platform
import statistics
import subprocess
import sys
import time
import tracemalloc
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import cv2  # noqa: E402

from bench_baseline import BaselineFailure, hough_baseline  # noqa: E402
from ringgauge import __version__  # noqa: E402
from ringgauge import synth  # noqa: E402
from ringgauge.bench_setup import BenchSetup  # noqa: E402
from ringgauge.errors import RinggaugeError  # noqa: E402
from ringgauge.imaging import frame_from_array  # noqa: E402
from ringgauge.pipeline import analyse  # noqa: E402
from ringgauge.sources import get_source  # noqa: E402

FULL_CLASSES = (0.3, 0.8, 1.3, 2.0, 3.0, 5.0)
QUICK_PLAN = ((0.3, 2), (0.8, 1), (1.3, 2))
DEFAULT_SEED = 20261201
METHODS = ("ringgauge", "baseline")


# --------------------------------------------------------------------------------------------- memory probe
def _fix_malloc_thresholds(threshold: int = 128 * 1024) -> bool:
    """Make glibc serve every block of 128 kB or more by its own mmap and return it on free (fixed thresholds).

    By default glibc raises its mmap threshold after large blocks are freed and keeps later ones in the heap, so a
    call that reuses such pages shows no RSS growth at all; with fixed thresholds each call's RSS peak is its own.
    """
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6")
        M_TRIM_THRESHOLD, M_MMAP_THRESHOLD = -1, -3
        return bool(libc.mallopt(M_MMAP_THRESHOLD, threshold)) and bool(libc.mallopt(M_TRIM_THRESHOLD, threshold))
    except (OSError, AttributeError):
        return False


class PeakMemory:
    """Peak memory of a block of work.

    Preferred: the kernel's peak resident set size (VmHWM), reset before the work by writing 5 to
    /proc/self/clear_refs (Linux); the figure is the peak RSS above the RSS at the start, so it includes memory
    allocated by C/C++ code (OpenCV, BLAS). Fallback where that reset is refused: tracemalloc's peak of Python and
    numpy allocations (misses OpenCV's internal buffers, and slows Python allocations).
    """

    def __init__(self, fix_malloc: bool = True):
        self.method = "rss"
        self.fixed_mmap = _fix_malloc_thresholds() if fix_malloc else False
        try:
            with open("/proc/self/clear_refs", "w") as fh:
                fh.write("5")
            self._status()
        except OSError:
            self.method = "tracemalloc"

    @staticmethod
    def _status() -> dict[str, int]:
        out = {}
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(("VmRSS:", "VmHWM:")):
                    key, val = line.split(":")
                    out[key] = int(val.split()[0]) * 1024
        return out

    @property
    def description(self) -> str:
        if self.method == "rss":
            return ("peak resident set size above the RSS before the call (kernel VmHWM, reset through "
                    "/proc/self/clear_refs before each call; includes OpenCV's and BLAS's C/C++ buffers"
                    + ("; glibc mmap/trim thresholds fixed at 128 kB so freed blocks leave the RSS)" if self.fixed_mmap
                       else "; memory reused from earlier calls is not seen)"))
        return "tracemalloc peak of Python/numpy allocations during the call (OpenCV's own buffers not seen)"

    def start(self) -> None:
        if self.method == "rss":
            with open("/proc/self/clear_refs", "w") as fh:
                fh.write("5")
            self._base = self._status()["VmRSS"]
        else:
            tracemalloc.start()
            tracemalloc.reset_peak()

    def stop(self) -> float:
        """Peak in MB (10^6 bytes)."""
        if self.method == "rss":
            return max(0, self._status()["VmHWM"] - self._base) / 1e6
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        return peak / 1e6


# --------------------------------------------------------------------------------------------- the image set
@dataclass
class Case:
    ident: str
    megapixels: float
    kwargs: dict
    image: np.ndarray

    @property
    def truth_radius_mm(self) -> float:
        return self.kwargs["radius_mm"]

    @property
    def truth_centre_px(self) -> tuple[float, float]:
        return self.kwargs["centre_px"]

    @property
    def pixel_um(self) -> float:
        return self.kwargs["camera"].pixel_um

    @property
    def source(self) -> str:
        return self.kwargs["source"]


def make_cases(plan, seed: int, log) -> list[Case]:
    cases = []
    total = sum(n for _, n in plan)
    for ci, (mp, n) in enumerate(plan):
        for k in range(n):
            rng = np.random.default_rng([seed, ci, k, int(round(mp * 10))])
            kw = synth.random_newton_case(rng, megapixels=mp)
            img = synth.newton_rings(rng=rng, **kw).image
            cases.append(Case(f"{mp:g}MP-{k + 1}", mp, kw, img))
            log(f"generated {len(cases)}/{total}: {cases[-1].ident} {img.shape[1]}x{img.shape[0]} px, "
                f"{kw['source']}, R = {kw['radius_mm']:.1f} mm")
    return cases


# --------------------------------------------------------------------------------------------- the two methods
@dataclass
class Outcome:
    method: str
    ok: bool
    reason: str = ""
    radius_mm: float = math.nan
    radius_u_mm: float = math.nan
    centre_px: tuple[float, float] = (math.nan, math.nan)
    wall_s: float = math.nan
    cpu_s: float = math.nan
    peak_mb: float = math.nan
    radius_err_pct: float = math.nan
    centre_err_px: float = math.nan
    within_3u: bool | None = None
    extra: dict = field(default_factory=dict)


def run_ringgauge(case: Case):
    setup = BenchSetup(source=get_source(case.source), pixel_size_um=case.pixel_um, pixel_size_u_um=0.0)
    frame = frame_from_array(case.image)  # converting the camera image is part of the tool's work: timed
    res = analyse(frame, setup)
    return res.radius_mm, res.radius_u_mm, res.centre_px


def run_baseline(case: Case):
    res = hough_baseline(case.image, pixel_um=case.pixel_um, wavelength_nm=get_source(case.source).wavelength_nm)
    return res.radius_mm, math.nan, res.centre_px


RUNNERS = {"ringgauge": (run_ringgauge, RinggaugeError), "baseline": (run_baseline, BaselineFailure)}


def measure(method: str, case: Case, mem: PeakMemory | None = None) -> Outcome:
    fn, expected = RUNNERS[method]
    if mem is not None:
        mem.start()
    c0, t0 = time.process_time(), time.perf_counter()
    try:
        R, u, centre = fn(case)
        ok, reason = True, ""
    except expected as exc:
        ok, reason = False, str(exc)
    except (cv2.error, np.linalg.LinAlgError, ValueError, FloatingPointError) as exc:  # counted, not fatal
        ok, reason = False, f"{type(exc).__name__}: {exc}"
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    peak = mem.stop() if mem is not None else math.nan
    out = Outcome(method, ok, reason, wall_s=wall, cpu_s=cpu, peak_mb=peak)
    if ok:
        out.radius_mm, out.radius_u_mm, out.centre_px = R, u, centre
        out.radius_err_pct = 100.0 * (R - case.truth_radius_mm) / case.truth_radius_mm
        tx, ty = case.truth_centre_px
        out.centre_err_px = math.hypot(centre[0] - tx, centre[1] - ty)
        if math.isfinite(u):
            out.within_3u = abs(R - case.truth_radius_mm) <= 3 * u
    return out


def memory_child(path: str) -> int:
    """In a fresh process (its malloc settings must not slow the timed run): peak memory of both methods on the
    pickled cases in ``path``; prints JSON {ident: {method: MB}} on stdout."""
    import json
    import pickle

    with open(path, "rb") as fh:
        cases = pickle.load(fh)
    mem = PeakMemory()
    for m in METHODS:  # warm-up on the first case, not counted
        measure(m, cases[0], mem)
    out = {c.ident: {m: measure(m, c, mem).peak_mb for m in METHODS} for c in cases}
    print(json.dumps({"description": mem.description, "peaks": out}))
    return 0


def memory_pass(cases: list[Case], log) -> tuple[dict, str]:
    """Peak memory on one image per megapixel class, measured in a child process."""
    import json
    import pickle
    import tempfile

    pick = list({c.megapixels: c for c in reversed(cases)}.values())[::-1]  # first image of each class
    log(f"bench: peak memory on {len(pick)} images (one per class) in a separate process ...")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "cases.pkl"
        with open(path, "wb") as fh:
            pickle.dump(pick, fh)
        proc = subprocess.run([sys.executable, __file__, "--memory-child", str(path)], capture_output=True,
                              text=True, cwd=str(ROOT))
    if proc.returncode != 0:
        log(f"bench: memory pass failed ({proc.stderr.strip().splitlines()[-1:]}); memory column left empty")
        return {}, "not measured (the memory pass failed)"
    data = json.loads(proc.stdout.strip().splitlines()[-1])
    return data["peaks"], data["description"] + "; one image per class (the first), measured in a separate process"


# --------------------------------------------------------------------------------------------- statistics
def _med(xs):
    xs = [x for x in xs if math.isfinite(x)]
    return statistics.median(xs) if xs else math.nan


def _max(xs):
    xs = [x for x in xs if math.isfinite(x)]
    return max(xs) if xs else math.nan


def summarise(outs: list[Outcome]) -> dict:
    good = [o for o in outs if o.ok]
    cov = [o.within_3u for o in good if o.within_3u is not None]
    return {
        "n": len(outs),
        "failed": len(outs) - len(good),
        "err_med": _med([abs(o.radius_err_pct) for o in good]),
        "err_max": _max([abs(o.radius_err_pct) for o in good]),
        "cen_med": _med([o.centre_err_px for o in good]),
        "cen_max": _max([o.centre_err_px for o in good]),
        "cov": (sum(cov), len(cov)) if cov else None,
        "wall_med": _med([o.wall_s for o in outs]),
        "wall_max": _max([o.wall_s for o in outs]),
        "cpu_med": _med([o.cpu_s for o in outs]),
        "mem_max": _max([o.peak_mb for o in outs]),
    }


def _ratio(a, b):
    return a / b if (math.isfinite(a) and math.isfinite(b) and b > 0) else math.nan


def _fmt(x, spec):
    return "–" if not (isinstance(x, (int, float)) and math.isfinite(x)) else format(x, spec)


def _pct(x):
    """An error in percent with enough digits for both methods (ppm-level to tens of percent)."""
    if not math.isfinite(x):
        return "–"
    return f"{x:.2g}" if x < 0.01 else (f"{x:.3f}" if x < 1 else f"{x:.2f}")


# --------------------------------------------------------------------------------------------- tables
HEAD = ["class", "method", "images", "failed", "median |ΔR| / %", "worst |ΔR| / %", "median centre err / px",
        "worst centre err / px", "|ΔR| ≤ 3u", "median wall s/image", "worst wall s/image", "median CPU s/image",
        "peak memory / MB (one image)"]
RHEAD = ["class", "time ratio ringgauge/baseline (median wall s)", "CPU ratio (median CPU s)",
         "median-error ratio ringgauge/baseline", "worst-error ratio ringgauge/baseline"]


def table_rows(groups: dict[str, dict[str, list[Outcome]]]):
    rows, rrows = [], []
    for label, per in groups.items():
        sums = {m: summarise(per[m]) for m in METHODS}
        for m in METHODS:
            s = sums[m]
            cov = "n/a (no u)" if s["cov"] is None else f"{s['cov'][0]}/{s['cov'][1]}"
            rows.append([label, m, str(s["n"]), str(s["failed"]), _pct(s["err_med"]), _pct(s["err_max"]),
                         _fmt(s["cen_med"], ".3f"), _fmt(s["cen_max"], ".3f"), cov, _fmt(s["wall_med"], ".3f"),
                         _fmt(s["wall_max"], ".3f"), _fmt(s["cpu_med"], ".3f"), _fmt(s["mem_max"], ".0f")])
        a, b = sums["ringgauge"], sums["baseline"]
        rrows.append([label, _fmt(_ratio(a["wall_med"], b["wall_med"]), ".3f"),
                      _fmt(_ratio(a["cpu_med"], b["cpu_med"]), ".3f"),
                      _fmt(_ratio(a["err_med"], b["err_med"]), ".2g"),
                      _fmt(_ratio(a["err_max"], b["err_max"]), ".2g")])
    return rows, rrows


def text_table(head, rows) -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
    line = "  ".join(h.ljust(w) for h, w in zip(head, widths))
    out = [line, "-" * len(line)]
    out += ["  ".join(c.ljust(w) for c, w in zip(r, widths)) for r in rows]
    return "\n".join(out)


def md_table(head, rows) -> str:
    def cells(r):
        return "| " + " | ".join(c.replace("|", "\\|") for c in r) + " |"

    return "\n".join([cells(head), "|" + "---|" * len(head), *(cells(r) for r in rows)])


def machine() -> dict:
    cpu = "unknown"
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    try:
        load = os.getloadavg()
    except OSError:
        load = (math.nan,) * 3
    return {"nproc": os.cpu_count(), "cpu": cpu, "load": load}


# --------------------------------------------------------------------------------------------- main
def main(argv=None) -> int:
    ap = argparse.ArgumentParser(
        description="Radius benchmark: ringgauge against a Hough-circle baseline on generated Newton's rings "
        "(figures and ratios; generation is not timed).")
    ap.add_argument("--quick", action="store_true", help="a handful of images (0.3-1.3 MP) for a smoke run")
    ap.add_argument("--out", default=str(ROOT / "resources" / "bench_latest.md"),
                    help="Markdown file for the table (default: resources/bench_latest.md)")
    ap.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"image-set seed (default {DEFAULT_SEED})")
    ap.add_argument("--per-class", type=int, default=6, help="images per megapixel class in the full run (default 6)")
    ap.add_argument("--skip-form", action="store_true",
                    help="do not run scripts/bench_form.py (the test-plate benchmark) afterwards")
    ap.add_argument("--skip-live", action="store_true",
                    help="do not run scripts/bench_live.py (the live tracking benchmark) afterwards")
    ap.add_argument("--memory-child", metavar="PICKLE", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.memory_child:
        return memory_child(args.memory_child)
    if args.per_class < 1:
        print("bench: --per-class must be at least 1", file=sys.stderr)
        return 2

    def log(msg):
        print(msg, file=sys.stderr, flush=True)

    started = _dt.datetime.now(_dt.timezone.utc)
    m0 = machine()
    plan = QUICK_PLAN if args.quick else tuple((mp, args.per_class) for mp in FULL_CLASSES)
    log(f"bench: generating {sum(n for _, n in plan)} images (seed {args.seed}; not timed) ...")
    cases = make_cases(plan, args.seed, log)

    # warm-up on an extra small image, not counted: imports, first-call caches
    warm = make_cases(((0.3, 1),), args.seed + 1, lambda _m: None)[0]
    for m in METHODS:
        measure(m, warm)

    results: dict[str, list[Outcome]] = {m: [] for m in METHODS}
    for i, case in enumerate(cases, 1):
        outs = {m: measure(m, case) for m in METHODS}
        for m in METHODS:
            results[m].append(outs[m])
        a, b = outs["ringgauge"], outs["baseline"]
        log(f"[{i}/{len(cases)}] {case.ident}: ringgauge "
            + (f"ΔR {a.radius_err_pct:+.4f} % ({a.wall_s:.2f} s)" if a.ok else f"FAILED ({a.reason})")
            + "; baseline "
            + (f"ΔR {b.radius_err_pct:+.3f} % ({b.wall_s:.2f} s)" if b.ok else f"FAILED ({b.reason})"))
    m1 = machine()
    peaks, mem_description = memory_pass(cases, log)
    for i, case in enumerate(cases):
        for m in METHODS:
            results[m][i].peak_mb = peaks.get(case.ident, {}).get(m, math.nan)

    groups: dict[str, dict[str, list[Outcome]]] = {}
    for mp in dict.fromkeys(c.megapixels for c in cases):
        idx = [i for i, c in enumerate(cases) if c.megapixels == mp]
        groups[f"{mp:g} MP"] = {m: [results[m][i] for i in idx] for m in METHODS}
    groups["all"] = results
    rows, rrows = table_rows(groups)

    header = [
        f"ringgauge {__version__} radius benchmark, {started:%Y-%m-%d %H:%M} UTC"
        + (" (--quick smoke run)" if args.quick else ""),
        f"machine: {m0['nproc']} CPUs (nproc), {m0['cpu']}; Python {platform.python_version()}, "
        f"numpy {np.__version__}, OpenCV {cv2.__version__}",
        f"load average at start {m0['load'][0]:.2f} / {m0['load'][1]:.2f} / {m0['load'][2]:.2f} (1/5/15 min), "
        f"at end {m1['load'][0]:.2f}: other processes share this machine, so timings are inflated when the load "
        f"exceeds the CPU count",
        f"{len(cases)} generated images (seed {args.seed}), generator: ringgauge.synth.random_newton_case; "
        "ΔR = measured − true radius, centre error = distance to the true contact point",
        f"memory: {mem_description}",
        "time: wall clock (time.perf_counter) and process CPU time (time.process_time, all threads) per image; "
        "ringgauge's time includes converting the array to a frame; one warm-up image per method not counted",
        "ringgauge: pipeline.analyse with the true pixel size given as exact (u = 0), so u is the budget's "
        "combined standard uncertainty without the pixel-scale term; '|ΔR| ≤ 3u' counts images within 3u",
        "baseline: cv2.HoughCircles (HOUGH_GRADIENT) centre + ring radii in radius bands, numpy.polyfit of r² "
        "against order (recipe in scripts/bench_baseline.py); failures are counted, errors over successes only",
        "ratios < 1 favour ringgauge",
    ]
    failures = [(c.ident, o.method, o.reason) for m in METHODS for c, o in zip(cases, results[m]) if not o.ok]
    target = summarise(groups["1.3 MP"]["ringgauge"]) if "1.3 MP" in groups else None

    text = "\n".join(header) + "\n\n" + text_table(HEAD, rows) + "\n\n" + text_table(RHEAD, rrows)
    if target:
        text += (f"\n\ntarget at 1.3 MP: ≤ 1 s per image (aim 0.3 s); ringgauge median {target['wall_med']:.3f} s, "
                 f"worst {target['wall_max']:.3f} s (wall clock)")
    if failures:
        text += "\n\nfailures:\n" + "\n".join(f"  {i} {m}: {r}" for i, m, r in failures)
    print(text, flush=True)

    per_image = [["image", "size / px", "lamp", "true R / mm", "ringgauge ΔR / %", "ringgauge u / %",
                  "ringgauge centre err / px", "ringgauge s", "baseline ΔR / %", "baseline centre err / px",
                  "baseline s"]]
    for c, a, b in zip(cases, results["ringgauge"], results["baseline"]):
        per_image.append([
            c.ident, f"{c.image.shape[1]}×{c.image.shape[0]}", c.source, f"{c.truth_radius_mm:.2f}",
            f"{a.radius_err_pct:+.4f}" if a.ok else "failed",
            f"{100 * a.radius_u_mm / a.radius_mm:.4f}" if a.ok else "–",
            f"{a.centre_err_px:.3f}" if a.ok else "–", f"{a.wall_s:.2f}",
            f"{b.radius_err_pct:+.3f}" if b.ok else "failed",
            f"{b.centre_err_px:.2f}" if b.ok else "–", f"{b.wall_s:.2f}",
        ])
    md = ["# Radius benchmark: latest figures", "", *[f"- {h}" for h in header], "",
          md_table(HEAD, rows), "", md_table(RHEAD, rrows), ""]
    if target:
        md += [f"Target at 1.3 MP: ≤ 1 s per image (aim 0.3 s); ringgauge median {target['wall_med']:.3f} s, "
               f"worst {target['wall_max']:.3f} s (wall clock).", ""]
    if failures:
        md += ["Failures:", "", *[f"- {i} {m}: {r}" for i, m, r in failures], ""]
    md += ["<details><summary>Per image</summary>", "", md_table(per_image[0], per_image[1:]), "", "</details>", ""]
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text("\n".join(md), encoding="utf-8")
    log(f"bench: table written to {out}")

    rc = run_form_bench(args, log)
    return run_live_bench(args, log) or rc


def run_live_bench(args, log) -> int:
    """Run scripts/bench_live.py (tracking mode on 1-megapixel video: frames/s, latency, dropped frames)."""
    live = HERE / "bench_live.py"
    if getattr(args, "skip_live", False) or not live.exists():
        return 0
    cmd = [sys.executable, str(live)] + (["--quick"] if args.quick else [])
    log(f"bench: running {' '.join(cmd[1:])} (live tracking) ...")
    rc = subprocess.call(cmd, cwd=str(ROOT))
    if rc:
        log(f"bench: scripts/bench_live.py exited with code {rc}")
    return rc


def run_form_bench(args, log) -> int:
    """Run scripts/bench_form.py (test-plate images) when it exists, passing --quick on."""
    form = HERE / "bench_form.py"
    if args.skip_form or not form.exists():
        return 0
    cmd = [sys.executable, str(form)]
    if args.quick:
        helptext = subprocess.run(cmd + ["--help"], capture_output=True, text=True, cwd=str(ROOT)).stdout
        if "--quick" not in helptext:
            log("bench: scripts/bench_form.py has no --quick option, so it is left out of the quick run "
                "(run it directly)")
            return 0
        cmd.append("--quick")
    log(f"bench: running {' '.join(cmd[1:])} (test-plate images) ...")
    rc = subprocess.call(cmd, cwd=str(ROOT))
    if rc:
        log(f"bench: scripts/bench_form.py exited with code {rc}")
    return rc


if __name__ == "__main__":
    sys.exit(main())
