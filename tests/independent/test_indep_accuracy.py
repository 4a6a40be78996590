"""Radius and centre on images made by this folder's own ring model, not by ringgauge's generator.

Targets from the issue (measurement engine): radius within 0.5 %, centre within 1 px, and |error| <= 3 x the
reported standard uncertainty in at least 90 % of cases, when pixel size and wavelength are exact. The aims
(0.05 %, 0.1 px) are printed with the measured figures (run with ``-s`` to see them), not asserted.

The truth of every image is its scene (radius, centre); invented scenes are test inputs, not check values from
outside. Outside facts used by the model are named in rings_model.py and checked in test_indep_model.py (NIST
sodium and mercury lines, Airy reflectance against tmm, textbook ring diameters).
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest

import rings_model as M
from engine_runs import COVERAGE_MIN, measure, summary, coverage

#: two-sided coverage: beyond these the reported uncertainty is too large (see test_random_coverage)
COVER1_MAX, Z2_MIN = 0.90, 0.5

W, H = 640, 480
PIX_UM = 6.0
C_MID = (331.4, 229.7)


def _scene(n_rings=28.0, centre=C_MID, spectrum=((M.HG_E_NM, 1.0),), n=1.0, size=(W, H), **kw) -> M.Scene:
    R = M.radius_for_rings(*size, centre, n_rings, PIX_UM, M.centroid_nm(spectrum), n)
    base = dict(
        width=size[0], height=size[1], pixel_um=PIX_UM, radius_mm=R, centre_px=centre, medium_index=n,
        spectrum=spectrum, visibility=0.8, level=0.6, vignette_sigma=1.2, vignette_centre=(0.45, 0.55),
        ramp=(0.15, -0.1), stray=0.04, blur_px=0.8, full_well_e=10000.0, read_noise_e=6.0, bits=8,
    )
    base.update(kw)
    return M.Scene(**base)


def _lens(aperture, rings_inside, outside_level, centre=(320.3, 240.2)) -> M.Scene:
    """A lens smaller than the field: rings only inside its edge, the bare flat (no fringes) around it."""
    R = aperture[2] ** 2 / rings_inside * (PIX_UM * 1e-3) ** 2 / (M.HG_E_NM * 1e-6)
    return _scene(centre=centre, aperture=aperture, outside_level=outside_level).with_(radius_mm=R)


_LAM_HG = M.HG_E_NM
_dust = tuple(
    M.Dust(x, y, r, kind, s)
    for x, y, r, kind, s in [
        (120, 100, 6, "dark", 0.9), (500, 80, 10, "dark", 0.6), (300, 400, 4, "dark", 1.0), (340, 235, 5, "dark", 0.8),
        (200, 300, 12, "dark", 0.5), (580, 420, 3, "dark", 1.0), (60, 420, 8, "dark", 0.7), (450, 300, 2, "dark", 1.0),
        (410, 150, 7, "dark", 0.9), (250, 180, 3, "glint", 0.8), (520, 250, 2, "glint", 1.0),
        (90, 250, 4, "glint", 0.5),
        (330, 60, 2.5, "glint", 0.9),
    ]
)

#: one named case per effect listed in the issue
EFFECTS: dict[str, M.Scene] = {
    "dark centre (contact)": _scene(),
    "bright centre (lifted lambda/4)": _scene(contact_gap_nm=_LAM_HG / 4),
    "grey centre (lifted lambda/8)": _scene(contact_gap_nm=_LAM_HG / 8),
    "lifted 2.3 fringes": _scene(contact_gap_nm=2.3 * _LAM_HG / 2),
    "paraxial sag": _scene(sag="paraxial"),
    "uneven light + hot spot": _scene(vignette_sigma=0.45, vignette_centre=(0.2, 0.8), ramp=(0.6, -0.5),
                                      hot_spots=((480.0, 120.0, 60.0, 0.9),)),
    "strong stray light": _scene(stray=0.3, stray_gradient=0.2, visibility=0.45),
    "heavy blur (2 px)": _scene(n_rings=16.0, blur_px=2.0),
    "shot noise (600 e-)": _scene(full_well_e=600.0, read_noise_e=10.0, level=0.4),
    "dust and glints": _scene(dust=_dust),
    "saturated bright rings": _scene(level=1.15, stray=0.05),
    "centre well off": _scene(centre=(121.6, 371.2)),
    "centre near edge": _scene(centre=(7.3, 250.8), n_rings=40.0),
    "centre outside frame": _scene(centre=(-14.6, 210.4), n_rings=40.0),
    "water gap n=1.333": _scene(n=1.333),
    "oil gap n=1.5": _scene(n=1.5, visibility=0.5),
    "sodium doublet": _scene(spectrum=M.sodium_doublet()),
    "LED 10 nm FWHM": _scene(spectrum=M.gaussian_band(590.0, 10.0), n_rings=22.0),
    "LED 30 nm FWHM": _scene(spectrum=M.gaussian_band(530.0, 30.0), n_rings=14.0),
    "multiple-beam (Airy)": _scene(face_reflectance=0.04),
    "dense rings (3.5 px)": _scene(n_rings=50.0, blur_px=0.5),
}

#: further camera and bench effects, run with the slow set
MORE_EFFECTS: dict[str, M.Scene] = {
    "defocus (disc PSF, radius 2.5 px)": _scene(n_rings=16.0, psf="disc", blur_px=2.5),
    "camera tone curve (gamma 2.2)": _scene(gamma=2.2),
    "hot and dead pixels (0.2 %)": _scene(defect_fraction=0.002),
    "mottled illumination (15 %)": _scene(mottle=0.15, mottle_len_px=18.0, mottle_seed=4),
    "LED 30 nm, rings fade inside": _scene(spectrum=M.gaussian_band(590.0, 30.0), n_rings=45.0),
    "lifted 18 fringes": _scene(contact_gap_nm=18.4 * _LAM_HG / 2, n_rings=40.0),
    "dim exposure (peak 8 %)": _scene(level=0.08, stray=0.005, full_well_e=12000.0),
    "low contrast (V = 0.15)": _scene(visibility=0.15),
    # not in the list, but a common bench image: the part is smaller than the camera's field
    "lens r=180 px in the field, grey flat around": _lens((320.0, 240.0, 180.0), 15, 0.3),
    "lens r=180 px in the field, dark around": _lens((320.0, 240.0, 180.0), 15, 0.02),
    "lens r=120 px in the field, grey flat around": _lens((320.0, 240.0, 120.0), 15, 0.3),
    "lens r=140 px in the field, bright around": _lens((320.0, 240.0, 140.0), 15, 0.6),
}

#: cases the engine does not yet meet; reported to its owner with their figures, marked until fixed
KNOWN_FAILURES = {
    "lens r=120 px in the field, grey flat around": "refused: 'no ring system found' although 15 rings of 4 px "
    "and more lie inside the lens; the ringless field around it hides the fringe spacing",
}

ALL_EFFECTS = {**EFFECTS, **MORE_EFFECTS}
_cache: dict[str, object] = {}


def _effect(name):
    if name not in _cache:
        _cache[name] = measure(name, ALL_EFFECTS[name], seed=zlib.crc32(name.encode()))  # noise seed per name
    return _cache[name]


def _marks(name):
    marks = [pytest.mark.slow] if name in MORE_EFFECTS else []
    if name in KNOWN_FAILURES:
        marks.append(pytest.mark.xfail(strict=True, reason=KNOWN_FAILURES[name]))
    return marks


@pytest.mark.parametrize("name", [pytest.param(n, marks=_marks(n)) for n in ALL_EFFECTS])
def test_effect_radius_and_centre(name):
    o = _effect(name)
    print(o.line())
    assert o.ok, o.line()
    assert not o.failures(), f"{o.line()}: {'; '.join(o.failures())}"


def _coverage_of(names):
    outs = [_effect(n) for n in names]
    print("\n" + "\n".join(o.line() for o in outs) + "\n" + summary(outs))
    assert coverage(outs) >= COVERAGE_MIN, summary(outs) + "\n" + "\n".join(
        o.line() for o in outs if not abs(o.z) <= 3
    )


def test_effect_coverage():
    _coverage_of(EFFECTS)


@pytest.mark.slow
def test_all_effects_coverage():
    _coverage_of(ALL_EFFECTS)


# --- a seeded random set over the ranges: the figures the owner asked for ------------------------------

RANDOM_SEEDS = list(range(48))
_random: dict[int, object] = {}


def _rand(seed):
    if seed not in _random:
        _random[seed] = measure(f"random #{seed}", M.random_scene(seed), seed)
    return _random[seed]


@pytest.mark.slow
@pytest.mark.parametrize("seed", RANDOM_SEEDS)
def test_random_radius_and_centre(seed):
    o = _rand(seed)
    print(o.line())
    assert not o.failures(), f"{o.line()}: {'; '.join(o.failures())}"


def _z_figures(outs):
    z = np.array([abs(o.z) for o in outs if o.ok])
    return float(np.mean(z <= 1)), float(np.mean(z**2)), float(np.median(z))


@pytest.mark.slow
def test_random_coverage():
    outs = [_rand(s) for s in RANDOM_SEEDS]
    print("\n" + "\n".join(o.line() for o in outs) + "\n" + summary(outs))
    assert coverage(outs) >= COVERAGE_MIN, summary(outs)
    # Two-sided: the reported u must not be overstated either. For a normal z 68.3 % lie within 1u and E[z²] = 1
    # (JCGM 100:2008 G.1); for 48 runs the share's binomial spread is ±0.07 (1 sigma), so more than 90 % within 1u,
    # or a mean z² below 0.5, means u is too large. Measured: 0.71 within 1u, mean z² 1.09.
    within1, mean_z2, _ = _z_figures(outs)
    assert within1 <= COVER1_MAX, summary(outs)
    assert mean_z2 >= Z2_MIN, f"mean z² {mean_z2:.2f}: the reported u is too large"


@pytest.mark.slow
def test_random_coverage_is_not_understated():
    # the lower side at the same statistical margin as the upper side above (JCGM 100:2008 G.1). It failed at
    # 0.44 within 1u, mean z² 2.7, median |z| 1.05 while the engine divided by the sodium doublet's line mean (R read
    # 170 ppm short on every doublet image) and a band's centre wavelength, and ignored the sphere-vs-paraboloid
    # sag, and gave arc images no sector scatter; with those fixed and carried: 0.71, 1.09, 0.46. Left: two images
    # (|z| 3.2, 3.3) whose rings are shifted alike in every sector by a hot spot near the centre or by strong
    # vignetting with the centre near the edge.
    within1, mean_z2, _ = _z_figures([_rand(s) for s in RANDOM_SEEDS])
    assert within1 >= 0.55 and mean_z2 <= 2.0


#: large frames (2.0 to 5.0 megapixels), each with its own effects
LARGE = {
    "5.0 MP, Na doublet": (M.SIZES[6], dict(spectrum=M.sodium_doublet())),
    "5.0 MP, LED 20 nm": (M.SIZES[6], dict(spectrum=M.gaussian_band(600.0, 20.0))),
    "3.1 MP, 16-bit, dust": (M.SIZES[5], dict(bits=16)),
}


@pytest.mark.slow
@pytest.mark.parametrize("name", list(LARGE))
def test_large_frames(name):
    size, kw = LARGE[name]
    i = list(LARGE).index(name)
    sc = M.random_scene(100 + i, size=size, **{k: v for k, v in kw.items() if k not in ("spectrum",)})
    if "spectrum" in kw:
        lam_old, lam_new = M.centroid_nm(sc.spectrum), M.centroid_nm(kw["spectrum"])
        # keep the ring count: R scales as 1 / lambda
        sc = sc.with_(spectrum=kw["spectrum"], radius_mm=sc.radius_mm * lam_old / lam_new)
    o = measure(name, sc, 100 + i)
    print(o.line())
    assert math.isfinite(o.rel_err) and not o.failures(), f"{o.line()}: {'; '.join(o.failures())}"
