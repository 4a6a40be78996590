"""Benchmark of the surface-form evaluation against a test plate.

Two sets of generated images with known form (0.5-10 fringes of power, astigmatism, zonal error, coma, rings
off the aperture centre, parts off the frame centre, uneven light, dust):

* "synth": made with ringgauge.synth.test_plate_fringes (multiple-beam fringes, camera model);
* "independent": made here with a different renderer (two-beam cos² fringes with random visibility, a
  Gaussian beam of light off the part's centre, a stray-light gradient, opaque dust and a scratch, Gaussian
  blur and noise) so the method is not judged only on the generator it was developed with.

For each image: errors of power, astigmatism and irregularity (fringes) of the full-aperture fit and of a
baseline that counts dark-fringe minima along the two meridians through the aperture centre (power = mean of
the half-counts, astigmatism = their difference; irregularity is not visible to it), whether |error| <= 2u
(expanded uncertainty coverage), and seconds per image.

Speed (``--speed``, also run by default after the accuracy sets; ``--quick`` runs a small accuracy set and the
speed part): a 1.3-megapixel frame (1280 x 1024, part 900 px across) and a five-frame set with unequal steps
and tilt changes are written as PNG files, then each case runs in a fresh process that loads them and
evaluates the form (wall and CPU seconds, peak resident memory). ``--code DIR`` runs the same cases against
another checkout of ringgauge (e.g. an earlier commit unpacked with ``git archive``) for before/after figures.
The machine may be shared: the CPU seconds are the steadier figure when other work is running.

Usage: python scripts/bench_form.py [--n 12] [--seed 1] [--size 384] [--speed] [--quick] [--code DIR]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy import ndimage, signal

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from ringgauge import synth  # noqa: E402
from ringgauge.bench_setup import default_setup  # noqa: E402
from ringgauge.errors import RinggaugeError  # noqa: E402
from ringgauge.form.evaluate import _disc_grid, evaluate_form, form_terms  # noqa: E402
from ringgauge.imaging import frame_from_array  # noqa: E402


def random_form(g: np.random.Generator) -> synth.SurfaceForm:
    power = float(np.exp(g.uniform(np.log(0.5), np.log(10.0))))
    if g.random() < 0.5:
        power = -power
    astig = float(g.uniform(0, 0.3 * abs(power) + 0.2)) if g.random() < 0.7 else 0.0
    zonal = float(g.uniform(-0.4, 0.4)) if g.random() < 0.6 else 0.0
    coma = float(g.uniform(-0.2, 0.2)) if g.random() < 0.3 else 0.0
    tilt = g.uniform(-0.6, 0.6, 2) * abs(power) if g.random() < 0.6 else np.zeros(2)
    f = synth.SurfaceForm(power=power, astig=astig, astig_axis_deg=float(g.uniform(0, 180)), zonal=zonal,
                          coma=coma, tilt_x=float(tilt[0]), tilt_y=float(tilt[1]), piston=0.0)
    # piston: the contact (smallest gap) at 0 to 0.4 fringe, as a part resting on the plate
    _, _, u, v = _disc_grid(1.0, 121)
    gmin = float(np.min(f.gap_fringes(u, v)))
    return synth.SurfaceForm(**{**f.__dict__, "piston": -gmin + float(g.uniform(0.0, 0.4))})


def truth_terms(form: synth.SurfaceForm) -> dict:
    _, _, u, v = _disc_grid(1.0, 201)
    return form_terms(form.gap_fringes(u, v), u, v)


def synth_image(form, g, size):
    pix = 20.0 / (0.85 * size) * 1e3  # µm per pixel: 20 mm part over 85 % of the frame
    cam = synth.Camera(width=size, height=size, pixel_um=pix, blur_px=float(g.uniform(0.5, 1.0)))
    off = g.uniform(-0.05, 0.05, 2) * size
    light = synth.Lighting(falloff=float(g.uniform(0.1, 0.4)), gradient=float(g.uniform(0, 0.3)),
                           gradient_angle_deg=float(g.uniform(0, 360)), stray=float(g.uniform(0.02, 0.1)))
    s = synth.test_plate_fringes(form, aperture_diameter_mm=20.0,
                                 aperture_centre_px=((size - 1) / 2 + off[0], (size - 1) / 2 + off[1]),
                                 camera=cam, lighting=light, dust=synth.Dust(count=int(g.integers(2, 9))), rng=g)
    return s.image, pix, s.truth["aperture_centre_px"], 10.0 / pix * 1e3


def independent_image(form, g, size):
    """Two-beam fringes, Gaussian beam, stray gradient, opaque dust and a scratch, blur, noise (8 bit)."""
    pix = 20.0 / (0.85 * size) * 1e3
    a = 10.0 / pix * 1e3  # aperture radius, px
    cx, cy = (size - 1) / 2 + g.uniform(-0.05, 0.05) * size, (size - 1) / 2 + g.uniform(-0.05, 0.05) * size
    yy, xx = np.mgrid[0:size, 0:size].astype(float)
    ss = 4  # sub-pixel sampling for the edge and fine fringes
    acc = np.zeros((size, size))
    cover = np.zeros((size, size))
    vis = float(g.uniform(0.75, 0.97))
    for dy in (np.arange(ss) + 0.5) / ss - 0.5:
        for dx in (np.arange(ss) + 0.5) / ss - 0.5:
            u, v = (xx + dx - cx) / a, (yy + dy - cy) / a
            ins = (u * u + v * v) <= 1.0
            W = form.gap_fringes(u, v)
            acc += ins * 0.5 * (1 - vis * np.cos(2 * np.pi * W))
            cover += ins
    fringe = acc / ss**2
    cover = cover / ss**2
    bx, by = cx + g.uniform(-0.3, 0.3) * a, cy + g.uniform(-0.3, 0.3) * a
    sig = a * g.uniform(1.0, 2.0)
    beam = np.exp(-((xx - bx) ** 2 + (yy - by) ** 2) / (2 * sig * sig))
    ang = g.uniform(0, 2 * np.pi)
    stray = 0.03 + 0.03 * ((xx - cx) * np.cos(ang) + (yy - cy) * np.sin(ang)) / size
    img = 0.8 * beam * (fringe + 0.05 * (1 - cover)) + stray
    for _ in range(int(g.integers(2, 7))):
        dx, dy, r = g.uniform(0, size), g.uniform(0, size), g.uniform(1.5, 5)
        img[(xx - dx) ** 2 + (yy - dy) ** 2 <= r * r] *= 0.15
    # a thin scratch: a bright line segment
    x0, y0 = g.uniform(0.3, 0.7, 2) * size
    t = np.linspace(0, 1, 200)
    ex, ey = x0 + 0.15 * size * t * np.cos(ang), y0 + 0.15 * size * t * np.sin(ang)
    img[np.clip(ey.astype(int), 0, size - 1), np.clip(ex.astype(int), 0, size - 1)] += 0.3
    img = ndimage.gaussian_filter(img, 0.8)
    img = img + g.normal(0, 0.008, img.shape)
    return np.clip(np.rint(img * 255), 0, 255).astype(np.uint8), pix, (cx, cy), a


def count_minima(image, centre, radius):
    """Shop-style ring counting: dark minima along the x and y diameters through the aperture centre."""
    img = image.astype(float)
    sm = ndimage.gaussian_filter(img, 1.5)
    counts = []
    for axis in (0, 1):
        t = np.linspace(-0.97, 0.97, int(2 * radius))
        xs = centre[0] + (t * radius if axis == 0 else 0 * t)
        ys = centre[1] + (t * radius if axis == 1 else 0 * t)
        prof = ndimage.map_coordinates(sm, [ys, xs], order=1)
        rng_ = np.percentile(prof, 95) - np.percentile(prof, 5)
        peaks, _ = signal.find_peaks(-prof, prominence=0.25 * rng_, distance=3)
        counts.append(len(peaks) / 2.0)
    nx, ny = counts
    return {"power": 0.5 * (nx + ny), "astig": abs(nx - ny)}


SPEED_CASES = (
    # (label, frames, aperture given by hand)
    ("one frame, 1.3 MP, aperture given", 1, True),
    ("one frame, 1.3 MP, aperture found", 1, False),
    ("five frames, 1.3 MP, aperture given", 5, True),
    ("five frames, 1.3 MP, aperture found", 5, False),
)
SPEED_CHILD = r"""
import json, sys, time
sys.path.insert(0, sys.argv[1])


