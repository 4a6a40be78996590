"""Pixel scale from periodic targets: line scales (stage micrometers), line gratings, crossed grids, dot grids.

Method
------
1. Flat-field: divide the image by a wide Gaussian-smoothed copy of itself, so uneven light and vignetting
   drop out (they are multiplicative).
2. Find the pattern's fundamental spatial frequency vector(s) f = (f_x, f_y) in cycles per pixel as the
   strongest peak(s) of the Hann-windowed, zero-padded 2-D FFT, interpolated between bins. A peak whose
   half or third also carries strong power is a harmonic and is replaced by that fundamental. For a crossed
   grid or a dot grid the second direction is the strongest peak near the first turned by 90° with about the
   same period; when half their sum and difference also carry power (a dot grid's diagonals), those are taken.
3. Refine f by non-linear least squares of a periodic model -- a constant, a plane, and cosines and sines of
   the fundamental and its harmonics (plus a grid's cross terms) -- over a seeded random subset of the pixels
   where the pattern is present (a regular sub-grid would alias harmonics onto the fundamental). Only terms
   below 0.45 cycles/px along x and y are modelled: higher ones fold onto lower ones on the pixel grid. The
   model is linear in its amplitudes, so only f is iterated (variable projection, Golub & Pereyra 1973;
   Kaufman's Jacobian); pixels with outlying residuals (dust, damaged lines) are dropped and the fit repeated.
4. Covariance of f: the larger of the Gauss-Newton covariance scaled by the residual variance and the
   heteroscedasticity-consistent (sandwich) one, times an AR(1) factor for the residuals' neighbour
   correlation, since neighbouring pixels are not independent.
5. Systematic terms, each rectangular: uneven light seen through the blur (bounded from the measured light
   curvature and the harmonics, see :func:`light_blur_bound`) and the scale's variation across the field
   (fits on halves of the pattern, see :func:`field_term`).

Geometry
--------
A line pattern of pitch P (µm) whose normal points along the unit vector n on the part images to the
frequency f = Aᵀ n / P, where A maps pixel steps to µm. With the metric G = AᵀA:

- one line set, x and y assumed equal: s = P |f|;
- a square grid (two perpendicular line sets of the same pitch): G = P² (f1 f1ᵀ + f2 f2ᵀ), whatever the
  grid's rotation;
- one line scale photographed twice, turned between shots (pixel axes assumed perpendicular, G diagonal):
  f_ix² / G_xx + f_iy² / G_yy = 1 / P² for i = 1, 2 -- two linear equations in 1/G_xx and 1/G_yy.

References
----------
G. H. Golub, V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least squares problems whose
variables separate", SIAM J. Numer. Anal. 10 (1973) 413-432.
D. C. Rife, R. R. Boorstyn, "Single-tone parameter estimation from discrete-time observations", IEEE Trans.
Inf. Theory 20 (1974) 591-598 (FFT peak then refinement of a tone's frequency).
JCGM 100:2008 (GUM) for the uncertainty.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import fft as sfft
from scipy import ndimage

from ..errors import CalibrationError, InputError
from ..imaging import Frame, frame_from_array
from .result import ScaleCalibration, assemble

#: finest period accepted, pixels (below ~2.5 px the pattern is at the camera's sampling limit)
MIN_PERIOD_PX = 2.5
#: fewest periods across the image that give a trustworthy period
MIN_PERIODS = 6
#: peak-to-background ratio of the FFT below which no line pattern is declared
MIN_PEAK_RATIO = 12.0
#: share of the flat-fielded image's variance the periodic model must explain
MIN_EXPLAINED = 0.2
#: points used by the least-squares refinement (a regular sub-grid of the pattern area)
MAX_FIT_POINTS = 40_000
#: residuals beyond this many robust standard deviations are left out (dust, damaged lines)
REJECT_K = 4.0
#: cross terms a phase_1 + b phase_2 of a grid's model (a grid of opaque lines is a product of two line sets)
MIXED_ORDERS = ((1, 1), (1, -1), (2, 1), (2, -1), (1, 2), (1, -2), (2, 2), (2, -2))
#: cross terms of a dot grid's model
DOT_ORDERS = tuple((a, b) for a in (1, 2, 3) for b in (-3, -2, -1, 1, 2, 3))
#: where a square grid's second line set is looked for: f1 turned by 90° within these tolerances
GRID_ANGLE_TOL_DEG = 15.0
GRID_PERIOD_TOL = 0.2
GRID_MIN_RELATIVE = 0.3


def _as_frame(image) -> Frame:
    if isinstance(image, Frame):
        return image
    return frame_from_array(np.asarray(image))


def _image_info(frame: Frame) -> dict:
    h, w = frame.shape
    return {"path": frame.path, "sha256": frame.sha256, "width": int(w), "height": int(h)}


def _smooth(data: np.ndarray, sigma: float) -> np.ndarray:
    """Gaussian-like low-pass of width ``sigma`` px: three box filters of width 2 sigma (fast for wide sigma)."""
    w = max(3, int(round(2 * sigma)) | 1)
    out = data
    for _ in range(3):
        out = ndimage.uniform_filter(out, w, mode="reflect")
    return out


def _flat_field(data: np.ndarray, sigma: float) -> np.ndarray:
    bg = _smooth(data, sigma)
    floor = max(1e-3, 0.02 * float(np.percentile(bg, 99)))
    return data / np.maximum(bg, floor) - 1.0


# ----------------------------------------------------------------------------------------------- FFT peaks


class _Spectrum:
    def __init__(self, z: np.ndarray):
        H, W = z.shape
        self.shape = (H, W)
        win = np.outer(np.hanning(H), np.hanning(W))
        zz = (z - z.mean()) * win
        self.ny = sfft.next_fast_len(min(2 * H, 4096))
        self.nx = sfft.next_fast_len(min(2 * W, 4096))
        F = sfft.rfft2(zz, s=(self.ny, self.nx), workers=1)
        self.mag = np.abs(F)
        self.fy = sfft.fftfreq(self.ny)[:, None]
        self.fx = sfft.rfftfreq(self.nx)[None, :]
        self.fr = np.hypot(self.fx, self.fy)
        fmin = max(MIN_PERIODS / min(H, W), 3.0 / min(H, W))
        self.valid = (self.fr >= fmin) & (self.fr <= 1.0 / MIN_PERIOD_PX)

    def peak(self, extra_mask=None):
        m = self.valid if extra_mask is None else (self.valid & extra_mask)
        if not m.any():
            return None
        masked = np.where(m, self.mag, 0.0)
        iy, ix = np.unravel_index(int(np.argmax(masked)), masked.shape)
        return self._refine(iy, ix)

    def _refine(self, iy: int, ix: int):
        """Sub-bin peak position by a parabola through the log-magnitudes of the neighbours."""
        def lm(y, x):
            return math.log(float(self.mag[y, x]) + 1e-30)

        def par(a, b, c):
            den = a - 2 * b + c
            return 0.0 if den >= 0 else 0.5 * (a - c) / den

        ny, nx = self.mag.shape
        dy = par(lm((iy - 1) % ny, ix), lm(iy, ix), lm((iy + 1) % ny, ix))
        dx = par(lm(iy, ix - 1), lm(iy, ix), lm(iy, ix + 1)) if 0 < ix < nx - 1 else 0.0
        fy = float(self.fy[iy, 0]) + dy / self.ny
        fx = float(self.fx[0, ix]) + dx / self.nx
        return np.array([fx, fy]), float(self.mag[iy, ix])

    def value_near(self, f, radius_bins: float = 2.0) -> float:
        """Largest magnitude within ``radius_bins`` of the frequency f (either sign)."""
        fx, fy = f
        if fx < 0:
            fx, fy = -fx, -fy
        best = 0.0
        rb = int(math.ceil(radius_bins))
        ix0, iy0 = int(round(fx * self.nx)), int(round(fy * self.ny))
        for iy in range(iy0 - rb, iy0 + rb + 1):
            for ix in range(max(0, ix0 - rb), min(self.mag.shape[1] - 1, ix0 + rb) + 1):
                if math.hypot(ix - fx * self.nx, iy - fy * self.ny) <= radius_bins:
                    best = max(best, float(self.mag[iy % self.ny, ix]))
        return best

    def background(self, f) -> float:
        """Median magnitude over the annulus 0.5 |f| .. 1.5 |f|: the noise floor near the peak."""
        r = math.hypot(*f)
        ring = self.valid & (self.fr > 0.5 * r) & (self.fr < 1.5 * r)
        return float(np.median(self.mag[ring])) if ring.any() else float(np.median(self.mag[self.valid]))

    def window_mask(self, f, angle_tol_deg: float, rel_radius_tol: float):
        """True within ``angle_tol_deg`` of the direction of f (either sign) and within a relative radius
        tolerance of |f|."""
        ang = np.degrees(np.arctan2(self.fy, self.fx))
        a0 = math.degrees(math.atan2(f[1], f[0]))
        dd = np.abs(((ang - a0) + 90.0) % 180.0 - 90.0)
        r = math.hypot(*f)
        return (dd <= angle_tol_deg) & (self.fr >= r * (1 - rel_radius_tol)) & (self.fr <= r * (1 + rel_radius_tol))


def _fundamental(spec: _Spectrum, f, amp):
    """Replace a harmonic by its fundamental when f/2 or f/3 carries comparable power."""
    for n in (3, 2):
        g = f / n
        if math.hypot(*g) * min(spec.shape) < MIN_PERIODS:
            continue
        if spec.value_near(g) >= 0.35 * amp:
            gc = _canon(g)
            mask = np.hypot((spec.fx - gc[0]) * spec.nx, (spec.fy - gc[1]) * spec.ny) <= 2.5
            pk = spec.peak(mask)
            if pk is not None:
                return pk
    return f, amp


def _canon(f) -> np.ndarray:
    f = np.asarray(f, dtype=np.float64)
    if f[0] < 0 or (f[0] == 0 and f[1] < 0):
        f = -f
    return f


def find_frequencies(data: np.ndarray, kind: str = "auto"):
    """Fundamental frequency vector(s) of a periodic target from its FFT, cycles per pixel.

    Returns a list of one (lines) or two (grid) (2,) arrays and a dict of what the spectrum showed. Raises
    CalibrationError when the image shows no periodic pattern.
    """
    spec = _Spectrum(data)
    pk = spec.peak()
    if pk is None:
        raise CalibrationError("the image is too small to hold a line pattern; use the full camera frame")
    f1, a1 = pk
    bg1 = spec.background(f1)
    ratio1 = a1 / max(bg1, 1e-30)
    if ratio1 < MIN_PEAK_RATIO:
        raise CalibrationError(
            f"no line pattern found (strongest spatial frequency only {ratio1:.1f}x the background); "
            "check that the scale is in focus, lit, and fills a good part of the frame"
        )
    f1, a1 = _fundamental(spec, f1, a1)
    info = {"peak_ratio": [ratio1]}
    if kind == "lines":
        return [_canon(f1)], info
    # A square grid's second line set lies near f1 turned by 90° with about the same period (pixels that are
    # not square or not perpendicular move it by a few per cent at most). Looking only there keeps the ends of
    # a line scale's strip and its longer 5th / 10th marks from passing for a second line set.
    f2 = None
    pk2 = spec.peak(spec.window_mask(np.array([-f1[1], f1[0]]), GRID_ANGLE_TOL_DEG, GRID_PERIOD_TOL))
    if pk2 is not None:
        f2c, a2 = pk2
        ratio2 = a2 / max(spec.background(f2c), 1e-30)
        info["second_peak_ratio"] = ratio2
        info["second_peak_relative"] = a2 / a1
        # a grid's two line sets are alike, so their peaks are of similar height; a line scale's base line or
        # numerals put a ridge, not a comparable peak, across the first direction
        if ratio2 >= MIN_PEAK_RATIO and a2 >= GRID_MIN_RELATIVE * a1:
            f2 = f2c
    if f2 is None:
        if kind == "grid":
            raise CalibrationError(
                "only one set of lines found, but a crossed grid was expected; for a line scale use --target lines"
            )
        return [_canon(f1)], info
    # a dot grid's diagonal can outshine its rows: when half the sum and half the difference also carry power,
    # those are the grid's fundamentals
    h1, h2 = (f1 + f2) / 2, (f1 - f2) / 2
    weakest = min(a1, a2)
    if spec.value_near(h1) >= 0.35 * weakest and spec.value_near(h2) >= 0.35 * weakest:
        found = [spec.peak(spec.window_mask(h, 5.0, 0.05)) for h in (h1, h2)]
        if all(pk is not None for pk in found):
            (f1, a1), (f2, a2) = found
            info["diagonal_replaced"] = True
    info["peak_ratio"].append(a2 / max(spec.background(f2), 1e-30))
    return [_canon(f1), _canon(f2)], info


# ------------------------------------------------------------------------------------- least-squares refinement


#: highest frequency (cycles/px, along x or y) a model term may have: above ~0.5 a harmonic is aliased by the
#: pixel grid and can fall onto (or next to) a lower one, which makes the fit singular
NYQUIST_MARGIN = 0.45


def model_terms(f0, harmonics: int, mixed: bool, mixed_orders=None) -> tuple[tuple[int, ...], ...]:
    """Integer combinations c of the directions (frequency = sum c_j f_j) that the periodic model carries.

    First each direction's harmonics 1..``harmonics`` (in that order, so harmonic h of direction j is found by
    :func:`_term_index`), then for a grid the cross terms of :data:`MIXED_ORDERS`; a term whose frequency
    reaches :data:`NYQUIST_MARGIN` along x or y is left out.
    """
    f0 = [np.asarray(f, dtype=np.float64) for f in f0]
    ndir = len(f0)
    cand = []
    for j in range(ndir):
        for h in range(1, harmonics + 1):
            c = [0] * ndir
            c[j] = h
            cand.append(tuple(c))
    if ndir == 2 and mixed:
        cand += [tuple(ab) for ab in (MIXED_ORDERS if mixed_orders is None else mixed_orders)]
    out = []
    for c in cand:
        fr = sum(ci * fj for ci, fj in zip(c, f0))
        if max(abs(fr[0]), abs(fr[1])) < NYQUIST_MARGIN:
            out.append(c)
    return tuple(out)


def _term_index(terms, j: int, h: int):
    c = [0] * len(terms[0]) if terms else []
    if not c:
        return None
    c[j] = h
    c = tuple(c)
    return terms.index(c) if c in terms else None


class _Model:
    """Periodic model over a set of points; linear in the amplitudes, iterated over the frequencies.

    Columns: 1, x, y, then cos and sin of each term's phase sum_j c_j phase_j (see :func:`model_terms`).
    """

    def __init__(self, xs, ys, z, terms, ndir: int):
        self.xs, self.ys, self.z = xs, ys, z
        self.terms, self.ndir = terms, ndir
        self.scale = max(float(np.abs(xs).max()), float(np.abs(ys).max()), 1.0)

    def _phases(self, theta):
        f = np.asarray(theta).reshape(self.ndir, 2)
        return [2 * np.pi * (f[j, 0] * self.xs + f[j, 1] * self.ys) for j in range(self.ndir)]

    def design(self, theta):
        ph = self._phases(theta)
        A = np.empty((self.xs.size, self.nlin()))
        A[:, 0] = 1.0
        A[:, 1] = self.xs / self.scale
        A[:, 2] = self.ys / self.scale
        for t, c in enumerate(self.terms):
            q = sum(ci * p for ci, p in zip(c, ph) if ci)
            A[:, 3 + 2 * t], A[:, 4 + 2 * t] = np.cos(q), np.sin(q)
        return A

    def nlin(self) -> int:
        return 3 + 2 * len(self.terms)

    def solve(self, theta):
        """Amplitudes by linear least squares (normal equations: the columns are nearly orthogonal)."""
        A = self.design(theta)
        M = A.T @ A
        coef = np.linalg.solve(M, A.T @ self.z)
        return self.z - A @ coef, coef, A, M

    def residual(self, theta):
        return self.solve(theta)[0]

    def jacobian(self, theta, coef, A, M):
        """Jacobian of the projected residual, Kaufman's form: -(I - A (AᵀA)⁻¹ Aᵀ) dA/dtheta coef."""
        slope = [np.zeros_like(self.xs) for _ in range(self.ndir)]
        for t, c in enumerate(self.terms):
            k = 3 + 2 * t
            # d/dphase of a cos(phase) + b sin(phase), phase = sum_j c_j phase_j
            d = -coef[k] * A[:, k + 1] + coef[k + 1] * A[:, k]
            for j, cj in enumerate(c):
                if cj:
                    slope[j] = slope[j] + cj * d
        D = np.empty((self.xs.size, 2 * self.ndir))
        for j in range(self.ndir):
            D[:, 2 * j] = 2 * np.pi * self.xs * slope[j]
            D[:, 2 * j + 1] = 2 * np.pi * self.ys * slope[j]
        return -(D - A @ np.linalg.solve(M, A.T @ D))

    def fit(self, theta, max_iter: int = 40):
        """Gauss-Newton with step halving on the projected residual; returns (theta, r, J)."""
        theta = np.asarray(theta, dtype=np.float64).copy()
        r, coef, A, M = self.solve(theta)
        cost = float(r @ r)
        J = self.jacobian(theta, coef, A, M)
        for _ in range(max_iter):
            step = np.linalg.lstsq(J, -r, rcond=None)[0]
            lam = 1.0
            while lam > 1e-4:
                t_new = theta + lam * step
                r_new, c_new, A_new, M_new = self.solve(t_new)
                if float(r_new @ r_new) <= cost:
                    break
                lam *= 0.5
            else:
                break
            theta, r, coef, A, M = t_new, r_new, c_new, A_new, M_new
            cost = float(r @ r)
            J = self.jacobian(theta, coef, A, M)
            if np.max(np.abs(lam * step)) * self.scale < 1e-7:  # cycles across the field
                break
        return theta, r, J

    def subset(self, keep):
        return _Model(self.xs[keep], self.ys[keep], self.z[keep], self.terms, self.ndir)


