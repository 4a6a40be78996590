"""The clear aperture of a part on a test plate, and the pixels left out of the form fit.

The part's edge bounds the fringe field: inside it the gap reflects with fringe modulation, outside it the
plate shows a flat, dim level. The aperture is found from local brightness and local modulation, the largest
region is kept and made convex (a dark fringe or a chip touching the edge only bites into it), and a
geometric least-squares circle is fitted to the region's outline with a robust loss.

Masks: saturated pixels (glare) are removed before the fit; dust, scratches and chips are found afterwards as
connected clusters of large fit residuals (see :mod:`ringgauge.form.fit`).

References
----------
Geometric circle fit: least squares on the orthogonal distances (scipy ``least_squares``), preferred over
algebraic fits, which are biased on partial arcs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage, optimize

from ..errors import AnalysisError


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

    def to_dict(self, pixel_size_um: tuple[float, float] | None = None) -> dict:
        d = {
            "centre_px": [float(self.centre_px[0]), float(self.centre_px[1])],
            "centre_u_px": [float(self.centre_u_px[0]), float(self.centre_u_px[1])],
            "diameter_px": 2 * float(self.radius_px),
            "diameter_u_px": 2 * float(self.radius_u_px),
            "edge_rms_px": float(self.edge_rms_px),
            "notes": list(self.notes),
        }
        if pixel_size_um is not None:
            d["diameter_mm"] = 2 * float(self.radius_px) * pixel_size_um[0] * 1e-3
            d["diameter_u_mm"] = 2 * float(self.radius_u_px) * pixel_size_um[0] * 1e-3
        return d


def find_aperture(image: np.ndarray, *, aspect: float = 1.0) -> Aperture:
    """Find the circular clear aperture of the fringe field.

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
        When no bounded fringe field is found.
    """
    img = np.asarray(image, dtype=np.float64)
    H, W = img.shape
    # work on a reduced copy: the edge is found to a pixel or so, then refined on the full image
    step = max(1, int(round(max(H, W) / 512)))
    small = img[::step, ::step]
    s = max(2.0, min(small.shape) / 80.0)
    mean = ndimage.uniform_filter(small, size=int(4 * s) | 1)
    sq = ndimage.uniform_filter(small * small, size=int(4 * s) | 1)
    std = np.sqrt(np.clip(sq - mean * mean, 0, None))
    feat = ndimage.gaussian_filter(mean + 2 * std, s)
    lo, hi = np.percentile(feat, [2, 98])
    if hi - lo <= 1e-6:
        raise AnalysisError("no fringe field found: the image has no region of fringes against a darker surround")
    thr = _otsu(feat)
    mask = feat > thr
    mask = ndimage.binary_opening(mask, iterations=2)
    lab, n = ndimage.label(mask)
    if n == 0:
        raise AnalysisError("no fringe field found: try a sharper image of the whole part on the plate")
    sizes = ndimage.sum(mask, lab, index=np.arange(1, n + 1))
    region = lab == (1 + int(np.argmax(sizes)))
    region = ndimage.binary_fill_holes(region)
    if region.all() or region.sum() < 0.01 * region.size:
        raise AnalysisError(
            "the part's edge was not found (the fringe field fills the frame or is tiny); show the whole part "
            "with some plate around it, or give the aperture by hand"
        )
    from skimage.morphology import convex_hull_image

    hull = convex_hull_image(region)
    edge = hull & ~ndimage.binary_erosion(hull)
    ys, xs = np.nonzero(edge)
    xs = xs * step
    ys = ys * step
    circle = _fit_circle(xs.astype(float), ys.astype(float), aspect)
    # refine on the full-resolution gradient: the strongest brightness step along each ray near the circle
    hull_full = np.kron(hull, np.ones((step, step), dtype=bool))[:H, :W] if step > 1 else hull
    circle, n_edge = _refine_edge(img, circle, aspect, hull_full, window=0.5)
    fine, n_fine = _refine_edge(img, circle, aspect, hull_full, window=0.05)
    moved = math.hypot(fine[0] - circle[0], fine[1] - circle[1]) + abs(fine[2] - circle[2])
    if n_fine >= 0.5 * n_edge and moved < 0.03 * circle[2]:  # the close look only polishes the circle
        circle, n_edge = fine, n_fine
    if n_edge < 0.12 * EDGE_RAYS:  # under about 45 degrees of clear edge
        raise AnalysisError(
            "the part's round edge was not found (the fringe field has no clear circular boundary); show the "
            "whole part with some plate around it, in focus"
        )
    cx, cy, r, ucx, ucy, ur, rms = circle
    notes = []
    if cx - r < 0 or cy - r / aspect < 0 or cx + r > W - 1 or cy + r / aspect > H - 1:
        notes.append("the aperture circle runs off the frame; the form is evaluated on the part seen")
    if rms > max(2.0, 0.02 * r):
        notes.append(f"the part's edge is not round (outline scatter {rms:.1f} px); chips or a bevel may be present")
    return Aperture((float(cx), float(cy)), float(r), (float(ucx), float(ucy)), float(ur), float(rms), tuple(notes))


def _otsu(values: np.ndarray) -> float:
    from skimage.filters import threshold_otsu

    return float(threshold_otsu(values))


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


EDGE_RAYS = 720


def _refine_edge(img, circle, aspect, hull, window: float = 0.3, nrays: int = EDGE_RAYS):
    """Outline points where, walking each ray inward from the dim surround, the brightness first rises
    clearly above the surround level; then a robust circle through them.

    A dark fringe that meets the edge gives a point too far inside; the robust loss sets it aside.
    """
    cx, cy, r = circle[0], circle[1], circle[2]
    H, W = img.shape
    sm = ndimage.gaussian_filter(img, 1.0)
    # the surround level from well outside the current circle (a dark rim just outside a too-small first
    # circle must not pull it down)
    yy, xx = np.mgrid[0:H, 0:W]
    far = np.hypot(xx - cx, (yy - cy) * aspect) > (1.0 + window) * r
    outside = far if far.sum() >= 200 else ~ndimage.binary_dilation(hull, iterations=3)
    if outside.sum() < 50:
        return circle, 0
    vals = sm[outside]
    b0 = float(np.median(vals))
    s0 = float(1.4826 * np.median(np.abs(vals - b0)))
    inside_hi = float(np.percentile(sm[hull], 95))
    dist = np.hypot(xx - cx, (yy - cy) * aspect)
    ring = (dist > 0.7 * r) & (dist < (1.0 + window) * r)
    inside_lo = float(np.percentile(sm[ring | hull], 2))
    thr = b0 + max(6 * s0, 0.2 * (inside_hi - b0))
    # a dark fringe at the rim is darker than the surround (the plate alone still reflects; the gap at a dark
    # fringe does not): the edge shows as a drop there
    dark_ok = b0 - inside_lo > 5 * s0
    thr_lo = b0 - max(3 * s0, 0.4 * (b0 - inside_lo)) if dark_ok else -np.inf
    th = np.linspace(0, 2 * np.pi, nrays, endpoint=False)
    ds = np.arange(window * r, -window * r, -0.25)  # outward -> inward
    rr = r + ds[None, :]
    xs = cx + rr * np.cos(th)[:, None]
    ys = cy + rr * np.sin(th)[:, None] / aspect
    ok = (xs >= 0) & (xs <= W - 1) & (ys >= 0) & (ys <= H - 1)
    prof = ndimage.map_coordinates(sm, [np.clip(ys, 0, H - 1), np.clip(xs, 0, W - 1)], order=1)
    prof[~ok] = b0  # beyond the frame: treat as surround
    cross = (prof > thr) | (prof < thr_lo)
    hit = cross.any(axis=1)
    first = np.argmax(cross, axis=1)
    good = hit & (first > 0)
    if good.sum() < 20:
        return circle, 0
    # keep rays that meet a clear step (bright, or dark against the surround) and place the point at half
    # height between the surround and the level just inside, which is symmetric under blur
    n = ds.size
    step_in = 8  # 2 px inward
    jj = np.clip(first - step_in, 0, n - 1)
    idx = np.nonzero(good & (first + step_in < n) & ok[np.arange(len(first)), jj])[0]
    sgn = np.where(prof[idx, first[idx]] > b0, 1.0, -1.0)
    level = prof[idx, first[idx] + step_in]
    # a clear step: the level just inside is a good part of the most extreme fringe further in along the same
    # ray (uneven light makes a global reference unfair to the dim side)
    ray_ext = np.array([np.max(sg * (prof[i, first[i]:] - b0)) for i, sg in zip(idx, sgn)])
    span = np.where(sgn > 0, inside_hi - b0, b0 - inside_lo)
    strong = (sgn * (level - b0) > 0.33 * ray_ext) & (ray_ext > 0.15 * span)
    idx, level, sgn = idx[strong], level[strong], sgn[strong]
    if idx.size < 20:
        return circle, 0
    rb = np.empty(idx.size)
    for k, (i, L, sg) in enumerate(zip(idx, level, sgn)):
        t = 0.5 * (b0 + L)
        j0 = max(1, first[i] - step_in)
        seg = sg * (prof[i, j0 : first[i] + step_in + 1] - t)
        jj = int(np.argmax(seg > 0))
        j = j0 + jj
        p0, p1 = prof[i, j - 1], prof[i, j]
        frac = np.clip((t - p0) / (p1 - p0), 0, 1) if p1 != p0 else 0.5
        rb[k] = r + ds[j - 1] - 0.25 * frac
    px = cx + rb * np.cos(th[idx])
    py = cy + rb * np.sin(th[idx]) / aspect
    # a dark fringe meeting the edge puts points inside the true edge: keep the consensus set (RANSAC)
    from skimage.measure import CircleModel, ransac

    pts = np.column_stack([px, py * aspect])
    rng = np.random.default_rng(0)  # fixed: the same image always gives the same aperture
    _, inl = ransac(pts, CircleModel, min_samples=3, residual_threshold=1.0, max_trials=300, rng=rng)
    if inl is None or inl.sum() < 20:
        inl = np.ones(len(px), dtype=bool)
    # a dark fringe along much of the edge can make a fringe contour the larger consensus; the part's edge
    # is the outermost circle: prefer a consistent set of points outside the first circle
    for _ in range(2):
        f0 = _fit_circle(px[inl], py[inl], aspect, x0=(cx, cy, r))
        d = np.hypot(px - f0[0], (py - f0[1]) * aspect) - f0[2]
        out = d > 1.5
        if out.sum() < max(20, 0.1 * inl.sum()):
            break
        _, inl2 = ransac(pts[out], CircleModel, min_samples=3, residual_threshold=1.0, max_trials=300, rng=rng)
        if inl2 is None or inl2.sum() < max(20, 0.1 * inl.sum()):
            break
        idx_out = np.nonzero(out)[0][inl2]
        f1 = _fit_circle(px[idx_out], py[idx_out], aspect, x0=f0[:3])
        d1 = np.hypot(px[inl] - f1[0], (py[inl] - f1[1]) * aspect) - f1[2]
        if np.median(d1) > -1.0:  # the new circle does not enclose the first set: not an outer edge
            break
        new = np.zeros_like(inl)
        new[idx_out] = True
        inl = new
    fit = _fit_circle(px[inl], py[inl], aspect, x0=(cx, cy, r))
    return fit, int(inl.sum())
