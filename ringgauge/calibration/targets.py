"""Synthetic calibration-target images with known truth: line scales, crossed grids, dot grids, discs.

A target is described in object space (micrometres, on the part's plane); the camera samples it with its own
pixel scale along x and y (which may differ), a Gaussian blur, uneven light, shot and read noise and
quantisation. Every generator returns a :class:`TargetImage` carrying the truth it was made from, so the tests
can compare what :mod:`ringgauge.calibration` measures with what was put in. Randomness is seeded.

Object coordinates: the image centre ((W - 1)/2, (H - 1)/2) is the object origin plus ``offset_um``;
X = (x - cx) * pixel_um, Y = (y - cy) * pixel_y_um, x = column, y = row.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
from scipy import ndimage

from ..synth import Camera, Lighting, _rng, codes_to_unit

__all__ = ["TargetImage", "line_grating", "crossed_grid", "dot_grid", "disc", "Camera", "Lighting"]


@dataclass
class TargetImage:
    """A generated calibration image and the truth it was made from."""

    image: np.ndarray  # (H, W) uint8 / uint16 camera codes
    truth: dict = field(default_factory=dict)

    @property
    def image01(self) -> np.ndarray:
        return codes_to_unit(self.image, self.truth["camera"]["bits"])


def _sample(fn, camera: Camera, offset_um=(0.0, 0.0), ss: int = 3, distortion: float = 0.0) -> np.ndarray:
    """``fn(X_um, Y_um, footprint_um)`` on a grid ``ss`` times finer than the pixels: shape (H ss, W ss).

    ``distortion`` k makes the object-space scale grow radially: a pixel at relative radius rho (1 at the
    frame's corner) sees the part at (1 + k rho^2) times the nominal position (k < 0 barrel, > 0 pincushion
    as seen in the image).
    """
    H, W = camera.height, camera.width
    sx = camera.pixel_um
    sy = camera.pixel_y_um or camera.pixel_um
    cx, cy = (W - 1) / 2, (H - 1) / 2
    foot = max(sx, sy) / ss  # anti-aliasing ramp width of one sub-sample, µm
    xs = (np.arange(W * ss) + 0.5) / ss - 0.5 - cx  # sub-sample centres in pixel units
    ys = (np.arange(H * ss) + 0.5) / ss - 0.5 - cy
    if distortion:
        rho2 = (xs[None, :] ** 2 + ys[:, None] ** 2) / (cx**2 + cy**2)
        grow = 1.0 + distortion * rho2
        X = xs[None, :] * sx * grow - offset_um[0]
        Y = ys[:, None] * sy * grow - offset_um[1]
    else:
        X = (xs * sx - offset_um[0])[None, :]
        Y = (ys * sy - offset_um[1])[:, None]
    return np.broadcast_to(fn(X, Y, foot), (H * ss, W * ss)).astype(np.float64)


def _ramp(inside_um, foot_um):
    """Anti-aliased indicator: 1 well inside (positive distance), 0 outside, linear over one footprint."""
    return np.clip(inside_um / foot_um + 0.5, 0.0, 1.0)


def _expose(transmission_hi: np.ndarray, ss: int, camera: Camera, lighting: Lighting, rng, dust_count: int = 0):
    """The camera's view of a target of given transmission (0..1), sampled ``ss`` times finer than the pixels.

    As on a real bench, the light falls on the target and the lens blurs what it sees *before* the sensor
    samples it: illumination and blur act on the fine grid, then each pixel integrates its ss x ss
    sub-samples (100 % fill factor), then dust, shot and read noise and quantisation.
    """
    g = _rng(rng)
    H, W = camera.height, camera.width
    cxl, cyl = lighting.centre if lighting.centre is not None else ((W - 1) / 2, (H - 1) / 2)
    xs = (np.arange(W * ss) + 0.5) / ss - 0.5
    ys = (np.arange(H * ss) + 0.5) / ss - 0.5
    xx, yy = xs[None, :], ys[:, None]
    rr2 = ((xx - cxl) ** 2 + (yy - cyl) ** 2) / (((W - 1) / 2) ** 2 + ((H - 1) / 2) ** 2)
    ang = np.deg2rad(lighting.gradient_angle_deg)
    lin = ((xx - (W - 1) / 2) * np.cos(ang) + (yy - (H - 1) / 2) * np.sin(ang)) / max(W, H)
    illum = np.clip((1.0 - lighting.falloff * rr2) * (1.0 + lighting.gradient * lin), 0.05, None)
    hi = (illum * transmission_hi + lighting.stray) / (1.0 + lighting.stray) * camera.exposure
    if camera.blur_px > 0:
        hi = ndimage.gaussian_filter(hi, camera.blur_px * ss, mode="nearest")
    intensity = hi.reshape(H, ss, W, ss).mean(axis=(1, 3))
    specks = []
    if dust_count:
        yy, xx = np.mgrid[0:H, 0:W].astype(np.float64)
        mask = np.zeros((H, W))
        for _ in range(dust_count):
            x0, y0, rad = g.uniform(0, W), g.uniform(0, H), g.uniform(2.0, 7.0)
            mask = np.maximum(mask, np.clip(rad - np.hypot(xx - x0, yy - y0) + 0.5, 0, 1))
            specks.append({"x": float(x0), "y": float(y0), "radius_px": float(rad)})
        intensity = intensity * (1 - 0.9 * mask)
    electrons = g.poisson(np.clip(intensity, 0, None) * camera.full_well_e).astype(np.float64)
    electrons += g.normal(0.0, camera.read_noise_e, size=electrons.shape)
    full = (1 << camera.bits) - 1
    codes = np.clip(np.rint(electrons / camera.full_well_e * full), 0, full)
    return codes.astype(np.uint8 if camera.bits == 8 else np.uint16), specks


def _truth(kind: str, camera: Camera, lighting: Lighting, **kw) -> dict:
    return {
        "kind": kind,
        "pixel_um": [camera.pixel_um, camera.pixel_y_um or camera.pixel_um],
        "camera": asdict(camera),
        "lighting": asdict(lighting),
        **kw,
    }


def _rotated(X, Y, angle_deg: float):
    """Coordinates along the grating's normal (u) and along its lines (v); angle of the normal from +x."""
    a = np.deg2rad(angle_deg)
    return X * np.cos(a) + Y * np.sin(a), -X * np.sin(a) + Y * np.cos(a)


