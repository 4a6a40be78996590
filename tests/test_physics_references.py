"""Outside checks: published Newton's-rings examples run through the engine's own ring fit and analysis,
NIST wavelengths in the source table, and the image generator's reflectance against Fresnel, Airy and `tmm`.

The worked examples give ring diameters and the answer; the engine's least squares (`fit_orders`) and its
R = n * slope / lambda (`physics.radius_from_slope`, used by `pipeline.analyse`) must reproduce the answer, and an
image rendered for the example's lens must be measured with its rings where the example puts them.
"""

import math

import numpy as np
import pytest
import tmm

from ringgauge import physics, synth
from ringgauge.bench_setup import BenchSetup
from ringgauge.errors import InputError
from ringgauge.fit.orders import Extremum, fit_orders
from ringgauge.imaging import frame_from_array
from ringgauge.pipeline import analyse
from ringgauge.sources import SOURCES, custom_source, get_source

PX_MM = 0.01  # an arbitrary pixel scale for ring lists given in mm

# Sources of the worked examples
AMRITA_WAVELENGTH = "Amrita Virtual Lab, Newton's rings, exercises: http://vlab.amrita.edu/?sub=1&brch=189&sim=335&cnt=5"
AMRITA_LIQUID = "Amrita Virtual Lab, refractive index by Newton's rings: http://vlab.amrita.edu/?sub=1&brch=189&sim=1520&cnt=5"


def rings_from_diameters(diameters_mm, numbers, kind="dark"):
    """Extremum list for rings of the given diameters and ring numbers (dark: m; bright: the m of m - 1/2)."""
    out = []
    for d, m in zip(diameters_mm, numbers):
        label = physics.order_value(m, kind)
        s = (d / 2 / PX_MM) ** 2
        out.append(Extremum(s=s, u_s=1e-3 * s, kind=kind, order=label - 1.0, contrast=0.5, window_count=100))
    return out


def engine_radius(extrema, wavelength_nm, n=1.0, kind="dark"):
    fit = fit_orders(extrema, kind=kind, px_mm=PX_MM)
    assert fit.success, fit.message
    return physics.radius_from_slope(fit.slope_mm2, wavelength_nm, n), fit


def perfect_contact_rings(d_mm, m, count=None):
    """Dark rings 1..m of a lens in perfect contact whose ring m has diameter d_mm (r_k^2 = k r_m^2 / m)."""
    ks = range(1, (count or m) + 1)
    return rings_from_diameters([d_mm * math.sqrt(k / m) for k in ks], list(ks))


# --- worked examples through the ring fit -----------------------------------------------------------------------

def test_eighth_dark_ring_lab_example_through_the_ring_fit():
    # AMRITA_WAVELENGTH: R = 3 m, D8 (dark, reflected, air) = 7.2 mm -> lambda = 540 nm.
    # Perfect contact (the exercise's assumption) puts ring k at D8 * sqrt(k / 8); with lambda = 540 nm the
    # engine's fit must give back R = 3 m.
    R, fit = engine_radius(perfect_contact_rings(7.2, 8), 540.0)
    assert R == pytest.approx(3000.0, rel=1e-6)
    assert fit.intercept_fringes == pytest.approx(0.0, abs=1e-6)  # perfect contact: no offset


def test_tenth_dark_ring_course_exercise_through_the_ring_fit():
    # Course exercise, original book not traced (so: common practice, no source): lambda = 500 nm,
    # D10 (dark) = 5.0 mm -> R = D^2 / (4 m lambda) = 1.25 m, from r_m^2 = m lambda R (Hecht, Optics, Newton's
    # rings — from memory).
    R, _ = engine_radius(perfect_contact_rings(5.0, 10), 500.0)
    assert R == pytest.approx(1250.0, rel=1e-6)


