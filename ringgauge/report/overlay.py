"""Figures for reports and certificates, drawn from a typed result (or its stored JSON, read back) with
matplotlib's Agg backend (no Qt).

They only draw what the analysis found: the image with the fitted rings and centre, and the fit of squared
ring radius against fringe order (or, for a test-plate analysis, the form terms with their uncertainties).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..form.result import FORM_TERMS
from ..presentation import typed_result

if TYPE_CHECKING:  # pragma: no cover
    from ..result import AnalysisResult

INK = "#1f4e79"
ACCENT = "#c55a11"
MAX_DISPLAY_PX = 900


def _figure(w_in: float, h_in: float, dpi: int = 150):
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    return Figure(figsize=(w_in, h_in), dpi=dpi)


def overlay_png(image01: np.ndarray, result: "AnalysisResult | dict", path: str | Path, *, title: str | None = None,
                fmt: str = "png") -> None:
    """The image (intensity in [0, 1], ``image[y, x]``) with the fitted rings, centre and aperture drawn on.

    ``fmt`` "jpeg" keeps documents small (camera noise compresses badly as PNG); the checksum of the original
    image, not this illustration, identifies the data."""
    from matplotlib.patches import Ellipse

    r = typed_result(result)
    img = np.asarray(image01, dtype=np.float32)
    H, W = img.shape
    step = max(1, int(math.ceil(max(H, W) / MAX_DISPLAY_PX)))
    shown = img[::step, ::step]
    aspect = H / W
    fig = _figure(5.0, max(2.5, 5.0 * aspect) + (0.35 if title else 0.0))
    ax = fig.add_axes((0.0, 0.0, 1.0, 0.93 if title else 1.0))
    ax.imshow(shown, cmap="gray", vmin=float(np.percentile(shown, 0.5)), vmax=float(np.percentile(shown, 99.5)),
              extent=(-0.5, W - 0.5, H - 0.5, -0.5), interpolation="antialiased")
    px, py = r.setup.pixel_size_xy_um
    yscale = px / py if py else 1.0  # ring radii are in x pixels; a round ring spans r * px / py rows
    lw = 0.8
    if r.centre_px is not None:
        cx, cy = r.centre_px
        for ring in () if r.fit is None else r.fit.rings:
            if not ring.radius_px:
                continue
            ax.add_patch(Ellipse((cx, cy), 2 * ring.radius_px, 2 * ring.radius_px * yscale, fill=False, lw=lw,
                                 ec="#00b050" if ring.used else ACCENT, ls="-" if ring.used else "--", alpha=0.9))
        size = 0.03 * max(W, H)
        ax.plot([cx - size, cx + size], [cy, cy], color="#ff3030", lw=1.0)
        ax.plot([cx, cx], [cy - size, cy + size], color="#ff3030", lw=1.0)
    form = r.form
    if form is not None and form.aperture.radius_px:
        (ax_, ay_), d = form.aperture.centre_px, 2 * form.aperture.radius_px
        ax.add_patch(Ellipse((ax_, ay_), d, d * yscale, fill=False, lw=1.0, ec="#00a0ff", ls="--"))
        td = form.test_diameter_mm or r.setup.test_diameter_mm
        if td and px:
            dpx = td / (px * 1e-3)
            ax.add_patch(Ellipse((ax_, ay_), dpx, dpx * yscale, fill=False, lw=1.0, ec="#ffd000", ls=":"))
    ax.set_xlim(-0.5, W - 0.5)
    ax.set_ylim(H - 0.5, -0.5)
    ax.set_axis_off()
    if title:
        fig.suptitle(title, fontsize=9, y=0.985)
    if fmt == "jpeg":
        fig.savefig(path, format="jpeg", pil_kwargs={"quality": 88})
    else:
        fig.savefig(path, format="png")


def fit_plot_png(result: "AnalysisResult | dict", path: str | Path) -> bool:
    """The fit behind the result; returns False (and draws nothing) when the result holds no fit to show."""
    r = typed_result(result)
    fit = r.fit
    rings = [] if fit is None else [x for x in fit.rings if x.r2_mm2 is not None and x.order is not None]
    if len(rings) >= 2 and fit.slope_mm2 is not None:
        _ring_fit(fit, rings, path)
        return True
    terms = _form_terms(r.form)
    if terms:
        _form_bars(terms, r.form.k, path)
        return True
    return False


def _ring_fit(fit, rings: list, path) -> None:
    fig = _figure(5.0, 3.6)
    top, bot = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 1.3]})
    m = np.array([r.order for r in rings], dtype=float)
    r2 = np.array([r.r2_mm2 for r in rings], dtype=float)
    used = np.array([bool(r.used) for r in rings])
    u = np.array([r.u_r2_mm2 or 0.0 for r in rings], dtype=float)
    slope = fit.slope_mm2
    icpt = fit.intercept_mm2 or 0.0
    mm = np.linspace(min(m.min(), 0.0), m.max() * 1.03, 50)
    top.plot(mm, slope * mm + icpt, color=ACCENT, lw=1.0, label="least-squares line")
    top.plot(m[used], r2[used], "o", ms=3, color=INK, label="rings used")
    if (~used).any():
        top.plot(m[~used], r2[~used], "x", color="#888888", label="rings left out")
    top.set_ylabel("r² / mm²")
    top.legend(fontsize=7, frameon=False)
    top.grid(alpha=0.3)
    res = np.array([r.residual_mm2 or 0.0 for r in rings], dtype=float) * 1e6
    bot.axhline(0, color="#555555", lw=0.8)
    bot.errorbar(m[used], res[used], yerr=u[used] * 1e6, fmt="o", ms=3, color=INK, elinewidth=0.6)
    if used.any():
        lim = 1.4 * float(np.max(np.abs(res[used]))) or 1.0
        bot.set_ylim(-lim, lim)  # a ring with a large u must not flatten the others' residuals
    bot.set_ylabel("residual / µm²", fontsize=8)
    bot.set_xlabel(f"fringe order m ({rings[0].kind or 'dark'} rings)")
    bot.grid(alpha=0.3)
    sign = "−" if icpt < 0 else "+"
    fig.suptitle(f"r² = {slope:.6g} mm² · m {sign} {abs(icpt):.4g} mm²", fontsize=8)
    fig.tight_layout()
    fig.savefig(path, format="png")


def _form_terms(form) -> list[tuple[str, float, float | None]]:
    """(short label, value, u) in fringes of each measured form term, in ``FORM_TERMS`` order."""
    if form is None:
        return []
    out = []
    for t in FORM_TERMS:
        try:
            q = form.term(t.name).fringes
        except KeyError:
            continue
        if math.isfinite(q.value):
            out.append((t.short, float(q.value), q.u))
    return out


def _form_bars(terms, k: float, path) -> None:
    fig = _figure(5.0, 3.0)
    ax = fig.add_subplot(1, 1, 1)
    y = np.arange(len(terms))[::-1]
    vals = [t[1] for t in terms]
    errs = [k * t[2] if t[2] is not None else 0.0 for t in terms]
    ax.barh(y, vals, xerr=errs, color=INK, alpha=0.8, capsize=3, height=0.55)
    ax.set_yticks(y, [t[0] for t in terms], fontsize=8)
    ax.axvline(0, color="#555555", lw=0.8)
    ax.set_xlabel(f"fringes (λ/2 of surface height), error bars U (k = {k:g})")
    ax.grid(alpha=0.3, axis="x")
    fig.tight_layout()
    fig.savefig(path, format="png")


def height_map_png(result: "AnalysisResult | dict", path: str | Path) -> bool:
    """The surface height map of a form result (nm, less piston and tilt) over the part, in mm from the
    aperture's centre (y down, as in the image); returns False when the result holds no map."""
    r = typed_result(result)
    form = r.form
    if form is None or form.height_map is None or form.height_map.extent_px is None:
        return False
    m = form.height_map.array()
    if not np.isfinite(m).any():
        return False
    px_mm, py_mm = (v * 1e-3 for v in form.pixel_size_um)
    cx, cy = form.aperture.centre_px
    x0, x1, y1, y0 = form.height_map.extent_px  # left, right, bottom (largest row), top
    extent = ((x0 - cx) * px_mm, (x1 - cx) * px_mm, (y1 - cy) * py_mm, (y0 - cy) * py_mm)
    lim = float(np.nanmax(np.abs(m))) or 1.0
    fig = _figure(4.2, 3.4)
    ax = fig.add_subplot(1, 1, 1)
    im = ax.imshow(m, extent=extent, cmap="RdBu_r", vmin=-lim, vmax=lim, interpolation="nearest")
    ax.set_aspect("equal")
    ax.set_xlabel("x / mm (columns)", fontsize=7)
    ax.set_ylabel("y / mm (rows, down)", fontsize=7)
    ax.tick_params(labelsize=6)
    pv = float(np.nanmax(m) - np.nanmin(m))
    sense = "" if form.height_map.sign_known else "; sign unknown: shown with power ≥ 0"
    ax.set_title(f"surface height less piston and tilt, PV {pv:.0f} nm{sense}", fontsize=7)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label("nm", fontsize=7)
    cb.ax.tick_params(labelsize=6)
    fig.tight_layout()
    fig.savefig(path, format="png")
    return True
