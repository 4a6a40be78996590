"""The benchmark's baseline: what a user might script with OpenCV's Hough circle transform and numpy.

Recipe (plain OpenCV and numpy calls, parameters scaled to the image):

1. Even out the rings: Gaussian blur (sigma 1 px) against noise, subtract the local mean and divide by the
   local RMS (Gaussian windows of 5 % of the short image side), map to 128 +- 60 grey levels. This removes
   uneven illumination and stray light and gives every ring the same edge strength, so one Canny threshold suits
   the whole field, while the fringes stay smooth (a binarised image gives jagged edges whose gradient
   directions scatter the Hough votes).
2. Common centre, first guess: ``cv2.HoughCircles`` (HOUGH_GRADIENT) on a copy shrunk to a 640 px long side
   (the full-size vote over all radii takes tens of seconds on a 5-megapixel frame), ``minDist`` = image size so
   only the strongest centre is kept, ``maxRadius=-1`` (centres only). All rings vote for their common centre.
3. Rings: HOUGH_GRADIENT returns one radius per centre, so concentric rings are found one radius band at a time
   (the usual advice for concentric circles). Bands run from 5 px out to the largest circle wholly inside the
   frame (partial arcs at the frame edge give too few votes for a reliable radius); each band is half the local
   spacing of the ring edges (4 px until six edges are found), overlapping the next by 1.5 px. Each call works
   on a crop around the centre, grey (128) outside the band's annulus widened by 3 px so other rings neither vote
   nor slow the call, with ``dp=1``, ``minDist=1``, Canny threshold 60 and an accumulator threshold of 40 votes
   (a full ring in a band peaks at some 50-200). The strongest circle centred within 3 px of the common centre
   and not within 0.75 px of a band limit is kept. The sweep stops where edges come closer than 5 px
   (Hough's radius windows are 1 px wide).
4. Fit: Canny edges of the evened rings sit where the intensity crosses its local mean (steepest slope), a
   quarter fringe either side of each dark ring, so successive edges are half a fringe apart in r^2. The edge
   spacing in r^2 comes from the innermost circles (far apart, so found cleanly), refined by a Rayleigh
   periodogram of all circles' r^2 values (robust to missed and duplicate circles); each circle gets the nearest multiple of it as its order, circles more than a quarter step off are
   dropped as spurious, and the same r^2-versus-order least-squares line as ringgauge is fitted
   (``numpy.polyfit``): R = n * slope / lambda. Common centre = median of the kept circles' centres.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

#: Canny high threshold on the evened rings (the low one is half of it, as HoughCircles does)
CANNY_HIGH = 60
#: long side of the shrunk copy used to find the first centre guess
CENTRE_SIDE_PX = 640
#: a ring circle's centre must lie this close to the common centre (px)
CENTRE_TOL_PX = 3.0
#: Hough accumulator threshold for the ring bands (a full ring in a band peaks at some 50-200 votes)
ACC_THRESHOLD = 40
#: bands overlap by twice this; circles closer than this to a band limit are left to the neighbouring band
EDGE_MARGIN_PX = 0.75
#: edges found band by band from the centre before tracking starts
N_FIRST_EDGES = 5
#: narrowest band tracked (px): closer edges are beyond Hough's 1-px radius windows
MIN_BAND_PX = 2.5


class BaselineFailure(Exception):
    """The baseline could not produce a radius for this image (the reason is the message)."""


@dataclass(frozen=True)
class BaselineResult:
    radius_mm: float
    centre_px: tuple[float, float]
    n_edges: int  # ring edges used in the fit
    hough_calls: int


def even_rings(img: np.ndarray) -> np.ndarray:
    """Step 1: rings with illumination removed and contrast made uniform (uint8, mid-grey 128)."""
    h, w = img.shape
    scale = 0.05 * min(h, w)  # background scale, well above the widest inner fringe
    g = cv2.GaussianBlur(img.astype(np.float32), (0, 0), 1.0)
    d = g - cv2.GaussianBlur(g, (0, 0), scale)
    z = d / np.sqrt(cv2.GaussianBlur(d * d, (0, 0), scale) + 1e-6)
    return np.clip(128.0 + 60.0 * z, 0, 255).astype(np.uint8)


def centre_guess(b: np.ndarray) -> tuple[float, float]:
    """Step 2: the strongest Hough centre on a shrunk copy, in full-size pixels."""
    h, w = b.shape
    f = min(1.0, CENTRE_SIDE_PX / max(h, w))
    small = cv2.resize(b, (round(w * f), round(h * f)), interpolation=cv2.INTER_AREA) if f < 1 else b
    c = cv2.HoughCircles(small, cv2.HOUGH_GRADIENT, dp=1, minDist=max(small.shape), param1=CANNY_HIGH,
                         param2=30, minRadius=5, maxRadius=-1)
    if c is None:
        raise BaselineFailure("Hough found no circle centre")
    return float(c[0, 0, 0]) / f, float(c[0, 0, 1]) / f


def _band_circle(b, r2, centre, lo, hi):
    """The strongest Hough circle with radius in [lo, hi] centred within CENTRE_TOL_PX of ``centre``, or None."""
    h, w = b.shape
    cx, cy = centre
    x0, x1 = int(max(0, cx - hi - 3)), int(min(w, cx + hi + 4))
    y0, y1 = int(max(0, cy - hi - 3)), int(min(h, cy + hi + 4))
    sub = b[y0:y1, x0:x1].copy()
    sub[(r2[y0:y1, x0:x1] < (lo - 3) ** 2) | (r2[y0:y1, x0:x1] > (hi + 3) ** 2)] = 128
    cc = cv2.HoughCircles(sub, cv2.HOUGH_GRADIENT, dp=1, minDist=1, param1=CANNY_HIGH, param2=ACC_THRESHOLD,
                          minRadius=int(math.floor(lo)), maxRadius=int(math.ceil(hi)))
    if cc is None:
        return None
    for x, y, r in cc[0]:
        # a circle at a band limit is a partial vote from a ring just outside the band
        if math.hypot(x + x0 - cx, y + y0 - cy) <= CENTRE_TOL_PX and lo + EDGE_MARGIN_PX <= r <= hi - EDGE_MARGIN_PX:
            return float(x + x0), float(y + y0), float(r)
    return None


def half_fringe_step(s2: np.ndarray) -> tuple[float, float]:
    """Spacing of the ring edges in r^2 (px^2) and its phase, from the circles' r^2 values ``s2``.

    A first value comes from the innermost circles, which lie far apart (edge k at r ~ sqrt(k), gaps of about
    r / 2k): circles closer than 0.1 r to the previous one are taken for the same edge, and the median r^2 step of
    the first six distinct ones is used. It is refined over all circles by a Rayleigh periodogram of the r^2
    values, power(f) = |mean exp(2 pi i f s)|, searched between 0.7 and 1.4 times the first value (a wider
    search picks up harmonics and chance peaks): missed edges do not move its peak, duplicate and spurious
    circles only lower it.
    """
    r = np.sort(np.sqrt(s2))
    distinct = [r[0]]
    for x in r[1:]:
        if x - distinct[-1] > max(3.0, 0.1 * x):
            distinct.append(x)
    if len(distinct) < 3:
        return math.nan, 0.0
    d0 = float(np.median(np.diff(np.square(distinct[:6]))))
    span = float(np.ptp(s2))
    f = np.arange(1.0 / (1.4 * d0), 1.0 / (0.7 * d0), 0.02 / span)
    z = np.exp(2j * np.pi * f[:, None] * s2[None, :]).mean(axis=1)
    i = int(np.argmax(np.abs(z)))
    return 1.0 / f[i], float(np.angle(z[i]))


def ring_circles(b: np.ndarray, centre: tuple[float, float]) -> tuple[list[tuple[float, float, float]], int]:
    """Step 3: ring-edge circles (x, y, r) from contiguous radius bands, and the number of Hough calls."""
    h, w = b.shape
    cx, cy = centre
    r_in = min(cx, w - 1 - cx, cy, h - 1 - cy)  # largest circle wholly inside the frame
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    r2 = (xx - np.float32(cx)) ** 2 + (yy - np.float32(cy)) ** 2
    hits: list[tuple[float, float, float]] = []
    lo, bw, calls = 5.0, 4.0, 0
    while lo < r_in:
        hi = min(lo + bw, r_in)
        c = _band_circle(b, r2, centre, lo, hi)
        calls += 1
        if c is not None:
            hits.append(c)
        if len(hits) >= 6:
            s2 = np.array([c[2] for c in hits]) ** 2
            step, _ = half_fringe_step(s2)
            if math.isfinite(step):
                spacing = step / (2 * hi)  # edge spacing in r here
                if spacing < 2 * MIN_BAND_PX:
                    break  # edges too close for Hough's 1-px radius windows
                bw = float(np.clip(0.5 * spacing + 2 * EDGE_MARGIN_PX, 3.0, 0.05 * min(h, w)))
        if hi >= r_in:
            break
        lo = hi - 2 * EDGE_MARGIN_PX
    return hits, calls


def fit_radius(circles, *, px_mm: float, lam_mm: float, n: float = 1.0) -> tuple[float, tuple[float, float], int]:
    """Step 4: half-fringe orders, r^2-versus-order line, common centre; returns R (mm), centre, edges used."""
    if len(circles) < 6:
        raise BaselineFailure(f"only {len(circles)} ring edges found by Hough (need 6)")
    F = np.array(circles, dtype=np.float64)
    s2 = F[:, 2] ** 2
    step, phase = half_fringe_step(s2)
    if not math.isfinite(step):
        raise BaselineFailure("no regular ring spacing among the Hough circles")
    x = s2 / step - phase / (2 * np.pi)
    k = np.rint(x)
    keep = np.abs(x - k) < 0.25  # edges off the regular spacing are spurious
    if keep.sum() < 6:
        raise BaselineFailure(f"only {int(keep.sum())} Hough circles fit a regular ring spacing (need 6)")
    if np.ptp(k[keep]) < 3:
        raise BaselineFailure("the ring spacing found among the Hough circles spans fewer than 3 edges")
    slope = np.polyfit(0.5 * k[keep], s2[keep], 1)[0] * px_mm**2  # successive edges: half a fringe apart
    centre = np.median(F[keep, :2], axis=0)
    return n * slope / lam_mm, (float(centre[0]), float(centre[1])), int(keep.sum())


def hough_baseline(img: np.ndarray, *, pixel_um: float, wavelength_nm: float, medium_index: float = 1.0) -> BaselineResult:
    """Radius of curvature (mm) from Newton's rings by the Hough recipe above; raises BaselineFailure."""
    b = even_rings(img)
    c0 = centre_guess(b)
    circles, calls = ring_circles(b, c0)
    R, centre, n_edges = fit_radius(circles, px_mm=pixel_um * 1e-3, lam_mm=wavelength_nm * 1e-6, n=medium_index)
    if not math.isfinite(R) or R <= 0:
        raise BaselineFailure("the r² fit gave no positive radius")
    return BaselineResult(R, centre, n_edges, calls + 1)
