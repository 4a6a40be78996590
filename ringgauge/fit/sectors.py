"""Sector profiles: the ring fit repeated in angular sectors about the centre.

The scatter of the sector results measures what one azimuthally averaged profile hides: uneven illumination,
dust, a centre error on rings cut by the frame edge, elliptical rings (astigmatism, or unequal pixel scales).
It is used as the Type A uncertainty of the ring fit, and its cos 2θ part as a roundness check.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .orders import fit_orders, locate_extrema
from .result import Sectors


@dataclass(frozen=True)
class SectorScatter(Sectors):
    """The sector scatter as the engine uses it: what a result stores, and the Type A left after the rings'
    ellipticity (cos 2θ part) is allowed for."""

    u_mean_round_mm2: float = float("nan")  # like u_mean_slope_mm2, after removing the elliptical (cos 2θ) part


def sector_scatter(
    profiles, *, period_s, phase0, s_min, s_max, kind, px_mm, radius_guess_mm, lam_mm_over_n, angles=None,
) -> SectorScatter | None:
    """Fit r^2 against order in each sector profile (from :func:`s_profiles_by_label`) and summarise the scatter."""
    n_sectors = len(profiles)
    slopes, mids, counts = [], [], []
    for k, prof in enumerate(profiles):
        if prof.count.sum() < 500:
            continue
        ext = locate_extrema(prof, period_s, phase0, s_min=s_min, s_max=s_max)
        fit = fit_orders(ext, kind=kind, px_mm=px_mm, radius_guess_mm=radius_guess_mm, lam_mm_over_n=lam_mm_over_n)
        if not fit.success or fit.ndata < 4:
            continue
        slopes.append(fit.slope_mm2)
        mids.append((k + 0.5) / n_sectors * 2 * np.pi - np.pi if angles is None else float(angles[k]))
        counts.append(fit.ndata)
    if len(slopes) < 4:
        return None
    sl = np.array(slopes)
    an = np.array(mids)
    n = len(sl)
    u_mean = float(np.std(sl, ddof=1) / np.sqrt(n))
    # roundness: slope(θ) = a + b cos 2θ + c sin 2θ
    X = np.stack([np.ones(n), np.cos(2 * an), np.sin(2 * an)], axis=1)
    coef, *_ = np.linalg.lstsq(X, sl, rcond=None)
    res = sl - X @ coef
    dof = n - 3
    if dof > 0:
        s2 = float(res @ res / dof)
        cov = np.linalg.inv(X.T @ X) * s2
        amp = float(np.hypot(coef[1], coef[2]))
        u_amp = float(np.sqrt(max(cov[1, 1], cov[2, 2])))
        u_round = float(np.sqrt(s2 / n))
    else:
        amp, u_amp = float(np.hypot(coef[1], coef[2])), float("nan")
        u_round = u_mean
    ell = amp / coef[0]
    axis = float(np.degrees(0.5 * np.arctan2(coef[2], coef[1])))
    return SectorScatter(
        n, tuple(float(np.degrees(a)) for a in an), tuple(float(v) for v in sl), tuple(counts), u_mean, n - 1,
        float(ell), float(u_amp / coef[0]), axis, u_round,
    )
