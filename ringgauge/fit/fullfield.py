"""Joint least-squares fit of a ring model to the pixels of a Newton's-rings image.

    I(x, y) = A(x, y) + M(x, y) cos(phi) + D cos(2 phi) + E sin(2 phi)
    phi = q * s_eff + phi0,   s = (x - x0)^2 + (aspect (y - y0))^2

A and M are low-order polynomials over the field (uneven illumination, stray light, fading contrast); M is real,
so the fringe phase is fixed by (x0, y0, q, phi0) alone; the second harmonic absorbs the Airy (multiple-beam)
shape. ``s_eff`` applies the exact sphere sagitta
t = R - sqrt(R^2 - r^2) instead of r^2 / 2R when the wavelength is known. The linear parameters are
eliminated by variable projection, so the non-linear search is over (x0, y0, q, phi0) only.

References
----------
B. An et al., fitting of Newton's rings for radius measurement, J. Eur. Opt. Soc.-Rapid Publ. 12:17 (2016).
G. H. Golub and V. Pereyra, "Separable nonlinear least squares: the variable projection method and its
applications", Inverse Problems 19, R1-R26 (2003).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, cho_solve
from scipy.optimize import least_squares


@dataclass(frozen=True)
class FullFieldFit:
    x0: float
    y0: float
    q: float  # rad per px^2 (phase per squared radius)
    cov: np.ndarray  # 3x3 covariance of (x0, y0, q), scaled by the residual variance
    sigma: float  # rms residual, intensity units
    modulation: float  # median |B + iC| over the sample, intensity units
    background: float  # median A
    phase0: float  # phase at s = 0 of the fundamental (dark rings at phi + phase0 = 2 pi m)
    npix: int
    r_max: float
    success: bool
    message: str

    @property
    def period_s(self) -> float:
        return 2 * np.pi / self.q


def _envelope_basis(u: np.ndarray, v: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Smooth field terms (illumination: quadratic in x, y) and fringe-contrast terms in s about the ring centre
    (blur, source band width: contrast falls with fringe order)."""
    return np.stack([np.ones_like(u), u, v, u * u, u * v, v * v, w * w, w * w * w], axis=1)


class _Model:
    """Variable-projection residual and Jacobian (Kaufman's approximation) for the ring model.

    Non-linear parameters p = (x0, y0, q, phi0). The fringe contrast M(x, y) is real: the fringe phase is
    q * s_eff + phi0 everywhere, so no envelope term can absorb a change of centre or of q.
    """

    def __init__(self, xs, ys, vals, aspect, lam_px_over_n, scale, centre):
        self.xs = xs
        self.ys = ys
        self.vals = vals
        self.aspect = aspect
        self.lam = lam_px_over_n
        self.scale = scale
        self.xc = float(np.mean(xs))
        self.yc = float(np.mean(ys))
        u = (xs - self.xc) / scale
        v = (ys - self.yc) * aspect / scale
        w = ((xs - centre[0]) ** 2 + (aspect * (ys - centre[1])) ** 2) / scale**2
        self.env = _envelope_basis(u, v, w)
        self.k = self.env.shape[1]
        self.coef = None
        self._key = None
        self._X = None

    def phase(self, p):
        x0, y0, q, phi0 = p
        s = (self.xs - x0) ** 2 + (self.aspect * (self.ys - y0)) ** 2
        if self.lam is not None and q > 0:
            R = 2 * np.pi / (self.lam * q)
            s = s * 2 * R / (R + np.sqrt(np.maximum(R * R - s, 0.0)))
        return q * s + phi0, s

    def _solve(self, p):
        key = tuple(p)
        if self._key == key:
            return
        ph, seff = self.phase(p)
        c = np.cos(ph)
        sn = np.sin(ph)
        e = self.env
        k = self.k
        X = self._X if self._X is not None else np.empty((e.shape[0], 2 * k + 2))
        X[:, :k] = e
        np.multiply(e, c[:, None], out=X[:, k : 2 * k])
        X[:, 2 * k] = 2 * c * c - 1
        X[:, 2 * k + 1] = 2 * sn * c
        self._X = X
        G = X.T @ X
        G[np.diag_indices_from(G)] *= 1 + 1e-12
        self._cho = cho_factor(G)
        coef = cho_solve(self._cho, X.T @ self.vals)
        self.X, self.coef, self.c, self.sn, self.seff, self._key = X, coef, c, sn, seff, key

    def residual(self, p):
        self._solve(p)
        return self.X @ self.coef - self.vals

    def contrast(self):
        return self.env @ self.coef[self.k : 2 * self.k]

    def jac(self, p):
        self._solve(p)
        k, coef, c, sn = self.k, self.coef, self.c, self.sn
        M = self.env @ coef[k : 2 * k]
        # d/dphase of M cos(ph) + D cos(2 ph) + E sin(2 ph)
        s2 = 2 * sn * c
        c2 = 2 * c * c - 1
        dI = -M * sn - 2 * coef[2 * k] * s2 + 2 * coef[2 * k + 1] * c2
        x0, y0, q, _ = p
        cols = np.stack(
            [dI * q * -2 * (self.xs - x0), dI * q * -2 * self.aspect**2 * (self.ys - y0), dI * self.seff, dI],
            axis=1,
        )
        # project out what the linear parameters can absorb
        cols -= self.X @ cho_solve(self._cho, self.X.T @ cols)
        return cols


