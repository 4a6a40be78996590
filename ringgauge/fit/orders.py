"""Ring positions from the s-profile and the least-squares fit of r^2 against fringe order.

Newton's rings in reflection: dark rings at r_m^2 = m lambda R / n, bright rings at (m - 1/2) lambda R / n.
Dust or pressure at the contact shifts every order alike, so the fit is r^2 = slope * m + intercept: the slope
gives R = n * slope / lambda, the intercept absorbs the contact offset.

References
----------
Newton's rings laboratory procedure (difference method D^2_{m+p} - D^2_m = 4 p lambda R / n): e.g. the IIT Kanpur
and Amrita virtual-laboratory procedures.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..result import Ring, RingFit
from ..rings.profile import SProfile


@dataclass(frozen=True)
class Extremum:
    s: float  # px^2
    u_s: float  # px^2
    kind: str  # "dark" or "bright"
    order: float  # phase-based fringe order (dark: integer m; bright: m - 1/2)
    contrast: float  # local fringe amplitude / local mean
    window_count: int


def locate_extrema(prof: SProfile, period_s: float, phase0: float, *, s_min: float = 0.0, s_max: float) -> list[Extremum]:
    """Locate dark and bright rings in an s-profile by local sinusoid fits one period wide.

    Around each predicted extremum s_m (from the fringe period and phase) the profile is fitted with
    a + b (s - s_m) + c cos(2 pi (s - s_m) / P) + d sin(2 pi (s - s_m) / P), weighted by the pixel count of each
    bin; the extremum lies where the fitted sinusoid's phase says. The linear term keeps a sloping envelope from
    biasing the position. The standard uncertainty comes from the fit's covariance (azimuthal scatter of each bin
    divided by its count, scaled by the residual chi-square when larger).
    """
    good = prof.count > 0
    s_all = prof.s[good]
    y_all = prof.mean[good]
    n_all = prof.count[good]
    var_all = prof.var[good]
    out: list[Extremum] = []
    # phase of the fundamental: I ~ A + M cos(2 pi s / P - phase0); dark where the cosine is -1
    # dark at 2 pi s/P - phase0 = pi (mod 2 pi) -> s = P (phase0 + pi)/(2 pi) + m P
    first_dark = period_s * ((phase0 + np.pi) / (2 * np.pi))
    m_lo = int(np.floor((s_min - first_dark) / period_s)) - 1
    m_hi = int(np.ceil((s_max - first_dark) / period_s)) + 1
    for m in range(m_lo, m_hi + 1):
        for kind, off in (("dark", 0.0), ("bright", 0.5)):
            sc = first_dark + (m + off) * period_s
            lo, hi = sc - 0.5 * period_s, sc + 0.5 * period_s
            if lo < max(s_min, 0.0) or hi > s_max:
                continue
            sel = (s_all >= lo) & (s_all <= hi)
            if sel.sum() < 8:
                continue
            ds = s_all[sel] - sc
            y = y_all[sel]
            wts = n_all[sel]
            arg = 2 * np.pi * ds / period_s
            X = np.stack([np.ones_like(ds), ds / period_s, np.cos(arg), np.sin(arg)], axis=1)
            sw = np.sqrt(wts)
            coef, *_ = np.linalg.lstsq(X * sw[:, None], y * sw, rcond=None)
            a, b, c, d = coef
            amp = np.hypot(c, d)
            if amp <= 0:
                continue
            # fitted fundamental c cos(arg) + d sin(arg) = amp cos(arg - psi), psi = atan2(d, c)
            psi = np.arctan2(d, c)
            # dark: cos(arg - psi) = -1 -> arg = psi + pi ; bright: arg = psi
            target = psi + np.pi if kind == "dark" else psi
            target = (target + np.pi) % (2 * np.pi) - np.pi
            shift = target / (2 * np.pi) * period_s
            if abs(shift) > 0.3 * period_s:
                continue  # the extremum is not where the fringe pattern says: doubtful ring
            # uncertainty: per-bin variance of the mean = azimuthal var / count
            res = y - X @ coef
            w_in = wts / np.maximum(var_all[sel], 1e-12)
            XtWX = (X * w_in[:, None]).T @ X
            try:
                cov = np.linalg.inv(XtWX)
            except np.linalg.LinAlgError:
                continue
            chi2 = float(np.sum(res * res * w_in)) / max(1, len(y) - 4)
            cov *= max(1.0, chi2)
            # d(target)/d(c, d): psi = atan2(d, c) -> dpsi/dc = -d/amp^2, dpsi/dd = c/amp^2
            gvec = np.array([0, 0, -d / amp**2, c / amp**2])
            u_psi = float(np.sqrt(max(gvec @ cov @ gvec, 0.0)))
            u_s = u_psi / (2 * np.pi) * period_s
            order = (sc + shift - first_dark) / period_s  # relative order, ~ m or m + 1/2
            out.append(
                Extremum(float(sc + shift), u_s, kind, float(order), float(amp / max(abs(a), 1e-9)), int(wts.sum()))
            )
    return out


def fit_orders(
    extrema: list[Extremum],
    *,
    kind: str,
    px_mm: float,
    radius_guess_mm: float | None = None,
    lam_mm_over_n: float | None = None,
    min_contrast: float = 0.02,
) -> RingFit:
    """Weighted least squares of r^2 (mm^2) against fringe order for the rings of one kind.

    Orders are labelled from the fringe phase, so missing rings leave gaps instead of shifting the count. Dark
    ring orders are integers m, 1 for the first dark ring outside the contact; bright rings carry m - 1/2. When ``radius_guess_mm``
    and ``lam_mm_over_n`` are given, the exact sphere relation r^2 = 2 R t - t^2 is used (t = gap at the ring) by
    adding t^2 to r^2.
    """
    rings = [e for e in extrema if e.kind == kind and e.contrast >= min_contrast]
    rings.sort(key=lambda e: e.s)
    if len(rings) < 3:
        return RingFit(
            np.nan, np.nan, np.nan, np.nan, np.nan, None, np.nan, np.nan, len(rings), 2, (), np.nan, np.nan,
            "weighted least squares r^2 vs order", False, f"only {len(rings)} {kind} rings resolved; need at least 3",
        )
    # Phase-frame order 0 is the first dark ring outside the contact (first_dark_s lies in (0, P]), so dark
    # rings are labelled m = order + 1 (integers) and bright ones m - 1/2; the contact offset
    # -intercept / slope then lies in [0, 1) fringe (modulo whole fringes).
    orders = np.array([e.order for e in rings]) + 1.0
    orders = np.rint(orders) if kind == "dark" else np.rint(orders - 0.5) + 0.5
    r2 = np.array([e.s for e in rings]) * px_mm**2
    u = np.array([max(e.u_s, 1e-9) for e in rings]) * px_mm**2
    if radius_guess_mm and lam_mm_over_n:
        t = r2 / (2 * radius_guess_mm)
        r2 = r2 + t * t
    w = 1.0 / u**2
    X = np.stack([orders, np.ones_like(orders)], axis=1)
    XtW = X.T * w
    cov0 = np.linalg.inv(XtW @ X)
    beta = cov0 @ (XtW @ r2)
    resid = r2 - X @ beta
    chisqr = float(np.sum(w * resid**2))
    dof = len(r2) - 2
    redchi = chisqr / dof if dof > 0 else np.nan
    cov = cov0 * max(1.0, redchi) if dof > 0 else cov0
    slope, icpt = beta
    ring_objs = tuple(
        Ring(
            float(m), kind, float(np.sqrt(e.s)), float(np.sqrt(e.s) * px_mm), float(r2i), float(ui), float(ri), True
        )
        for m, e, r2i, ui, ri in zip(orders, rings, r2, u, resid)
    )
    return RingFit(
        float(slope), float(np.sqrt(cov[0, 0])), float(icpt), float(np.sqrt(cov[1, 1])),
        float(-icpt / slope),
        ((float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))),
        chisqr, float(redchi), len(r2), 2, ring_objs, float(np.sqrt(r2.min())), float(np.sqrt(r2.max())),
        "weighted least squares r^2 vs order", True, "",
    )
