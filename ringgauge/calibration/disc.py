"""Pixel scale from a reference disc (or a ring gauge's bore) of certified diameter.

Method
------
1. Find the disc: Otsu threshold of the lightly smoothed image, the largest region of either polarity that
   does not touch the frame, and its boundary along rays from its centroid.
2. Sub-pixel edge points: along each ray the profile is sampled every 0.25 px (cubic-spline interpolation);
   the local inner and outer levels are the medians of its two ends, and the edge is where the profile crosses
   the 50 % level between them (linear interpolation between samples). The local levels make the edge
   independent of uneven light.
3. Geometric fit of the image metric: the edge points p_i satisfy (p_i - c)ᵀ G (p_i - c) = (D/2)² on the part,
   so scipy.optimize.least_squares fits the centre c and G = [[G_xx, G_xy], [G_xy, G_yy]] (µm²/px²) to the
   residuals sqrt((p_i - c)ᵀ G (p_i - c)) - D/2 in micrometres (robust soft-L1 loss first, then outliers beyond
   4 robust sigma dropped and a plain least-squares refit). Scale x = sqrt(G_xx), y = sqrt(G_yy).
4. Uncertainty: the certified diameter; the fit (covariance scaled by the residual variance and by the
   residuals' neighbour correlation around the edge); and the edge definition -- the whole fit is repeated
   with edges read at 25 % and 75 % of the step, and half the difference is taken as the half-width of a
   rectangular distribution. (For incoherent light the geometric edge of a symmetric blur lies at 50 %;
   coherent light puts it nearer 25 %; edge bevels and diffraction move it too.)

References
----------
N. Otsu, "A threshold selection method from gray-level histograms", IEEE Trans. SMC 9 (1979) 62-66.
Geometric (orthogonal-distance) conic fitting: W. Gander, G. H. Golub, R. Strebel, "Least-squares fitting of
circles and ellipses", BIT 34 (1994) 558-578.
JCGM 100:2008 (GUM) for the uncertainty.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage
from scipy.optimize import least_squares

from ..errors import CalibrationError, InputError
from .grating import _as_frame, _image_info, _single_thread
from .result import ScaleCalibration, assemble, check_plausible, derived, propagate

MIN_RADIUS_PX = 20.0
MIN_RAYS = 48


def _find_blob(data: np.ndarray):
    from skimage.filters import threshold_otsu
    from skimage.measure import label, regionprops

    sm = ndimage.gaussian_filter(data, 1.5)
    t = threshold_otsu(sm)
    H, W = data.shape
    best = None
    for polarity, binary in (("dark", sm < t), ("bright", sm > t)):
        lab = label(binary)
        for reg in regionprops(lab):
            r0, c0, r1, c1 = reg.bbox
            if r0 == 0 or c0 == 0 or r1 == H or c1 == W:
                continue
            if reg.area < math.pi * MIN_RADIUS_PX**2 or reg.solidity < 0.9:
                continue
            if best is None or reg.area > best[1].area:
                best = (polarity, reg, lab == reg.label)
    if best is None:
        raise CalibrationError(
            "no complete disc found inside the frame; the whole disc must be in view, in focus and against an "
            "evenly lit background"
        )
    return best


def _edge_points(data: np.ndarray, coeffs: np.ndarray, centre, r_init, angles, levels=(0.25, 0.5, 0.75)):
    """Sub-pixel crossings of each ray's profile at the given fractions of its edge step."""
    r_mean = float(np.median(r_init))
    half = max(8.0, 0.06 * r_mean)
    t = np.arange(-half, half + 1e-9, 0.25)
    cx, cy = centre
    ca, sa = np.cos(angles), np.sin(angles)
    rr = r_init[:, None] + t[None, :]
    xs = cx + rr * ca[:, None]
    ys = cy + rr * sa[:, None]
    prof = ndimage.map_coordinates(coeffs, [ys.ravel(), xs.ravel()], order=3, prefilter=False,
                                   mode="nearest").reshape(xs.shape)
    k = max(4, t.size // 5)
    inner = np.median(prof[:, :k], axis=1)
    outer = np.median(prof[:, -k:], axis=1)
    noise = np.std(prof[:, :k], axis=1) + np.std(prof[:, -k:], axis=1)
    step = outer - inner
    sign = np.sign(np.median(step))
    good = (np.sign(step) == sign) & (np.abs(step) > 6 * noise + 1e-6)
    p = (prof - inner[:, None]) / np.where(step == 0, 1.0, step)[:, None]
    grad = np.gradient(ndimage.uniform_filter1d(p, 3, axis=1), axis=1)
    out = {q: np.full(angles.size, np.nan) for q in levels}
    for i in np.flatnonzero(good):
        pi = p[i]
        g0 = int(np.argmax(grad[i]))
        for q in levels:
            cr = np.flatnonzero((pi[:-1] - q) * (pi[1:] - q) <= 0)
            cr = cr[pi[cr + 1] != pi[cr]]
            if cr.size == 0:
                continue
            j = int(cr[np.argmin(np.abs(cr - g0))])
            if abs(j - g0) > 0.6 * t.size / 2:
                continue
            frac = (q - pi[j]) / (pi[j + 1] - pi[j])
            out[q][i] = rr[i, j] + frac * (t[1] - t[0])
    pts = {}
    for q in levels:
        ok = np.isfinite(out[q])
        pts[q] = (np.column_stack([cx + out[q][ok] * ca[ok], cy + out[q][ok] * sa[ok]]), np.flatnonzero(ok))
    return pts, float(np.median(np.abs(step[good]))) if good.any() else 0.0, int(good.sum())


def _fit_metric(points: np.ndarray, R_um: float, s0: float, centre0):
    """Geometric fit of centre and metric G to edge points on a circle of radius R_um on the part."""

    def resid(p):
        d = points - p[:2]
        q = p[2] * d[:, 0] ** 2 + 2 * p[3] * d[:, 0] * d[:, 1] + p[4] * d[:, 1] ** 2
        return np.sqrt(np.clip(q, 1e-30, None)) - R_um

    p0 = np.array([centre0[0], centre0[1], s0 * s0, 0.0, s0 * s0])
    xs = np.array([1.0, 1.0, 1e-3 * s0 * s0, 1e-3 * s0 * s0, 1e-3 * s0 * s0])
    sol = least_squares(resid, p0, loss="soft_l1", f_scale=0.5 * s0, x_scale=xs)
    r = resid(sol.x)
    sig = 1.4826 * float(np.median(np.abs(r - np.median(r))))
    keep = np.abs(r) <= 4.0 * max(sig, 1e-9 * s0)
    pts = points[keep]

    def resid2(p):
        d = pts - p[:2]
        q = p[2] * d[:, 0] ** 2 + 2 * p[3] * d[:, 0] * d[:, 1] + p[4] * d[:, 1] ** 2
        return np.sqrt(np.clip(q, 1e-30, None)) - R_um

    sol = least_squares(resid2, sol.x, x_scale=xs, xtol=1e-12, ftol=1e-12)
    r = sol.fun
    n, npar = r.size, 5
    s2 = float(r @ r) / max(n - npar, 1)
    J = sol.jac
    try:
        cov = np.linalg.inv(J.T @ J) * s2
    except np.linalg.LinAlgError:
        raise CalibrationError("the disc edge fit is degenerate; photograph the whole disc") from None
    # neighbour correlation of the residuals around the edge (points are in angular order)
    rho = float(np.corrcoef(r[:-1], r[1:])[0, 1]) if n > 10 and r.std() > 0 else 0.0
    rho = min(max(rho, 0.0), 0.95)
    cov = cov * (1 + rho) / (1 - rho)
    return sol.x, cov, {"points": int(n), "rejected": int(keep.size - keep.sum()),
                        "residual_rms_um": math.sqrt(float(r @ r) / n), "neighbour_correlation": rho}


def disc_edge_points(image, levels=(0.25, 0.5, 0.75)):
    """Sub-pixel edge points of the disc in the image at the given fractions of the edge step.

    Returns ``({level: (N, 2) array of (x, y) px}, info)``; info holds the polarity, the rough centre and
    radius (px), the number of rays and the median edge step. Raises CalibrationError when no disc is found.
    """
    frame = _as_frame(image)
    data = frame.data.astype(np.float64)
    polarity, reg, mask = _find_blob(data)
    cy0, cx0 = reg.centroid
    r_eq = math.sqrt(reg.area / math.pi)
    n_rays = int(np.clip(2 * math.pi * r_eq / 1.5, 90, 1440))
    angles = np.linspace(0, 2 * math.pi, n_rays, endpoint=False)
    # boundary of the region along each ray
    radii = np.arange(0.0, 2.0 * r_eq, 0.5)
    xs = cx0 + radii[None, :] * np.cos(angles)[:, None]
    ys = cy0 + radii[None, :] * np.sin(angles)[:, None]
    inside = ndimage.map_coordinates(mask.astype(np.float64), [ys.ravel(), xs.ravel()], order=0,
                                     mode="constant").reshape(xs.shape) > 0.5
    first_out = np.argmin(inside, axis=1)
    r_init = radii[np.where(first_out == 0, radii.size - 1, first_out)] - 0.25
    coeffs = ndimage.spline_filter(data, order=3)
    pts, step, _ = _edge_points(data, coeffs, (cx0, cy0), r_init, angles, levels)
    info = {"polarity": polarity, "centre_px": (float(cx0), float(cy0)), "radius_px": r_eq, "rays": n_rays,
            "edge_step": step}
    return {q: v[0] for q, v in pts.items()}, info


@_single_thread
def measure_disc(image, diameter_mm: float, diameter_u_mm: float | None = None, *,
                 target_id: str | None = None) -> ScaleCalibration:
    """Pixel scale along x and y (and squareness) from one image of a disc of certified diameter.

    Parameters
    ----------
    image : Frame or (H, W) array
        The whole disc in view, dark on bright or bright on dark, at the focus used for the parts.
    diameter_mm : float
        Certified diameter, millimetres.
    diameter_u_mm : float, optional
        Its standard uncertainty (k = 1), mm. Default: 0.002 mm as a rectangular half-width (an assumption;
        give the certificate's value).
    """
    try:
        D = float(diameter_mm)
        uD = None if diameter_u_mm is None else float(diameter_u_mm)
    except (TypeError, ValueError):
        raise InputError("disc diameter and its uncertainty must be numbers of millimetres") from None
    if not math.isfinite(D) or D <= 0:
        raise InputError(f"disc diameter must be a positive number of millimetres, got {diameter_mm}")
    warnings: list[str] = []
    if uD is None:
        uD = 0.002 / math.sqrt(3.0)
        warnings.append(
            f"no diameter uncertainty given: assumed ±0.002 mm (u = {uD:.2g} mm); give --diameter-u from the "
            "disc's certificate"
        )
    if not math.isfinite(uD) or uD < 0 or uD > 0.05 * D:
        raise InputError(f"diameter uncertainty must be between 0 and 5 % of the diameter, got {diameter_u_mm} mm")
    frame = _as_frame(image)
    pts, found = disc_edge_points(frame)
    polarity, (cx0, cy0), r_eq, n_rays, step = (found[k] for k in ("polarity", "centre_px", "radius_px", "rays",
                                                                     "edge_step"))
    R_um = D * 1000.0 / 2.0
    s0 = R_um / r_eq
    check_plausible(s0, f"the disc diameter ({D:g} mm)")
    p50, cov, info = _fit_metric(pts[0.5], R_um, s0, (cx0, cy0))
    p25, _, _ = _fit_metric(pts[0.25], R_um, s0, (cx0, cy0))
    p75, _, _ = _fit_metric(pts[0.75], R_um, s0, (cx0, cy0))
    G = p50[2:]
    fit_u = propagate(lambda g: derived(g), G, cov[2:, 2:])
    sx = math.sqrt(G[0])
    rms_px = info["residual_rms_um"] / sx
    if rms_px > 0.5:
        warnings.append(
            f"the disc edge is ragged (residual {rms_px:.2f} px rms): dust, a chipped edge or a poor focus"
        )
    coverage = pts[0.5].shape[0] / n_rays
    if coverage < 0.8:
        warnings.append(f"an edge was found on only {100 * coverage:.0f} % of the rays around the disc")
    details = {
        "polarity": f"{polarity} disc",
        "centre_px": [float(p50[0]), float(p50[1])],
        "diameter_px": [D * 1000.0 / math.sqrt(G[0]), D * 1000.0 / math.sqrt(G[2])],
        "rays": n_rays,
        "edge_step": step,
        "fit": info,
        "edge_levels": {"25%": [math.sqrt(p25[2]), math.sqrt(p25[4])], "75%": [math.sqrt(p75[2]),
                                                                              math.sqrt(p75[4])]},
    }
    target = {"kind": "reference disc", "diameter_mm": D, "diameter_u_mm": uD, "id": target_id}
    res = assemble("disc", target, G, fit_u, ("diameter", D, uD, "mm"), edge=(p25[2:], p75[2:]),
                   images=(_image_info(frame),), details=details, warnings=warnings)
    from .grating import _anisotropy_note

    return _anisotropy_note(res)
