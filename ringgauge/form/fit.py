"""Full-aperture fit of a gap model to a test-plate fringe image.

Model, over the normalised aperture (u, v) = ((x - x0) / a, (y - y0) / a · aspect), u^2 + v^2 <= 1:

    I(u, v) = A(u, v) + B(u, v) · cos(2 pi W)

with W(u, v) the gap in fringes (one fringe = lambda / 2 of gap) expanded in Zernike circle polynomials
(unnormalised, peak value 1, OSA/ANSI index order; piston, tilts, defocus, astigmatism, coma, trefoil,
spherical, secondary astigmatism, secondary spherical), A and B low-order polynomials for the uneven
illumination and contrast. A free second harmonic for the multiple-beam (Airy) fringe shape is deliberately
left out: with it, half the true gap fits the image as well (cos 4 pi (W/2) = cos 2 pi W).

The intensity is even in W and periodic: W, -W and W + 1 give the same image. The fit therefore returns W
with the convention "power >= 0" and the piston reduced to [0, 1); the true sign comes from a gap change
between frames (:mod:`ringgauge.form.sign`).

Start values: the local fringe frequency squared, |grad W|^2, is a quadratic in (u, v) when W is a quadratic
(power, astigmatism, tilt). It is estimated at each pixel as the ratio of band-passed gradient energy to
band-passed signal energy, fitted with a quadratic, and solved for the Hessian (up to the sign of each
eigenvalue) and the ring centre. Each sign choice, and a few scalings of it, are refined by least squares on
a subsample of pixels with the low-order terms; the best is refined with all terms. The linear parameters
(A, B) are solved exactly for each trial (variable projection) before the joint refinement.

Uncertainties: the covariance of the joint least-squares fit, scaled by the reduced chi-square (as lmfit does),
and by a factor for the correlation of neighbouring pixels (noise blurred by the optics is correlated over
the point-spread width; the subsampling stride is compared with the residuals' correlation length).

References
----------
Zernike circle polynomials: OSA/ANSI Z80.28 index order (unnormalised here).
Variable projection: G. H. Golub and V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413-432.
Energy-ratio local frequency: the fringe "energy" |grad n|^2 + n^2 |grad phi|^2 of a cosine signal,
    cf. the 2-D energy operator, P. Maragos and A. C. Bovik, JOSA A 12 (1995) 1867-1876.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from ..blas import one_thread
from ..errors import AnalysisError

#: (name, n, m) of the gap terms in fit order; the first six are the low-order stage
TERMS: tuple[tuple[str, int, int], ...] = (
    ("piston", 0, 0),
    ("tilt_x", 1, 1),
    ("tilt_y", 1, -1),
    ("defocus", 2, 0),
    ("astig_0", 2, 2),
    ("astig_45", 2, -2),
    ("coma_x", 3, 1),
    ("coma_y", 3, -1),
    ("trefoil_0", 3, 3),
    ("trefoil_30", 3, -3),
    ("spherical", 4, 0),
    ("astig2_0", 4, 2),
    ("astig2_45", 4, -2),
    ("spherical2", 6, 0),
)
LOW_ORDER = 6


def zernike(n: int, m: int, u, v):
    """Unnormalised Zernike circle polynomial R_n^|m|(rho) cos(m theta) (m >= 0) or sin(|m| theta) (m < 0)."""
    rho2 = u * u + v * v
    rho = np.sqrt(rho2)
    th = np.arctan2(v, u)
    am = abs(m)
    R = np.zeros_like(rho)
    for k in range((n - am) // 2 + 1):
        c = (-1) ** k * math.factorial(n - k) / (
            math.factorial(k) * math.factorial((n + am) // 2 - k) * math.factorial((n - am) // 2 - k)
        )
        R = R + c * rho ** (n - 2 * k)
    if m > 0:
        return R * np.cos(am * th)
    if m < 0:
        return R * np.sin(am * th)
    return R


def finesse_coefficient(glass_index: float = 1.52, medium_index: float = 1.0) -> float:
    """F = 4 rho / (1 - rho)^2 with rho = ((n_glass - n_medium) / (n_glass + n_medium))^2 (Fresnel, normal
    incidence): the multiple-beam fringe shape of an uncoated gap."""
    rho = ((glass_index - medium_index) / (glass_index + medium_index)) ** 2
    return 4 * rho / (1 - rho) ** 2


def gap_basis(u, v, nterms: int = len(TERMS)) -> np.ndarray:
    """(nterms, N) array of the gap terms at the points (u, v)."""
    return np.stack([zernike(n, m, u, v) for _, n, m in TERMS[:nterms]])


def _poly2(u, v, degree: int) -> np.ndarray:
    """Monomials u^i v^j with i + j <= degree, (n, N) array."""
    u = np.asarray(u, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    up = [np.ones_like(u)]
    vp = [np.ones_like(v)]
    for _ in range(degree):
        up.append(up[-1] * u)
        vp.append(vp[-1] * v)
    out = np.empty((sum(d + 1 for d in range(degree + 1)),) + u.shape)
    k = 0
    for d in range(degree + 1):
        for i in range(d, -1, -1):
            np.multiply(up[i], vp[d - i], out=out[k])
            k += 1
    return out


@dataclass(frozen=True)
class GapFit:
    """Result of the full-aperture fit.

    Attributes
    ----------
    names : tuple of str
        Gap term names in covariance order (see :data:`TERMS`).
    coeffs : (n,) array
        Zernike coefficients of the gap, fringes (power >= 0 convention, piston in [0, 1)).
    covariance : (n, n) array or None
        Covariance of ``coeffs`` in fringes^2, scaled as described in the module docstring; None when the
        fit was singular.
    centre_px, radius_px, aspect : the normalisation (aperture centre (x, y), radius along x, y/x pixel ratio).
    """

    names: tuple[str, ...]
    coeffs: np.ndarray
    covariance: np.ndarray | None
    centre_px: tuple[float, float]
    radius_px: float
    aspect: float
    ndata: int
    nvarys: int
    chisqr: float
    redchi: float
    residual_rms: float
    contrast: float  # median fringe modulation B / A over the aperture
    correlation_factor: float
    success: bool
    message: str
    masked_px: np.ndarray | None = None  # (H, W) bool: pixels left out after the outlier pass
    notes: tuple[str, ...] = field(default_factory=tuple)
    alternatives: dict = field(default_factory=dict)  # model-choice label -> coefficients refitted under it
    edge_scale: float = 1.0  # part edge found from the model, as a multiple of radius_px (1 = as given)
    finesse: float = 0.0  # coefficient of finesse of the fringe shape the fit used (0 = two-beam cosine)
    params: np.ndarray | None = None  # raw parameter vector (gap, modulation, light) before the orientation
    transform: tuple[bool, bool] = (False, False)  # (half-fringe shift, W -> -W) taking params to coeffs
    illum_degree: int = 3

    def gap(self, u, v) -> np.ndarray:
        """Gap in fringes at normalised coordinates."""
        return np.tensordot(self.coeffs, gap_basis(u, v, len(self.coeffs)), axes=1)


class _Problem:
    """Pixels of one frame inside the aperture, with the design pieces that do not change during a fit.

    Intensity model: I = s + L(u, v) · (1 + M(u, v) · cos(2 pi W(u, v))), with s a uniform stray level,
    L the illumination (polynomial), M = m0 + m1 u + m2 v the fringe modulation and W the gap in fringes.
    The illumination multiplies the fringe term as it multiplies the light: a free amplitude polynomial
    would absorb a sub-fringe power (cos of a small quadratic is itself nearly quadratic).
    Parameter vector: [gap terms (nw), m0, m1, m2, s, L terms]; s and L enter linearly.
    Arrays are (points, terms), C order, so products and the normal equations need no copies.
    """

    NM = 3

    def __init__(self, u, v, y, illum_degree=2, finesse=0.0):
        self.illum_degree = illum_degree
        self.u = np.asarray(u, dtype=np.float64)
        self.v = np.asarray(v, dtype=np.float64)
        self.y = np.asarray(y, dtype=np.float64)
        self.F = float(finesse)
        self.PLT = np.ascontiguousarray(_poly2(self.u, self.v, illum_degree).T)
        self.PMT = np.stack([np.ones_like(self.u), self.u, self.v], axis=1)
        mono = _poly2(self.u, self.v, _MONO_DEG)  # (28, N) in the order of _illum_monomials
        idx = [(i, d - i) for d in range(_MONO_DEG + 1) for i in range(d, -1, -1)]
        Zc = np.array([[Cz[i, j] for (i, j) in idx] for Cz in _ZMONO])  # (terms, 28)
        self.ZT = np.ascontiguousarray((Zc @ mono).T)  # (N, terms)

    @property
    def PL(self):
        return self.PLT.T

    @property
    def PM(self):
        return self.PMT.T

    @property
    def Z(self):
        return self.ZT.T

    def _parts(self, c, m):
        W = self.ZT[:, : len(c)] @ c
        ph = 2 * np.pi * W
        M = self.PMT @ m
        return ph, M

    def design(self, c, m):
        ph, M = self._parts(c, m)
        f = 1.0 + M * self.shape(ph)
        X = np.empty((f.size, 1 + self.PLT.shape[1]))
        X[:, 0] = 1.0
        np.multiply(self.PLT, f[:, None], out=X[:, 1:])
        return X

    def shape(self, ph, cos_ph=None):
        """Fringe shape: cos(ph) for two-beam fringes; the multiple-beam (Airy) profile for F > 0, scaled to
        the same range [-1, 1] (1 at zero gap). ``cos_ph``: cos(ph) when already at hand."""
        if cos_ph is None:
            cos_ph = np.cos(ph)
        if self.F == 0:
            return cos_ph
        x = 0.5 * (1.0 - cos_ph)
        return 1.0 - 2.0 * (1.0 + self.F) * x / (1.0 + self.F * x)

    def dshape(self, ph, cos_ph=None):
        if self.F == 0:
            return -np.sin(ph)
        x = 0.5 * (1.0 - (np.cos(ph) if cos_ph is None else cos_ph))
        return -(1.0 + self.F) * np.sin(ph) / (1.0 + self.F * x) ** 2

    def linear(self, c, m):
        X = self.design(c, m)
        A = X.T @ X
        try:
            lin = np.linalg.solve(A + 1e-12 * np.trace(A) * np.eye(A.shape[0]), X.T @ self.y)
        except np.linalg.LinAlgError:
            lin, *_ = np.linalg.lstsq(X, self.y, rcond=None)
        return lin, X

    def projected_residual(self, c, m):
        lin, X = self.linear(c, m)
        return X @ lin - self.y

    def _penalty_weight(self):
        if not hasattr(self, "_kappa"):
            self._kappa = float(np.sqrt(self.y.size) * max(np.std(self.y), 1e-6))
        return self._kappa

    def _stray_limits(self):
        if not hasattr(self, "_limits"):
            ybar = abs(float(np.mean(self.y)))
            self._limits = (-0.1 * ybar, 0.6 * ybar)
        return self._limits

    def full_residual(self, p, nw):
        """Residuals, plus two rows that keep the model physical: |M| <= 1 over the disc, i.e.
        |m0| + |(m1, m2)| <= 1 (intensity cannot go below the stray level), and a stray level s between
        -10 % and 60 % of the mean intensity. Without the second, s -> +inf, L -> -inf with L*M finite fits
        as well and frees the fringe amplitude from the illumination (and flips the meaning of the
        modulation's sign). The rows are zero inside the ranges."""
        c, m, lin = p[:nw], p[nw : nw + self.NM], p[nw + self.NM :]
        ph, M = self._parts(c, m)
        L = self.PLT @ lin[1:]
        cos_ph = np.cos(ph)
        cs = self.shape(ph, cos_ph)
        # kept for full_jac: the Jacobian is always asked for at the last accepted residual's parameters
        self._last = (np.array(p, dtype=float), nw, ph, M, cs, L, cos_ph)
        r = np.empty(self.y.size + 2)
        r[:-2] = lin[0] + L * (1.0 + M * cs) - self.y
        k = self._penalty_weight()
        lo, hi = self._stray_limits()
        r[-2] = k * max(0.0, abs(m[0]) + math.hypot(m[1], m[2]) - 1.0)
        r[-1] = k * (max(0.0, lin[0] - hi) - max(0.0, lo - lin[0])) / max(hi, 1e-6)
        return r

    def full_jac(self, p, nw, out=None):
        """Jacobian of :meth:`full_residual`; written into ``out`` (same shape) when given, so a fit's iterations
        reuse one array."""
        c, m, lin = p[:nw], p[nw : nw + self.NM], p[nw + self.NM :]
        last = getattr(self, "_last", None)
        if last is not None and last[1] == nw and np.array_equal(last[0], p):
            ph, M, cs, L, cos_ph = last[2:]
        else:
            ph, M = self._parts(c, m)
            cos_ph = np.cos(ph)
            cs = self.shape(ph, cos_ph)
            L = self.PLT @ lin[1:]
        N = self.y.size
        nL = self.PLT.shape[1]
        shape = (N + 2, nw + self.NM + 1 + nL)
        J = out if out is not None and out.shape == shape else np.empty(shape)
        J[N:] = 0.0
        np.multiply(self.ZT[:, :nw], (2 * np.pi * L * M * self.dshape(ph, cos_ph))[:, None], out=J[:N, :nw])
        np.multiply(self.PMT, (L * cs)[:, None], out=J[:N, nw : nw + 3])
        J[:N, nw + 3] = 1.0
        np.multiply(self.PLT, (1.0 + M * cs)[:, None], out=J[:N, nw + 4 :])
        k = self._penalty_weight()
        g = math.hypot(m[1], m[2])
        if abs(m[0]) + g > 1.0:
            J[N, nw] = k * np.sign(m[0])
            if g > 0:
                J[N, nw + 1 : nw + 3] = k * m[1:3] / g
        lo, hi = self._stray_limits()
        if lin[0] > hi or lin[0] < lo:
            J[N + 1, nw + self.NM] = k / max(hi, 1e-6)
        return J

    def phased_start(self, c):
        """Start vector for the gap shape ``c`` with the piston and modulation taken from the image: the
        linear fit y = light + alpha cos(2 pi W0) + beta sin(2 pi W0) gives the fringe phase, so a start is
        never half a fringe out (from there the modulation must pass through zero, where the gap terms get
        no gradient)."""
        c = np.array(c, dtype=float)
        W0 = self.ZT[:, 1 : len(c)] @ c[1:]
        cs, sn = np.cos(2 * np.pi * W0), np.sin(2 * np.pi * W0)
        X = np.hstack([self.PLT, cs[:, None], sn[:, None]])
        coef, *_ = np.linalg.lstsq(X, self.y, rcond=None)
        alpha, beta = coef[-2], coef[-1]
        A = math.hypot(alpha, beta)
        psi = math.atan2(beta, alpha)
        c[0] = ((-psi - np.pi) / (2 * np.pi)) % 1.0  # -A cos(2 pi (W0 + p)) = alpha cos + beta sin
        mean = max(float(np.mean(self.y)), 1e-6)
        m0 = -min(0.9, max(0.1, A / mean))
        return self.start(c, (m0, 0.0, 0.0))

    def start(self, c, m=(-0.8, 0.0, 0.0)):
        m = np.asarray(m, dtype=float)
        lin, _ = self.linear(np.asarray(c, dtype=float), m)
        return np.concatenate([c, m, lin])


def normalised_coords(shape, centre_px, radius_px, aspect=1.0):
    H, W = shape
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float64)
    u = (xx - centre_px[0]) / radius_px
    v = (yy - centre_px[1]) * aspect / radius_px
    return u, v