def _lines(u, v, foot, pitch, width, missing, damaged, length_um, long_every):
    """Opacity (0..1) of a set of lines of given width at ``pitch`` along u."""
    n = np.rint(u / pitch)
    d = np.abs(u - n * pitch)
    line = _ramp(width / 2 - d, foot)
    if length_um is not None:
        half = np.where((long_every > 0) & (n % max(long_every, 1) == 0), 0.75 * length_um, 0.5 * length_um)
        line = line * _ramp(half - np.abs(v), foot)
    for m in missing:
        line = np.where(n == m, 0.0, line)
    for m, v0, v1 in damaged:
        line = np.where((n == m) & (v > v0) & (v < v1), 0.0, line)
    return line


def line_grating(
    pitch_um: float = 10.0,
    *,
    angle_deg: float = 0.0,
    line_width: float = 0.3,
    contrast: float = 0.85,
    length_um: float | None = None,
    long_every: int = 0,
    base_line: bool = False,
    distortion: float = 0.0,
    missing_lines: int = 0,
    damaged_lines: int = 0,
    camera: Camera = Camera(width=640, height=512, pixel_um=1.0, blur_px=0.8),
    lighting: Lighting = Lighting(),
    offset_um: tuple[float, float] = (0.0, 0.0),
    dust: int = 0,
    rng=None,
) -> TargetImage:
    """A line scale or line grating: dark lines of ``line_width`` x pitch on a bright field.

    Parameters
    ----------
    pitch_um : float
        Line pitch (period) in micrometres, object space.
    angle_deg : float
        Direction of the grating's normal (across the lines) from +x toward +y; 0 = vertical lines.
    length_um : float, optional
        Line length (a stage micrometer's strip); None = lines across the whole field.
    long_every : int
        Every n-th line is 1.5 times longer (the 5th / 10th division marks of a micrometer); needs length_um.
    base_line : bool
        A long line across the divisions at one end of the strip, as many stage micrometers have; needs
        length_um.
    distortion : float
        Radial lens distortion k (see ``_sample``); 0 = none.
    missing_lines, damaged_lines : int
        How many lines are missing entirely / have a gap, chosen at random.
    rng : {numpy.random.Generator, int}, optional
    """
    g = _rng(rng)
    span = np.hypot(camera.width * camera.pixel_um, camera.height * (camera.pixel_y_um or camera.pixel_um))
    nmax = max(1, int(0.4 * span / pitch_um))
    missing = [int(m) for m in g.choice(np.arange(-nmax, nmax + 1), size=missing_lines, replace=False)]
    damaged = []
    for m in g.choice(np.arange(-nmax, nmax + 1), size=damaged_lines, replace=False):
        v0 = g.uniform(-0.4, 0.2) * span
        damaged.append((int(m), float(v0), float(v0 + g.uniform(0.05, 0.2) * span)))

    def fn(X, Y, foot):
        u, v = _rotated(X, Y, angle_deg)
        op = _lines(u, v, foot, pitch_um, line_width * pitch_um, missing, damaged, length_um, long_every)
        if base_line and length_um is not None:
            op = np.maximum(op, _ramp(line_width * pitch_um / 2 - np.abs(v + 0.5 * length_um), foot))
        return 1.0 - contrast * op

    img, specks = _expose(_sample(fn, camera, offset_um, 3, distortion), 3, camera, lighting, g, dust)
    return TargetImage(img, _truth("line_grating", camera, lighting, pitch_um=pitch_um, angle_deg=angle_deg,
                                   line_width=line_width, missing=missing, damaged=damaged, distortion=distortion,
                                   dust=specks))