def hwm():
    # peak resident memory of this process (VmHWM; ru_maxrss would carry the forking parent's peak)
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")


from ringgauge.bench_setup import default_setup
from ringgauge.form.evaluate import evaluate_form
from ringgauge.imaging import load_frame
paths, given = sys.argv[3:], sys.argv[2] == "1"
try:  # decoded as the tool decodes them (analyse_files: under one BLAS thread)
    from ringgauge.blas import one_thread
except ImportError:  # an older checkout (--code)
    import contextlib
    one_thread = contextlib.nullcontext
with one_thread():
    frames = [load_frame(p) for p in paths]
setup = default_setup(20.0, "mercury-e", pixel_size_u_um=0.02,
                      aperture_px=(639.5, 511.5, 450.0) if given else None)
base = hwm()
t0, c0 = time.perf_counter(), time.process_time()
r = evaluate_form(frames, setup)
out = {"wall": time.perf_counter() - t0, "cpu": time.process_time() - c0,
       "rss_mb": hwm(), "rss_before_mb": base,
       "power": r.terms["power_fringes"], "route": getattr(r, "route", "one-frame fit" if len(frames) == 1 else
                                                       "model fit (all frames)")}
print(json.dumps(out))
"""


def speed(code_dir: Path, log=print) -> list[dict]:
    """Time the form evaluation of a 1.3-megapixel frame and a five-frame set in fresh processes."""
    import json
    import subprocess
    import tempfile

    from ringgauge.imaging import save_png

    cam = synth.Camera(width=1280, height=1024, pixel_um=20.0, blur_px=0.8)
    form = synth.SurfaceForm(power=3.0, astig=0.5, astig_axis_deg=30, zonal=0.1, piston=0.3)
    steps = (0.0, 0.12, 0.27, 0.41, 0.58)
    tilts = ((0, 0), (0.03, -0.02), (0.05, 0.0), (0.01, 0.04), (-0.03, 0.02))
    rows = []
    with tempfile.TemporaryDirectory(prefix="rg-bench-form-") as tmp:
        paths = []
        for i, (st, (tx, ty)) in enumerate(zip(steps, tilts)):
            f = synth.SurfaceForm(**{**form.__dict__, "piston": form.piston + st, "tilt_x": tx, "tilt_y": ty})
            img = synth.test_plate_fringes(f, aperture_diameter_mm=18.0, camera=cam, rng=500 + i)
            pth = Path(tmp) / f"set-{i + 1}.png"
            save_png(pth, img.image01, bits=8)
            paths.append(str(pth))
        for label, n, given in SPEED_CASES:
            cmd = [sys.executable, "-c", SPEED_CHILD, str(code_dir), "1" if given else "0", *paths[:n]]
            pr = subprocess.run(cmd, capture_output=True, text=True)
            if pr.returncode:
                err = (pr.stderr.strip().splitlines() or ["?"])[-1]
                log(f"  {label:38s} failed: {err[:110]}")
                rows.append({"label": label, "failed": err})
                continue
            d = json.loads(pr.stdout.strip().splitlines()[-1])
            d["label"] = label
            rows.append(d)
            log(f"  {label:38s} {d['wall']:6.2f} s wall {d['cpu']:6.2f} s CPU  peak {d['rss_mb']:5.0f} MB "
                f"(after loading {d['rss_before_mb']:4.0f} MB)  power {d['power']:+.3f} fr  [{d['route']}]")
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--n", type=int, default=12, help="images per set (default 12, two sets)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--size", type=int, default=384, help="image side in pixels (default 384)")
    ap.add_argument("--speed", action="store_true", help="only the speed and memory part")
    ap.add_argument("--quick", action="store_true", help="a small accuracy set (3 per kind) and the speed part")
    ap.add_argument("--code", type=Path, default=Path(__file__).resolve().parents[1],
                    help="ringgauge checkout to time (default: this one)")
    args = ap.parse_args(argv)
    if args.speed:
        print(f"surface-form speed ({args.code}); targets: one frame <= 0.5 s and <= 300 MB, five frames <= 1.5 s")
        speed(args.code)
        return 0
    if args.quick:
        args.n = 3
    g = np.random.default_rng(args.seed)
    rows = []
    print(f"surface-form benchmark: {2 * args.n} images of {args.size}×{args.size} px (seed {args.seed})")
    print(f"{'set':12s} {'A true':>7s} {'astig':>6s} {'B true':>6s} | {'dA fit':>7s} {'dAst':>6s} {'dB':>6s} "
          f"{'2u ok':>5s} {'s':>5s} | {'dA cnt':>7s} {'dAst':>6s}")
    for kind in ("synth", "independent"):
        for _ in range(args.n):
            form = random_form(g)
            tt = truth_terms(form)
            maker = synth_image if kind == "synth" else independent_image
            img, pix, centre, radius = maker(form, g, args.size)
            setup = default_setup(pix, "mercury-e", pixel_size_u_um=0.001 * pix)
            t0 = time.perf_counter()
            try:
                r = evaluate_form([frame_from_array(img)], setup)
            except RinggaugeError as exc:
                print(f"{kind:12s} {abs(form.power):7.2f} failed: {exc}")
                rows.append({"kind": kind, "failed": True})
                continue
            dt = time.perf_counter() - t0
            e = {
                "power": r.terms["power_fringes"] - abs(tt["power_fringes"]),
                "astig": r.terms["astigmatism_fringes"] - tt["astigmatism_fringes"],
                "irr": r.terms["irregularity_fringes"] - tt["irregularity_fringes"],
            }
            u = {"power": r.terms_u["power_fringes"], "astig": r.terms_u["astigmatism_fringes"],
                 "irr": r.terms_u["irregularity_fringes"]}
            ok = sum(abs(e[k]) <= 2 * u[k] for k in e)
            c = count_minima(img, r.aperture.centre_px, r.aperture.radius_px)
            ec = {"power": c["power"] - abs(tt["power_fringes"]), "astig": c["astig"] - tt["astigmatism_fringes"]}
            rows.append({"kind": kind, "failed": False, "e": e, "ec": ec, "s": dt, "ok": ok})
            print(f"{kind:12s} {abs(tt['power_fringes']):7.2f} {tt['astigmatism_fringes']:6.2f} "
                  f"{tt['irregularity_fringes']:6.2f} | {e['power']:+7.3f} {e['astig']:+6.3f} {e['irr']:+6.3f} "
                  f"{ok:>3d}/3 {dt:5.1f} | {ec['power']:+7.2f} {ec['astig']:+6.2f}", flush=True)
    print()
    print("summary (fringes; RMS and largest |error|; targets: power 0.15 (aim 0.02), astigmatism 0.2 "
          "(aim 0.05), irregularity 0.1)")
    for kind in ("synth", "independent", "all"):
        ok_rows = [r for r in rows if not r["failed"] and (kind == "all" or r["kind"] == kind)]
        nfail = sum(1 for r in rows if r["failed"] and (kind == "all" or r["kind"] == kind))
        if not ok_rows:
            continue

        def stat(key, sub="e"):
            x = np.array([r[sub][key] for r in ok_rows])
            return float(np.sqrt(np.mean(x * x))), float(np.max(np.abs(x)))

        pf, pfm = stat("power")
        af, afm = stat("astig")
        irr, irm = stat("irr")
        pc, pcm = stat("power", "ec")
        ac, acm = stat("astig", "ec")
        cov = np.mean([r["ok"] / 3 for r in ok_rows])
        sec = np.mean([r["s"] for r in ok_rows])
        print(f"  {kind:12s} n={len(ok_rows):2d} failed={nfail}  fit: power {pf:.3f} (max {pfm:.3f}), astig "
              f"{af:.3f} (max {afm:.3f}), irregularity {irr:.3f} (max {irm:.3f}); |error| <= 2u in "
              f"{100 * cov:.0f} %; {sec:.1f} s/image")
        print(f"  {'':12s}        counting minima: power {pc:.3f} (max {pcm:.3f}), astig {ac:.3f} (max {acm:.3f}); "
              f"ratio counting/fit RMS: power {pc / max(pf, 1e-9):.0f}×, astig {ac / max(af, 1e-9):.0f}×")
    print()
    print(f"surface-form speed ({args.code}); targets: one frame <= 0.5 s and <= 300 MB, five frames <= 1.5 s")
    speed(args.code)
    return 0


if __name__ == "__main__":
    sys.exit(main())
