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
    if start is not None:
        c = np.array([start[0] / scale, start[1] / scale * aspect])
    else:
        c = None
    diag = float(np.hypot(w, h * aspect))
    delta = diag  # robust scale of line distances
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
    return CentreEstimate(float(x), float(y), float(scale), cond, inl, small)
