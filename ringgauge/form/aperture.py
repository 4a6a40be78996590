"""The clear aperture of a part on a test plate, and the pixels left out of the form fit.

The part's edge bounds the fringe field: inside it the gap reflects with fringes, outside it the plate alone
shows the lamp's smooth light. The plate's light is modelled and divided out (so uneven light is neither part
nor dust), the part is the region departing from it, and the rim is placed to a fraction of a pixel by fitting
a blurred-edge model along rays — a step in brightness and slope, so a rim on a dark, grey or bright fringe is
found alike — and a geometric circle through all rays at once (see :func:`find_aperture`). An aperture can
also be set by hand (:func:`aperture_for`), as the window and ``analyze --aperture`` do.

Masks: saturated pixels (glare) are removed before the fit; dust, scratches and chips are found afterwards as
connected clusters of large fit residuals (see :mod:`ringgauge.form.fit`).

References
----------
Geometric circle fit: least squares on the orthogonal distances (scipy ``least_squares``), preferred over
algebraic fits, which are biased on partial arcs. Blurred edge: a step convolved with a Gaussian point-spread
function is an error function (the closed forms used are moments of the normal distribution). Variable
projection for models linear in some parameters: G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10(2) 413
(1973).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage, optimize

from ..errors import AnalysisError, InputError


@dataclass(frozen=True)
class Aperture:
    """A detected clear-aperture circle.

    Attributes
    ----------
    centre_px : (2,) tuple, (x, y) in pixels
    radius_px : float
        Radius of the detected edge, pixels (x metric).
    centre_u_px, radius_u_px : standard uncertainties from the circle fit (k = 1), pixels.
    edge_rms_px : float
        RMS distance of the outline points from the circle (a chipped or non-round edge raises it).
    """

    centre_px: tuple[float, float]
    radius_px: float
    centre_u_px: tuple[float, float] = (0.0, 0.0)
    radius_u_px: float = 0.0
    edge_rms_px: float = 0.0
    notes: tuple[str, ...] = field(default_factory=tuple)
    manual: bool = False  # set by hand (window or --aperture): evaluated as given, never moved by the engine

    def to_dict(self, pixel_size_um: tuple[float, float] | None = None) -> dict:
        d = {
            "centre_px": [float(self.centre_px[0]), float(self.centre_px[1])],
            "centre_u_px": [float(self.centre_u_px[0]), float(self.centre_u_px[1])],
            "diameter_px": 2 * float(self.radius_px),
            "diameter_u_px": 2 * float(self.radius_u_px),
            "edge_rms_px": float(self.edge_rms_px),
            "notes": list(self.notes),
            "source": "set by hand" if self.manual else "found from the image",
        }
        if pixel_size_um is not None:
            d["diameter_mm"] = 2 * float(self.radius_px) * pixel_size_um[0] * 1e-3
            d["diameter_u_mm"] = 2 * float(self.radius_u_px) * pixel_size_um[0] * 1e-3
        return d


_NO_EDGE = "the part's edge was not found"
_TRY = ("; show the whole part with some plate around it, in focus, or give the aperture by hand "
        "(analyze --aperture X Y DIAMETER, or set it in the window)")


def aperture_for(image: np.ndarray, *, aspect: float = 1.0,
                 given: tuple[float, float, float] | None = None) -> Aperture:
    """The aperture set by hand (``given`` = (x, y, radius) in pixels: ``BenchSetup.aperture_px``, from the
    window or ``--aperture``), else the one found by :func:`find_aperture`."""
    if given is None:
        return find_aperture(image, aspect=aspect)
    try:
        x, y, r = (float(v) for v in given)
    except (TypeError, ValueError):
        raise InputError("the aperture set by hand must be three numbers: centre x, y and radius in pixels") from None
    H, W = np.shape(image)[:2]
    if not all(math.isfinite(v) for v in (x, y, r)) or r <= 0:
        raise InputError(f"the aperture set by hand ({x:g}, {y:g}, radius {r:g}) px is not a usable circle")
    if not (-0.5 <= x <= W - 0.5 and -0.5 <= y <= H - 0.5):
        raise InputError(f"the aperture set by hand is centred at ({x:g}, {y:g}) px, outside the image ({W} x {H} px)")
    if r < 4:
        raise InputError(f"the aperture set by hand is too small to evaluate (diameter {2 * r:g} px, at least 8 px)")
    notes = [f"aperture set by hand: diameter {2 * r:.1f} px about ({x:.1f}, {y:.1f}) px"]
    if x - r < -0.5 or y - r / aspect < -0.5 or x + r > W - 0.5 or y + r / aspect > H - 0.5:
        notes.append("the aperture set by hand runs off the frame; the form is evaluated on the part seen")
    # a hand-set circle is a stated evaluation area; a quarter pixel stands for placing it on the image
    return Aperture((x, y), r, (0.25, 0.25), 0.25, 0.0, tuple(notes), manual=True)


def find_aperture(image: np.ndarray, *, aspect: float = 1.0) -> Aperture:
    """Find the circular clear aperture of the fringe field.

    Two stages. (1) Coarse: the plate around the part shows no fringes, only the lamp's smooth light; a
    low-order surface fitted to log-brightness over the frame's border (then over everything outside the
    current part estimate) models that light, so the part is the region that departs from it — uneven light
    and vignetting are divided out instead of being mistaken for the part or for dust. (2) Fine: along rays
    from the coarse centre, the outermost point where the brightness (divided by that light model) leaves the
    plate's level; there a blurred-edge model — plate level outside, a local quadratic fringe profile inside
    (or, where the fringes near the rim are dense, a sinusoid of the ray's own fringe frequency), a step in
    value and slope at the rim, convolved with a Gaussian blur — is fitted by least squares, which
    places the rim to a fraction of a pixel whether it falls on a dark, grey or bright fringe. A geometric
    least-squares circle (robust loss) through those rim points gives centre, radius and their uncertainties.

    Parameters
    ----------
    image : (H, W) float array
        Intensity (any scale).
    aspect : float
        Pixel size along y divided by pixel size along x; the circle is round in object space, so its
        y semi-axis in pixels is ``radius / aspect``.

    Raises
    ------
    AnalysisError
        When no bounded fringe field is found (the image shows no edge between part and plate).
    """
    img = np.asarray(image, dtype=np.float64)
    H, W = img.shape
    if min(H, W) < 24:
        raise AnalysisError(_NO_EDGE + f" (the image, {W} x {H} px, is too small)" + _TRY)
    light, region = _coarse_region(img)
    ys, xs = _hull_outline(region)
    if xs.size < 12:
        raise AnalysisError(_NO_EDGE + " (no part outline against the plate)" + _TRY)
    circle = _fit_circle(xs.astype(float), ys.astype(float), aspect)
    n_rays = 0
    norm = light  # sampled as image / light model where the rim finder looks (see _PlateLight)
    # every other trial blur and every other ray: this pass only seeds the close look (centre and blur), which
    # tries the blur found and its neighbours on all rays
    tab = _rim_tables(norm, circle, aspect, window=0.25, sigmas=SIGMAS[::2], nrays=RIM_RAYS // 2)
    if tab is not None:
        # this pass only centres the rays and picks the blur for the close look below: a fiftieth of a pixel
        # is close enough (the close look fits the rim afresh about that centre)
        circle, n_rays, sig, _ = _rim_circle(tab, circle, aspect, xtol=0.02)
        # close look: the part's side of the model is a local quadratic (a sinusoid where the fringes are dense),
        # so it may reach only a fraction of the fringe spacing into the part; the longest stretch the model
        # still explains to the noise is kept
        got = []
        for in_px in (6.0, 4.0, 2.5):
            # the rough departure point lies up to about two blur widths outside the rim
            near = tuple(x for x in SIGMAS if abs(math.log(x / sig)) < 0.3)  # the blur found, +- one step
            tab = _rim_tables(norm, circle, aspect, window=0.06, out_px=max(6.0, 3 * sig + 2),
                              in_px=in_px + 2 * sig, sigmas=near, fringes=True)
            if tab is not None:
                got.append(_rim_circle(tab, circle, aspect))
        if got:
            least = min(g[3] for g in got)
            circle, n_rays, sig, _ = next(g for g in got if g[3] <= 1.5 * least)
        else:
            n_rays = 0
    if n_rays < 0.12 * RIM_RAYS:  # under about 45 degrees of clear edge
        raise AnalysisError(_NO_EDGE + " (the fringe field has no clear circular boundary)" + _TRY)
    cx, cy, r, ucx, ucy, ur, rms = circle
    # ur: the fit's own (pixel noise) with the rim's model error (see _rim_circle); 0.05 px more for the
    # blurred-step model itself (Type B)
    ur = math.hypot(ur if math.isfinite(ur) else 1.0, 0.05)
    ucx = math.hypot(ucx if math.isfinite(ucx) else 0.0, 0.05)
    ucy = math.hypot(ucy if math.isfinite(ucy) else 0.0, 0.05)
    notes = []
    if cx - r < 0 or cy - r / aspect < 0 or cx + r > W - 1 or cy + r / aspect > H - 1:
        notes.append("the aperture circle runs off the frame; the form is evaluated on the part seen")
    if rms > max(2.0, 0.02 * r):
        notes.append(f"the part's edge is not round (outline scatter {rms:.1f} px); chips or a bevel may be present")
    return Aperture((float(cx), float(cy)), float(r), (float(ucx), float(ucy)), float(ur), float(rms), tuple(notes))


def _hull_outline(region: np.ndarray):
    """Row and column indices of the outline of the part's convex hull: the hull's pixels (centres inside or on
    the hull of the pixels' edge midpoints) that have a 4-neighbour outside it.

    The hull is convex, so each row holds one run of hull pixels; its ends come from the hull's half-planes
    directly, row by row, instead of testing every pixel of the frame against the polygon."""
    from scipy.spatial import ConvexHull, QhullError

    H, W = region.shape
    rows = np.nonzero(region.any(axis=1))[0]
    if rows.size == 0:
        return np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp)
    # candidates: the first and last pixel of every row and column (the hull's corners are among them)
    cols = np.nonzero(region.any(axis=0))[0]
    first_c = np.argmax(region[rows], axis=1)
    last_c = W - 1 - np.argmax(region[rows, ::-1], axis=1)
    first_r = np.argmax(region[:, cols], axis=0)
    last_r = H - 1 - np.argmax(region[::-1, cols], axis=0)
    pts = np.concatenate([np.stack([rows, first_c], 1), np.stack([rows, last_c], 1),
                          np.stack([first_r, cols], 1), np.stack([last_r, cols], 1)]).astype(float)
    offs = np.array([[-0.5, 0], [0.5, 0], [0, -0.5], [0, 0.5]])  # midpoints of each pixel's edges
    pts = np.unique((pts[:, None, :] + offs).reshape(-1, 2), axis=0)
    try:
        eq = ConvexHull(pts).equations  # n_r * r + n_c * c + d <= 0 inside
    except (QhullError, ValueError):
        return np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp)
    y0, y1 = max(0, rows[0] - 1), min(H, rows[-1] + 2)
    r = np.arange(y0, y1, dtype=float)
    tol = 1e-9
    lim = -(eq[None, :, 0] * r[:, None] + eq[None, :, 2]) + tol  # n_c * c <= lim
    nc = eq[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        b = lim / nc[None, :]
    hi = np.min(np.where(nc > tol, b, np.inf), axis=1)
    lo = np.max(np.where(nc < -tol, b, -np.inf), axis=1)
    flat = np.abs(nc) <= tol  # edges along a row: the row is in only if it is on their inner side
    row_ok = np.all(~flat[None, :] | (lim >= 0), axis=1)
    lo = np.maximum(np.ceil(lo), 0)
    hi = np.minimum(np.floor(hi), W - 1)
    row_ok &= lo <= hi
    hull = np.zeros((y1 - y0 + 2, W + 2), dtype=bool)  # one pixel of margin all round
    cc = np.arange(W)
    inside = row_ok[:, None] & (cc[None, :] >= lo[:, None]) & (cc[None, :] <= hi[:, None])
    hull[1:-1, 1:-1] = inside
    # a hull pixel is on the outline when a 4-neighbour is outside it (or outside the frame)
    core = hull[1:-1, 1:-1] & hull[:-2, 1:-1] & hull[2:, 1:-1] & hull[1:-1, :-2] & hull[1:-1, 2:]
    ey, ex = np.nonzero(inside & ~core)
    return ey + y0, ex


def _poly_terms(X, Y, order=3):
    cols = [np.ones_like(X)]
    for d in range(1, order + 1):
        for k in range(d + 1):
            cols.append(X ** (d - k) * Y**k)
    return np.stack(cols, axis=-1)


def _coarse_region(img: np.ndarray):
    """The plate's light model (a :class:`_PlateLight`, which samples the image divided by it) and a boolean
    mask of the part (full size).

    Works on a reduced copy. The plate's light is modelled as exp(quadratic in x, y) — a Gaussian fall-off and a
    gentle ramp both fit it — over pixels taken to be plate: first a border strip, then all pixels outside the
    dilated part estimate. Pixels departing from it by more than the plate's own scatter are the part.
    """
    H, W = img.shape
    step = max(1, int(math.ceil(max(H, W) / 256)))
    h2, w2 = H // step, W // step
    small = img[: h2 * step, : w2 * step].reshape(h2, step, w2, step).mean(axis=(1, 3))
    floor = max(1e-6, 1e-3 * float(np.percentile(small, 99)))
    logi = np.log(np.maximum(small, floor))
    yy, xx = np.mgrid[0:h2, 0:w2]
    Xn, Yn = (xx - w2 / 2) / max(w2, h2), (yy - h2 / 2) / max(w2, h2)
    A = _poly_terms(Xn, Yn)
    b = max(2, int(round(0.06 * min(h2, w2))))
    plate = np.zeros((h2, w2), dtype=bool)
    plate[:b, :] = plate[-b:, :] = True
    plate[:, :b] = plate[:, -b:] = True
    sm = ndimage.gaussian_filter(logi, 1.0)
    region = None
    for _ in range(4):
        m = plate.copy()
        coef = None
        for _ in range(3):  # robust: drop the plate pixels the model does not explain (dust, a part's corner)
            if m.sum() < 3 * A.shape[-1]:
                break
            Am = A[m]  # normal equations: ten columns of low-order terms on centred, scaled coordinates are
            coef = np.linalg.solve(Am.T @ Am, Am.T @ sm[m])  # well conditioned, and far quicker than an SVD
            res = sm - A @ coef
            s = 1.4826 * np.median(np.abs(res[m] - np.median(res[m]))) + 1e-9
            m = plate & (np.abs(res) < 4 * s)
        if coef is None:
            break
        res = sm - A @ coef
        s = 1.4826 * np.median(np.abs(res[m])) + 1e-9
        dev = np.abs(res) > max(6 * s, 0.03)
        dev = ndimage.binary_opening(dev, iterations=1)
        lab, n = ndimage.label(dev)
        if n == 0:
            if region is not None:  # a later round lost the part (its light model took some of it): keep the last
                break
            raise AnalysisError(_NO_EDGE + " (nothing departs from the plate's smooth light)" + _TRY)
        # fringes crossing the plate's own level split the part into a central patch and rings around it (a
        # ring filled holds the patch).
        # Lobes of a saddle or a near-flat lie side by side: every large component (a tenth of the largest at
        # least; dust specks are far smaller) belongs to the part
        sizes = ndimage.sum(dev, lab, index=np.arange(1, n + 1))
        big = np.nonzero(sizes >= 0.1 * sizes.max())[0] + 1
        reg = ndimage.binary_fill_holes(np.isin(lab, big))
        if reg.sum() > 0.9 * reg.size or reg.sum() < 0.005 * reg.size:
            if region is not None:
                break
            raise AnalysisError(_NO_EDGE + " (the fringe field fills the frame or is tiny)" + _TRY)
        kept = coef
        grown = ndimage.binary_dilation(reg, iterations=max(2, int(0.04 * min(h2, w2))))
        new_plate = ~grown
        if region is not None and (reg ^ region).sum() < 0.002 * reg.size:
            region = reg
            break
        region = reg
        if new_plate.sum() >= 3 * A.shape[-1] * 4:
            plate = new_plate
    # the part mask at full size; the light model is kept as its coefficients and evaluated only where the rim
    # finder samples the image (a few hundred thousand points, not the whole frame)
    mask = np.zeros((H, W), dtype=bool)
    full = np.kron(region, np.ones((step, step), dtype=bool))
    mask[: full.shape[0], : full.shape[1]] = full
    return _PlateLight(img, kept, step, h2, w2, float(np.exp(np.max(A @ kept)))), mask


class _PlateLight:
    """The image divided by the plate's light model exp(cubic in x, y) (see :func:`_coarse_region`), sampled at
    given points: the image bilinearly, the model exactly there."""

    def __init__(self, img, coef, step, h2, w2, peak):
        self.img = img
        self.coef = np.asarray(coef, dtype=float)
        self.step, self.h2, self.w2 = step, h2, w2
        self.floor = 1e-6 * max(peak, 1e-12)
        self.shape = img.shape

    def light(self, ys, xs):
        s = max(self.w2, self.h2)
        X = ((xs + 0.5) / self.step - 0.5 - self.w2 / 2) / s
        Y = ((ys + 0.5) / self.step - 0.5 - self.h2 / 2) / s
        # the cubic by powers of y: sum_k Y^k P_k(X), each P_k by Horner in X (terms in the order of _poly_terms)
        c = self.coef
        P0 = ((c[6] * X + c[3]) * X + c[1]) * X + c[0]
        P1 = (c[7] * X + c[4]) * X + c[2]
        P2 = c[8] * X + c[5]
        q = ((c[9] * Y + P2) * Y + P1) * Y + P0
        return np.exp(q, out=q)

    def sample(self, ys, xs):
        """Normalised brightness (the plate reads about 1) at rows ``ys`` and columns ``xs`` (inside the frame)."""
        v = ndimage.map_coordinates(self.img, [ys, xs], order=1, mode="nearest")
        return v / np.maximum(self.light(ys, xs), self.floor)


def _fit_circle(xs, ys, aspect, x0=None):
    """Geometric least-squares circle (robust soft-L1 loss) through outline points; y scaled by ``aspect``."""
    yy = ys * aspect
    if x0 is None:
        x0 = (xs.mean(), yy.mean(), np.sqrt(((xs - xs.mean()) ** 2 + (yy - yy.mean()) ** 2).mean()))
    else:
        x0 = (x0[0], x0[1] * aspect, x0[2])

    def res(p):
        return np.hypot(xs - p[0], yy - p[1]) - p[2]

    scale = max(1.0, 0.005 * x0[2])
    fit = optimize.least_squares(res, x0, loss="soft_l1", f_scale=scale)
    r = res(fit.x)
    rms = float(np.sqrt(np.mean(r * r)))
    dof = max(1, r.size - 3)
    try:
        cov = np.linalg.inv(fit.jac.T @ fit.jac) * (np.sum(r * r) / dof)
        u = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        u = np.array([np.nan] * 3)
    cx, cyy, rad = fit.x
    return cx, cyy / aspect, abs(rad), u[0], u[1] / aspect, u[2], rms


RIM_RAYS = 360
RIM_INSIDE_PX = 6.0
SIGMAS = tuple(0.4 * 1.25**k for k in range(10))  # trial blur widths, 0.4-3 px
EDGE_RAYS = RIM_RAYS  # kept for callers of the earlier name


def _rim_tables(norm, circle, aspect, *, window: float, nrays: int = RIM_RAYS, out_px: float = 6.0,
                in_px: float = RIM_INSIDE_PX, sigmas=SIGMAS, fringes: bool = False):
    """Per-ray misfit of the blurred-edge model against the trial rim position, for each trial blur.

    ``norm`` samples the image divided by the plate's light model (:class:`_PlateLight`), so the plate reads
    about 1 everywhere. On each
    ray the outermost sustained departure from the plate's level marks the rim roughly; the blurred-edge model
    (:func:`_edge_basis`) is compared with the profile over ``out_px`` of plate beyond and ``in_px`` of part
    within that point. The model is linear in its levels and slopes, so for each trial position and blur they
    are solved in closed form (variable projection) for all rays at once. Returns None when too few rays see
    a rim, else a dict with the rays' angles, their departure radii, the trial offsets and a table of the
    residual sum of squares per blur (N rays x K offsets) and the noise variance of one sample.
    """
    cx, cy, r = circle[0], circle[1], circle[2]
    H, W = norm.shape
    ds = 0.25
    s_out = max(out_px + 6.0, window * r)
    s_in = max(in_px + 4.0, window * r)
    ss = np.arange(s_out, -s_in - 1e-9, -ds)  # outward -> inward, relative to the current radius
    th = np.linspace(0, 2 * np.pi, nrays, endpoint=False)
    rr = r + ss[None, :]
    xs = cx + rr * np.cos(th)[:, None]
    ys = cy + rr * np.sin(th)[:, None] / aspect
    ok = (xs >= 0) & (xs <= W - 1) & (ys >= 0) & (ys <= H - 1)
    prof = norm.sample(np.clip(ys, 0, H - 1), np.clip(xs, 0, W - 1))
    # plate level and scatter (noise) from the outer part of every ray
    n_ref = max(8, int(0.5 * (s_out - out_px) / ds))
    ref = prof[:, :n_ref]
    ref_ok = ok[:, :n_ref].all(axis=1)
    if ref_ok.sum() < 0.12 * nrays:
        return None
    # noise of each ray from its plate stretch: differences of samples 2 px apart (interpolated samples closer
    # than a pixel share pixels and would understate it)
    st = int(round(2.0 / ds))
    dif = ref[:, st:] - ref[:, :-st]
    sig_i = 1.4826 * np.median(np.abs(dif - np.median(dif, axis=1, keepdims=True)), axis=1) / math.sqrt(2) + 1e-6
    sig_n = float(np.median(sig_i[ref_ok]))
    # walking inward, each point is compared with the straight line through the 8 px of plate just outside it
    # (1 px gap): the plate's own slope (uneven light the model left) is followed, the rim is not
    L, g = int(round(8.0 / ds)), int(round(1.0 / ds))
    xk = np.arange(-(g + L - 1), -g + 1, dtype=float)  # positions of the window relative to the point
    wk = 1.0 / L + (0 - xk.mean()) * (xk - xk.mean()) / np.sum((xk - xk.mean()) ** 2)
    pred = np.full_like(prof, np.nan)  # NaN: no full window of plate outside these
    n_first = g + L - 1
    if prof.shape[1] > n_first:
        win = np.lib.stride_tricks.sliding_window_view(prof, L, axis=1)[:, : prof.shape[1] - n_first]
        pred[:, n_first:] = win @ wk  # the window ending g samples before each point, one matrix product
    smooth = ndimage.uniform_filter1d(prof, size=5, axis=1)  # 1.25 px
    dev = np.abs(smooth - pred) > np.maximum(5 * sig_i, 0.04)[:, None]
    dev &= np.isfinite(pred)
    # sustained departure (1.5 px) counts; a lone noise spike does not
    run = ndimage.uniform_filter1d(dev.astype(float), size=7, axis=1, origin=-3) > 0.99
    run[:, :n_ref] = False
    hit = run.any(axis=1)
    j = np.argmax(run, axis=1)
    n_o, n_i = int(round(out_px / ds)), int(round(in_px / ds))
    good = ref_ok & hit & (j - n_o >= 0) & (j + n_i < ss.size)
    idx = np.nonzero(good)[0]
    if idx.size < 0.12 * nrays:
        return None
    k = np.arange(-n_o, n_i + 1)
    rows = j[idx, None] + k[None, :]
    okw = ok[idx[:, None], rows].all(axis=1)
    idx, rows = idx[okw], rows[okw]
    if idx.size < 0.12 * nrays:
        return None
    Y = prof[idx[:, None], rows]  # (N, M)
    t = -k * ds  # position relative to the departure point, outward positive
    e_grid = np.arange(t.min() + 0.5, t.max() - 0.25 + 1e-9, 0.05)
    ysq = np.sum(Y * Y, axis=1)
    tables = {}
    K, M = e_grid.size, t.size
    # the part's side: a local quadratic, or -- where the fringes inside the rim are closer than the stretch
    # fitted -- a sinusoid of the ray's own fringe frequency (a dense fringe bends a quadratic model and pulls
    # the rim inward)
    kq = _ray_frequencies(norm, (cx, cy), th[idx], r + ss[j[idx]], aspect, in_px) if fringes else np.zeros(idx.size)
    groups = [(kv, np.nonzero(kq == kv)[0]) for kv in np.unique(kq)]
    for sig in sigmas:
        T = np.empty((idx.size, K))
        for kv, rays in groups:
            # the model's columns for every trial position at once, (K, M, c), and their orthonormal bases
            cols = _edge_basis(t[None, :], e_grid[:, None], sig) if kv == 0 else \
                _fringe_edge_basis(t[None, :], e_grid[:, None], sig, kv)
            B = np.stack(cols, axis=-1)
            nc = B.shape[-1]
            Q, _ = np.linalg.qr(B)
            # all rays against all trial positions in one matrix product: (N, M) @ (M, c * K)
            proj = Y[rays] @ Q.transpose(1, 2, 0).reshape(M, nc * K)
            np.square(proj, out=proj)
            T[rays] = np.maximum(ysq[rays, None] - proj.reshape(-1, nc, K).sum(axis=1), 0.0)
        tables[float(sig)] = T
    return {"theta": th[idx], "base": r + ss[j[idx]], "e_grid": e_grid, "tables": tables,
            "noise_var": sig_n**2, "oversampling": 1.0 / ds, "m": Y.shape[1], "centre": (cx, cy),
            "profiles": Y, "t": t, "k": kq}


def _rim_circle(tab, circle, aspect, xtol=1e-3, n_try=1):
    """The circle that best explains every ray's profile at once: minimises the sum over rays of each ray's
    excess misfit at the circle's crossing (capped, so dust or a chip on a few rays cannot pull it). Returns
    (cx, cy, r, u_cx, u_cy, u_r, rms of the per-ray best positions about it, blur) and the rays used."""
    th, base, eg = tab["theta"], tab["base"], tab["e_grid"]
    cx0, cy0 = tab["centre"]
    c, sn = np.cos(th), np.sin(th)
    var = tab["noise_var"]
    cap = 25.0 * var  # about 5 sigma of one sample's misfit

    def crossing(p):
        dx, dyy, r = p  # centre offset (y in x-metric units) and radius
        pu = dx * c + dyy * sn
        disc = r * r - dx * dx - dyy * dyy + pu * pu
        return pu + np.sqrt(np.maximum(disc, 0.0))

    best = None
    # the minimiser runs for the blur(s) whose per-ray best misfits sum lowest (a lower bound of the total it
    # compares); on the generated parts a second blur never won, and each costs a minimisation
    items = sorted(tab["tables"].items(), key=lambda it: float(np.sum(np.minimum(it[1].min(axis=1), 1e9))))
    for sig, T in items[:n_try]:
        mins = T.min(axis=1)
        ex = T - mins[:, None]

        def cost(p, ex=ex.ravel(), row=np.arange(ex.shape[0]) * eg.size, eg0=eg[0], deg=eg[1] - eg[0],
                 last=eg.size - 1, bufs=[np.empty(c.size) for _ in range(4)]):
            # the crossing (see crossing()) and the interpolated table, with the same arithmetic in place: the
            # minimiser calls this some thousand times, and allocations cost as much as the sums
            dx, dyy, r = p
            pos, a, f, v = bufs
            np.multiply(c, dx, out=pos)
            np.multiply(sn, dyy, out=a)
            pos += a  # pu
            np.multiply(pos, pos, out=a)
            a += r * r - dx * dx - dyy * dyy
            np.maximum(a, 0.0, out=a)
            np.sqrt(a, out=a)
            a += pos  # the crossing
            np.subtract(a, base, out=pos)
            pos -= eg0
            pos /= deg
            inside = (pos >= 0) & (pos <= last)
            np.floor(pos, out=a)
            np.clip(a, 0, last - 1, out=a)
            i0 = a.astype(np.intp)
            np.subtract(pos, a, out=f)
            np.clip(f, 0, 1, out=f)
            at = row + i0  # flat index of each ray's lower neighbour in the table
            np.subtract(1, f, out=a)
            a *= ex.take(at)
            at += 1
            np.multiply(f, ex.take(at), out=v)
            v += a
            np.copyto(v, cap, where=~inside)
            np.divide(v, cap, out=a)
            a += 1
            v /= a
            return float(np.sum(v))

        # start from the per-ray best positions
        e_best = eg[np.argmin(ex, axis=1)] + base
        x0 = np.array([0.0, 0.0, float(np.median(e_best))])
        simplex = np.array([x0, x0 + [0.7, 0, 0], x0 + [0, 0.7, 0], x0 + [0, 0, 0.7]])
        res = optimize.minimize(cost, x0, method="Nelder-Mead",
                                options={"xatol": xtol, "fatol": xtol * var, "maxiter": 3000,
                                         "initial_simplex": simplex})
        tot = res.fun + float(np.sum(np.minimum(T.min(axis=1), 1e9)))
        if best is None or tot < best[0]:
            best = (tot, sig, res.x, cost, e_best)
    _, sig, p, cost, e_best = best
    # uncertainty: curvature of the misfit (a Gaussian likelihood has -ln L = SSE / (2 var)): cov = 2 var H^-1
    h = np.array([0.05, 0.05, 0.05])
    Hm = np.zeros((3, 3))
    for a in range(3):
        for b in range(a, 3):
            ea, eb = np.eye(3)[a] * h[a], np.eye(3)[b] * h[b]
            Hm[a, b] = Hm[b, a] = (cost(p + ea + eb) - cost(p + ea - eb) - cost(p - ea + eb) + cost(p - ea - eb)) / (
                4 * h[a] * h[b])
    try:
        # samples 1/4 px apart are not independent: about one independent sample per pixel
        cov = 2 * var * tab["oversampling"] * np.linalg.inv(Hm)
        u = np.sqrt(np.clip(np.diag(cov), 0, None))
        if not np.all(np.isfinite(u)):
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        u = np.array([np.nan] * 3)
    cross = crossing(p)
    d = e_best - cross
    used = np.abs(d) < 1.5
    rms = float(np.sqrt(np.mean(d[used] ** 2))) if used.any() else float("nan")
    # rim errors that several neighbouring rays share (a stretch of rim where the part's brightness matches the
    # plate's, a bevel, a chip) do not average out like pixel noise: the scatter of 12 sector means says how
    # large they are; the radius shares about 1/sqrt(12) of it
    sec = np.floor(th[used] / (2 * np.pi) * 12).astype(int)
    means = [float(np.mean(d[used][sec == k])) for k in range(12) if np.sum(sec == k) >= 3]
    sector_sd = float(np.std(means, ddof=1)) if len(means) >= 4 else rms
    cx, cy = cx0 + p[0], cy0 + p[1] / aspect
    misfit = best[0] / (ex.shape[0] * tab["m"] * var)  # mean squared residual per sample over the noise's
    # the rim's model error: the larger of the sector scatter and half the per-ray scatter (a rim whose
    # brightness matches the plate's all round shares one bias that sectors cannot show), Type B
    u_model = max(sector_sd, 0.5 * rms) if math.isfinite(rms) else 1.0
    u_slope = _slope_only_rim(tab, cross - base, sig)
    return ((cx, cy, float(p[2]), u[0], u[1] / aspect, math.hypot(u[2], u_model, u_slope), rms), int(used.sum()),
            float(sig), float(misfit))


def _slope_only_rim(tab, e, sig) -> float:
    """Type B standard uncertainty (px) of the radius where the rim is placed by a change of slope rather
    than a step in brightness.

    The rim is placed by the step between the plate's level and the part's; where the part's brightness at
    the rim nearly equals the plate's while the fringe rises steeply there, moving the rim by up to a blur width
    trades the step for the fringe's slope and fits about as well -- a bias every ray shares (it reached a
    pixel on generated parts), which the rays' scatter does not show. Each ray's fitted step s and inside
    slope g at the rim give a weight w = 1 / (1 + (s / (g sig))^2), near 1 for a slope-only rim and near 0
    for a clear step; the mean weight times the blur width, as a rectangular half-width, is the term.
    Returns 0 when the table carries no profiles."""
    Y, t, kq = tab.get("profiles"), tab.get("t"), tab.get("k")
    if Y is None or not len(e):
        return 0.0
    w = np.zeros(len(e))
    for kv in np.unique(kq):
        rays = np.nonzero(kq == kv)[0]
        ee = np.asarray(e)[rays, None]
        if kv == 0:
            cols = _edge_basis(t[None, :], ee, sig)  # out level, in level, in slope, in curvature, out slope
        else:
            cols = _fringe_edge_basis(t[None, :], ee, sig, kv)  # out level, out slope, in level, in slope, cos, sin
        B = np.stack(cols, axis=-1)  # (rays, M, c)
        A = np.einsum("rmi,rmj->rij", B, B)
        A += 1e-9 * np.trace(A, axis1=1, axis2=2)[:, None, None] * np.eye(A.shape[-1])
        coef = np.linalg.solve(A, np.einsum("rmi,rm->ri", B, Y[rays])[..., None])[..., 0]
        if kv == 0:
            step, slope = coef[:, 1] - coef[:, 0], coef[:, 2]
        else:
            step, slope = coef[:, 2] + coef[:, 4] - coef[:, 0], coef[:, 3] + kv * coef[:, 5]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            q = np.minimum(np.abs(step / (slope * sig)), 1e100)  # no slope: q is infinite or NaN, w is 0
        w[rays] = np.where(np.isfinite(q), 1.0 / (1.0 + q * q), 0.0)
    return float(sig * np.mean(w) / math.sqrt(3))


def _edge_basis(t, e, sig):
    """Columns of the blurred-edge model at positions ``t`` (outward positive) for a rim at ``e`` blurred by a
    Gaussian of ``sig``: plate level and slope outside, level, slope and curvature of the part inside. Each is
    the closed-form convolution of a one-sided polynomial with the Gaussian."""
    from scipy.special import ndtr

    m = t - e
    z = m / sig
    phi = np.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)
    p_in = ndtr(-z)
    e1 = m * p_in - sig * phi
    e2 = (m * m + sig * sig) * p_in - m * sig * phi
    o1 = m * (1 - p_in) + sig * phi  # the plate's own slope outside (uneven light)
    return [1 - p_in, p_in, e1, e2, o1]


def _ray_frequencies(norm, centre, theta, base, aspect, in_px):
    """Each ray's fringe frequency (radians per pixel) just inside its departure radius ``base``, quantised to
    steps of 8 % so rays of about the same frequency share one model; 0 where the fringes are too wide for a
    quadratic not to follow them over ``in_px``, or no clear fringe is seen.

    The strongest tone of the linearly detrended profile over the 32 px inside (a Hann-windowed Fourier sum
    over trial periods of 2.5-64 px); it counts when one and a half periods fit in the stretch and a sinusoid
    of that frequency explains at least 60 % of the profile's variance (dust, noise or a wide fringe's curve
    do not), on more than a dozen rays."""
    H, W = norm.shape
    ds = 0.25
    x = np.arange(1.0, 33.0, ds)  # inward from the departure point, px
    rr = base[:, None] - x[None, :]
    xs = centre[0] + rr * np.cos(theta)[:, None]
    ys = centre[1] + rr * np.sin(theta)[:, None] / aspect
    seg = norm.sample(np.clip(ys, 0, H - 1), np.clip(xs, 0, W - 1))
    X = np.stack([np.ones_like(x), x - x.mean()], axis=1)
    seg = seg - (seg @ np.linalg.pinv(X).T) @ X.T
    periods = np.geomspace(2.5, 64.0, 100)
    kk = 2 * np.pi / periods
    E = np.exp(-1j * np.outer(x, kk)) * np.hanning(x.size)[:, None]
    best = kk[np.argmax(np.abs(seg @ E), axis=1)]
    # share of the variance a sinusoid of that frequency explains (per-ray 2 x 2 normal equations)
    cs, sn = np.cos(best[:, None] * x[None, :]), np.sin(best[:, None] * x[None, :])
    a11, a12, a22 = (cs * cs).sum(1), (cs * sn).sum(1), (sn * sn).sum(1)
    b1, b2 = (cs * seg).sum(1), (sn * seg).sum(1)
    det = a11 * a22 - a12 * a12
    with np.errstate(divide="ignore", invalid="ignore"):
        fitted = (a22 * b1 * b1 - 2 * a12 * b1 * b2 + a11 * b2 * b2) / det
        share = fitted / np.maximum((seg * seg).sum(1), 1e-300)
    use = (2 * np.pi / best <= (x[-1] - x[0]) / 1.5) & (best * in_px > 1.0) & (share >= 0.6)
    step = math.log(1.08)
    kq = np.where(use, np.exp(np.round(np.log(best) / step) * step), 0.0)
    # a frequency seen on a dozen rays or fewer is left out (a speck of dust, a glint; each frequency costs a
    # model of its own)
    vals, inv, cnt = np.unique(kq, return_inverse=True, return_counts=True)
    return np.where(cnt[inv] > 12, kq, 0.0)

def _fringe_edge_basis(t, e, sig, k):
    """Columns of the blurred-edge model with a fringe of ``k`` radians per pixel inside: plate level and slope
    outside; level, slope and the fringe's cos and sin inside, each convolved with a Gaussian of ``sig``. For
    M ~ N(m, sig^2), m the position relative to the rim, the blurred one-sided tone is
    E[exp(i k M) 1(M < 0)] = exp(i k m - k^2 sig^2 / 2) Phi(-(m + i k sig^2) / sig), Phi(z) = erfc(-z / sqrt 2) / 2
    (the Gaussian's characteristic function completed to a square).

    A frequency a few per cent off is absorbed by the level and slope columns over the few pixels fitted;
    columns for the tone's derivative in frequency or its second harmonic (the multiple-beam shape) were tried
    and left out: the extra freedom let a wide fringe's rim drift outward by a pixel or two."""
    from scipy.special import erfc

    cols = _edge_basis(t, e, sig)
    m = t - e
    tone = np.exp(1j * k * m - 0.5 * (k * sig) ** 2) * 0.5 * erfc((m + 1j * k * sig * sig) / (sig * math.sqrt(2)))
    return [cols[0], cols[4], cols[1], cols[2], tone.real, tone.imag]