# ---------------------------------------------------------------------------------------------------------
# Polynomials on a pixel grid: each Zernike term as exact monomial coefficients C[i, j] of u^i v^j, so a model
# is evaluated on a whole (cropped) frame with separable Horner sums (numpy polygrid2d) instead of one
# (terms x pixels) array per term.

_MONO_DEG = 6


def _zernike_monomials(n: int, m: int, deg: int = _MONO_DEG) -> np.ndarray:
    """Exact coefficients C[i, j] (u^i v^j) of the unnormalised Zernike term R_n^|m| cos/sin(|m| theta)."""
    from scipy.signal import convolve2d

    am = abs(m)
    size = deg + 1
    ang = np.zeros((size, size))
    for k in range(am + 1):  # (u + i v)^am = sum_k C(am, k) u^(am-k) (i v)^k
        ik = 1j**k
        val = ik.real if m >= 0 else ik.imag
        if abs(val) > 0.5:
            ang[am - k, k] += math.comb(am, k) * round(val)
    out = np.zeros((size, size))
    for k in range((n - am) // 2 + 1):
        c = (-1) ** k * math.factorial(n - k) / (
            math.factorial(k) * math.factorial((n + am) // 2 - k) * math.factorial((n - am) // 2 - k)
        )
        j = (n - 2 * k - am) // 2  # rho^(n-2k) cos(m th) = (u^2 + v^2)^j Re((u + i v)^am)
        P = np.zeros((size, size))
        for l in range(j + 1):
            P[2 * l, 2 * (j - l)] += math.comb(j, l)
        out += c * convolve2d(P, ang)[:size, :size]
    return out


_ZMONO = np.stack([_zernike_monomials(n, m) for _, n, m in TERMS])


def _gap_monomials(c) -> np.ndarray:
    return np.tensordot(np.asarray(c, dtype=float), _ZMONO[: len(c)], axes=1)


def _illum_monomials(lin_L, degree: int) -> np.ndarray:
    C = np.zeros((degree + 1, degree + 1))
    k = 0
    for d in range(degree + 1):
        for i in range(d, -1, -1):
            C[i, d - i] = lin_L[k]
            k += 1
    return C


def _grid(C, uc, vr) -> np.ndarray:
    """Polynomial with coefficients C[i, j] (u^i v^j) on the grid of columns ``uc`` and rows ``vr``: (rows, cols)."""
    return np.polynomial.polynomial.polygrid2d(uc, vr, C).T


class _Crop:
    """The part of a frame around the aperture (to 1.15 radii), with its normalised axis coordinates."""

    def __init__(self, img, centre_px, radius_px, aspect, reach=1.15):
        H, W = img.shape
        cx, cy = centre_px
        ry = radius_px / aspect
        self.x0 = max(0, int(math.floor(cx - reach * radius_px)))
        self.x1 = min(W, int(math.ceil(cx + reach * radius_px)) + 1)
        self.y0 = max(0, int(math.floor(cy - reach * ry)))
        self.y1 = min(H, int(math.ceil(cy + reach * ry)) + 1)
        if self.x1 - self.x0 < 8 or self.y1 - self.y0 < 8:
            raise AnalysisError("the aperture lies outside the frame; give the part's edge by hand")
        self.img = np.asarray(img[self.y0 : self.y1, self.x0 : self.x1], dtype=np.float32)
        self.uc = (np.arange(self.x0, self.x1, dtype=np.float64) - cx) / radius_px
        self.vr = (np.arange(self.y0, self.y1, dtype=np.float64) - cy) * aspect / radius_px
        self.rho2 = self.uc[None, :] ** 2 + self.vr[:, None] ** 2
        self.shape = self.img.shape
        self.full_shape = (H, W)

    def points(self, mask):
        iy, ix = np.nonzero(mask)
        return self.uc[ix], self.vr[iy], self.img[iy, ix].astype(np.float64)

    def paste(self, mask) -> np.ndarray:
        out = np.zeros(self.full_shape, dtype=bool)
        out[self.y0 : self.y1, self.x0 : self.x1] = mask
        return out


def _model_map(crop: _Crop, p, nw, finesse, illum_degree) -> np.ndarray:
    """The fitted intensity model over the whole crop (float64, rows x cols)."""
    c, m, lin = p[:nw], p[nw : nw + 3], p[nw + 3 :]
    Cw, Cl = _gap_monomials(c), _illum_monomials(lin[1:], illum_degree)
    shp = _Problem.__new__(_Problem)
    shp.F = float(finesse)
    uc = crop.uc
    out = np.empty(crop.shape)
    # by blocks of rows: the same sums for every pixel, with temporaries that stay in the cache instead of
    # half a dozen frame-sized arrays
    for r0 in range(0, crop.shape[0], 64):
        vr = crop.vr[r0 : r0 + 64]
        S = shp.shape(2 * np.pi * _grid(Cw, uc, vr))
        M = m[0] + m[1] * uc[None, :] + m[2] * vr[:, None]
        L = _grid(Cl, uc, vr)
        out[r0 : r0 + 64] = lin[0] + L * (1.0 + M * S)
    return out


def _open_dilate(mask: np.ndarray) -> np.ndarray:
    """Binary opening (one iteration) then dilation (three), the cross structuring element, computed on the
    bounding box of the set pixels with a margin (the same result as on the whole array, without passes over
    the empty rest of it)."""
    out = np.zeros_like(mask)
    rows = np.flatnonzero(mask.any(axis=1))
    if rows.size == 0:
        return out
    cols = np.flatnonzero(mask.any(axis=0))
    g = 6  # reach of the opening (2) and the dilation (3), and one more
    y0, y1 = max(0, rows[0] - g), min(mask.shape[0], rows[-1] + g + 1)
    x0, x1 = max(0, cols[0] - g), min(mask.shape[1], cols[-1] + g + 1)
    box = ndimage.binary_opening(mask[y0:y1, x0:x1], iterations=1)
    out[y0:y1, x0:x1] = ndimage.binary_dilation(box, iterations=3)
    return out


def _decimate(crop: _Crop, target_radius: float, radius_px: float):
    """Block mean of the crop so the aperture radius spans about ``target_radius`` pixels; (image, u, v, q)."""
    q = max(1, int(radius_px // target_radius))
    H, W = crop.shape
    Hq, Wq = H // q, W // q
    img = crop.img[: Hq * q, : Wq * q].reshape(Hq, q, Wq, q).mean(axis=(1, 3), dtype=np.float64)
    uc = crop.uc[: Wq * q].reshape(Wq, q).mean(axis=1)
    vr = crop.vr[: Hq * q].reshape(Hq, q).mean(axis=1)
    return img, uc, vr, q


def _smooth(a, sigma):
    """Gaussian smoothing; wide kernels are applied on a block-averaged copy and interpolated back (the result
    is smooth on that scale anyway), which keeps the cost independent of the width."""
    f = int(sigma // 3)
    if f < 2:
        return ndimage.gaussian_filter(a, sigma)
    H, W = a.shape
    Hf, Wf = -(-H // f), -(-W // f)
    pad = np.pad(a, ((0, Hf * f - H), (0, Wf * f - W)), mode="edge")
    small = pad.reshape(Hf, f, Wf, f).mean(axis=(1, 3))
    small = ndimage.gaussian_filter(small, sigma / f)
    # bilinear interpolation back to full size (what map_coordinates order=1, mode "nearest" does), done
    # separably: rows first, then columns, a few times quicker than interpolating every pixel's four neighbours
    a0, a1, wy = _linear_weights(H, Hf, f)
    b0, b1, wx = _linear_weights(W, Wf, f)
    rows = small[a0] * (1.0 - wy)[:, None]
    rows += small[a1] * wy[:, None]
    out = rows[:, b0] * (1.0 - wx)
    out += rows[:, b1] * wx
    return out


def _linear_weights(n_out: int, n_in: int, f: int):
    """Neighbour indices and weights of linear interpolation from block centres (every ``f`` pixels) back to
    ``n_out`` pixels, ends held at the nearest block."""
    c = (np.arange(n_out) - (f - 1) / 2) / f
    i0 = np.floor(c)
    w = c - i0
    i0 = i0.astype(np.intp)
    return np.clip(i0, 0, n_in - 1), np.clip(i0 + 1, 0, n_in - 1), w


def fit_gap(*args, **kwargs) -> GapFit:
    """See :func:`_fit_gap` (the same, with the BLAS library held to one thread: :func:`ringgauge.blas.one_thread`)."""
    with one_thread():
        return _fit_gap(*args, **kwargs)


def _fit_gap(
    image: np.ndarray,
    centre_px: tuple[float, float],
    radius_px: float,
    *,
    aspect: float = 1.0,
    exclude: np.ndarray | None = None,
    inset: float = 0.985,
    edge_px: float = 3.0,
    max_points: int = 20000,
    nterms: int = len(TERMS),
    finesse: float = 0.0,
    finesse_candidates: tuple[float, ...] | None = None,
    illum_degree: int = 3,
    progress=None,
    prior: GapFit | None = None,
) -> GapFit:
    """Fit the gap model to the pixels inside the aperture.

    Parameters
    ----------
    image : (H, W) float array
        Intensity.
    centre_px : (2,) tuple, (x, y) in pixels; radius_px : float, pixels along x
        The clear aperture (see :func:`ringgauge.form.aperture.find_aperture`).
    aspect : float
        Pixel size y / pixel size x.
    exclude : (H, W) bool array, optional
        Pixels to leave out (glare, known defects).
    inset, edge_px : float
        Fraction of the aperture radius used, and the least margin in pixels left out at the edge.
    max_points : int
        Pixels used per fit (a regular subsample); all pixels are used for the outlier pass.
    nterms : int
        Number of gap terms (6 = piston, tilt, defocus, astigmatism only).
    finesse : float
        Coefficient of finesse F = 4 rho / (1 - rho)^2 of the gap's faces (rho = Fresnel reflectance), for the
        multiple-beam fringe shape; 0 fits plain cosine (two-beam) fringes. See :func:`finesse_coefficient`.
    illum_degree : int
        Degree of the illumination polynomial L(u, v) (the start values use a quadratic).
    finesse_candidates : tuple of float, optional
        Other plausible F values (unknown glass index, two-beam fringes): the fit is repeated with each and the
        best kept; the runner-up and a one-degree-richer illumination model give the model-choice
        sensitivities in ``GapFit.alternatives``.
    prior : GapFit, optional
        The fit of an earlier frame of the same part (same aperture). This frame is then fitted starting from
        that frame's shape, illumination and contrast, with only piston and tilt free at first (a scan over the
        piston), then all terms; its fringe shape and term count are the prior's, and the result keeps the
        prior's orientation of the gap (W or -W), so the two pistons are directly comparable.

    Raises
    ------
    AnalysisError
        When the fringe field has no usable modulation.
    """
    crop = _Crop(image, centre_px, radius_px, aspect)
    profile = None
    # leave out the blurred edge: a relative margin and at least ``edge_px`` pixels (the edge's blur
    # darkens the last pixels and would bend the high radial terms)
    r_use = min(inset, 1.0 - edge_px / radius_px)
    inside = crop.rho2 <= r_use**2
    if exclude is not None:
        inside &= ~np.asarray(exclude[crop.y0 : crop.y1, crop.x0 : crop.x1], dtype=bool)
    n_in = int(inside.sum())
    if n_in < 200:
        raise AnalysisError("too few usable pixels inside the aperture for a form fit (under 200)")
    stride = max(1, int(math.ceil(math.sqrt(n_in / max_points))))
    sel = np.zeros_like(inside)
    sel[::stride, ::stride] = True
    sel &= inside
    # coarse stage on a block-averaged copy (aperture radius ~ 150 px): start values and trials
    dimg, duc, dvr, q = _decimate(crop, 150.0, radius_px)
    drho2 = duc[None, :] ** 2 + dvr[:, None] ** 2
    dinside = drho2 <= r_use**2
    nd = int(dinside.sum())
    cst = max(1, int(math.ceil(math.sqrt(nd / 2000))))
    coarse = np.zeros_like(dinside)
    coarse[::cst, ::cst] = True
    coarse &= dinside
    iy, ix = np.nonzero(coarse)
    cu, cv, cy_ = duc[ix], dvr[iy], dimg[iy, ix]
    if prior is not None:
        if prior.params is None:
            raise ValueError("prior fit carries no parameters")
        nterms = len(prior.coeffs)
        finesse = prior.finesse
        illum_degree = prior.illum_degree
        finesse_candidates = None
        if progress:
            progress("fitting from the first frame's shape (piston and tilt first)")
        cprob = _Problem(cu, cv, cy_, illum_degree, finesse=finesse)
        nw = nterms
        free = np.r_[0:3, nw + 3 : len(prior.params)]  # piston, tilt, and the linear light terms
        tried = []
        for k in range(8):
            p0 = prior.params.copy()
            p0[0] += k / 8.0
            p0[nw + 3 :] = cprob.linear(p0[:nw], p0[nw : nw + 3])[0]
            r = _refine(cprob, p0, nw, max_nfev=25, free=free)
            tried.append((_cost(r), r.x))
        tried.sort(key=lambda t: t[0])
        prob = _Problem(*crop.points(sel), illum_degree, finesse=finesse)
        p0 = tried[0][1].copy()
        p0[nw + 3 :] = prob.linear(p0[:nw], p0[nw : nw + 3])[0]
        p = _refine(prob, p0, nw, max_nfev=60, free=free).x
        last = _refine(prob, p, nw, max_nfev=100)
        p = last.x
    else:
        if progress:
            progress("estimating fringe frequency")
        starts = _start_values(dimg, duc, dvr, dinside, radius_px / q)
        # coarse trials with the plain cosine: a half-fringe piston shift is the same as a negative modulation,
        # so one modulation sign suffices; the fringe shape is chosen on the full-resolution sample below
        if progress:
            progress(f"trying {len(starts)} start values")
        tried = []
        cprob = _Problem(cu, cv, cy_, finesse=0.0)
        for c0 in starts:
            r = _refine(cprob, cprob.phased_start(c0), LOW_ORDER, max_nfev=20)
            tried.append((_cost(r), tuple(r.x)))
        tried.sort(key=lambda t: t[0])
        if progress:
            progress(f"fitting the gap model to {int(sel.sum())} pixels")
        # the two best distinct candidates, refined with all terms on a medium sample; the better one on all
        mid = np.zeros_like(inside)
        mst = max(stride, int(math.ceil(math.sqrt(n_in / 6000))))
        mid[::mst, ::mst] = True
        mid &= inside
        # with an unknown fringe shape, each candidate start is refined under the plain cosine and under the
        # given multiple-beam shape: started from the other shape's solution, a low-power fit stays in a basin
        # biased by the shape mismatch (0.2 fringe at one fringe of power with a zonal term)
        mu, mv, my = crop.points(mid)
        shapes = (finesse,) if not finesse_candidates else tuple(dict.fromkeys((finesse, 0.0)))
        best = None
        seen = []
        for _, pt in tried:
            if len(seen) == 2:
                break
            c = np.asarray(pt[:LOW_ORDER])
            if any(np.allclose(np.abs(c[1:]), np.abs(o[1:]), atol=0.05) for o in seen):
                continue
            seen.append(c)
            for Fs in shapes:
                mp_ = _Problem(mu, mv, my, illum_degree, finesse=Fs)
                p0 = mp_.start(np.concatenate([c, np.zeros(max(0, nterms - LOW_ORDER))]), pt[LOW_ORDER : LOW_ORDER + 3])
                r = _refine(mp_, p0, nterms, max_nfev=60)
                if best is None or _cost(r) < best[0]:
                    best = (_cost(r), r.x, Fs, mp_)
        nw = nterms
        p_mid, finesse, mprob = best[1], best[2], best[3]
        profile = None
        if abs(2 * p_mid[3]) < LOW_POWER:
            if progress:
                progress("low power: scanning the power against the illumination")
            p_mid, profile = _power_profile(mprob, p_mid, nw)
        prob = _Problem(*crop.points(sel), illum_degree, finesse=finesse)
        last = _refine(prob, p_mid, nw, max_nfev=60)
        p = last.x
    # outlier pass on all pixels: dust, glints and chips leave large residuals in compact clusters
    if progress:
        progress("looking for dust and defects")
    resid = _model_map(crop, p, nw, finesse, illum_degree)
    resid -= crop.img
    r_in = resid[sel]  # the fit's own sample (tens of thousands of pixels) gives the robust scatter as well
    sig = 1.4826 * np.median(np.abs(r_in - np.median(r_in)))
    bad = _open_dilate(inside & (np.abs(resid) > max(4.5 * sig, 1e-6))) & inside
    if last.success and not np.any(sel & bad):
        res = last  # no sampled pixel left out: the same problem, already solved
    else:
        prob = _Problem(*crop.points(sel & ~bad), illum_degree, finesse=finesse)
        res = _refine(prob, p, nw, max_nfev=100)
    alternatives = {}
    weak_note = ""
    if prior is None and profile is not None:
        lo_p, hi_p, ends = profile
        if hi_p - lo_p > 0.1:
            # both ends of the interval are model-choice alternatives: their distances enter the budget, so the
            # expanded uncertainty reaches over the whole interval
            for label, pe in zip(("low", "high"), ends):
                alternatives[f"low-power ambiguity ({label} end of the power profile)"] = (pe[:nw].copy(),
                                                                                         pe[nw : nw + 3].copy())
            weak_note = (f"weak fit: powers from {lo_p:.2f} to {hi_p:.2f} fringe fit this image almost equally well "
                         "(little power under uneven light); the uncertainty is widened to cover them")
    shape_note = ""
    if finesse_candidates:
        # the fringe shape depends on the faces' reflectance (glass index, coatings, a liquid gap): refit with
        # each candidate coefficient of finesse and keep the one that fits best; the runner-up gives the
        # model-choice sensitivity
        if progress:
            progress("choosing the fringe shape")
        # the choice and the sensitivities are refits on a third of the sample (the same pixels for every
        # candidate, so their differences are the model's, not the noise's)
        kk = max(1, -(-prob.y.size // 6000))

        def on_mid(F, deg=illum_degree, _p=prob):
            return _Problem(_p.u[::kk], _p.v[::kk], _p.y[::kk], deg, finesse=F)

        fits = [(finesse, _refine(on_mid(finesse), res.x, nw, max_nfev=30))]
        for Fc in finesse_candidates:
            if abs(Fc - finesse) < 1e-9:
                continue
            fits.append((Fc, _refine(on_mid(Fc), res.x, nw, max_nfev=40)))
        fits.sort(key=lambda t: _cost(t[1]))
        if abs(fits[0][0] - finesse) > 1e-9:
            finesse = fits[0][0]
            prob = _Problem(prob.u, prob.v, prob.y, illum_degree, finesse=finesse)
            res = _refine(prob, fits[0][1].x, nw, max_nfev=60)
        chosen = fits[0][1].x
        d_alt = fits[1][1].x - chosen
        alternatives["fringe shape (next best F)"] = ((res.x + d_alt)[:nw].copy(), (res.x + d_alt)[nw : nw + 3].copy())
        shape_note = f"fringe shape: coefficient of finesse F = {finesse:.3f} fitted best"
    p = res.x
    r = res.fun[:-2]  # without the two constraint rows
    ndata, nvarys = r.size, p.size
    chisqr = float(np.sum(r * r))
    redchi = chisqr / max(1, ndata - nvarys)
    good = inside & ~bad
    corr = _correlation_factor(resid, good, stride)
    cov = None
    try:
        J = res.jac
        cov_full = np.linalg.inv(J.T @ J) * redchi * corr
        cov = cov_full[:nw, :nw]
    except np.linalg.LinAlgError:
        pass
    if finesse_candidates:
        if progress:
            progress("model sensitivity (illumination)")
        alt = on_mid(finesse, illum_degree + 1)
        ra = _refine(alt, alt.start(chosen[:nw], chosen[nw : nw + 3]), nw, max_nfev=40)
        dc = ra.x[: nw + 3] - chosen[: nw + 3]
        alternatives[f"illumination model (degree {illum_degree + 1})"] = ((p[:nw] + dc[:nw]).copy(),
                                                                          (p[nw : nw + 3] + dc[nw:]).copy())
    edge_scale = _edge_from_model(resid, crop.rho2, radius_px) if prior is None else 1.0
    c, m = p[:nw], p[nw : nw + 3]
    contrast = _contrast(prob, p, nw)
    bright0 = bool(m[0] * p[nw + 4] > 0)  # fringe amplitude L*M > 0: bright where W is whole
    if prior is None:
        c_can, m_can = _canonical(c, m, bright0)
        flip_m = bright0
        flip_w = bool(c_can[3] * c[3] < 0)
    else:
        # the prior's orientation: same half-fringe convention and the same sign of W (never re-decided here)
        flip_m, flip_w = prior.transform
        c_can = np.array(c, dtype=float)
        m_can = np.array(m, dtype=float)
        pp = prior.params
        if bright0 != bool(pp[nw] * pp[nw + 4] > 0):
            flip_m = not flip_m  # the fringe amplitude changed sign: a half-fringe shift
        if flip_m:
            c_can[0] += 0.5
            m_can = -m_can
        if flip_w:
            c_can = -c_can
        c_can[0] = c_can[0] % 1.0
    m = m_can
    alt_out = {}
    for label, (ca, ma) in alternatives.items():
        ca = ca.copy()
        if label.startswith("low-power ambiguity") and ca[3] * p[3] < 0:
            # the power profile is drawn in the power >= 0 orientation: bring its ends to this fit's raw W or -W
            # (the image is the same) before the transforms below; left as they were, a fit whose raw power was
            # negative set the ends at the opposite sign, and their distance -- twice the power -- entered the
            # budget as if the power were that uncertain
            ca = -ca
        if np.sign(ma[0]) != np.sign(m[0]) and np.sign(ma[0]) == np.sign(p[nw]):
            ca[0] += 0.5
        if flip_w:
            ca = -ca
        ca[0] = (ca[0] - c_can[0] + 0.5) % 1.0 - 0.5 + c_can[0]
        alt_out[label] = ca
    c = c_can
    notes = [shape_note] if shape_note else []
    if weak_note:
        notes.append(weak_note)
    if abs(m[0]) > 1.1:
        notes.append("fitted fringe modulation above 1 (unphysical): the illumination and a sub-fringe power are "
                     "hard to tell apart in this image; treat power below one fringe with care")
    if contrast < 0.1:
        notes.append(f"weak fringe contrast ({contrast:.2f}); results are less certain")
    return GapFit(
        names=tuple(t[0] for t in TERMS[:nw]),
        coeffs=c,
        covariance=cov,
        centre_px=(float(centre_px[0]), float(centre_px[1])),
        radius_px=float(radius_px),
        aspect=float(aspect),
        ndata=int(ndata),
        nvarys=int(nvarys),
        chisqr=chisqr,
        redchi=float(redchi),
        residual_rms=float(np.sqrt(chisqr / ndata)),
        contrast=contrast,
        correlation_factor=float(corr),
        success=bool(res.success),
        message=str(res.message),
        masked_px=crop.paste(bad),
        notes=tuple(notes),
        alternatives=alt_out,
        edge_scale=float(edge_scale),
        finesse=float(finesse),
        params=p.copy(),
        transform=(flip_m, flip_w),
        illum_degree=int(illum_degree),
    )


LOW_POWER = 1.6  # fringes: below this the power is profiled against the illumination (common practice, no source)
PROFILE_BAND = 0.015  # relative cost band of the power profile (see _power_profile)


def _power_profile(prob: _Problem, p, nw):
    """Profile the fit cost over the power (defocus held at a grid of values from 0 to 2.2 fringes, all else
    free). Under about a fringe and a half the fringe term and the illumination polynomial trade off: several
    powers fit nearly as well, and the plain minimisation stops in whichever basin it starts in.

    Returns the best parameter vector and (low, high, end vectors) of the powers whose cost lies within the
    2-sigma band Delta chi^2 = 4 of the best (scaled by the residual variance), or None for the interval when
    the profile could not be drawn.
    """
    free = np.r_[0:3, 4 : p.size]
    n = prob.y.size
    base = _refine(prob, p, nw, max_nfev=40)
    x0 = base.x.copy()
    if x0[3] < 0:  # profile in the power >= 0 orientation (W -> -W fits the same)
        x0[:nw] = -x0[:nw]
    rows = [(abs(2 * base.x[3]), _cost(base), base.x)]
    grid = np.arange(0.0, 2.21, 0.1)
    p_here = 2 * x0[3]
    # continuation: walk up and down from the fitted power, each step starting from its neighbour's solution
    for seq in (grid[grid >= p_here], grid[grid < p_here][::-1]):
        q = x0.copy()
        for P in seq:
            q = q.copy()
            q[0] += P / 2 - q[3]  # keep the gap at the centre
            q[3] = P / 2
            q[nw + 3 :] = prob.linear(q[:nw], q[nw : nw + 3])[0]
            r = _refine(prob, q, nw, max_nfev=25, free=free)
            rows.append((P, _cost(r), r.x))
            q = r.x
    best = min(rows, key=lambda t: t[1])
    rb = _refine(prob, best[2], nw, max_nfev=60)
    cmin = min(_cost(rb), best[1])
    pbest = rb.x if _cost(rb) <= best[1] else best[2]
    sigma2 = cmin / max(1, n - p.size)
    # band: Delta chi^2 = 4 for pixel noise, and at least 1.5 % of the cost for the model's own misfit (fringe
    # shape, illumination polynomial), which dominates on real images (chosen here on generated parts: at 0.5 %
    # half a fringe with tilt under strongly uneven light came out 0.13 fringe low with U = 0.02 and no warning)
    tol = max(4.0 * sigma2, PROFILE_BAND * cmin)
    ok = [t for t in rows if t[1] - cmin < tol]
    ok.append((abs(2 * pbest[3]), cmin, pbest))
    lo = min(t[0] for t in ok)
    hi = max(t[0] for t in ok)
    ends = [min(ok, key=lambda t: t[0])[2], max(ok, key=lambda t: t[0])[2]]
    return pbest, (lo, hi, ends)


@dataclass
class _LMResult:
    x: np.ndarray
    fun: np.ndarray
    jac: np.ndarray
    success: bool
    message: str


def _refine(prob: _Problem, p0, nw, max_nfev: int = 100, free=None) -> _LMResult:
    """Joint least squares of all terms from the start vector ``p0`` (see :class:`_Problem`).

    Levenberg-Marquardt with Marquardt's diagonal scaling, solved through the normal equations (the
    Jacobian has a few dozen columns and tens of thousands of rows; BLAS makes J^T J cheap). ``free``
    (indices) limits the parameters varied; the others stay at their start values.
    """
    p = np.asarray(p0, dtype=float).copy()
    idx = np.arange(p.size) if free is None else np.asarray(free)
    r = prob.full_residual(p, nw)
    cost = float(r @ r)
    lam = 1e-3

    buf = []

    def jac(q):
        # one array for every iteration's Jacobian (A and g are formed from it before it is refilled)
        J = prob.full_jac(q, nw, out=buf[0] if buf else None)
        if not buf:
            buf.append(J)
        return J if free is None else J[:, idx]

    J = jac(p)
    nfev = 1
    success, message = False, "iteration limit reached"
    while nfev < max_nfev:
        A = J.T @ J
        g = J.T @ r
        d = np.diag(A).copy()
        d[d <= 0] = 1.0
        improved = False
        while nfev < max_nfev:
            try:
                step = np.linalg.solve(A + lam * np.diag(d), -g)
            except np.linalg.LinAlgError:
                lam *= 10
                continue
            p_new = p.copy()
            p_new[idx] += step
            r_new = prob.full_residual(p_new, nw)
            nfev += 1
            c_new = float(r_new @ r_new)
            if c_new < cost:
                rel = (cost - c_new) / max(cost, 1e-300)
                p, r, cost = p_new, r_new, c_new
                lam = max(lam / 5, 1e-9)
                improved = True
                break
            lam *= 8
            if lam > 1e10:
                break
        if not improved:
            success, message = True, "no further decrease of the sum of squares"
            break
        J = jac(p)
        if rel < 1e-9 or np.max(np.abs(step[idx < nw])) < 1e-6:
            success, message = True, "converged (relative decrease below 1e-9 or step below 1e-6 fringe)"
            break
    return _LMResult(p, r, J, success, message)


def _cost(res) -> float:
    return float(np.sum(res.fun**2))


def _extend(p, nw_old, nw_new):
    return np.concatenate([p[:nw_old], np.zeros(nw_new - nw_old), p[nw_old:]])


def _contrast(prob: _Problem, p, nw) -> float:
    """Median fringe visibility over the fitted pixels: |L M| / (s + L), the fringe amplitude over the mean."""
    m, lin = p[nw : nw + 3], p[nw + 3 :]
    L = lin[1:] @ prob.PL
    M = m @ prob.PM
    return float(np.median(np.abs(L * M)) / max(abs(float(np.median(lin[0] + L))), 1e-9))


def _canonical(c, m, bright0=None):
    """Dark at zero gap (fringe amplitude < 0: a half-fringe shift flips the cosine), power >= 0 (W -> -W
    leaves the image unchanged) and piston in [0, 1) (W -> W + 1 likewise)."""
    c = np.array(c, dtype=float)
    m = np.array(m, dtype=float)
    if (m[0] > 0) if bright0 is None else bright0:
        m = -m
        c[0] += 0.5
    # defocus Z(2,0) = 2 rho^2 - 1 carries the power; flip the whole gap when it is negative
    if c[3] < 0:
        c = -c
    c[0] = c[0] % 1.0
    return c, m


def _start_values(img, uc, vr, inside, radius_px):
    """Candidate start vectors (piston, tilt_x, tilt_y, defocus, astig_0, astig_45) from the local frequency.

    ``img`` is a (block-averaged) frame with column / row coordinates ``uc`` / ``vr`` and ``radius_px`` its
    aperture radius in its own pixels."""
    cands = []
    q, theta, g2 = _frequency_quadratic(img, uc, vr, inside, radius_px)
    if q is not None:
        quad = _from_quadratic(q)
        cands += quad
        # |grad W|^2 alone cannot place a saddle's axis (with M's eigenvalues +a and -a, M^2 = a^2 I looks like
        # a sphere): the squared complex gradient, which carries the fringes' orientation, does
        cands += _from_complex_quadratic(g2)
        # straight or gently curved fringes (a near-flat, a tilted part): |grad W|^2 is nearly constant and the
        # quadratic gives no tilt direction; the fringes' orientation (structure tensor) does, up to sign
        t = math.sqrt(max(q[0], 0.0))
        if t > 0.3 and theta is not None:
            tv = t * np.array([math.cos(theta), math.sin(theta)])
            cands.append(np.array([0.25, tv[0], tv[1], 0.0, 0.0, 0.0]))
            c = quad[0].copy()
            c[1:3] = tv
            cands.append(c)
    # small-power guesses: a fraction of a fringe to two fringes with the rings centred
    for p in (0.25, 0.6, 1.2, 2.0):
        cands.append(np.array([0.25, 0.0, 0.0, p / 2, 0.0, 0.0]))
    return cands


def _frequency_quadratic(img, uc, vr, inside, radius_px):
    """Fit |grad W|^2 (fringes per aperture radius, squared) as a quadratic in (u, v); also the dominant
    direction (radians from u toward v, modulo pi) of the intensity gradient. (None, None) when too little
    of the aperture is usable."""
    u = np.broadcast_to(uc[None, :], img.shape)
    v = np.broadcast_to(vr[:, None], img.shape)
    s_hp = max(3.0, radius_px / 10)
    fin = inside.astype(np.float64)
    base = _smooth(np.where(inside, img, 0.0), s_hp)
    wgt = _smooth(fin, s_hp)
    hp = np.where(inside, img - base / np.maximum(wgt, 1e-6), 0.0)
    hp = ndimage.gaussian_filter(hp, 1.5)
    gy, gx = np.gradient(hp)
    s_avg = max(3.0, radius_px / 12)
    e_grad = _smooth(gx * gx + gy * gy, s_avg)
    e_sig = _smooth(hp * hp, s_avg)
    w_in = _smooth(fin, s_avg)
    core = inside & (u * u + v * v < 0.8**2) & (w_in > 0.9)
    if core.sum() < 100:
        return None, None, None
    # dominant direction of the fringes' gradient over the core, in (u, v): the structure tensor
    du = abs(uc[1] - uc[0]) if uc.size > 1 else 1.0
    dv = abs(vr[1] - vr[0]) if vr.size > 1 else 1.0
    gu, gv = gx[core] / du, gy[core] / dv
    theta = 0.5 * math.atan2(2 * float(np.mean(gu * gv)), float(np.mean(gu * gu) - np.mean(gv * gv)))
    step = max(1, int(math.sqrt(core.sum() / 5000)))
    sel = np.zeros_like(core)
    sel[::step, ::step] = True
    sel &= core & (e_sig > 1e-12)
    if sel.sum() < 50:
        return None, None, None
    f2 = e_grad[sel] / e_sig[sel] * (radius_px / (2 * np.pi)) ** 2  # fringes per radius, squared
    uu, vv = u[sel], v[sel]
    X = np.stack([np.ones_like(uu), uu, vv, uu * uu, uu * vv, vv * vv]).T
    w = np.sqrt(e_sig[sel])
    coef, *_ = np.linalg.lstsq(X * w[:, None], f2 * w, rcond=None)
    # the squared complex gradient (g_u + i g_v)^2 = |g|^2 exp(2 i phi) is blind to the sign of the gradient
    # (the fringes' sin flips it every half fringe) yet keeps its direction: its local average over the signal
    # energy is (grad W)^2 in complex form, per radius (same scaling as f2)
    gxu, gyv = gx / (du * radius_px), gy / (dv * radius_px)
    g2r = _smooth(gxu * gxu - gyv * gyv, s_avg)[sel] / e_sig[sel] * (radius_px / (2 * np.pi)) ** 2
    g2i = _smooth(2 * gxu * gyv, s_avg)[sel] / e_sig[sel] * (radius_px / (2 * np.pi)) ** 2
    cr, *_ = np.linalg.lstsq(X * w[:, None], g2r * w, rcond=None)
    ci, *_ = np.linalg.lstsq(X * w[:, None], g2i * w, rcond=None)
    return coef, theta, cr + 1j * ci


def _from_complex_quadratic(g):
    """Start vectors from the squared complex gradient G^2 = g0 + g1 u + g2 v + g3 u^2 + g4 uv + g5 v^2 (complex).

    With W = P (u^2 + v^2) + A1 (u^2 - v^2) + A2 (2uv) + t.x and z = u + i v, the complex gradient is
    G = W_u + i W_v = 2 P z + 2 A conj(z) + T (A = A1 + i A2, T = t_u + i t_v), so
    G^2 = 4 P^2 z^2 + 4 A^2 conj(z)^2 + 8 P A |z|^2 + 4 P T z + 4 A T conj(z) + T^2. The coefficients of z^2,
    conj(z)^2 and |z|^2 follow from those of u^2, uv, v^2; P and A from the first two (each up to sign, the
    relative sign from the third), T from the linear terms. Both relative signs are returned.
    """
    if g is None or not np.all(np.isfinite(g)):
        return []
    a_z2 = 0.5 * ((g[3] - g[5]) / 2 + g[4] / 2j)  # coefficient of z^2
    a_zb2 = 0.5 * ((g[3] - g[5]) / 2 - g[4] / 2j)  # coefficient of conj(z)^2
    a_r2 = (g[3] + g[5]) / 2  # coefficient of |z|^2
    P = 0.5 * math.sqrt(max(a_z2.real, 0.0))
    A = 0.5 * np.sqrt(a_zb2)
    if abs(A) < 0.05 and P < 0.05:
        return []
    cz = 0.5 * (g[1] - 1j * g[2])  # coefficient of z
    czb = 0.5 * (g[1] + 1j * g[2])  # coefficient of conj(z)
    out = []
    signs = (1, -1)
    if P > 0.05 and abs(A) > 0.05:
        # the |z|^2 term fixes the relative sign of P and A (8 P A); keep the other as a spare
        signs = (1, -1) if (a_r2 * np.conj(8 * P * A)).real >= 0 else (-1, 1)
    for sgn in signs:
        Aa = sgn * A
        den = 4 * (P * P + abs(Aa) ** 2)
        T = (P * cz + np.conj(Aa) * czb) / den if den > 0 else 0j
        if not np.isfinite(T) or abs(T) > 4 * (P + abs(Aa) + 1):
            T = 0j
        out.append(np.array([0.25, T.real, T.imag, P / 2, Aa.real, Aa.imag]))
    return out


def _from_quadratic(q):
    """Start vectors from |grad W|^2 = q0 + q1 u + q2 v + q3 u^2 + q4 uv + q5 v^2.

    With W = t.x + x^T M x (plus piston), grad W = t + 2 M x and |grad W|^2 = |t|^2 + 4 t^T M x + 4 x^T M^2 x.
    """
    M2 = np.array([[q[3], q[4] / 2], [q[4] / 2, q[5]]]) / 4.0
    ev, V = np.linalg.eigh(M2)
    ev = np.sqrt(np.clip(ev, 0, None))
    out = []
    for s1, s2 in ((1, 1), (1, -1)):
        for scale in (1.0, 0.8, 1.25):
            M = V @ np.diag([s1 * ev[0], s2 * ev[1]]) @ V.T * scale
            try:
                t = np.linalg.solve(4 * M, np.array([q[1], q[2]]) * scale**2)
            except np.linalg.LinAlgError:
                t = np.zeros(2)
            if not np.all(np.isfinite(t)) or np.hypot(*t) > 4 * (abs(np.trace(M)) + 1):
                t = np.zeros(2)
            # W = p (u^2+v^2) + A1 (u^2 - v^2) + A2 (2uv) + t.x
            p = (M[0, 0] + M[1, 1]) / 2
            A1 = (M[0, 0] - M[1, 1]) / 2
            A2 = M[0, 1]
            # Zernike: defocus 2rho^2-1 -> coeff p/2; astig_0 = u^2-v^2 -> A1; astig_45 = 2uv -> A2
            out.append(np.array([0.25, t[0], t[1], p / 2, A1, A2]))
    return out


def _edge_from_model(resid, rho2, radius_px) -> float:
    """Where the fitted fringe model stops describing the image, as a multiple of the aperture radius.

    ``resid`` is model minus image over a crop reaching beyond the edge (the model extrapolated), ``rho2`` the
    squared normalised radius there. The residual is small inside the part and large outside (the plate alone
    shows no fringes). The edge is placed where the binned residual crosses half-way between the two levels.
    Returns 1.0 when the contrast is not clear.
    """
    band = (rho2 > 0.88**2) & (rho2 < 1.12**2)
    if band.sum() < 500:
        return 1.0
    res = np.abs(resid[band])
    rb = np.sqrt(rho2[band])
    step = 0.5 / radius_px
    edges = np.arange(0.88, 1.12 + step, step)
    idx = np.digitize(rb, edges) - 1
    nb = len(edges) - 1
    med = np.full(nb, np.nan)
    order = np.argsort(idx, kind="stable")
    sidx, sres = idx[order], res[order]
    bounds = np.searchsorted(sidx, np.arange(nb + 1))
    for i in range(nb):
        if bounds[i + 1] > bounds[i]:
            med[i] = np.median(sres[bounds[i] : bounds[i + 1]])
    centres = 0.5 * (edges[:-1] + edges[1:])
    inner = np.nanmedian(med[(centres > 0.9) & (centres < 1 - 5 / radius_px)])
    outer = np.nanmedian(med[centres > 1 + 8 / radius_px]) if np.any(centres > 1 + 8 / radius_px) else np.nan
    if not (np.isfinite(inner) and np.isfinite(outer)) or outer < 3 * inner:
        return 1.0
    half = 0.5 * (inner + outer)
    start = np.searchsorted(centres, 1 - 5 / radius_px)
    for i in range(start, len(centres)):
        if np.isfinite(med[i]) and med[i] > half:
            k = centres[i] - 0.5 * step
            return float(k) if abs(k - 1) < 0.05 else 1.0
    return 1.0


def _correlation_factor(resid, mask, stride):
    """Variance inflation for correlated residuals at the sampling stride.

    The residual map's autocorrelation at lags of one stride along x and y estimates how much neighbouring
    samples share; the factor (1 + 2 rho_x)(1 + 2 rho_y), floored at 1, is the usual first-order correction
    for a sum over an AR(1)-like correlated sample.
    """
    # every fourth row (for the x lag) and column (for the y lag) is plenty for two correlation coefficients
    m = mask
    r = np.where(m, resid, 0.0)
    rv = r[m]
    var = float(np.mean(rv * rv)) if rv.size else 0.0
    if var <= 0:
        return 1.0
    rhos = []
    for dy, dx in ((0, stride), (stride, 0)):
        sub = (slice(None, None, 4), slice(None)) if dy == 0 else (slice(None), slice(None, None, 4))
        a = r[: r.shape[0] - dy, : r.shape[1] - dx][sub]
        b = r[dy:, dx:][sub]
        mm = (m[: m.shape[0] - dy, : m.shape[1] - dx] & m[dy:, dx:])[sub]
        if mm.sum() < 100:
            rhos.append(0.0)
            continue
        rhos.append(max(0.0, float(np.mean(a[mm] * b[mm]) / var)))
    return max(1.0, (1 + 2 * rhos[0]) * (1 + 2 * rhos[1]))
