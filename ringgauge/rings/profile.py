"""Radial profiles of a ring image, binned in the squared radius s = r^2, where Newton's rings are periodic."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class SProfile:
    """Mean intensity in bins of s = r^2 (pixel units of x; y scaled by the aspect)."""

    s: np.ndarray  # mean s of the pixels in each bin, px^2
    mean: np.ndarray  # mean intensity per bin
    count: np.ndarray  # pixels per bin
    var: np.ndarray  # variance of the pixels in each bin (azimuthal scatter)
    ds: float


def squared_radius(shape, centre, aspect: float = 1.0, rows=None) -> np.ndarray:
    """s = (x - x0)^2 + (aspect (y - y0))^2 for every pixel (or for the given rows)."""
    h, w = shape
    x0, y0 = centre
    ys = np.arange(h, dtype=np.float64) if rows is None else np.asarray(rows, dtype=np.float64)
    dx2 = (np.arange(w, dtype=np.float64) - x0) ** 2
    dy2 = (aspect * (ys - y0)) ** 2
    return dy2[:, None] + dx2[None, :]


def s_profile(
    data: np.ndarray,
    centre: tuple[float, float],
    *,
    aspect: float = 1.0,
    s_max: float,
    ds: float,
    mask: np.ndarray | None = None,
) -> SProfile:
    """Bin the image by s = r^2 around ``centre`` into bins of width ``ds`` up to ``s_max`` (px^2)."""
    s = squared_radius(data.shape, centre, aspect)
    nb = int(np.ceil(s_max / ds))
    idx = (s / ds).astype(np.int64)
    ok = idx < nb
    if mask is not None:
        ok &= mask
    idx = idx[ok]
    v = data[ok].astype(np.float64)
    cnt = np.bincount(idx, minlength=nb).astype(np.float64)
    sm = np.bincount(idx, weights=v, minlength=nb)
    sq = np.bincount(idx, weights=v * v, minlength=nb)
    ssum = np.bincount(idx, weights=s[ok], minlength=nb)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sm / cnt
        var = sq / cnt - mean**2
        # the mean s of the pixels in each bin, not the bin centre: where rings are cut by the frame edge the
        # pixels are not spread evenly over a bin
        centres = np.where(cnt > 0, ssum / np.maximum(cnt, 1), (np.arange(nb) + 0.5) * ds)
    return SProfile(centres, mean, cnt, np.maximum(var, 0.0), ds)


def dominant_period(prof: SProfile, min_period: float | None = None) -> tuple[float, float]:
    """Period (px^2 per fringe) of the strongest oscillation of an s-profile, and its peak-to-noise ratio.

    The profile is detrended (a wide moving average removed), windowed and zero-padded; the FFT peak is refined by
    a parabola through the log-magnitudes of its neighbours.
    """
    good = prof.count > 0
    if good.sum() < 16:
        return float("nan"), 0.0
    y = np.interp(prof.s, prof.s[good], prof.mean[good])
    n = len(y)
    win = max(5, n // 20) | 1
    kern = np.ones(win) / win
    pad = np.pad(y, win // 2, mode="edge")
    trend = np.convolve(pad, kern, mode="valid")
    y = (y - trend) * np.hanning(n)
    nfft = 1 << int(np.ceil(np.log2(n * 8)))
    spec = np.abs(np.fft.rfft(y, nfft))
    freqs = np.fft.rfftfreq(nfft, d=prof.ds)
    lo = 2.0 / (n * prof.ds)  # at least ~2 cycles over the range
    hi = 1.0 / (2.5 * prof.ds)
    if min_period is not None:
        hi = min(hi, 1.0 / min_period)
    band = (freqs >= lo) & (freqs <= hi)
    if not band.any():
        return float("nan"), 0.0
    ib = np.nonzero(band)[0]
    i = ib[np.argmax(spec[ib])]
    if 0 < i < len(spec) - 1:
        a, b, c = np.log(spec[i - 1 : i + 2] + 1e-300)
        den = a - 2 * b + c
        off = 0.5 * (a - c) / den if den != 0 else 0.0
    else:
        off = 0.0
    f = (i + off) * (freqs[1] - freqs[0])
    noise = np.median(spec[ib]) + 1e-300
    return float(1.0 / f), float(spec[i] / noise)


def sector_labels(shape, centre, aspect: float, n_sectors: int) -> np.ndarray:
    """Angular sector (0 .. n-1) of every pixel about ``centre``, angles from +x toward +y."""
    h, w = shape
    ys = (aspect * (np.arange(h) - centre[1])).astype(np.float32)
    xs = (np.arange(w) - centre[0]).astype(np.float32)
    theta = np.arctan2(ys[:, None], xs[None, :])
    lab = ((theta + np.float32(np.pi)) * np.float32(n_sectors / (2 * np.pi))).astype(np.int64)
    return lab % n_sectors


def s_profiles_by_label(
    data: np.ndarray,
    centre: tuple[float, float],
    labels: np.ndarray | None,
    n_labels: int,
    *,
    aspect: float = 1.0,
    s_max: float,
    ds: float,
    mask: np.ndarray | None = None,
) -> tuple[list[SProfile], SProfile]:
    """One s-profile per label and their total, all in a single pass over the image.

    ``labels=None`` means ``n_labels`` equal angular sectors about the centre. Only the bounding box of the disc
    s <= s_max is read.
    """
    h, w = data.shape
    r = np.sqrt(s_max)
    x0, x1 = max(0, int(np.floor(centre[0] - r))), min(w, int(np.ceil(centre[0] + r)) + 1)
    y0, y1 = max(0, int(np.floor(centre[1] - r / aspect))), min(h, int(np.ceil(centre[1] + r / aspect)) + 1)
    if x1 <= x0 or y1 <= y0:
        empty = SProfile(np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0), ds)
        return [empty] * n_labels, empty
    sub = data[y0:y1, x0:x1]
    if labels is None:
        lab = sector_labels(sub.shape, (centre[0] - x0, centre[1] - y0), aspect, n_labels)
    else:
        lab = labels[y0:y1, x0:x1]
    s = squared_radius(sub.shape, (centre[0] - x0, centre[1] - y0), aspect)
    nb = int(np.ceil(s_max / ds))
    idx = (s / ds).astype(np.int64)
    ok = idx < nb
    if mask is not None:
        ok &= mask[y0:y1, x0:x1]
    comb = lab[ok] * nb + idx[ok]
    v = sub[ok].astype(np.float64)
    size = n_labels * nb
    raw = [
        np.bincount(comb, minlength=size).astype(np.float64).reshape(n_labels, nb),
        np.bincount(comb, weights=v, minlength=size).reshape(n_labels, nb),
        np.bincount(comb, weights=v * v, minlength=size).reshape(n_labels, nb),
        np.bincount(comb, weights=s[ok], minlength=size).reshape(n_labels, nb),
    ]
    nominal = (np.arange(nb) + 0.5) * ds

    def make(c, sm, sq, ssum):
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = sm / c
            var = np.maximum(sq / c - mean**2, 0.0)
            cen = np.where(c > 0, ssum / np.maximum(c, 1), nominal)
        return SProfile(cen, mean, c, var, ds)

    per = [make(*(a[k] for a in raw)) for k in range(n_labels)]
    total = make(*(a.sum(axis=0) for a in raw))
    return per, total
