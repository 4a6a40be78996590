"""An image model of a part lying on a test plate, written for these tests alone, apart from ringgauge's generator.

The part is a disc (the clear aperture) of radius ``aperture_px`` about ``centre_px`` lying on a test plate. Its
departure from the plate is a surface height h(u, v) over the normalised aperture (u, v) = ((x, y) - centre) /
radius, written in fringes (one fringe = lambda / 2 of height) as

    h = power * rho^2 + astig/2 * (cos 2a (u^2 - v^2) + sin 2a * 2uv) + zonal * (6 rho^4 - 6 rho^2 + 1)
        + tilt_x * u + tilt_y * v,

so that the principal meridians differ by ``astig`` fringes of power. Positive power is centre contact (the gap
grows toward the edge); negative power is edge contact (the gap is largest at the centre). The gap is
t = offset + h - min(h) >= 0 (contact where t = 0, plus ``offset`` of dust or air film).

In reflection the two faces bounding the gap give, at a gap t, the normalised reflectance
(1 - cos delta) / 2 (two-beam) or the multiple-beam Airy form F sin^2(delta/2) / (1 + F sin^2(delta/2)) / (F / (1 + F)),
F = 4 rho / (1 - rho)^2, delta = 4 pi n t / lambda — both zero at contact (the half-wave phase flip at one
face) [E. Hecht, *Optics*, thin-film interference chapter; Fresnel reflectance ((n - 1) / (n + 1))^2 ~ 0.04 of
one glass face]. Outside the part the plate alone reflects one face, about 0.04 / 0.148 = 0.27 of the brightest
fringe [der. from those two formulas], without fringes.

The camera: illumination (Gaussian fall-off, a linear ramp: uneven light), fringe visibility, stray light, dust
specks on the part (dark discs) and glints (bright discs), on a grid ``oversample`` times finer than the pixels;
Gaussian blur on that grid, binning into pixels (pixel integration), shot (Poisson) noise in electrons, read
noise and quantisation to 8 or 12 bits with clipping.

Frame sets: each frame adds a uniform gap change (``steps``, fringes, unequal) and a small tilt change
(``tilt_steps``, fringes across the aperture radius in u and v).

Truth: :func:`truth_terms` computes power, astigmatism and irregularity from h by their ISO 10110-5:2015
meanings (least-squares best-fit sphere over the test diameter after piston and tilt; power = its rho^2
coefficient, irregularity = PV of the departure from it) on a dense grid, with numpy alone.

Coordinates as ringgauge states them: x = column, y = row, pixel centres at integers, origin at the centre of the
top-left pixel.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import ndimage

# Mercury green e-line in standard air, NIST Atomic Spectra Database.
HG_E_NM = 546.074


@dataclass(frozen=True)
class Speck:
    x: float
    y: float
    radius_px: float
    kind: str = "dark"  # "dark": transmission 1 - strength; "glint": adds strength (may saturate)
    strength: float = 0.8


@dataclass(frozen=True)
class Part:
    """One part on a test plate and its camera; the truth is the form (fringes) and the aperture."""

    width: int = 400
    height: int = 400
    pixel_um: float = 60.0
    centre_px: tuple[float, float] = (200.0, 200.0)
    aperture_px: float = 150.0
    power: float = 2.0  # fringes, signed: + centre contact, - edge contact
    astig: float = 0.0  # fringes: difference of the principal meridians' power
    astig_axis_deg: float = 0.0
    zonal: float = 0.0  # fringes, coefficient of 6 rho^4 - 6 rho^2 + 1
    tilt: tuple[float, float] = (0.0, 0.0)  # fringes across the radius in u, v
    offset: float = 0.0  # fringes of gap at the closest point (0 = contact)
    #: where the rim falls in the fringe cycle: None leaves it where power/offset put it; 0 dark, 0.5 bright,
    #: 0.25 grey (mean gap along the rim, fractional part in fringes)
    rim_phase: float | None = None
    wavelength_nm: float = HG_E_NM
    medium_index: float = 1.0
    face_reflectance: float | None = 0.04  # None: two-beam shape
    visibility: float = 0.9
    outside_level: float = 0.27
    level: float = 0.7  # peak illumination, fraction of full scale
    falloff_sigma: float = 2.0  # Gaussian fall-off width in aperture radii (inf = none)
    falloff_centre: tuple[float, float] = (0.0, 0.0)  # offset of its centre, in aperture radii
    ramp: tuple[float, float] = (0.0, 0.0)  # relative illumination change across one aperture diameter in x, y
    stray: float = 0.02
    specks: tuple[Speck, ...] = ()
    blur_px: float = 0.8
    oversample: int = 3
    full_well_e: float = 15000.0
    read_noise_e: float = 6.0
    bits: int = 8

    def with_(self, **kw) -> "Part":
        return replace(self, **kw)


@dataclass
class Shot:
    counts: np.ndarray  # (H, W) uint8 / uint16 camera codes
    part: Part
    gap_fringes_at_rim: float = field(default=0.0)


def height_fringes(part: Part, u: np.ndarray, v: np.ndarray, tilt=(0.0, 0.0)) -> np.ndarray:
    """Surface height in fringes at normalised aperture coordinates (u, v)."""
    r2 = u * u + v * v
    a = math.radians(2 * part.astig_axis_deg)
    h = part.power * r2
    h = h + 0.5 * part.astig * (math.cos(a) * (u * u - v * v) + math.sin(a) * 2 * u * v)
    h = h + part.zonal * (6 * r2 * r2 - 6 * r2 + 1)
    h = h + (part.tilt[0] + tilt[0]) * u + (part.tilt[1] + tilt[1]) * v
    return h


def _gap_floor(part: Part) -> float:
    """min of h over the aperture (dense polar sampling), so that the gap is >= offset everywhere."""
    rr, th = np.meshgrid(np.linspace(0, 1, 201), np.linspace(0, 2 * np.pi, 361))
    return float(height_fringes(part, rr * np.cos(th), rr * np.sin(th)).min())


def _rim_shift(part: Part) -> float:
    """Extra gap (fringes) that puts the rim's mean gap at ``rim_phase`` of a fringe."""
    if part.rim_phase is None:
        return 0.0
    th = np.linspace(0, 2 * np.pi, 720, endpoint=False)
    rim = float(np.mean(height_fringes(part, np.cos(th), np.sin(th)))) - _gap_floor(part) + part.offset
    return (part.rim_phase - rim) % 1.0