def test_contact_offset_does_not_change_the_radius():
    # Difference method D_{m+p}^2 - D_m^2 = 4 p lambda R / n (NPTEL Physical Optics module 11:
    # https://archive.nptel.ac.in/content/storage2/courses/122103011/md06_physical_optics/): the same lens with
    # dust at the contact (every D^2 larger by the same amount) gives the same R, the offset goes to the intercept.
    clean = [7.2 * math.sqrt(k / 8) for k in range(1, 9)]
    dusty = [math.sqrt(d * d + 4 * 0.81) for d in clean]  # +0.81 mm^2 in r^2
    R, fit = engine_radius(rings_from_diameters(dusty, range(1, 9)), 540.0)
    assert R == pytest.approx(3000.0, rel=1e-6)
    assert fit.intercept_mm2 == pytest.approx(0.81, rel=1e-6)


def test_bright_rings_course_exercise_through_the_ring_fit():
    # Course exercise, original book not traced (common practice, no source): bright rings D_n = 4.2 mm and
    # D_(n+8) = 7.0 mm, R = 2 m -> lambda = (D_(n+8)^2 - D_n^2) / (4 * 8 * R) = 490 nm. The fit needs three rings:
    # ring n + 4 is put where the line through the two given ones puts it (its D^2 is their mean).
    mid = math.sqrt((4.2**2 + 7.0**2) / 2)
    ext = rings_from_diameters([4.2, mid, 7.0], [5, 9, 13], kind="bright")
    R, fit = engine_radius(ext, 490.0, kind="bright")
    assert R == pytest.approx(2000.0, rel=1e-6)
    assert [r.order for r in fit.rings] == [4.5, 8.5, 12.5]  # bright rings carry m - 1/2


def test_liquid_index_lab_example_through_the_ring_fit():
    # AMRITA_LIQUID: D10 of 14 mm in air becomes 12.7 mm with a drop of water -> n = 1.215.
    # The engine must give the same lens radius from the air rings (n = 1) and the liquid rings (n = 1.215).
    R_air, _ = engine_radius(perfect_contact_rings(14.0, 10), 589.2937)
    R_liq, _ = engine_radius(perfect_contact_rings(12.7, 10), 589.2937, n=1.215)
    assert R_liq == pytest.approx(R_air, rel=5e-4)  # 1.215 is the example's rounding of 1.2152
    R_wrong, _ = engine_radius(perfect_contact_rings(12.7, 10), 589.2937)  # liquid ignored: R short by n
    assert R_wrong / R_air == pytest.approx(1 / 1.215, rel=5e-4)


def test_tenth_ring_of_a_one_metre_lens_derived():
    # derived from r_m^2 = m lambda R (Hecht, Optics, Newton's rings — from memory): R = 1 m,
    # lambda = 589.3 nm -> r10 = sqrt(10 * 589.3e-6 mm * 1000 mm) = 2.4276 mm; through the ring fit
    R, _ = engine_radius(perfect_contact_rings(2 * 2.4276, 10), 589.3)
    assert R == pytest.approx(1000.0, rel=5e-5)


# --- worked examples through the whole analysis (rendered images) -----------------------------------------------

def _measure(radius_mm, wavelength_nm, pixel_um, size, *, medium_index=1.0):
    src = custom_source(wavelength_nm, 0.01)
    cam = synth.Camera(width=size, height=size, pixel_um=pixel_um, blur_px=0.6)
    img = synth.newton_rings(radius_mm, source=src, camera=cam, rng=4, centre_px=(size / 2 - 0.3, size / 2 + 0.4),
                             medium_index=medium_index)
    setup = BenchSetup(src, pixel_um, medium_index=medium_index)
    return analyse(frame_from_array(img.image), setup)


def _ring(res, order):
    """The measured ring that lies ``order`` fringes of gap from the contact (r^2 / slope; the engine's order
    labels are defined only up to a whole fringe at a perfect contact, where the first dark ring is the contact)."""
    ring = min(res.fit.rings, key=lambda r: abs(r.r2_mm2 / res.fit.slope_mm2 - order))
    assert ring.r2_mm2 / res.fit.slope_mm2 == pytest.approx(order, abs=0.05)
    return ring


def test_eighth_dark_ring_lab_example_through_analyse():
    # AMRITA_WAVELENGTH: R = 3 m and lambda = 540 nm put the 8th dark ring at D = 7.2 mm.
    res = _measure(3000.0, 540.0, 10.0, 900)
    assert res.radius_mm == pytest.approx(3000.0, rel=1e-3)
    assert 2 * _ring(res, 8.0).radius_mm == pytest.approx(7.2, abs=0.01)
    assert res.radius_mm == pytest.approx(
        physics.radius_from_slope(res.fit.slope_mm2, 540.0), rel=2e-3
    )  # the reported R is the slope's R up to the small blur correction