def _start_phase(xs, ys, vals, p3, aspect):
    """Phase offset phi0 from a linear fit with free cosine and sine amplitudes (constant over the field)."""
    x0, y0, q = p3
    ph = q * ((xs - x0) ** 2 + (aspect * (ys - y0)) ** 2)
    X = np.stack([np.ones_like(ph), np.cos(ph), np.sin(ph)], axis=1)
    coef, *_ = np.linalg.lstsq(X, vals, rcond=None)
    # B cos + C sin = M cos(ph + phi0) with M = hypot(B, C), phi0 = atan2(-C, B)
    return float(np.arctan2(-coef[2], coef[1]))


def fit_full_field(
    data: np.ndarray,
    centre: tuple[float, float],
    period_s: float,
    *,
    aspect: float = 1.0,
    lam_px_over_n: float | None = None,
    r_max: float,
    valid: np.ndarray | None = None,
    n_pixels: int = 30000,
    rng=0,
    stages: tuple[float, ...] = (12.0, 6.0),
    min_period_px: float = 3.0,
) -> FullFieldFit:
    """Fit the ring model by variable projection, growing the fitted disc in stages.

    Parameters
    ----------
    data : (H, W) array
        Intensity.
    centre : (x, y)
        Starting centre in pixels (x = column, y = row).
    period_s : float
        Starting fringe period in s = r^2, px^2 per fringe.
    r_max : float
        Largest radius (px) to use: beyond it the fringes are under-sampled.
    valid : (H, W) bool array, optional
        Pixels that may be used (not saturated, not masked).
    stages : tuple of float
        Fringe periods in pixels at the edge of each intermediate disc (coarse to fine).
    """
    g = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    h, w = data.shape
    p = np.array([centre[0], centre[1], 2 * np.pi / period_s, 0.0], dtype=np.float64)
    # intermediate discs hold at least 4 fringes: with fewer, the field terms can trade places with the period
    r_min_stage = np.sqrt(4.0 * period_s)
    radii = [max(r_min_stage, period_s / (2 * st)) for st in stages]
    radii = [r for r in radii if r < 0.9 * r_max] + [r_max]
    # candidate pixels: a random sample inside the largest disc
    n_all = h * w
    take = min(n_all, max(4 * n_pixels, 200000))
    # a random sample of pixels (with replacement: drawing without it permutes the whole frame; the few repeats
    # are harmless)
    flat = g.integers(0, n_all, size=take) if take < n_all else np.arange(n_all)
    ys_all = (flat // w).astype(np.float64)
    xs_all = (flat % w).astype(np.float64)
    vals_all = data.reshape(-1)[flat].astype(np.float64)
    ok_all = np.ones(len(flat), dtype=bool) if valid is None else valid.reshape(-1)[flat]
    res = None
    model = None
    for stage, rad in enumerate(radii):
        s = (xs_all - p[0]) ** 2 + (aspect * (ys_all - p[1])) ** 2
        sel = ok_all & (s <= rad * rad)
        idx = np.nonzero(sel)[0]
        if len(idx) < 200:
            continue
        npx = n_pixels if stage == len(radii) - 1 else n_pixels // 2
        if len(idx) > npx:
            idx = idx[g.choice(len(idx), npx, replace=False)]
        model = _Model(xs_all[idx], ys_all[idx], vals_all[idx], aspect, lam_px_over_n, max(rad, 10.0), p[:2])
        if stage == 0:
            # the period guess may be off by a fraction of a fringe over the range: scan it
            nf = rad * rad / period_s
            best = None
            span = min(0.6 / max(nf, 1.0), 0.03)  # the spectral period estimate is good to a few per cent
            for j in np.linspace(-1.0, 1.0, 9):
                pq = p.copy()
                pq[2] = p[2] * (1 + j * span)
                pq[3] = _start_phase(model.xs, model.ys, model.vals, pq[:3], aspect)
                cost = float(np.sum(model.residual(pq) ** 2))
                if best is None or cost < best[0]:
                    best = (cost, pq)
            p = best[1]
        scales = np.array([1.0, 1.0, p[2] / max(1.0, rad * rad / period_s * 2 * np.pi) + 1e-12, 1.0])
        res = least_squares(
            model.residual, p, jac=model.jac, method="lm", x_scale=scales, xtol=1e-8, ftol=1e-9, max_nfev=100
        )
        p = res.x
        if stage == len(radii) - 1:
            # one round of outlier rejection (dust, scratches, glints) on the final disc
            r = res.fun
            sig = 1.4826 * np.median(np.abs(r - np.median(r)))
            keep = np.abs(r) < 4.5 * max(sig, 1e-9)
            if keep.mean() < 0.995:
                model = _Model(
                    model.xs[keep], model.ys[keep], model.vals[keep], aspect, lam_px_over_n, model.scale, p[:2]
                )
                res = least_squares(
                    model.residual, p, jac=model.jac, method="lm", x_scale=scales, xtol=1e-8, ftol=1e-9,
                    max_nfev=100,
                )
                p = res.x
    if res is None or model is None:
        raise ValueError("too few usable pixels for the ring fit")
    r = model.residual(p)
    n = len(r)
    dof = max(1, n - 4 - model.X.shape[1])
    sigma2 = float(np.sum(r * r) / dof)
    J = res.jac
    try:
        cov = np.linalg.inv(J.T @ J) * sigma2
    except np.linalg.LinAlgError:
        cov = np.full((4, 4), np.nan)
    M = model.contrast()
    A = model.env @ model.coef[: model.k]
    # I = A + M cos(q s + phi0): with M > 0 dark rings lie where q s + phi0 = pi (mod 2 pi); report the phase
    # as that of +cos so that dark rings are at q s - phase0 = pi, whichever sign M took
    phi0 = float(p[3]) if np.median(M) >= 0 else float(p[3]) + np.pi
    phase0 = float(np.angle(np.exp(-1j * phi0)))
    return FullFieldFit(
        float(p[0]), float(p[1]), float(p[2]), cov[:3, :3], float(np.sqrt(sigma2)), float(np.median(np.abs(M))),
        float(np.median(A)), phase0, n, float(radii[-1]), bool(res.success), str(res.message),
    )
