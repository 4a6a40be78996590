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
    return np.stack([u**i * v**j for d in range(degree + 1) for i in range(d, -1, -1) for j in [d - i]])


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

    def gap(self, u, v) -> np.ndarray:
        """Gap in fringes at normalised coordinates."""
        return np.tensordot(self.coeffs, gap_basis(u, v, len(self.coeffs)), axes=1)


class _Problem:
    """Pixels of one frame inside the aperture, with the design pieces that do not change during a fit.

    Intensity model: I = s + L(u, v) · (1 + M(u, v) · cos(2 pi W(u, v))), with s a uniform stray level,
    L the illumination (quadratic), M = m0 + m1 u + m2 v the fringe modulation and W the gap in fringes.
    The illumination multiplies the fringe term as it multiplies the light: a free amplitude polynomial
    would absorb a sub-fringe power (cos of a small quadratic is itself nearly quadratic).
    Parameter vector: [gap terms (nw), m0, m1, m2, s, L terms (6)]; s and L enter linearly.
    """

    NM = 3

    def __init__(self, u, v, y, illum_degree=2, finesse=0.0):
        self.illum_degree = illum_degree
        self.u, self.v, self.y = u, v, y
        self.F = float(finesse)
        self.PL = _poly2(u, v, illum_degree)
        self.PM = _poly2(u, v, 1)
        self.Z = gap_basis(u, v)

    def _parts(self, c, m):
        W = np.tensordot(c, self.Z[: len(c)], axes=1)
        ph = 2 * np.pi * W
        M = m @ self.PM
        return ph, M

    def design(self, c, m):
        ph, M = self._parts(c, m)
        f = 1.0 + M * self.shape(ph)
        return np.vstack([np.ones_like(f), self.PL * f]).T

    def shape(self, ph):
        """Fringe shape: cos(ph) for two-beam fringes; the multiple-beam (Airy) profile for F > 0, scaled to
        the same range [-1, 1] (1 at zero gap)."""
        if self.F == 0:
            return np.cos(ph)
        x = 0.5 * (1.0 - np.cos(ph))
        return 1.0 - 2.0 * (1.0 + self.F) * x / (1.0 + self.F * x)

    def dshape(self, ph):
        if self.F == 0:
            return -np.sin(ph)
        x = 0.5 * (1.0 - np.cos(ph))
        return -(1.0 + self.F) * np.sin(ph) / (1.0 + self.F * x) ** 2

    def linear(self, c, m):
        X = self.design(c, m)
        lin, *_ = np.linalg.lstsq(X, self.y, rcond=None)
        return lin, X

    def projected_residual(self, c, m):
        lin, X = self.linear(c, m)
        return X @ lin - self.y

    def _penalty_weight(self):
        if not hasattr(self, "_kappa"):
            self._kappa = float(np.sqrt(self.y.size) * max(np.std(self.y), 1e-6))
        return self._kappa

    def full_residual(self, p, nw):
        """Residuals, plus one row that keeps the modulation physical (|m0| <= 1: intensity cannot go
        below the stray level); the row is zero inside that range."""
        c, m, lin = p[:nw], p[nw : nw + self.NM], p[nw + self.NM :]
        r = self.design(c, m) @ lin - self.y
        pen = self._penalty_weight() * max(0.0, abs(m[0]) - 1.0)
        return np.append(r, pen)

    def full_jac(self, p, nw):
        c, m, lin = p[:nw], p[nw : nw + self.NM], p[nw + self.NM :]
        ph, M = self._parts(c, m)
        cs = self.shape(ph)
        L = lin[1:] @ self.PL
        X = np.vstack([np.ones_like(cs), self.PL * (1.0 + M * cs)])
        Jw = self.Z[:nw] * (2 * np.pi * L * M * self.dshape(ph))
        Jm = self.PM * (L * cs)
        J = np.vstack([Jw, Jm, X]).T
        row = np.zeros((1, J.shape[1]))
        if abs(m[0]) > 1.0:
            row[0, nw] = self._penalty_weight() * np.sign(m[0])
        return np.vstack([J, row])

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