def test_tenth_dark_ring_course_exercise_through_analyse():
    # course exercise (common practice, no source): R = 1.25 m, lambda = 500 nm -> D10 = 5.0 mm
    res = _measure(1250.0, 500.0, 6.0, 900)
    assert res.radius_mm == pytest.approx(1250.0, rel=1e-3)
    assert 2 * _ring(res, 10.0).radius_mm == pytest.approx(5.0, abs=0.01)


def test_liquid_gap_lab_example_through_analyse():
    # AMRITA_LIQUID: with water (n = 1.215 in the example) the 10th ring of a lens with D10 = 14 mm in air shrinks to
    # 12.7 mm; R from D10(air) = 14 mm at 589.29 nm is 14^2 / (40 * 589.29e-6) = 8315 mm.
    R = 14.0**2 / (40 * 589.2937e-6)
    res = _measure(R, 589.2937, 20.0, 900, medium_index=1.215)
    assert res.radius_mm == pytest.approx(R, rel=2e-3)
    assert 2 * _ring(res, 10.0).radius_mm == pytest.approx(12.7, abs=0.02)


# --- reflectance of the gap (checks of the image generator, not the engine) --------------------------------------

def test_fresnel_four_percent_per_face():
    # Fresnel equations at normal incidence, R = ((n1 - n2)/(n1 + n2))^2; n = 1.5 gives 0.04 (Hecht, Optics,
    # Fresnel equations — from memory)
    assert synth.fresnel_reflectance(1.5, 1.0) == pytest.approx(0.04, rel=1e-12)


def test_airy_peak_reflectance_of_two_faces():
    # Airy formula for a plane-parallel film, R = F sin^2(d/2) / (1 + F sin^2(d/2)), F = 4 rho / (1 - rho)^2
    # (Born & Wolf, Principles of Optics, multiple-beam interference — from memory). rho = 0.04 gives a peak of
    # F / (1 + F) = 0.1479 (the two-beam estimate would be 16 %; a single face's 8 % is wrong).
    lam = 546.074
    rho = 0.04
    F = 4 * rho / (1 - rho) ** 2
    R = synth.airy_reflectance(lam / 4, lam, 1.0, 1.5)  # gap of a quarter wave: d = pi, sin^2 = 1
    assert R == pytest.approx(F / (1 + F), rel=1e-9)
    assert R == pytest.approx(0.148, abs=0.0005)
    assert synth.airy_reflectance(0.0, lam, 1.0, 1.5) == pytest.approx(0.0, abs=1e-15)  # contact is dark


@pytest.mark.parametrize("n_glass,n_gap", [(1.52, 1.0), (1.52, 1.333), (1.75, 1.0)])
def test_airy_reflectance_matches_transfer_matrix_package(n_glass, n_gap):
    # reference library: `tmm` (transfer-matrix method, PyPI; S. J. Byrnes, arXiv:1603.02720), normal incidence
    lam = 589.2937
    for t in np.linspace(0.0, 600.0, 25):
        ref = tmm.coh_tmm("s", [n_glass, n_gap, n_glass], [np.inf, t, np.inf], 0.0, lam)["R"]
        assert synth.airy_reflectance(t, lam, n_gap, n_glass) == pytest.approx(ref, abs=1e-10)


def test_exact_sagitta_against_the_sphere():
    # sagitta of a sphere, s = R - sqrt(R^2 - r^2) (ISO 10110-5 uses the sagitta for power; the geometry is
    # elementary — common practice, no source)
    R, r = 50.0, 12.5
    assert synth.sphere_sag_mm(r * r, R) == pytest.approx(R - math.sqrt(R * R - r * r), rel=1e-12)
    # and the engine's correction from measured r^2 to the paraxial relation inverts it: r^2 + t^2 = 2 R t
    t = synth.sphere_sag_mm(r * r, R)
    assert physics.sphere_r2_correction(r * r, R) == pytest.approx(2 * R * t, rel=1e-3)