def _neighbour_corr(res_img: np.ndarray, ok: np.ndarray) -> float:
    """Variance inflation for spatially correlated residuals: AR(1) factor along x times along y."""
    factor = 1.0
    for axis in (0, 1):
        a = np.take(res_img, np.arange(res_img.shape[axis] - 1), axis=axis)
        b = np.take(res_img, np.arange(1, res_img.shape[axis]), axis=axis)
        m = np.take(ok, np.arange(ok.shape[axis] - 1), axis=axis) & np.take(ok, np.arange(1, ok.shape[axis]), axis=axis)
        if m.sum() < 50:
            continue
        ra, rb = a[m], b[m]
        rho = float(np.corrcoef(ra, rb)[0, 1]) if ra.std() > 0 and rb.std() > 0 else 0.0
        rho = min(max(rho, 0.0), 0.95)
        factor *= (1 + rho) / (1 - rho)
    return factor


def fit_frequencies(data: np.ndarray, f0: list, *, harmonics: int | None = None, mixed: bool = True,
                    sigma_px: float | None = None, mixed_orders=None, reject_k: float = REJECT_K):
    """Refine the frequency vector(s) ``f0`` (cycles/px) over the image; returns (f, cov, info)."""
    H, W = data.shape
    ndir = len(f0)
    period = max(1.0 / math.hypot(*f) for f in f0)
    if harmonics is None:
        harmonics = 4 if ndir == 1 else 3
    sigma = sigma_px or max(3.0, 2.0 * period)
    z = _flat_field(data, sigma)
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float64)
    cx, cy = (W - 1) / 2, (H - 1) / 2
    # where the pattern is present: local modulation at the fundamental(s)
    # (on a grid coarsened by k: the amplitude map is smooth on the scale of a period)
    k = max(1, int(period // 2))
    Hk, Wk = H // k, W // k
    amp_small = np.zeros((Hk, Wk))
    for f in f0:
        q = np.exp(-2j * np.pi * (f[0] * (xx - cx) + f[1] * (yy - cy))) * z
        qs = q[: Hk * k, : Wk * k].reshape(Hk, k, Wk, k).mean(axis=(1, 3))
        amp_small += np.hypot(_smooth(qs.real, 1.5 * period / k), _smooth(qs.imag, 1.5 * period / k))
    amp = np.zeros((H, W))
    amp[: Hk * k, : Wk * k] = np.repeat(np.repeat(amp_small, k, axis=0), k, axis=1)
    edge = int(math.ceil(1.5 * period))
    present = amp > 0.25 * float(np.percentile(amp, 99))
    present[:edge], present[-edge:], present[:, :edge], present[:, -edge:] = False, False, False, False
    count = int(present.sum())
    if count < 200:
        raise CalibrationError("the line pattern covers too little of the image; fill more of the frame with it")
    # A seeded random subset, not a regular sub-grid: a stride would alias the harmonics onto the fundamental.
    idx_all = np.flatnonzero(present)
    if count > MAX_FIT_POINTS:
        idx_fit = np.sort(np.random.default_rng(20240613).choice(idx_all, MAX_FIT_POINTS, replace=False))
    else:
        idx_fit = idx_all
    pts = np.zeros_like(present)
    pts.flat[idx_fit] = True
    xs, ys, zs = xx.flat[idx_fit] - cx, yy.flat[idx_fit] - cy, z.flat[idx_fit]
    terms = model_terms(f0, harmonics, mixed, mixed_orders)
    if not terms:
        raise CalibrationError("the line period is at the camera's sampling limit; use a coarser pitch or more "
                               "magnification")
    model = _Model(xs, ys, zs, terms, ndir)
    theta0 = np.concatenate([np.asarray(f, float) for f in f0])
    keep = np.ones(xs.size, dtype=bool)
    theta = theta0
    for _ in range(3):
        theta, _, _ = model.subset(keep).fit(theta)
        r = model.residual(theta)  # all points, so rejected ones can come back
        s = 1.4826 * float(np.median(np.abs(r[keep] - np.median(r[keep]))))
        new_keep = np.abs(r) <= reject_k * max(s, 1e-12)
        if np.array_equal(new_keep, keep):
            break
        keep = new_keep
    m = model.subset(keep)
    theta, r, J = m.fit(theta)
    n, p = r.size, theta.size + m.nlin()
    s2 = float(r @ r) / max(n - p, 1)
    cov = _covariance(J, r, p)
    # Residuals at every pattern pixel (in chunks) for their neighbour correlation. For a random subset of
    # a fraction q of the pixels the variance inflation is about 1 + q (kappa - 1), kappa that of all pixels.
    # (over a window of at most 384 x 384 px at the pattern's centre: plenty for a lag-1 correlation)
    coef_fit = m.solve(theta)[1]
    res_img = np.zeros((H, W))
    ry, rx = np.nonzero(present)
    wy0 = max(0, int(np.median(ry)) - 192)
    wx0 = max(0, int(np.median(rx)) - 192)
    win = np.zeros_like(present)
    win[wy0:wy0 + 384, wx0:wx0 + 384] = True
    idx_win = np.flatnonzero(present & win)
    for c0 in range(0, idx_win.size, 50_000):
        sl = idx_win[c0:c0 + 50_000]
        sub = _Model(xx.flat[sl] - cx, yy.flat[sl] - cy, z.flat[sl], terms, ndir)
        sub.scale = m.scale
        res_img.flat[sl] = sub.z - sub.design(theta) @ coef_fit
    s_rob = 1.4826 * float(np.median(np.abs(r - np.median(r))))
    ok = present & win & (np.abs(res_img) <= 4.0 * max(s_rob, 1e-12))
    kappa = _neighbour_corr(res_img, ok)
    corr = 1.0 + (r.size / max(idx_all.size, 1)) * (kappa - 1.0)
    cov = cov * corr
    explained = 1.0 - float(r @ r) / max(float(((m.z - m.z.mean()) ** 2).sum()), 1e-30)
    if explained < MIN_EXPLAINED:
        raise CalibrationError(
            f"the image is not a regular line pattern (a periodic model explains only {100 * explained:.0f} % "
            "of it); check focus and that the target is a line scale, grid or dot grid"
        )
    # the same fit on halves of the pattern (left/right, top/bottom, centre/edge): does the scale vary across
    # the field (lens distortion, a tilted target)?
    splits = {}
    xm, ym = float(np.median(m.xs)), float(np.median(m.ys))
    rr = np.hypot(m.xs - xm, m.ys - ym)
    for name, sel in (("left/right", m.xs < xm), ("top/bottom", m.ys < ym), ("centre/edge", rr < np.median(rr))):
        halves = []
        for part in (sel, ~sel):
            if part.sum() < 200:
                break
            sub = m.subset(part)
            th, rh, Jh = sub.fit(theta, max_iter=4)  # starts at the optimum of the whole
            halves.append((th, _covariance(Jh, rh, theta.size + sub.nlin()) * corr))
        if len(halves) == 2:
            splits[name] = halves
    drift = np.abs(theta - theta0).reshape(ndir, 2)
    coef = m.solve(theta)[1]
    amps = []  # amplitudes of harmonics 1, 2, ... of each direction while they are modelled
    for j in range(ndir):
        a = []
        for h in range(1, harmonics + 1):
            t = _term_index(terms, j, h)
            if t is None:
                break
            a.append(float(np.hypot(coef[3 + 2 * t], coef[4 + 2 * t])))
        amps.append(a)
    # curvature of the log of the local light level over the pattern (quadratic surface, per px^2)
    bg = _smooth(data, sigma)[pts][keep]
    xk, yk = m.xs / m.scale, m.ys / m.scale
    Q = np.stack([np.ones_like(xk), xk, yk, xk * xk, xk * yk, yk * yk], axis=1)
    qc = np.linalg.lstsq(Q, np.log(np.maximum(bg, 1e-6)), rcond=None)[0] / m.scale**2
    hess = np.array([[2 * qc[3], qc[4]], [qc[4], 2 * qc[5]]])
    info = {
        "harmonic_amplitudes": amps,
        "light_log_hessian_per_px2": hess,
        "points_used": int(n),
        "points_rejected": int(keep.size - keep.sum()),
        "pattern_area_fraction": count / float(H * W),
        "harmonics": harmonics,
        "model_terms": [list(c) for c in terms],
        "residual_rms": math.sqrt(float(r @ r) / n),
        "explained_fraction": explained,
        "reduced_chi_square_scale": s2,
        "correlation_inflation": corr,
        "neighbour_inflation_all_pixels": kappa,
        "refinement_shift_cycles_per_px": drift.max(),
    }
    info["_splits"] = splits
    return theta.reshape(ndir, 2), cov, info


def _covariance(J, r, p):
    """Covariance of the frequencies from the projected Jacobian J and residuals r (p parameters in all).

    Heteroscedasticity-consistent ("sandwich") covariance with the small-sample factor n / (n - p): the noise is
    not uniform (shot noise follows the line pattern, damaged spots), so the classical s^2 (JᵀJ)^-1 can be too
    optimistic. The larger of the two is kept.
    """
    n = r.size
    try:
        JtJ_inv = np.linalg.inv(J.T @ J)
    except np.linalg.LinAlgError:
        raise CalibrationError("the line-pattern fit is degenerate; photograph more of the scale") from None
    cov_classic = JtJ_inv * (float(r @ r) / max(n - p, 1))
    cov_hc = JtJ_inv @ ((J * (r * r)[:, None]).T @ J) @ JtJ_inv * (n / max(n - p, 1))
    return cov_hc if np.trace(cov_hc) > np.trace(cov_classic) else cov_classic


def field_term(metric, theta, parts):
    """Scale variation across the field from fits on halves of the pattern.

    ``parts`` is a list of (slice of theta, {split name: ((theta_a, cov_a), (theta_b, cov_b))}). For each split
    the difference d between the halves' (s_x, s_y, psi, s_x - s_y) beyond what their own uncertainties explain,
    e = sqrt(max(0, d^2 - u_d^2)), is taken; for a scale that changes linearly across the field the local scale
    then spans ±e around the mean, so u = e_max / sqrt(3) (rectangular). Radial distortion concentrates its
    change at the edge, so there the corners can lie beyond ±e. Returns (u (4,), details).
    """
    from .result import derived, propagate

    theta = np.asarray(theta, dtype=np.float64)
    e_max = np.zeros(4)
    out = {}
    for k, (sl, splits) in enumerate(parts):
        for name, ((ta, ca), (tb, cb)) in splits.items():
            def at(t, sl=sl):
                full = theta.copy()
                full[sl] = t
                return derived(metric(full))

            da, db = at(ta), at(tb)
            ua, ub = propagate(at, ta, ca), propagate(at, tb, cb)
            d = da - db
            ud = np.hypot(ua, ub)
            e = np.sqrt(np.clip(d * d - ud * ud, 0.0, None))
            e_max = np.maximum(e_max, e)
            out[name if len(parts) == 1 else f"{name} (image {k + 1})"] = {
                "difference_um_per_px": [float(d[0]), float(d[1])],
                "difference_u_um_per_px": [float(ud[0]), float(ud[1])],
            }
    e_max[3] = max(e_max[0], e_max[1], e_max[3])
    return e_max / math.sqrt(3.0), {"halves": out, "excess_um_per_px": [float(e_max[0]), float(e_max[1])]}


FIELD_NOTE = ("fits on halves of the pattern (left/right, top/bottom, centre/edge) differ beyond their own "
              "uncertainty by e (lens distortion, a tilted target); u = e / sqrt(3). The local scale in the "
              "far corners of a distorted field can differ by more")


def _field_warning(u_field, scale) -> list[str]:
    rel = math.sqrt(3.0) * max(u_field[0], u_field[1]) / scale
    if rel > 1e-4:
        return [f"the scale varies across the field by about {1e6 * rel:.0f} ppm (lens distortion or a tilted "
                "target); carried in the budget -- use the same field area for parts, or a better lens"]
    return []


def light_blur_bound(f, amps, hess) -> float:
    """Bound on the relative frequency shift from uneven light seen through the blur.

    Light that varies over the target, A(x), imaged through a Gaussian blur of variance sigma^2 shifts the local
    fringe phase by sigma^2 2 pi f . grad ln A, so the frequency by sigma^2 H f, H the Hessian of ln A
    (derived here from the first-order expansion of the blur). sigma^2 is bounded from the pattern itself: the
    blur damps harmonic h by exp(-2 pi^2 sigma^2 h^2 |f|^2) and the line shape damps the 2nd harmonic relative
    to the 1st further, so a2/a1 <= exp(-6 pi^2 sigma^2 |f|^2) gives an upper bound on sigma^2 (capped at
    (0.3 period)^2, beyond which the pattern would have too little contrast to be found).
    """
    f = np.asarray(f, dtype=np.float64)
    nf2 = float(f @ f)
    cap = (0.3 ** 2) / nf2
    ratio = amps[1] / amps[0] if len(amps) > 1 and amps[0] > 0 else 0.0
    s2 = cap if ratio <= 0 else min(cap, max(0.0, -math.log(min(ratio, 1.0)) / (6 * math.pi**2 * nf2)))
    return abs(s2 * float(f @ np.asarray(hess) @ f) / nf2)


def _light_term(metric, theta, ndir, bounds):
    """u of (s_x, s_y, psi, s_x - s_y) from relative frequency shifts up to ``bounds`` (rectangular)."""
    from .result import derived

    d0 = derived(metric(theta))
    acc = np.zeros(4)
    for j in range(ndir):
        t = np.array(theta, dtype=np.float64)
        t[2 * j: 2 * j + 2] *= 1.0 + bounds[j]
        acc += (derived(metric(t)) - d0) ** 2
    return np.sqrt(acc) / math.sqrt(3.0)


LIGHT_NOTE = ("uneven light on the target seen through the lens blur shifts the line phase; bound from the "
              "measured light curvature and the blur the harmonics allow")


def _direction_info(f) -> dict:
    return {
        "frequency_cycles_per_px": [float(f[0]), float(f[1])],
        "period_px": 1.0 / math.hypot(*f),
        "normal_direction_deg": math.degrees(math.atan2(f[1], f[0])),
    }


def _check_pitch(pitch_um, pitch_u_um):
    try:
        P = float(pitch_um)
        uP = float(pitch_u_um)
    except (TypeError, ValueError):
        raise InputError("grating pitch and its uncertainty must be numbers of micrometres") from None
    if not math.isfinite(P) or P <= 0:
        raise InputError(f"grating pitch must be a positive number of micrometres, got {pitch_um}")
    if not math.isfinite(uP) or uP < 0:
        raise InputError(f"pitch uncertainty must be zero or a positive number of micrometres, got {pitch_u_um}")
    if uP > 0.1 * P:
        raise InputError(f"pitch uncertainty {uP:g} µm is over 10 % of the pitch {P:g} µm; check both values")
    return P, uP


def _default_pitch_u(P: float) -> float:
    """When no certificate value is given: 0.1 % of the pitch as a rectangular half-width -> standard u.

    Common practice, no source: ordinary stage micrometers are specified to about ±1 µm over 1 mm.
    """
    return 0.001 * P / math.sqrt(3.0)


def _single_thread(fn):
    """Run with one BLAS thread: the fit's matrices are small and the bench PC is shared with other work."""
    import functools

    @functools.wraps(fn)
    def wrapper(*a, **k):
        from ..blas import one_thread

        with one_thread(user_api=None):
            return fn(*a, **k)

    return wrapper


@_single_thread
def measure_grating(image, pitch_um: float, pitch_u_um: float | None = None, *, kind: str = "auto",
                    target_id: str | None = None) -> ScaleCalibration:
    """Pixel scale from one image of a line scale, line grating, crossed grid or dot grid.

    Parameters
    ----------
    image : Frame or (H, W) array
        The calibration image, taken at the same focus and magnification as the parts.
    pitch_um : float
        Certified pitch (division or grid period) in micrometres, object space.
    pitch_u_um : float, optional
        Its standard uncertainty in micrometres (k = 1). Default: 0.1 % of the pitch as a rectangular limit.
    kind : {"auto", "lines", "grid", "dots"}
        "lines" = one line set (x and y then assumed equal), "grid" = two perpendicular line sets of the same
        pitch, "dots" = a square dot grid; "auto" decides from the spectrum (two strong directions -> grid).

    Returns
    -------
    ScaleCalibration
    """
    if kind not in ("auto", "lines", "grid", "dots"):
        raise InputError(f"target kind must be auto, lines, grid or dots, got {kind!r}")
    defaulted = pitch_u_um is None
    P, uP = _check_pitch(pitch_um, 0.0 if defaulted else pitch_u_um)
    if defaulted:
        uP = _default_pitch_u(P)
    frame = _as_frame(image)
    data = frame.data.astype(np.float64)
    H, W = data.shape
    z0 = _flat_field(data, max(H, W) / 16.0)
    f0, spec_info = find_frequencies(z0, "grid" if kind == "dots" else kind)
    # a dot grid's spectrum fills its whole lattice: model every (a, b) with |a|, |b| <= 3
    # and keep its heavy-tailed residuals (the sharp dot cores): a 4-sigma cut drops them unevenly with the
    # sampling phase across the field and biased the period by about -200 ppm on generated grids
    f, cov, fit_info = fit_frequencies(data, f0, harmonics=3 if kind == "dots" else None,
                                       mixed_orders=DOT_ORDERS if kind == "dots" else None,
                                       reject_k=8.0 if kind == "dots" else REJECT_K)
    splits = fit_info.pop("_splits")
    warnings: list[str] = []
    if defaulted:
        warnings.append(
            f"no pitch uncertainty given: assumed ±0.1 % of the pitch (u = {uP:.3g} µm); give --pitch-u from "
            "the target's certificate"
        )
    details = {"spectrum": spec_info, "fit": fit_info, "directions": [_direction_info(v) for v in f]}
    for v in f:
        n_periods = math.hypot(*v) * min(H, W)
        if n_periods < MIN_PERIODS:
            raise CalibrationError(
                f"only {n_periods:.1f} line periods across the image; at least {MIN_PERIODS} are needed -- use a "
                "finer pitch or a lower magnification"
            )
    grid_kind = {"dots": "dot grid", "grid": "crossed grid"}.get(kind, "square grid")
    target = {"kind": "line scale" if len(f) == 1 else grid_kind,
              "pitch_um": P, "pitch_u_um": uP, "id": target_id}
    ref = ("pitch", P, uP, "µm")
    images = (_image_info(frame),)
    if len(f) == 1:
        fv = f[0]
        s = P * math.hypot(*fv)
        us = P * math.sqrt(float(fv @ cov @ fv)) / math.hypot(*fv)
        G = np.array([s * s, 0.0, s * s])
        b = light_blur_bound(fv, fit_info["harmonic_amplitudes"][0], fit_info["light_log_hessian_per_px2"])
        ul = s * b / math.sqrt(3.0)
        details["light_blur_bound_rel"] = b

        def metric1(t):
            sc2 = P * P * float(t[0] ** 2 + t[1] ** 2)
            return np.array([sc2, 0.0, sc2])

        u_field, details["field"] = field_term(metric1, fv, [(slice(0, 2), splits)])
        warnings += _field_warning(u_field, s)
        warnings.append("one line set: the scale is measured across the lines only, and x and y are assumed "
                        "equal; a crossed grid, or the scale photographed again turned by 90°, measures both")
        details["direction_deg"] = details["directions"][0]["normal_direction_deg"]
        return assemble("line-scale", target, G, np.array([us, us, 0.0, 0.0]), ref, measured_y=False,
                        extra=[("uneven light through the blur", np.array([ul, ul, 0.0, 0.0]), LIGHT_NOTE),
                               ("scale variation across the field", u_field, FIELD_NOTE)],
                        images=images, details=details, warnings=warnings)

    def metric(theta):
        a, b = theta[:2], theta[2:]
        return P * P * np.array([a[0] ** 2 + b[0] ** 2, a[0] * a[1] + b[0] * b[1], a[1] ** 2 + b[1] ** 2])

    from .result import derived, propagate

    theta = f.reshape(-1)
    fit_u = propagate(lambda t: derived(metric(t)), theta, cov)
    n1, n2 = math.hypot(*f[0]), math.hypot(*f[1])
    if abs(n1 - n2) / max(n1, n2) > 0.1:
        warnings.append(
            f"the two line sets have periods {1 / n1:.2f} px and {1 / n2:.2f} px; a square grid of one pitch "
            "was assumed -- check the target"
        )
    bounds = [light_blur_bound(v, fit_info["harmonic_amplitudes"][j], fit_info["light_log_hessian_per_px2"])
              for j, v in enumerate(f)]
    details["light_blur_bound_rel"] = bounds
    light = _light_term(metric, theta, 2, bounds)
    u_field, details["field"] = field_term(metric, theta, [(slice(0, 4), splits)])
    warnings += _field_warning(u_field, math.sqrt(metric(theta)[0]))
    method = {"dots": "dot-grid", "grid": "crossed-grid"}.get(kind, "square-grid")
    res = assemble(method, target, metric(theta), fit_u, ref,
                   extra=[("uneven light through the blur", light, LIGHT_NOTE),
                          ("scale variation across the field", u_field, FIELD_NOTE)],
                   images=images, details=details, warnings=warnings)
    return _anisotropy_note(res)


def _anisotropy_note(res: ScaleCalibration) -> ScaleCalibration:
    if not res.anisotropic:
        return res
    from dataclasses import replace

    note = (
        f"x and y scales differ ({res.scale_x.value:.5f} vs {res.scale_y.value:.5f} µm/px, more than twice the "
        f"uncertainty of the difference {res.difference_u_um:.2g} µm/px): anisotropic pixels or a tilted "
        "camera; both scales will be used"
    )
    return replace(res, warnings=res.warnings + (note,))


@_single_thread
def measure_line_pair(image_a, image_b, pitch_um: float, pitch_u_um: float | None = None, *,
                      target_id: str | None = None) -> ScaleCalibration:
    """Pixel scale along x and y from one line scale photographed twice, turned by about 90° in between.

    Each image gives a frequency vector f_i; with the pixel axes perpendicular on the part (G diagonal) the
    two equations f_ix² / G_xx + f_iy² / G_yy = 1 / P² give both scales. The turn need not be exactly 90°;
    the line directions must differ by 45°-135° in the images for a well-conditioned answer.
    """
    defaulted = pitch_u_um is None
    P, uP = _check_pitch(pitch_um, 0.0 if defaulted else pitch_u_um)
    if defaulted:
        uP = _default_pitch_u(P)
    frames = [_as_frame(image_a), _as_frame(image_b)]
    fs, covs, infos, pair_splits = [], [], [], []
    for fr in frames:
        data = fr.data.astype(np.float64)
        H, W = data.shape
        f0, spec_info = find_frequencies(_flat_field(data, max(H, W) / 16.0), "lines")
        f, cov, fit_info = fit_frequencies(data, f0)
        pair_splits.append(fit_info.pop("_splits"))
        fs.append(f[0])
        covs.append(cov)
        fit_info["light_blur_bound_rel"] = light_blur_bound(f[0], fit_info["harmonic_amplitudes"][0],
                                                            fit_info["light_log_hessian_per_px2"])
        infos.append({"spectrum": spec_info, "fit": fit_info, **_direction_info(f[0])})
    a1 = math.degrees(math.atan2(fs[0][1], fs[0][0]))
    a2 = math.degrees(math.atan2(fs[1][1], fs[1][0]))
    turn = abs(((a2 - a1) + 90.0) % 180.0 - 90.0)
    if turn < 45.0:
        raise CalibrationError(
            f"the line directions in the two images differ by only {turn:.0f}°; turn the scale by about 90° "
            "between the two photographs"
        )
    theta = np.concatenate(fs)
    cov = np.zeros((4, 4))
    cov[:2, :2], cov[2:, 2:] = covs[0], covs[1]

    def metric(t):
        M = np.array([[t[0] ** 2, t[1] ** 2], [t[2] ** 2, t[3] ** 2]])
        inv = np.linalg.solve(M, np.full(2, 1.0 / (P * P)))
        if np.any(inv <= 0):
            raise CalibrationError("the two line-scale images do not give a consistent scale; photograph again")
        return np.array([1.0 / inv[0], 0.0, 1.0 / inv[1]])

    from .result import derived, propagate

    G = metric(theta)
    fit_u = propagate(lambda t: derived(metric(t)), theta, cov)
    warnings = []
    if defaulted:
        warnings.append(
            f"no pitch uncertainty given: assumed ±0.1 % of the pitch (u = {uP:.3g} µm); give --pitch-u from "
            "the target's certificate"
        )
    warnings.append("pixel axes assumed perpendicular on the part (squareness is not measured by two line images)")
    details = {"images": infos, "turn_deg": turn}
    target = {"kind": "line scale (two orientations)", "pitch_um": P, "pitch_u_um": uP, "id": target_id}
    light = _light_term(metric, theta, 2, [i["fit"]["light_blur_bound_rel"] for i in infos])
    u_field, details["field"] = field_term(metric, theta, [(slice(0, 2), pair_splits[0]),
                                                           (slice(2, 4), pair_splits[1])])
    warnings += _field_warning(u_field, math.sqrt(G[0]))
    res = assemble("line-scale-pair", target, G, fit_u, ("pitch", P, uP, "µm"),
                   extra=[("uneven light through the blur", light, LIGHT_NOTE),
                          ("scale variation across the field", u_field, FIELD_NOTE)],
                   images=tuple(_image_info(f) for f in frames), details=details, warnings=warnings)
    from dataclasses import replace

    res = replace(res, squareness=None)
    return _anisotropy_note(res)
