"""An image model of Newton's rings written for these tests alone, apart from ringgauge's own generator.

A spherical lens of radius R rests on an optical flat; the gap t(r) between them is the exact sphere sagitta
t = R - sqrt(R^2 - r^2) (or the paraxial r^2 / 2R) plus a contact offset t0 (dust or a film lifting the lens).
In reflection, contact is dark [half-wave phase flip at one face: Hecht, *Optics*, Newton's rings — from memory]. The fringe shape is either the
two-beam one, (1 - cos delta) / 2, or the multiple-beam Airy reflectance F sin^2(delta/2) / (1 + F sin^2(delta/2))
with F = 4 rho / (1 - rho)^2 [Hecht, *Optics*, thin-film chapter], delta = 4 pi n t / lambda; both are 0 at
contact. Broadband light averages the fringe shape over the spectrum (lines with weights, or a Gaussian band).

The camera: illumination a(x, y) (Gaussian vignetting, a linear ramp, hot spots), fringe visibility V, additive
stray light, dust (dark discs on the lens, bright glints), optionally a lens edge smaller than the field — all on a
grid ``oversample`` times finer than the pixels; blur on that fine grid (Gaussian, or a uniform disc for defocus),
then binning into pixels (pixel integration); a smooth random illumination texture; then shot (Poisson) noise in
electrons, read noise, a tone curve (gamma), gain and quantisation to 8/12/16 bits with clipping at full scale,
stuck pixels; colour by channel gains.

Coordinates as ringgauge states them: x = column, y = row, pixel centres at integers, origin at the centre of the
top-left pixel; a pixel covers [x - 1/2, x + 1/2] x [y - 1/2, y + 1/2].
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import ndimage, signal

# Sodium D2 / D1 standard air wavelengths, NIST ASD; D2 about twice as bright as D1 (HyperPhysics).
NA_D2_NM, NA_D1_NM = 588.9950, 589.5924
# Mercury green e-line, NIST ASD.
HG_E_NM = 546.074


@dataclass(frozen=True)
class Dust:
    x: float
    y: float
    radius_px: float
    kind: str  # "dark" (absorbing speck on the lens: transmission 1 - strength) or "glint" (adds strength)
    strength: float


@dataclass(frozen=True)
class Scene:
    """Everything that makes one image; the truth is ``radius_mm`` and ``centre_px``."""

    width: int = 640
    height: int = 480
    pixel_um: float = 5.0
    radius_mm: float = 500.0
    centre_px: tuple[float, float] = (320.0, 240.0)
    medium_index: float = 1.0
    #: (wavelength nm, weight) pairs; a single pair for a line source
    spectrum: tuple[tuple[float, float], ...] = ((HG_E_NM, 1.0),)
    sag: str = "exact"  # or "paraxial"
    contact_gap_nm: float = 0.0
    visibility: float = 0.9
    face_reflectance: float | None = None  # None: two-beam shape; else Airy with this reflectance per face
    level: float = 0.6  # peak illumination as a fraction of full scale
    vignette_sigma: float = 1.5  # Gaussian vignetting width in units of the image half-diagonal (inf = none)
    vignette_centre: tuple[float, float] = (0.5, 0.5)  # as fractions of width, height
    ramp: tuple[float, float] = (0.0, 0.0)  # relative illumination change across the full width / height
    hot_spots: tuple[tuple[float, float, float, float], ...] = ()  # (x, y, sigma px, relative height)
    stray: float = 0.0  # uniform stray light, fraction of full scale
    stray_gradient: float = 0.0  # extra stray light rising linearly across the width, fraction of full scale
    dust: tuple[Dust, ...] = ()
    blur_px: float = 0.7  # Gaussian PSF sigma in pixels
    oversample: int = 3
    full_well_e: float = 12000.0  # electrons at full scale
    read_noise_e: float = 8.0
    bits: int = 8  # 8, 12 or 16
    colour_gains: tuple[float, float, float] | None = None  # (blue, green, red) channel gains; None = grey
    psf: str = "gaussian"  # "gaussian" (sigma = blur_px) or "disc" (defocus: uniform disc of radius blur_px)
    gamma: float = 1.0  # camera tone curve: code = full scale * (signal / full well) ** (1 / gamma)
    defect_fraction: float = 0.0  # fraction of pixels stuck at full scale (hot) or at zero (dead), half each
    mottle: float = 0.0  # relative rms of a smooth random illumination texture (diffuser, dirty optics)
    mottle_len_px: float = 25.0  # its correlation length
    mottle_seed: int = 0
    #: the lens's edge when it is smaller than the field: (x, y, radius px); outside it the flat alone reflects,
    #: without fringes, at ``outside_level`` times the illumination
    aperture: tuple[float, float, float] | None = None
    outside_level: float = 0.3

    @property
    def full_scale(self) -> int:
        return (1 << self.bits) - 1

    def with_(self, **kw) -> "Scene":
        return replace(self, **kw)


@dataclass(frozen=True)
class Rendered:
    counts: np.ndarray  # (H, W) or (H, W, 3) uint8 / uint16 integer codes, colour in BGR order
    scene: Scene
    noiseless: np.ndarray = field(repr=False, default=None)  # (H, W) float64 intensity in [0, 1+], before noise


def sodium_doublet() -> tuple[tuple[float, float], ...]:
    return ((NA_D2_NM, 2.0), (NA_D1_NM, 1.0))


def gaussian_band(centre_nm: float, fwhm_nm: float, samples: int = 41) -> tuple[tuple[float, float], ...]:
    """A Gaussian spectrum in wavelength (an LED), sampled over +-3 sigma; weights sum to 1."""
    sigma = fwhm_nm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    lam = np.linspace(centre_nm - 3 * sigma, centre_nm + 3 * sigma, samples)
    w = np.exp(-0.5 * ((lam - centre_nm) / sigma) ** 2)
    w /= w.sum()
    return tuple((float(a), float(b)) for a, b in zip(lam, w))


def centroid_nm(spectrum) -> float:
    lam = np.array([s[0] for s in spectrum])
    w = np.array([s[1] for s in spectrum])
    return float(np.sum(lam * w) / np.sum(w))


def _gap_mm(r2_mm2: np.ndarray, scene: Scene) -> np.ndarray:
    R = scene.radius_mm
    if scene.sag == "paraxial":
        t = r2_mm2 / (2.0 * R)
    elif scene.sag == "exact":
        # R - sqrt(R^2 - r^2) written without cancellation
        t = r2_mm2 / (R + np.sqrt(np.maximum(R * R - r2_mm2, 0.0)))
    else:
        raise ValueError(f"unknown sag model {scene.sag!r}")
    return t + scene.contact_gap_nm * 1e-6


def _fringe_shape(t_mm: np.ndarray, scene: Scene) -> np.ndarray:
    """Normalised gap reflectance in [0, 1], 0 at contact, averaged over the spectrum."""
    weights = np.array([s[1] for s in scene.spectrum], dtype=np.float64)
    weights = weights / weights.sum()
    out = np.zeros_like(t_mm)
    if scene.face_reflectance is not None:
        rho = scene.face_reflectance
        F = 4 * rho / (1 - rho) ** 2
        rmax = F / (1 + F)
    for (lam_nm, _), wk in zip(scene.spectrum, weights):
        delta = 4.0 * math.pi * scene.medium_index * t_mm / (lam_nm * 1e-6)
        if scene.face_reflectance is None:
            out += wk * 0.5 * (1.0 - np.cos(delta))
        else:
            s2 = np.sin(0.5 * delta) ** 2
            out += wk * (F * s2 / (1 + F * s2)) / rmax
    return out


#: table samples per fringe when the fringe shape is tabulated against r^2 (linear interpolation error ~1e-4)
TABLE_PER_FRINGE = 256


def _shape_of_r2(r2_max_mm2: float, scene: Scene):
    """The fringe shape depends on r^2 alone: tabulate it finely once, interpolate per sample."""
    lam_min = min(s[0] for s in scene.spectrum) * 1e-6
    n_fringes = 2 * scene.medium_index * float(_gap_mm(np.array([r2_max_mm2]), scene)[0]) / lam_min + 2
    n_tab = int(max(4096, TABLE_PER_FRINGE * n_fringes))
    r2_tab = np.linspace(0.0, r2_max_mm2 * (1 + 1e-9), n_tab)
    f_tab = _fringe_shape(_gap_mm(r2_tab, scene), scene)
    return lambda r2: np.interp(r2, r2_tab, f_tab)


def _fine_grid(scene: Scene) -> tuple[np.ndarray, np.ndarray]:
    os_ = scene.oversample
    # sample k of pixel i sits at i - 1/2 + (k + 1/2) / os
    xf = (np.arange(scene.width * os_) + 0.5) / os_ - 0.5
    yf = (np.arange(scene.height * os_) + 0.5) / os_ - 0.5
    return xf, yf


def _apply_disc(arr: np.ndarray, xf: np.ndarray, yrows: np.ndarray, d: Dust, change) -> None:
    """Change ``arr`` (rows ``yrows`` of the fine grid) in place inside the dust disc."""
    i0, i1 = np.searchsorted(xf, [d.x - d.radius_px, d.x + d.radius_px])
    j0, j1 = np.searchsorted(yrows, [d.y - d.radius_px, d.y + d.radius_px])
    if i1 <= i0 or j1 <= j0:
        return
    sub = arr[j0:j1, i0:i1]
    m = (xf[None, i0:i1] - d.x) ** 2 + (yrows[j0:j1, None] - d.y) ** 2 <= d.radius_px**2
    sub[m] = change(sub[m])


def render_noiseless(scene: Scene) -> np.ndarray:
    """Expected intensity per pixel (fraction of full scale, may exceed 1 where it will saturate)."""
    xf, yf = _fine_grid(scene)
    W, H = scene.width, scene.height
    x0, y0 = scene.centre_px
    p_mm = scene.pixel_um * 1e-3
    half_diag = 0.5 * math.hypot(W, H)
    vx, vy = scene.vignette_centre[0] * (W - 1), scene.vignette_centre[1] * (H - 1)
    fine = np.empty((yf.size, xf.size), dtype=np.float32)
    step = max(1, 4_000_000 // max(xf.size, 1))
    dx2 = (xf - x0) ** 2
    r2_max = (max(dx2[0], dx2[-1]) + max((yf[0] - y0) ** 2, (yf[-1] - y0) ** 2)) * p_mm * p_mm
    shape_of = _shape_of_r2(r2_max, scene)
    for start in range(0, yf.size, step):
        rows = slice(start, min(start + step, yf.size))
        yy = yf[rows][:, None]
        r2 = (dx2[None, :] + (yy - y0) ** 2) * p_mm * p_mm
        shape = shape_of(r2)
        del r2
        # illumination: every term separable in x and y, so built from 1-D factors
        if math.isfinite(scene.vignette_sigma):
            vs = scene.vignette_sigma * half_diag
            a = np.outer(np.exp(-0.5 * ((yf[rows] - vy) / vs) ** 2), np.exp(-0.5 * ((xf - vx) / vs) ** 2))
        else:
            a = np.ones_like(shape)
        a *= 1.0 + scene.ramp[0] * (xf[None, :] / W - 0.5) + scene.ramp[1] * (yy / H - 0.5)
        for hx, hy, hs, hh in scene.hot_spots:
            a += hh * np.outer(np.exp(-0.5 * ((yf[rows] - hy) / hs) ** 2), np.exp(-0.5 * ((xf - hx) / hs) ** 2))
        a *= scene.level
        for d in scene.dust:
            if d.kind == "dark":
                _apply_disc(a, xf, yf[rows], d, lambda v, d=d: v * (1.0 - d.strength))
        shape *= scene.visibility
        shape += 1.0 - scene.visibility
        if scene.aperture is not None:
            ax, ay, ar = scene.aperture
            outside = (xf[None, :] - ax) ** 2 + (yy - ay) ** 2 > ar * ar
            shape[outside] = scene.outside_level
        img = a
        img *= shape
        img += scene.stray + scene.stray_gradient * (xf[None, :] / W)
        for d in scene.dust:
            if d.kind == "glint":
                _apply_disc(img, xf, yf[rows], d, lambda v, d=d: v + d.strength)
        fine[rows] = img
    if scene.blur_px > 0 and scene.psf == "gaussian":
        fine = ndimage.gaussian_filter(fine, sigma=scene.blur_px * scene.oversample, mode="reflect", truncate=3.5)
    elif scene.blur_px > 0 and scene.psf == "disc":
        rad = scene.blur_px * scene.oversample
        k = int(math.ceil(rad))
        yy, xx = np.mgrid[-k : k + 1, -k : k + 1]
        # disc of radius rad, edge pixels weighted by a 4x4 sub-sampled coverage
        sub = (np.arange(4) + 0.5) / 4 - 0.5
        cover = np.zeros(xx.shape)
        for a in sub:
            for b in sub:
                cover += (xx + a) ** 2 + (yy + b) ** 2 <= rad * rad
        kern = (cover / cover.sum()).astype(np.float32)
        fine = signal.oaconvolve(np.pad(fine, k, mode="reflect"), kern, mode="valid").astype(np.float32)
    elif scene.blur_px > 0:
        raise ValueError(f"unknown PSF {scene.psf!r}")
    os_ = scene.oversample
    out = fine.reshape(H, os_, W, os_).mean(axis=(1, 3), dtype=np.float64)
    if scene.mottle > 0:
        g = np.random.default_rng(scene.mottle_seed).normal(size=out.shape)
        tex = ndimage.gaussian_filter(g, scene.mottle_len_px, mode="wrap")
        out *= 1.0 + scene.mottle * tex / tex.std()
    return out


def _expose(intensity: np.ndarray, scene: Scene, rng: np.random.Generator) -> np.ndarray:
    e = rng.poisson(np.clip(intensity, 0, None) * scene.full_well_e).astype(np.float64)
    e += rng.normal(0.0, scene.read_noise_e, size=e.shape)
    v = np.clip(e / scene.full_well_e, 0.0, 1.0)
    if scene.gamma != 1.0:
        v = v ** (1.0 / scene.gamma)
    codes = np.rint(v * scene.full_scale)
    if scene.defect_fraction > 0:
        idx = rng.choice(codes.size, size=int(scene.defect_fraction * codes.size), replace=False)
        codes.flat[idx[: idx.size // 2]] = scene.full_scale
        codes.flat[idx[idx.size // 2 :]] = 0
    return codes.astype(np.uint8 if scene.bits <= 8 else np.uint16)


def render(scene: Scene, rng: np.random.Generator | int = 0) -> Rendered:
    """Integer camera codes for ``scene`` (uint8 for 8-bit, uint16 holding 12- or 16-bit data)."""
    rng = np.random.default_rng(rng)
    clean = render_noiseless(scene)
    if scene.colour_gains is None:
        return Rendered(_expose(clean, scene, rng), scene, clean)
    chans = [_expose(clean * g, scene, rng) for g in scene.colour_gains]
    return Rendered(np.stack(chans, axis=2), scene, clean)


# --- random scenes over the ranges of the issue ------------------------------------------------------------------

SIZES = ((640, 480), (800, 600), (1024, 768), (1280, 960), (1600, 1200), (2048, 1536), (2592, 1944))


def random_scene(seed: int, *, size: tuple[int, int] | None = None, **overrides) -> Scene:
    """One scene with effects drawn at random (seeded) over the ranges the engine has to cope with."""
    rng = np.random.default_rng(10_000 + seed)
    W, H = size if size is not None else SIZES[int(rng.integers(0, 4))]
    # ring centre: near the image centre, well off it, near an edge, or just outside the frame
    where = rng.choice(["middle", "off", "edge", "outside"], p=[0.35, 0.35, 0.2, 0.1])
    if where == "middle":
        cx, cy = W / 2 + rng.uniform(-0.05, 0.05) * W, H / 2 + rng.uniform(-0.05, 0.05) * H
    elif where == "off":
        cx, cy = rng.uniform(0.2, 0.8) * W, rng.uniform(0.2, 0.8) * H
    else:
        d = rng.uniform(8, 40) if where == "edge" else -rng.uniform(5, 30)
        side = int(rng.integers(0, 4))
        along = rng.uniform(0.3, 0.7)
        cx, cy = [(d, along * H), (W - 1 - d, along * H), (along * W, d), (along * W, H - 1 - d)][side]
    cx, cy = float(cx), float(cy)
    # light source and gap medium
    src = rng.choice(["hg", "na", "led", "line"], p=[0.35, 0.3, 0.15, 0.2])
    if src == "hg":
        spectrum = ((HG_E_NM, 1.0),)
    elif src == "na":
        spectrum = sodium_doublet()
    elif src == "led":
        spectrum = gaussian_band(float(rng.uniform(520, 630)), float(rng.uniform(10, 30)))
    else:
        spectrum = ((float(rng.uniform(450, 700)), 1.0),)
    n = float(rng.choice([1.0, 1.0, 1.0, rng.uniform(1.33, 1.5)]))
    pixel_um = float(rng.uniform(3.0, 12.0))
    lam_nm = centroid_nm(spectrum)
    # choose R from the finest fringe period wanted at the farthest corner (local period = P_s / (2 r))
    corners = [(0, 0), (W - 1, 0), (0, H - 1), (W - 1, H - 1)]
    r_far = max(math.hypot(x - cx, y - cy) for x, y in corners)
    n_rings = float(rng.uniform(12, 60)) if src != "led" else float(rng.uniform(10, 25))
    period_s = r_far**2 / n_rings  # px^2 per fringe
    if period_s / (2 * r_far) < 3.5:  # keep the outer fringes resolved (at least 3.5 px)
        period_s = 7.0 * r_far
    radius_mm = period_s * n * (pixel_um * 1e-3) ** 2 / (lam_nm * 1e-6)
    contact = float(rng.choice([0.0, 0.0, rng.uniform(0, 1) * lam_nm / (4 * n), rng.uniform(0, 2000)]))
    hot = ()
    if rng.random() < 0.3:
        hot = ((float(rng.uniform(0, W)), float(rng.uniform(0, H)), float(rng.uniform(0.03, 0.15) * W),
                float(rng.uniform(0.2, 0.8))),)
    dust = []
    for _ in range(int(rng.integers(0, 8))):
        kind = "dark" if rng.random() < 0.7 else "glint"
        dust.append(Dust(float(rng.uniform(0, W)), float(rng.uniform(0, H)), float(rng.uniform(1.5, 12)), kind,
                         float(rng.uniform(0.3, 1.0)) if kind == "dark" else float(rng.uniform(0.2, 1.0))))
    bits = int(rng.choice([8, 12, 16]))
    kw = dict(
        width=W, height=H, pixel_um=pixel_um, radius_mm=radius_mm, centre_px=(cx, cy), medium_index=n,
        spectrum=spectrum, sag=str(rng.choice(["exact", "paraxial"])), contact_gap_nm=contact,
        visibility=float(rng.uniform(0.35, 0.95)),
        face_reflectance=None if rng.random() < 0.7 else 0.04,
        level=float(rng.uniform(0.35, 0.75)),
        vignette_sigma=float(rng.uniform(0.6, 2.5)),
        vignette_centre=(float(rng.uniform(0.3, 0.7)), float(rng.uniform(0.3, 0.7))),
        ramp=(float(rng.uniform(-0.4, 0.4)), float(rng.uniform(-0.4, 0.4))),
        hot_spots=hot,
        stray=float(rng.uniform(0.0, 0.15)),
        stray_gradient=float(rng.uniform(0.0, 0.1)),
        dust=tuple(dust),
        blur_px=float(rng.uniform(0.3, 1.5)),
        oversample=3 if W * H <= 600_000 else 2,
        full_well_e=float(rng.uniform(3000, 30000)),
        read_noise_e=float(rng.uniform(2, 15)),
        bits=bits,
    )
    kw.update(overrides)
    return Scene(**kw)


def source_label(scene: Scene) -> str:
    if len(scene.spectrum) == 2:
        return "Na doublet"
    if len(scene.spectrum) > 2:
        lam = np.array([s[0] for s in scene.spectrum])
        w = np.array([s[1] for s in scene.spectrum])
        sd = math.sqrt(np.sum(w * (lam - centroid_nm(scene.spectrum)) ** 2) / np.sum(w))
        return f"LED {centroid_nm(scene.spectrum):.0f} nm, {2.3548 * sd:.0f} nm FWHM"
    return f"line {scene.spectrum[0][0]:.1f} nm"


def radius_for_rings(width: int, height: int, centre_px, n_rings: float, pixel_um: float, lam_nm: float,
                     medium_index: float = 1.0) -> float:
    """Radius (mm) that puts ``n_rings`` fringes between the ring centre and the farthest frame corner."""
    cx, cy = centre_px
    r_far = max(math.hypot(x - cx, y - cy) for x in (0, width - 1) for y in (0, height - 1))
    period_s = r_far**2 / n_rings  # px^2 per fringe: r^2 = m lambda R / n
    return period_s * medium_index * (pixel_um * 1e-3) ** 2 / (lam_nm * 1e-6)


def harsh_scene(seed: int) -> Scene:
    """The seeded random scene made harder: low fringe visibility, much stray light, strong blur (Gaussian or
    defocus disc), few electrons, mottled illumination. The rings stay visible to the eye."""
    sc = random_scene(seed)
    r = np.random.default_rng(seed + 777)
    return sc.with_(
        visibility=float(r.uniform(0.12, 0.4)), blur_px=float(r.uniform(0.8, 2.2)), stray=float(r.uniform(0.1, 0.4)),
        full_well_e=float(r.uniform(800, 4000)), mottle=float(r.uniform(0, 0.15)), mottle_seed=seed,
        psf=str(r.choice(["gaussian", "disc"])),
    )