def fit_gap(
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

    Raises
    ------
    AnalysisError
        When the fringe field has no usable modulation.
    """
    img = np.asarray(image, dtype=np.float64)
    u_all, v_all = normalised_coords(img.shape, centre_px, radius_px, aspect)
    # leave out the blurred edge: a relative margin and at least ``edge_px`` pixels (the edge's blur
    # darkens the last pixels and would bend the high radial terms)
    r_use = min(inset, 1.0 - edge_px / radius_px)
    inside = (u_all**2 + v_all**2) <= r_use**2
    if exclude is not None:
        inside &= ~exclude
    n_in = int(inside.sum())
    if n_in < 200:
        raise AnalysisError("too few usable pixels inside the aperture for a form fit (under 200)")
    stride = max(1, int(math.floor(math.sqrt(n_in / max_points))))
    sub = np.zeros_like(inside)
    sub[::stride, ::stride] = True
    sel = inside & sub
    if progress:
        progress("estimating fringe frequency")
    starts = _start_values(img, u_all, v_all, inside, radius_px)
    coarse = np.zeros_like(inside)
    cstride = max(stride, int(math.floor(math.sqrt(n_in / 4000))))
    coarse[::cstride, ::cstride] = True
    coarse &= inside
    shapes = (finesse,) if not finesse_candidates else tuple(dict.fromkeys((finesse, 0.0)))
    if progress:
        progress(f"trying {len(starts) * 2 * len(shapes)} start values")
    tried = []
    for Fs in shapes:
        cprob = _Problem(u_all[coarse], v_all[coarse], img[coarse], finesse=Fs)
        for c0 in starts:
            for m0 in ((-0.8, 0, 0), (0.8, 0, 0)):
                r = _refine(cprob, cprob.start(c0, m0), LOW_ORDER, max_nfev=30)
                tried.append((_cost(r), Fs, tuple(r.x)))
    tried.sort(key=lambda t: t[0])
    if progress:
        progress(f"fitting the gap model to {int(sel.sum())} pixels")
    best = None
    seen = []
    for _, Fs, pt in tried:
        if len(seen) == 2:
            break
        c = np.asarray(pt[:LOW_ORDER])
        if any(np.allclose(np.abs(c[1:]), np.abs(o[1:]), atol=0.05) for o in seen):
            continue
        seen.append(c)
        prob = _Problem(u_all[sel], v_all[sel], img[sel], illum_degree, finesse=Fs)
        p0 = prob.start(np.concatenate([c, np.zeros(max(0, nterms - LOW_ORDER))]), pt[LOW_ORDER : LOW_ORDER + 3])
        r = _refine(prob, p0, nterms)
        if best is None or _cost(r) < best[0]:
            best = (_cost(r), r.x, Fs)
    p = best[1]
    finesse = best[2]
    nw = nterms
    # outlier pass on all pixels: dust, glints and chips leave large residuals in compact clusters
    if progress:
        progress("looking for dust and defects")
    full = _Problem(u_all[inside], v_all[inside], img[inside], illum_degree, finesse=finesse)
    r = full.full_residual(p, nw)[:-1]
    sig = 1.4826 * np.median(np.abs(r - np.median(r)))
    bad = np.zeros_like(inside)
    bad[inside] = np.abs(r) > max(4.5 * sig, 1e-6)
    bad = ndimage.binary_opening(bad, iterations=1)
    bad = ndimage.binary_dilation(bad, iterations=3) & inside
    sel2 = sel & ~bad
    prob = _Problem(u_all[sel2], v_all[sel2], img[sel2], illum_degree, finesse=finesse)
    res = _refine(prob, p, nw, max_nfev=200)
    alternatives = {}
    shape_note = ""
    if finesse_candidates:
        # the fringe shape depends on the faces' reflectance (glass index, coatings, a liquid gap): refit with
        # each candidate coefficient of finesse and keep the one that fits best; the runner-up gives the
        # model-choice sensitivity
        if progress:
            progress("choosing the fringe shape")
        fits = [(finesse, prob, res)]
        for Fc in finesse_candidates:
            if abs(Fc - finesse) < 1e-9:
                continue
            pc = _Problem(u_all[sel2], v_all[sel2], img[sel2], illum_degree, finesse=Fc)
            fits.append((Fc, pc, _refine(pc, res.x, nw, max_nfev=80)))
        fits.sort(key=lambda t: _cost(t[2]))
        finesse, prob, res = fits[0]
        alternatives["fringe shape (next best F)"] = (fits[1][2].x[:nw].copy(), fits[1][2].x[nw : nw + 3].copy())
        shape_note = f"fringe shape: coefficient of finesse F = {finesse:.3f} fitted best"
    p = res.x
    r = res.fun[:-1]  # without the modulation row
    ndata, nvarys = r.size, p.size
    chisqr = float(np.sum(r * r))
    redchi = chisqr / max(1, ndata - nvarys)
    corr = _correlation_factor(img, inside & ~bad, p, nw, stride, u_all, v_all, finesse, illum_degree)
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
        alt = _Problem(u_all[sel2], v_all[sel2], img[sel2], illum_degree + 1, finesse=finesse)
        ra = _refine(alt, alt.start(p[:nw], p[nw : nw + 3]), nw, max_nfev=60)
        alternatives[f"illumination model (degree {illum_degree + 1})"] = (ra.x[:nw].copy(), ra.x[nw : nw + 3].copy())
    edge_scale = _edge_from_model(img, u_all, v_all, p, nw, finesse, illum_degree, radius_px)
    c, m = p[:nw], p[nw : nw + 3]
    contrast = float(abs(m[0]))
    c_can, m = _canonical(c, m)
    # W -> -W and a half-fringe piston shift leave the covariance of the other terms unchanged
    flip_m = np.sign(m[0]) != np.sign(p[nw])
    flip_w = c_can[3] * c[3] < 0
    alt_out = {}
    for label, (ca, ma) in alternatives.items():
        ca = ca.copy()
        if np.sign(ma[0]) != np.sign(m[0]) and np.sign(ma[0]) == np.sign(p[nw]):
            ca[0] += 0.5
        if flip_w:
            ca = -ca
        ca[0] = (ca[0] - c_can[0] + 0.5) % 1.0 - 0.5 + c_can[0]
        alt_out[label] = ca
    c = c_can
    notes = [shape_note] if shape_note else []
    if abs(m[0]) > 1.1:
        notes.append("fitted fringe modulation above 1 (unphysical): the illumination and a sub-fringe power are "
                     "hard to tell apart in this image; treat power below one fringe with care")
    if contrast < 0.1:
        notes.append(f"weak fringe contrast ({contrast:.2f}); results are less certain")
    masked = np.zeros_like(inside)
    masked |= bad
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
        masked_px=masked,
        notes=tuple(notes),
        alternatives=alt_out,
        edge_scale=float(edge_scale),
        finesse=float(finesse),
    )


@dataclass
class _LMResult:
    x: np.ndarray
    fun: np.ndarray
    jac: np.ndarray
    success: bool
    message: str


def _refine(prob: _Problem, p0, nw, max_nfev: int = 100) -> _LMResult:
    """Joint least squares of all terms from the start vector ``p0`` (see :class:`_Problem`).

    Levenberg-Marquardt with Marquardt's diagonal scaling, solved through the normal equations (the
    Jacobian has a few dozen columns and tens of thousands of rows; BLAS makes J^T J cheap).
    """
    p = np.asarray(p0, dtype=float).copy()
    r = prob.full_residual(p, nw)
    cost = float(r @ r)
    lam = 1e-3
    J = prob.full_jac(p, nw)
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
            p_new = p + step
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
        J = prob.full_jac(p, nw)
        if rel < 1e-10 or np.max(np.abs(step[:nw])) < 1e-7:
            success, message = True, "converged (relative decrease below 1e-10 or step below 1e-7 fringe)"
            break
    return _LMResult(p, r, J, success, message)


def _cost(res) -> float:
    return float(np.sum(res.fun**2))


def _extend(p, nw_old, nw_new):
    return np.concatenate([p[:nw_old], np.zeros(nw_new - nw_old), p[nw_old:]])


def _canonical(c, m):
    """Dark at zero gap (m0 < 0: a half-fringe shift flips the cosine), power >= 0 (W -> -W leaves the
    image unchanged) and piston in [0, 1) (W -> W + 1 likewise)."""
    c = np.array(c, dtype=float)
    m = np.array(m, dtype=float)
    if m[0] > 0:
        m = -m
        c[0] += 0.5
    # defocus Z(2,0) = 2 rho^2 - 1 carries the power; flip the whole gap when it is negative
    if c[3] < 0:
        c = -c
    c[0] = c[0] % 1.0
    return c, m


def _start_values(img, u, v, inside, radius_px):
    """Candidate start vectors (piston, tilt_x, tilt_y, defocus, astig_0, astig_45) from the local frequency."""
    cands = []
    q = _frequency_quadratic(img, u, v, inside, radius_px)
    if q is not None:
        cands += _from_quadratic(q)
    # small-power guesses: a fraction of a fringe to two fringes with the rings centred
    for p in (0.25, 0.6, 1.2, 2.0):
        cands.append(np.array([0.25, 0.0, 0.0, p / 2, 0.0, 0.0]))
    return cands


def _frequency_quadratic(img, u, v, inside, radius_px):
    """Fit |grad W|^2 (fringes per aperture radius, squared) as a quadratic in (u, v)."""
    s_hp = max(3.0, radius_px / 10)
    base = ndimage.gaussian_filter(np.where(inside, img, 0.0), s_hp)
    wgt = ndimage.gaussian_filter(inside.astype(float), s_hp)
    hp = np.where(inside, img - base / np.maximum(wgt, 1e-6), 0.0)
    hp = ndimage.gaussian_filter(hp, 1.5)
    gy, gx = np.gradient(hp)
    s_avg = max(3.0, radius_px / 12)
    e_grad = ndimage.gaussian_filter(gx * gx + gy * gy, s_avg)
    e_sig = ndimage.gaussian_filter(hp * hp, s_avg)
    w_in = ndimage.gaussian_filter(inside.astype(float), s_avg)
    core = inside & (u * u + v * v < 0.8**2) & (w_in > 0.9)
    if core.sum() < 100:
        return None
    step = max(1, int(math.sqrt(core.sum() / 5000)))
    sel = np.zeros_like(core)
    sel[::step, ::step] = True
    sel &= core & (e_sig > 1e-12)
    if sel.sum() < 50:
        return None
    f2 = e_grad[sel] / e_sig[sel] * (radius_px / (2 * np.pi)) ** 2  # fringes per radius, squared
    uu, vv = u[sel], v[sel]
    X = np.stack([np.ones_like(uu), uu, vv, uu * uu, uu * vv, vv * vv]).T
    w = np.sqrt(e_sig[sel])
    coef, *_ = np.linalg.lstsq(X * w[:, None], f2 * w, rcond=None)
    return coef


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


def _edge_from_model(img, u_all, v_all, p, nw, finesse, illum_degree, radius_px) -> float:
    """Where the fitted fringe model stops describing the image, as a multiple of the aperture radius.

    The model is extrapolated over an annulus around the detected edge; its residual is small inside the
    part and large outside (the plate alone shows no fringes). The edge is placed where the binned residual
    crosses half-way between the two levels. Returns 1.0 when the contrast is not clear.
    """
    rho = np.hypot(u_all, v_all)
    band = (rho > 0.88) & (rho < 1.12)
    if band.sum() < 500:
        return 1.0
    pr = _Problem(u_all[band], v_all[band], img[band], illum_degree, finesse=finesse)
    res = np.abs(pr.full_residual(p, nw)[:-1])
    rb = rho[band]
    step = 0.5 / radius_px
    edges = np.arange(0.88, 1.12 + step, step)
    idx = np.digitize(rb, edges) - 1
    med = np.array([np.median(res[idx == i]) if np.any(idx == i) else np.nan for i in range(len(edges) - 1)])
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


def _correlation_factor(img, mask, p, nw, stride, u_all, v_all, finesse, illum_degree):
    """Variance inflation for correlated residuals at the sampling stride.

    The residual map's autocorrelation at lags of one stride along x and y estimates how much neighbouring
    samples share; the factor (1 + 2 rho_x)(1 + 2 rho_y), floored at 1, is the usual first-order correction
    for a sum over an AR(1)-like correlated sample.
    """
    y0, y1 = np.nonzero(mask.any(axis=1))[0][[0, -1]]
    x0, x1 = np.nonzero(mask.any(axis=0))[0][[0, -1]]
    box = (slice(y0, y1 + 1), slice(x0, x1 + 1))
    m = mask[box]
    tmp = _Problem(u_all[box][m], v_all[box][m], img[box][m], illum_degree, finesse=finesse)
    r = np.zeros(m.shape)
    r[m] = tmp.full_residual(p, nw)[:-1]
    rv = r[m]
    var = float(np.mean(rv * rv))
    if var <= 0:
        return 1.0
    rhos = []
    for dy, dx in ((0, stride), (stride, 0)):
        a = r[: r.shape[0] - dy, : r.shape[1] - dx]
        b = r[dy:, dx:]
        mm = m[: m.shape[0] - dy, : m.shape[1] - dx] & m[dy:, dx:]
        if mm.sum() < 100:
            rhos.append(0.0)
            continue
        rhos.append(max(0.0, float(np.mean(a[mm] * b[mm]) / var)))
    return max(1.0, (1 + 2 * rhos[0]) * (1 + 2 * rhos[1]))
