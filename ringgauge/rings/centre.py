"""Coarse ring-system centre from intensity gradients.

For concentric rings the intensity gradient at every pixel points along the line through the ring centre. The
centre is the point closest, in the weighted least-squares sense, to all these gradient lines; robust
re-weighting discards lines from dust, edges and illumination that do not point at it. The centre may lie
outside the frame.

References
----------
R. Parthasarathy, "Rapid, accurate particle tracking by calculation of radial symmetry centers",
Nature Methods 9, 724-726 (2012).
G. Loy and A. Zelinsky, "Fast radial symmetry for detecting points of interest", IEEE TPAMI 25(8) (2003).
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from ..errors import AnalysisError


@dataclass(frozen=True)
class CentreEstimate:
    x: float
    y: float
    scale: float  # pixels of the original image per pixel of the working image
    conditioning: float  # smallest/largest eigenvalue of the normal matrix: ~0 for straight fringes
    inlier_fraction: float
    small: np.ndarray | None = None  # the area-averaged working image the estimate was made on
    vote: tuple[float, float] | None = None  # the accumulator peak (original pixels), a second candidate


def working_image(data: np.ndarray, max_side: int = 512) -> tuple[np.ndarray, float]:
    """Area-averaged copy of at most ``max_side`` pixels on the long side (anti-aliased), and its scale."""
    h, w = data.shape
    scale = max(1.0, max(h, w) / max_side)
    if scale <= 1.0:
        return data.astype(np.float32, copy=False), 1.0
    small = cv2.resize(data, (int(round(w / scale)), int(round(h / scale))), interpolation=cv2.INTER_AREA)
    sx = w / small.shape[1]
    return small, sx


def highpass(img: np.ndarray, sigma: float) -> np.ndarray:
    """Remove slowly varying illumination: image minus its heavy Gaussian blur, divided by a local level."""
    low = cv2.GaussianBlur(img, (0, 0), sigma)
    return img - low


def _vote(px, py, nx, ny, wgt, width, height, *, n_lines: int = 4000, margin: float = 0.75, rng=0) -> np.ndarray:
    """Peak of an accumulator where each gradient line adds its weight along its length (radial-symmetry
    voting, after Loy and Zelinsky). The accumulator reaches ``margin`` of the frame beyond each edge, so a centre
    outside the frame is found too."""
    g = np.random.default_rng(rng)
    n = len(px)
    if n > n_lines:
        pick = g.choice(n, size=n_lines, replace=False, p=wgt / wgt.sum())
        px, py, nx, ny = px[pick], py[pick], nx[pick], ny[pick]
        wv = np.ones(n_lines)
    else:
        wv = wgt
    cell = max(1.0, max(width, height) / 200.0)
    x0, y0 = -margin * width, -margin * height
    gw = int(np.ceil((1 + 2 * margin) * width / cell))
    gh = int(np.ceil((1 + 2 * margin) * height / cell))
    reach = np.hypot((1 + 2 * margin) * width, (1 + 2 * margin) * height)
    t = np.arange(-reach, reach, cell).astype(np.float32)
    acc = np.zeros(gw * gh)
    for k in range(0, len(px), 500):  # in chunks: the samples of all lines at once would take ~200 MB
        sl = slice(k, k + 500)
        ix = ((px[sl, None] - x0 + nx[sl, None] * t[None, :]) / cell).astype(np.int32)
        iy = ((py[sl, None] - y0 + ny[sl, None] * t[None, :]) / cell).astype(np.int32)
        ok = (ix >= 0) & (ix < gw) & (iy >= 0) & (iy < gh)
        acc += np.bincount(
            (iy.astype(np.int64) * gw + ix)[ok], weights=np.broadcast_to(wv[sl, None], ok.shape)[ok], minlength=gw * gh
        )
    acc = cv2.GaussianBlur(acc.reshape(gh, gw).astype(np.float32), (0, 0), 1.5)
    j, i = np.unravel_index(int(np.argmax(acc)), acc.shape)
    return np.array([x0 + (i + 0.5) * cell, y0 + (j + 0.5) * cell])


def gradient_centre(
    data: np.ndarray, *, aspect: float = 1.0, max_side: int = 512, start: tuple[float, float] | None = None
) -> CentreEstimate:
    """Estimate the ring centre (x, y) in pixels of ``data`` from its gradient field.

    ``aspect`` = pixel size y / pixel size x: the metric in which rings are circles.
    """
    small, scale = working_image(data, max_side)
    h, w = small.shape
    img = highpass(small, sigma=max(h, w) / 12.0)
    img = cv2.GaussianBlur(img, (0, 0), 1.0)
    gx = cv2.Sobel(img, cv2.CV_64F, 1, 0, ksize=3)
    gy = cv2.Sobel(img, cv2.CV_64F, 0, 1, ksize=3)
    # work in the metric frame: y' = aspect * y; gradient components transform contravariantly
    gy = gy / aspect
    mag2 = gx * gx + gy * gy
    thr = np.percentile(mag2, 60)
    sel = mag2 > max(thr, 1e-12)
    if sel.sum() < 50:
        raise AnalysisError("no ring system found: the image has too little structure")
    yy, xx = np.nonzero(sel)
    px = xx.astype(np.float64)
    py = yy.astype(np.float64) * aspect
    m = np.sqrt(mag2[sel])
    nx = gx[sel] / m
    ny = gy[sel] / m
    wgt = mag2[sel] / np.median(mag2[sel])
    # clip very strong gradients (dust speck edges, aperture edges) so they cannot dominate
    wgt = np.minimum(wgt, 4.0)
    diag = float(np.hypot(w, h * aspect))
    # parallel gradient lines (straight fringes: a wedge) have no crossing point at all
    a11, a12, a22 = np.sum(wgt * (1 - nx * nx)), np.sum(wgt * (-nx * ny)), np.sum(wgt * (1 - ny * ny))
    ev = np.linalg.eigvalsh(np.array([[a11, a12], [a12, a22]]))
    if ev[1] <= 0 or ev[0] / ev[1] < 2e-3:
        raise AnalysisError(
            "no ring system found: the fringes are straight or nearly so (a wedge, not a curved surface); "
            "check that the part rests on the flat and that the image shows rings"
        )
    vote = None
    if start is not None:
        c = np.array([start[0] / scale, start[1] / scale * aspect])
        delta = diag
    else:
        # every gradient line votes along its length; the lines of a ring system cross at its centre, while
        # lines from uneven light, hot spots and dust scatter their votes
        c = _vote(px, py, nx, ny, wgt, w, h * aspect)
        vote = (float(c[0]), float(c[1] / aspect))
        delta = 0.05 * diag  # robust scale of line distances, shrunk as the estimate settles
    cond = 0.0
    inl = 1.0
    for it in range(12):
        if c is not None:
            # distance of c from each line, and distance from the pixel to c
            dxc = c[0] - px
            dyc = c[1] - py
            dist = np.abs(dxc * ny - dyc * nx)
            rr = np.hypot(dxc, dyc) + 2.0
            # Cauchy weights on the line distance; Parthasarathy's 1/r weighting on pixel distance
            rw = wgt / (1.0 + (dist / delta) ** 2) / np.sqrt(rr)
            inl = float(np.mean(dist < max(3.0, 0.05 * diag)))
        else:
            rw = wgt
        a11 = np.sum(rw * (1 - nx * nx))
        a12 = np.sum(rw * (-nx * ny))
        a22 = np.sum(rw * (1 - ny * ny))
        b1 = np.sum(rw * ((1 - nx * nx) * px - nx * ny * py))
        b2 = np.sum(rw * (-nx * ny * px + (1 - ny * ny) * py))
        A = np.array([[a11, a12], [a12, a22]])
        ev = np.linalg.eigvalsh(A)
        cond = float(ev[0] / ev[1]) if ev[1] > 0 else 0.0
        if cond < 1e-4:
            raise AnalysisError(
                "no ring system found: the fringes are straight or nearly so (a wedge, not a curved surface); "
                "check that the part rests on the flat and that the image shows rings"
            )
        c_new = np.linalg.solve(A, np.array([b1, b2]))
        if c is not None and np.hypot(*(c_new - c)) < 1e-3:
            c = c_new
            break
        c = c_new
        delta = max(2.0, 0.5 * delta)
    x, y = c[0] * scale, c[1] / aspect * scale
    # pixel-centre convention: working pixel i covers original [i*s - 0.5, (i+1)*s - 0.5)
    x = x + 0.5 * (scale - 1.0)
    y = y + 0.5 * (scale - 1.0)
    if vote is not None:
        vote = (vote[0] * scale + 0.5 * (scale - 1.0), vote[1] * scale + 0.5 * (scale - 1.0))
    return CentreEstimate(float(x), float(y), float(scale), cond, inl, small, vote)


def profile_sharpness(small: np.ndarray, centre, aspect: float, mask=None, s_max=None, nbins: int = 512) -> tuple[float, float]:
    """How sharply the rings stand out in the profile binned in s = r^2 about ``centre`` (working pixels):
    the peak-to-noise ratio of its spectrum, and the period found. Largest at the true ring centre."""
    from .profile import dominant_period, s_profile

    h, w = small.shape
    if s_max is None:
        s_max = max((x - centre[0]) ** 2 + (aspect * (y - centre[1])) ** 2 for x in (0, w - 1) for y in (0, h - 1))
    prof = s_profile(small, centre, aspect=aspect, s_max=s_max, ds=s_max / nbins, mask=mask)
    period, snr = dominant_period(prof)
    return (snr if np.isfinite(period) else 0.0), period


def refine_by_sharpness(small: np.ndarray, starts, aspect: float, mask=None, *, step: float = 8.0):
    """Pattern search for the centre (working pixels) that makes the s-profile sharpest, from the best of
    ``starts``. Robust where gradients mislead: faint, blurred or noisy rings, mottled light, a centre near or
    beyond the frame edge."""
    best = None
    for c in starts:
        sc, _ = profile_sharpness(small, c, aspect, mask)
        if best is None or sc > best[0]:
            best = (sc, np.asarray(c, dtype=float))
    score, c = best
    while step >= 0.25:
        moved = False
        for dx, dy in ((1, 0), (-1, 0), (0, 1), (0, -1), (1, 1), (1, -1), (-1, 1), (-1, -1)):
            cand = c + step * np.array([dx, dy])
            sc, _ = profile_sharpness(small, cand, aspect, mask)
            if sc > score:
                score, c, moved = sc, cand, True
        if not moved:
            step /= 2
    return c, score
