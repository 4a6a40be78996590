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

from .. import physics
from .result import Ring, RingFit
from ..rings.profile import SProfile


LOCAL_TERMS = ("harmonic",)


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
    a + b x + c cos(2 pi x) + d sin(2 pi x) + second harmonic, x = (s - s_m) / P, weighted by the pixel count of
    each bin; the ring lies where the fitted fundamental's phase says. The linear term keeps a sloping background
    from biasing the position. The standard uncertainty comes from the fit's covariance (azimuthal scatter of each
    bin divided by its count, scaled by the residual chi-square when larger). All windows are solved at once.
    """
    ds = prof.ds
    nb = len(prof.s)
    if nb == 0:
        return []
    # phase of the fundamental: I ~ A + M cos(2 pi s / P - phase0); dark where the cosine is -1
    # dark at 2 pi s/P - phase0 = pi (mod 2 pi) -> s = P (phase0 + pi)/(2 pi) + m P
    first_dark = period_s * ((phase0 + np.pi) / (2 * np.pi))
    m_lo = int(np.floor((s_min - first_dark) / period_s)) - 1
    m_hi = int(np.ceil((s_max - first_dark) / period_s)) + 1
    half = np.arange(m_lo, m_hi + 1, dtype=np.float64)
    cand = np.concatenate([first_dark + half * period_s, first_dark + (half + 0.5) * period_s])
    kinds = np.array(["dark"] * len(half) + ["bright"] * len(half))
    keep = (cand - 0.5 * period_s >= max(s_min, 0.0)) & (cand + 0.5 * period_s <= s_max)
    cand, kinds = cand[keep], kinds[keep]
    if len(cand) == 0:
        return []
    width = int(np.ceil(period_s / ds)) + 3
    start = np.floor((cand - 0.5 * period_s) / ds).astype(np.int64) - 1
    idx = start[:, None] + np.arange(width)[None, :]
    inside = (idx >= 0) & (idx < nb)
    idx_c = np.clip(idx, 0, nb - 1)
    sb = prof.s[idx_c]
    cnt = np.where(inside, prof.count[idx_c], 0.0)
    dsx = sb - cand[:, None]
    cnt = np.where(np.abs(dsx) <= 0.5 * period_s, cnt, 0.0)
    y = np.where(cnt > 0, prof.mean[idx_c], 0.0)
    var = np.where(cnt > 0, prof.var[idx_c], 1.0)
    x = dsx / period_s
    arg = 2 * np.pi * x
    ca, sa = np.cos(arg), np.sin(arg)
    cols = [np.ones_like(x), x, ca, sa]
    if "slope" in LOCAL_TERMS:
        cols += [x * ca, x * sa]
    if "harmonic" in LOCAL_TERMS:
        cols += [2 * ca * ca - 1, 2 * sa * ca]
    X = np.stack(cols, axis=2)  # (n, width, p)
    npar = X.shape[2]
    nbins = (cnt > 0).sum(axis=1)
    ok = nbins >= max(12, npar + 4)
    Xw = X * cnt[:, :, None]
    G = np.einsum("nwi,nwj->nij", Xw, X)
    G[:, np.arange(npar), np.arange(npar)] += 1e-12
    rhs = np.einsum("nwi,nw->ni", Xw, y)
    out: list[Extremum] = []
    try:
        coef = np.linalg.solve(G, rhs[:, :, None])[:, :, 0]
    except np.linalg.LinAlgError:
        return out
    res = y - np.einsum("nwi,ni->nw", X, coef)
    w_in = np.where(cnt > 0, cnt / np.maximum(var, 1e-12), 0.0)
    Gi = np.einsum("nwi,nw,nwj->nij", X, w_in, X)
    Gi[:, np.arange(npar), np.arange(npar)] += 1e-300
    chi2 = np.einsum("nw,nw,nw->n", res, res, w_in) / np.maximum(1, nbins - npar)
    a, c, d = coef[:, 0], coef[:, 2], coef[:, 3]
    amp = np.hypot(c, d)
    psi = np.arctan2(d, c)
    # fitted fundamental c cos(arg) + d sin(arg) = amp cos(arg - psi); dark: arg = psi + pi; bright: arg = psi
    target = np.where(kinds == "dark", psi + np.pi, psi)
    target = (target + np.pi) % (2 * np.pi) - np.pi
    shift = target / (2 * np.pi) * period_s
    # (a shift beyond 0.3 P means the extremum is not where the fringe pattern says: a doubtful ring, skipped)
    good = np.nonzero(ok & (amp > 0) & (np.abs(shift) <= 0.3 * period_s))[0]
    if len(good) == 0:
        return out
    try:
        cov = np.linalg.inv(Gi[good]) * np.maximum(1.0, chi2[good])[:, None, None]
    except np.linalg.LinAlgError:
        return out
    ag = amp[good]
    g2, g3 = -d[good] / ag**2, c[good] / ag**2  # d psi / d c, d psi / d d
    var_psi = g2 * g2 * cov[:, 2, 2] + 2 * g2 * g3 * cov[:, 2, 3] + g3 * g3 * cov[:, 3, 3]
    u_s = np.sqrt(np.maximum(var_psi, 0.0)) / (2 * np.pi) * period_s
    s_ext = cand[good] + shift[good]
    contrast = ag / np.maximum(np.abs(a[good]), 1e-9)
    wsum = cnt[good].sum(axis=1)
    for j, i in enumerate(good):
        out.append(
            Extremum(
                float(s_ext[j]), float(u_s[j]), str(kinds[i]), float((s_ext[j] - first_dark) / period_s),
                float(contrast[j]), int(wsum[j]),
            )
        )
    out.sort(key=lambda e: e.s)
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
    orders = physics.label_orders([e.order for e in rings], kind)
    r2 = np.array([e.s for e in rings]) * px_mm**2
    u = np.array([max(e.u_s, 1e-9) for e in rings]) * px_mm**2
    if radius_guess_mm and lam_mm_over_n:
        r2 = physics.sphere_r2_correction(r2, radius_guess_mm)
    w = 1.0 / u**2
    X = np.stack([orders, np.ones_like(orders)], axis=1)
    XtW = X.T * w
    cov0 = np.linalg.inv(XtW @ X)
    beta = cov0 @ (XtW @ r2)
    resid = r2 - X @ beta
    chisqr = float(np.sum(w * resid**2))
    dof = len(r2) - 2
    redchi = chisqr / dof if dof > 0 else np.nan
    # Covariance scaled by the reduced chi-square (as lmfit does) when there are enough rings to estimate the
    # scatter; with fewer than 5 degrees of freedom it is never scaled down.
    if dof >= 5:
        cov = cov0 * redchi
    elif dof > 0:
        cov = cov0 * max(1.0, redchi)
    else:
        cov = cov0
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
