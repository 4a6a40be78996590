"""Synthetic interferograms: physically based, seeded, returning the truth.

The gap between the part and the reference is a height map t(x, y) in nanometres. Its reflectance follows
the Airy formula for two equal glass/medium interfaces (multiple-beam), integrated over the source spectrum;
the camera then adds illumination fall-off, stray light, blur, pixel integration, shot and read noise,
quantisation and dust. Used by the tests, the demo, the benchmark and the training mode.

References
----------
Airy reflectance of a thin gap: E. Hecht, *Optics*, thin-film / Fabry-Perot chapter.
Fresnel reflectance at normal incidence: ((n1 - n2) / (n1 + n2))^2.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
from scipy import ndimage

from . import physics
from .sources import LightSource, get_source

GLASS_INDEX = 1.52


def fresnel_reflectance(n1: float, n2: float) -> float:
    """Normal-incidence intensity reflectance of an interface between indices ``n1`` and ``n2``."""
    return ((n1 - n2) / (n1 + n2)) ** 2


def airy_reflectance(gap_nm, wavelength_nm: float, medium_index: float = 1.0, glass_index: float = GLASS_INDEX):
    """Reflectance of a gap of thickness ``gap_nm`` between two glass bodies (multiple-beam Airy formula).

    R = F sin^2(d/2) / (1 + F sin^2(d/2)), F = 4 rho / (1 - rho)^2, d = 4 pi n t / lambda, with rho the
    Fresnel reflectance of one glass/medium face. Zero gap is dark (the half-wave phase flip).
    """
    rho = fresnel_reflectance(glass_index, medium_index)
    F = 4.0 * rho / (1.0 - rho) ** 2
    s2 = np.sin(2.0 * np.pi * medium_index * np.asarray(gap_nm, dtype=np.float64) / wavelength_nm) ** 2
    return F * s2 / (1.0 + F * s2)


def sphere_sag_mm(r2_mm2, radius_mm: float):
    """Exact sagitta R - sqrt(R^2 - r^2) of a sphere of radius ``radius_mm`` (mm) at r^2 (mm^2)."""
    R = abs(radius_mm)
    r2 = np.minimum(np.asarray(r2_mm2, dtype=np.float64), R * R)
    return r2 / (R + np.sqrt(R * R - r2))  # = R - sqrt(R^2 - r^2), without cancellation


@dataclass(frozen=True)
class Camera:
    """An area camera looking at the gap through the part.

    ``pixel_um`` is the object-space pixel size (x, y may differ for anisotropic scales).
    """

    width: int = 1280
    height: int = 1024
    pixel_um: float = 10.0
    pixel_y_um: float | None = None
    bits: int = 8
    full_well_e: float = 12000.0
    read_noise_e: float = 8.0
    exposure: float = 0.8  # mean peak signal as a fraction of full scale
    blur_px: float = 0.6  # Gaussian PSF sigma in pixels (defocus, lens)
    supersample: int | None = None  # sub-samples per pixel side; None = enough for the finest fringe


@dataclass(frozen=True)
class Lighting:
    """Illumination and stray light across the field, as fractions of the peak signal."""

    falloff: float = 0.25  # relative drop from centre to the field corner (vignetting)
    gradient: float = 0.10  # linear tilt across the field
    gradient_angle_deg: float = 30.0
    stray: float = 0.05  # uniform stray light (incoherent reflections, room light), fraction of peak
    centre: tuple[float, float] | None = None  # illumination centre (x, y) px; None = field centre


@dataclass(frozen=True)
class Dust:
    """Dust specks and scratches: dark opaque blobs and a few bright glints."""

    count: int = 0
    radius_px: tuple[float, float] = (2.0, 8.0)
    bright_fraction: float = 0.2


@dataclass
class SynthImage:
    """A generated image and the truth it was made from."""

    image: np.ndarray  # (H, W) uint8/uint16 codes
    truth: dict
    intensity: np.ndarray | None = None  # noiseless intensity in [0, 1] before quantisation

    @property
    def image01(self) -> np.ndarray:
        return codes_to_unit(self.image, self.truth["camera"]["bits"])


def codes_to_unit(codes: np.ndarray, bits: int) -> np.ndarray:
    """Camera codes of a ``bits``-deep sensor (8-bit codes in uint8, deeper ones in uint16) as intensity in [0, 1]."""
    full = 255.0 if codes.dtype == np.uint8 else float((1 << bits) - 1)
    return codes.astype(np.float64) / full


def _rng(rng) -> np.random.Generator:
    return rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)


def render(
    gap_nm_fn,
    *,
    source: LightSource | str = "sodium-d",
    camera: Camera = Camera(),
    lighting: Lighting = Lighting(),
    dust: Dust = Dust(),
    medium_index: float = 1.0,
    glass_index: float = GLASS_INDEX,
    aperture=None,
    outside_level: float = 0.03,
    noise: bool = True,
    rng=None,
    truth: dict | None = None,
    max_fringe_freq: float | None = None,
) -> SynthImage:
    """Render the camera image of a gap.

    Parameters
    ----------
    gap_nm_fn : callable (x_mm, y_mm) -> gap in nm
        Gap thickness over the field; coordinates in millimetres relative to the top-left pixel centre,
        x along columns and y along rows.
    source : LightSource or str
        The lamp; its spectral lines (or LED band) are integrated.
    aperture : callable (x_mm, y_mm) -> bool array, optional
        Where the part covers the reference; outside it the image shows ``outside_level``.
    max_fringe_freq : float, optional
        Highest fringe frequency in cycles per pixel, to choose the pixel sub-sampling.
    rng : {numpy.random.Generator, int}, optional
    """
    src = get_source(source) if isinstance(source, str) else source
    g = _rng(rng)
    H, W = camera.height, camera.width
    px = camera.pixel_um * 1e-3
    py = (camera.pixel_y_um or camera.pixel_um) * 1e-3
    ss = camera.supersample
    if ss is None:
        f = 0.25 if max_fringe_freq is None else max_fringe_freq
        ss = int(np.clip(np.ceil(6 * f), 1, 6))
    offs = (np.arange(ss) + 0.5) / ss - 0.5
    spectrum = src.spectrum()
    refl = np.zeros((H, W), dtype=np.float64)
    cover = np.zeros((H, W), dtype=np.float64)
    ys = np.arange(H, dtype=np.float64)
    xs = np.arange(W, dtype=np.float64)
    # row blocks keep memory modest for 5-megapixel frames
    block = max(1, int(2_000_000 // max(1, W * ss * ss)))
    for r0 in range(0, H, block):
        r1 = min(H, r0 + block)
        acc = np.zeros((r1 - r0, W))
        cov = np.zeros((r1 - r0, W))
        for dy in offs:
            yy = ((ys[r0:r1] + dy) * py)[:, None]
            for dx in offs:
                xx = ((xs + dx) * px)[None, :]
                gap = np.broadcast_to(gap_nm_fn(xx, yy), (r1 - r0, W))
                val = np.zeros_like(gap)
                for lam, w in spectrum:
                    val += w * airy_reflectance(gap, lam, medium_index, glass_index)
                if aperture is not None:
                    inside = np.broadcast_to(aperture(xx, yy), (r1 - r0, W)).astype(np.float64)
                    acc += val * inside
                    cov += inside
                else:
                    acc += val
                    cov += 1.0
        refl[r0:r1] = acc / (ss * ss)
        cover[r0:r1] = cov / (ss * ss)
    rho = fresnel_reflectance(glass_index, medium_index)
    F = 4 * rho / (1 - rho) ** 2
    rmax = F / (1 + F)
    signal = refl / rmax  # 0 .. 1 fringe signal
    # illumination
    cxl, cyl = lighting.centre if lighting.centre is not None else ((W - 1) / 2, (H - 1) / 2)
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float64)
    rr2 = ((xx - cxl) ** 2 + (yy - cyl) ** 2) / (((W - 1) / 2) ** 2 + ((H - 1) / 2) ** 2)
    ang = np.deg2rad(lighting.gradient_angle_deg)
    lin = ((xx - (W - 1) / 2) * np.cos(ang) + (yy - (H - 1) / 2) * np.sin(ang)) / max(W, H)
    illum = (1.0 - lighting.falloff * rr2) * (1.0 + lighting.gradient * lin)
    illum = np.clip(illum, 0.05, None)
    intensity = illum * (signal * cover + outside_level * (1.0 - cover)) + lighting.stray
    intensity = intensity / (1.0 + lighting.stray) * camera.exposure
    # dust: opaque specks block light, a few glints add it
    specks = []
    if dust.count:
        mask = np.zeros((H, W), dtype=np.float64)
        glint = np.zeros((H, W), dtype=np.float64)
        for _ in range(dust.count):
            cx, cy = g.uniform(0, W), g.uniform(0, H)
            rad = g.uniform(*dust.radius_px)
            d2 = (xx - cx) ** 2 + (yy - cy) ** 2
            blob = np.clip(rad - np.sqrt(d2) + 0.5, 0, 1)
            bright = g.random() < dust.bright_fraction
            (glint if bright else mask)[...] = np.maximum(glint if bright else mask, blob)
            specks.append({"x": float(cx), "y": float(cy), "radius_px": float(rad), "bright": bool(bright)})
        intensity = intensity * (1 - 0.9 * mask) + 0.6 * camera.exposure * glint
    if camera.blur_px > 0:
        intensity = ndimage.gaussian_filter(intensity, camera.blur_px, mode="nearest")
    full = (1 << camera.bits) - 1
    clean = np.clip(intensity, 0, 1)
    if noise:
        electrons = g.poisson(np.clip(intensity, 0, None) * camera.full_well_e).astype(np.float64)
        electrons += g.normal(0.0, camera.read_noise_e, size=electrons.shape)
        noisy = electrons / camera.full_well_e
    else:
        noisy = intensity
    codes = np.clip(np.rint(noisy * full), 0, full).astype(np.uint8 if camera.bits == 8 else np.uint16)
    t = dict(truth or {})
    t.update(
        {
            "source": src.key,
            "wavelength_nm": src.wavelength_nm,
            "medium_index": medium_index,
            "glass_index": glass_index,
            "camera": asdict(camera),
            "lighting": asdict(lighting),
            "dust": specks,
            "supersample": ss,
        }
    )
    return SynthImage(codes, t, clean)


def newton_rings(
    radius_mm: float = 1000.0,
    *,
    centre_px: tuple[float, float] | None = None,
    contact_offset_nm: float = 0.0,
    source: LightSource | str = "sodium-d",
    camera: Camera = Camera(),
    lighting: Lighting = Lighting(),
    dust: Dust = Dust(),
    medium_index: float = 1.0,
    noise: bool = True,
    rng=None,
) -> SynthImage:
    """A convex sphere of radius ``radius_mm`` resting on an optical flat: Newton's rings.

    ``centre_px`` is the contact point (x, y) in pixels (may lie outside the frame). ``contact_offset_nm``
    adds a uniform gap (dust at the contact, > 0) or removes one (pressure, < 0; the gap is clipped at 0).
    """
    H, W = camera.height, camera.width
    if centre_px is None:
        centre_px = ((W - 1) / 2, (H - 1) / 2)
    cx, cy = centre_px
    px = camera.pixel_um * 1e-3
    py = (camera.pixel_y_um or camera.pixel_um) * 1e-3

    def gap(x_mm, y_mm):
        r2 = (x_mm - cx * px) ** 2 + (y_mm - cy * py) ** 2
        return np.maximum(sphere_sag_mm(r2, radius_mm) * 1e6 + contact_offset_nm, 0.0)

    src = get_source(source) if isinstance(source, str) else source
    # finest fringe: at the farthest corner, cycles per pixel = d(2 n t / lambda)/dr * pixel
    far = max(np.hypot(x - cx, y - cy) for x in (0, W - 1) for y in (0, H - 1))
    rfar = far * max(px, py)
    freq = physics.fringe_frequency_per_mm(rfar, radius_mm, src.wavelength_nm, medium_index) * max(px, py)
    truth = {
        "kind": "newton_rings",
        "radius_mm": float(radius_mm),
        "centre_px": [float(cx), float(cy)],
        "contact_offset_nm": float(contact_offset_nm),
        "pixel_um": [camera.pixel_um, camera.pixel_y_um or camera.pixel_um],
    }
    return render(
        gap, source=src, camera=camera, lighting=lighting, dust=dust, medium_index=medium_index,
        noise=noise, rng=rng, truth=truth, max_fringe_freq=min(freq, 1.0),
    )


@dataclass(frozen=True)
class SurfaceForm:
    """Departure of a surface from a test plate, in fringes (one fringe = lambda/2 of gap).

    ``power`` is the sagitta of the sphere term across the aperture radius (PV, with sign: > 0 the gap
    grows toward the edge, i.e. contact at the centre), ``astig`` the difference between the principal
    meridians' power (fringes, PV over the aperture) with its ``astig_axis_deg``, ``zonal`` a rotationally
    symmetric bump (r^4 - r^2 shape, PV over the aperture), ``tilt_x``/``tilt_y`` fringes across the aperture
    radius, ``piston`` the gap at the aperture centre in fringes, ``coma`` PV-ish fringes.
    """

    power: float = 2.0
    astig: float = 0.0
    astig_axis_deg: float = 0.0
    zonal: float = 0.0
    coma: float = 0.0
    tilt_x: float = 0.0
    tilt_y: float = 0.0
    piston: float = 0.3

    def gap_fringes(self, u, v):
        """Gap in fringes at normalised aperture coordinates (u, v), u^2 + v^2 <= 1."""
        rho2 = u * u + v * v
        th = np.deg2rad(self.astig_axis_deg)
        a = u * np.cos(th) + v * np.sin(th)
        b = -u * np.sin(th) + v * np.cos(th)
        return (
            self.piston
            + self.tilt_x * u
            + self.tilt_y * v
            + self.power * rho2
            + 0.5 * self.astig * (a * a - b * b)
            + self.zonal * 4.0 * (rho2 * rho2 - rho2)  # PV of 4(r^4 - r^2) over the disc is 1
            + self.coma * (3 * rho2 - 2) * u
        )


def test_plate_fringes(
    form: SurfaceForm = SurfaceForm(),
    *,
    aperture_diameter_mm: float = 20.0,
    aperture_centre_px: tuple[float, float] | None = None,
    source: LightSource | str = "mercury-e",
    camera: Camera = Camera(width=1024, height=1024, pixel_um=25.0),
    lighting: Lighting = Lighting(),
    dust: Dust = Dust(),
    medium_index: float = 1.0,
    noise: bool = True,
    rng=None,
) -> SynthImage:
    """A part on a test plate: a few fringes over a circular aperture (the part's edge bounds the field)."""
    src = get_source(source) if isinstance(source, str) else source
    H, W = camera.height, camera.width
    if aperture_centre_px is None:
        aperture_centre_px = ((W - 1) / 2, (H - 1) / 2)
    ax, ay = aperture_centre_px
    px = camera.pixel_um * 1e-3
    py = (camera.pixel_y_um or camera.pixel_um) * 1e-3
    a = aperture_diameter_mm / 2
    half = src.wavelength_nm / (2 * medium_index)  # gap per fringe

    def gap(x_mm, y_mm):
        u = (x_mm - ax * px) / a
        v = (y_mm - ay * py) / a
        g = form.gap_fringes(u, v) * half
        return np.maximum(g, 0.0)

    def inside(x_mm, y_mm):
        return ((x_mm - ax * px) ** 2 + (y_mm - ay * py) ** 2) <= a * a

    truth = {
        "kind": "test_plate",
        "form": asdict(form),
        "aperture_diameter_mm": aperture_diameter_mm,
        "aperture_centre_px": [float(ax), float(ay)],
        "pixel_um": [camera.pixel_um, camera.pixel_y_um or camera.pixel_um],
    }
    return render(
        gap, source=src, camera=camera, lighting=lighting, dust=dust, medium_index=medium_index,
        aperture=inside, noise=noise, rng=rng, truth=truth, max_fringe_freq=0.2,
    )


def random_newton_case(rng=None, *, megapixels: float = 1.3) -> dict:
    """Random but realistic Newton's-rings parameters (for benchmarks and training)."""
    g = _rng(rng)
    aspect = 1.25
    h = int(round(np.sqrt(megapixels * 1e6 / aspect)))
    w = int(round(h * aspect))
    src = str(g.choice(["sodium-d", "mercury-e", "helium-d", "hene", "cadmium-red"]))
    pix = float(g.uniform(3.0, 12.0))
    # choose R so that 8-40 dark rings fit inside the shorter half-side
    rings = g.uniform(8, 40)
    half = 0.45 * min(w, h) * pix * 1e-3
    lam = get_source(src).wavelength_nm * 1e-6
    R = half**2 / (rings * lam)
    centre = (float(g.uniform(0.3, 0.7) * w), float(g.uniform(0.3, 0.7) * h))
    return {
        "radius_mm": float(R),
        "centre_px": centre,
        "contact_offset_nm": float(g.uniform(0, 150)),
        "source": src,
        "camera": Camera(width=w, height=h, pixel_um=pix, blur_px=float(g.uniform(0.4, 1.2)),
                         full_well_e=float(g.uniform(4000, 20000))),
        "lighting": Lighting(falloff=float(g.uniform(0.05, 0.4)), gradient=float(g.uniform(0, 0.3)),
                             gradient_angle_deg=float(g.uniform(0, 360)), stray=float(g.uniform(0, 0.15))),
        "dust": Dust(count=int(g.integers(0, 8))),
    }