def crossed_grid(
    pitch_um: float = 50.0,
    *,
    angle_deg: float = 0.0,
    line_width: float = 0.15,
    contrast: float = 0.85,
    missing_lines: int = 0,
    camera: Camera = Camera(width=640, height=512, pixel_um=2.0, blur_px=0.8),
    lighting: Lighting = Lighting(),
    offset_um: tuple[float, float] = (0.0, 0.0),
    dust: int = 0,
    rng=None,
) -> TargetImage:
    """A square grid of opaque lines (two perpendicular line sets of the same pitch), turned by ``angle_deg``."""
    g = _rng(rng)
    span = np.hypot(camera.width * camera.pixel_um, camera.height * (camera.pixel_y_um or camera.pixel_um))
    nmax = max(1, int(0.4 * span / pitch_um))
    miss_u = [int(m) for m in g.choice(np.arange(-nmax, nmax + 1), size=missing_lines, replace=False)]
    miss_v = [int(m) for m in g.choice(np.arange(-nmax, nmax + 1), size=missing_lines, replace=False)]
    w = line_width * pitch_um

    def fn(X, Y, foot):
        u, v = _rotated(X, Y, angle_deg)
        a = _lines(u, v, foot, pitch_um, w, miss_u, [], None, 0)
        b = _lines(v, u, foot, pitch_um, w, miss_v, [], None, 0)
        return (1.0 - contrast * a) * (1.0 - contrast * b)

    img, specks = _expose(_sample(fn, camera, offset_um, 3), 3, camera, lighting, g, dust)
    return TargetImage(img, _truth("crossed_grid", camera, lighting, pitch_um=pitch_um, angle_deg=angle_deg,
                                   line_width=line_width, missing=[miss_u, miss_v], dust=specks))


def dot_grid(
    pitch_um: float = 50.0,
    *,
    angle_deg: float = 0.0,
    dot_diameter: float = 0.4,
    contrast: float = 0.85,
    camera: Camera = Camera(width=640, height=512, pixel_um=2.0, blur_px=0.8),
    lighting: Lighting = Lighting(),
    offset_um: tuple[float, float] = (0.0, 0.0),
    dust: int = 0,
    rng=None,
) -> TargetImage:
    """A square lattice of dark dots of ``dot_diameter`` x pitch, turned by ``angle_deg``."""
    g = _rng(rng)
    r = dot_diameter * pitch_um / 2

    def fn(X, Y, foot):
        u, v = _rotated(X, Y, angle_deg)
        du = u - np.rint(u / pitch_um) * pitch_um
        dv = v - np.rint(v / pitch_um) * pitch_um
        return 1.0 - contrast * _ramp(r - np.hypot(du, dv), foot)

    img, specks = _expose(_sample(fn, camera, offset_um, 3), 3, camera, lighting, g, dust)
    return TargetImage(img, _truth("dot_grid", camera, lighting, pitch_um=pitch_um, angle_deg=angle_deg,
                                   dot_diameter=dot_diameter, dust=specks))


def disc(
    diameter_mm: float = 5.0,
    *,
    centre_um: tuple[float, float] = (0.0, 0.0),
    dark: bool = True,
    contrast: float = 0.9,
    camera: Camera = Camera(width=800, height=640, pixel_um=10.0, blur_px=0.8),
    lighting: Lighting = Lighting(),
    dust: int = 0,
    rng=None,
) -> TargetImage:
    """A reference disc of ``diameter_mm``: dark on a bright field (back-lit) or, with ``dark=False``, bright on
    dark (a ring gauge's bore, lit from behind). ``centre_um`` is its centre relative to the image centre."""
    g = _rng(rng)
    R = diameter_mm * 1000.0 / 2

    def fn(X, Y, foot):
        inside = _ramp(R - np.hypot(X - centre_um[0], Y - centre_um[1]), foot)
        return 1.0 - contrast * inside if dark else (1.0 - contrast) + contrast * inside

    img, specks = _expose(_sample(fn, camera, ss=4), 4, camera, lighting, g, dust)
    sx, sy = camera.pixel_um, camera.pixel_y_um or camera.pixel_um
    cpx = ((camera.width - 1) / 2 + centre_um[0] / sx, (camera.height - 1) / 2 + centre_um[1] / sy)
    return TargetImage(img, _truth("disc", camera, lighting, diameter_mm=diameter_mm, dark=dark,
                                   centre_px=list(cpx), diameter_px=[2 * R / sx, 2 * R / sy], dust=specks))