def reflectance(t_fringes: np.ndarray, part: Part) -> np.ndarray:
    """Normalised gap reflectance in [0, 1] at a gap of t fringes (lambda / 2 each): 0 at contact."""
    delta = 2 * np.pi * t_fringes  # 4 pi n t / lambda with t in units of lambda / (2 n)
    if part.face_reflectance is None:
        return 0.5 * (1 - np.cos(delta))
    rho = part.face_reflectance
    F = 4 * rho / (1 - rho) ** 2
    s2 = np.sin(0.5 * delta) ** 2
    return F * s2 / (1 + F * s2) / (F / (1 + F))


def render_noiseless(part: Part, *, step: float = 0.0, tilt=(0.0, 0.0)) -> np.ndarray:
    """Expected intensity per pixel (fraction of full scale) for one frame with an added uniform gap ``step``."""
    os_ = part.oversample
    xf = (np.arange(part.width * os_) + 0.5) / os_ - 0.5
    yf = (np.arange(part.height * os_) + 0.5) / os_ - 0.5
    X, Y = np.meshgrid(xf, yf)
    cx, cy = part.centre_px
    R = part.aperture_px
    u, v = (X - cx) / R, (Y - cy) / R
    inside = u * u + v * v <= 1.0
    t = height_fringes(part, u, v, tilt) - _gap_floor(part) + part.offset + _rim_shift(part) + step
    shape = part.visibility * reflectance(t, part) + (1 - part.visibility)
    shape = np.where(inside, shape, part.outside_level)
    fx, fy = part.falloff_centre
    illum = np.ones_like(u)
    if math.isfinite(part.falloff_sigma):
        illum = np.exp(-0.5 * ((u - fx) ** 2 + (v - fy) ** 2) / part.falloff_sigma**2)
    illum = illum * (1 + 0.5 * part.ramp[0] * u + 0.5 * part.ramp[1] * v)
    img = part.level * illum
    for s in part.specks:
        m = (X - s.x) ** 2 + (Y - s.y) ** 2 <= s.radius_px**2
        if s.kind == "dark":
            img = np.where(m, img * (1 - s.strength), img)
    img = img * shape + part.stray
    for s in part.specks:
        if s.kind == "glint":
            m = (X - s.x) ** 2 + (Y - s.y) ** 2 <= s.radius_px**2
            img = np.where(m, img + s.strength, img)
    if part.blur_px > 0:
        img = ndimage.gaussian_filter(img, part.blur_px * os_, mode="nearest")
    return img.reshape(part.height, os_, part.width, os_).mean(axis=(1, 3))


def _expose(intensity: np.ndarray, part: Part, rng: np.random.Generator) -> np.ndarray:
    e = rng.poisson(np.clip(intensity, 0, None) * part.full_well_e).astype(np.float64)
    e += rng.normal(0.0, part.read_noise_e, size=e.shape)
    full = (1 << part.bits) - 1
    codes = np.rint(np.clip(e / part.full_well_e, 0.0, 1.0) * full)
    return codes.astype(np.uint8 if part.bits <= 8 else np.uint16)


def render(part: Part, rng=0, *, steps=(0.0,), tilt_steps=None) -> list[np.ndarray]:
    """Camera codes of one frame per gap step (fringes, cumulative offsets from the first frame)."""
    rng = np.random.default_rng(rng)
    tilt_steps = tilt_steps or [(0.0, 0.0)] * len(steps)
    return [_expose(render_noiseless(part, step=s, tilt=tl), part, rng) for s, tl in zip(steps, tilt_steps)]


def truth_terms(part: Part, n: int = 301) -> dict:
    """Power (signed), astigmatism and irregularity (fringes) of ``h`` over the aperture by their ISO 10110-5
    meanings: least squares on a dense grid over the unit disc, tilt and piston removed."""
    t = np.linspace(-1, 1, n)
    U, V = np.meshgrid(t, t)
    m = U * U + V * V <= 1
    u, v = U[m], V[m]
    h = height_fringes(part.with_(tilt=(0.0, 0.0)), u, v)
    one, r2 = np.ones_like(u), u * u + v * v
    X = np.stack([one, u, v, r2], axis=1)
    c, *_ = np.linalg.lstsq(X, h, rcond=None)
    resid = h - X @ c
    X2 = np.stack([one, u, v, r2, u * u - v * v, 2 * u * v], axis=1)
    c2, *_ = np.linalg.lstsq(X2, h, rcond=None)
    return {
        "power_fringes": float(c[3]),
        "astigmatism_fringes": float(2 * math.hypot(c2[4], c2[5])),
        "irregularity_fringes": float(np.ptp(resid)),
        "rms_irregularity_fringes": float(np.sqrt(np.mean(resid**2))),
    }