# --- wavelengths (NIST ASD; BIPM CIPM 2007 for HeNe) ------------------------------------------------------------

@pytest.mark.parametrize(
    "key,lam",
    [
        ("mercury-e", 546.074),  # NIST ASD Hg I 546.074 nm (air)
        ("helium-d", 587.5618),  # NIST ASD He I 587.5618 nm (air)
        ("cadmium-red", 643.8469),  # NIST ASD Cd I 643.8469 nm (air)
        ("hene", 632.816),  # BIPM CIPM 2007: 632.9908 nm vacuum, in standard air (Birch & Downs 1994)
        ("sodium-d", (588.9950 + 589.5924) / 2),  # NIST ASD Na I D2 588.9950, D1 589.5924: mean 589.2937
    ],
)
def test_built_in_wavelengths_are_the_reference_values(key, lam):
    assert get_source(key).wavelength_nm == pytest.approx(lam, abs=5e-5)


def test_sodium_mean_is_the_mean_of_its_lines():
    # NIST ASD Na I: D2 588.9950 nm, D1 589.5924 nm; (588.9950 + 589.5924) / 2 = 589.2937 nm
    assert (588.9950 + 589.5924) / 2 == pytest.approx(589.2937, abs=1e-9)
    assert get_source("sodium-d").wavelength_nm == pytest.approx(589.2937, abs=1e-9)


def test_sodium_lines_and_brightness_ratio():
    # NIST ASD: D2 588.9950 nm, D1 589.5924 nm; D2 about twice as bright as D1 (HyperPhysics, "Sodium spectrum":
    # http://hyperphysics.phy-astr.gsu.edu/hbase/quantum/sodium.html — the 2:1 ratio from the line strengths)
    lines = {round(l.wavelength_nm, 4): l.weight for l in SOURCES["sodium-d"].lines}
    assert set(lines) == {588.995, 589.5924}
    assert lines[588.995] == pytest.approx(2 * lines[589.5924])
    # the conventional mean and the brightness-weighted centroid differ by about 0.1 nm: the uncertainty covers it
    centroid = (2 * 588.995 + 589.5924) / 3
    assert abs(SOURCES["sodium-d"].wavelength_nm - centroid) <= math.sqrt(3) * SOURCES["sodium-d"].wavelength_u_nm + 1e-9


def test_hene_air_wavelength_from_vacuum_value():
    # BIPM: 632.9908 nm in vacuum; the refractive index of standard air at 633 nm is 1.000 2765 (Birch & Downs,
    # Metrologia 31 (1994) 315 — from memory to the digits shown)
    assert 632.9908 / 1.0002765 == pytest.approx(get_source("hene").wavelength_nm, abs=0.002)


def _edlen_air_index(lam_nm: float) -> float:
    # B. Edlén, Metrologia 2 (1966) 71, dispersion of standard air (15 °C, 101 325 Pa, 0.03 % CO2):
    # (n - 1) 1e8 = 8342.13 + 2406030 / (130 - s^2) + 15997 / (38.9 - s^2), s = 1 / lambda in µm^-1 (from memory)
    s2 = (1000.0 / lam_nm) ** 2
    return 1.0 + (8342.13 + 2406030.0 / (130.0 - s2) + 15997.0 / (38.9 - s2)) * 1e-8


def test_green_hene_air_wavelength_from_vacuum_value():
    # CIPM recommended radiations: iodine-stabilised He-Ne at 543.516 nm in vacuum (from memory to the digits
    # shown); the table keeps the air wavelength, as for the red line (it was 543.5 nm, 0.13 nm off)
    lam = get_source("green-hene").wavelength_nm
    assert 543.516 / _edlen_air_index(543.4) == pytest.approx(lam, abs=0.002)
    # the same formula gives the red line's air value to the table's uncertainty (cross-check of the formula)
    assert 632.9908 / _edlen_air_index(632.9) == pytest.approx(get_source("hene").wavelength_nm, abs=0.002)


@pytest.mark.parametrize("bad", [-5.0, 0.0, float("nan"), 5000.0, 50.0])
def test_impossible_wavelengths_are_refused(bad):
    with pytest.raises(InputError):
        custom_source(bad)
