"""Checks of the physics against outside sources: textbook worked examples, Fresnel and Airy formulas, the `tmm`
transfer-matrix package, and NIST wavelengths."""

import math

import numpy as np
import pytest

from ringgauge import physics, synth
from ringgauge.sources import SOURCES, custom_source, get_source
from ringgauge.errors import InputError


# --- worked examples of Newton's rings (DOMAIN.md §2) ---------------------------------------------------------

def test_radius_from_tenth_dark_ring_textbook_exercise():
    # textbook exercise (Q&A site): lambda = 500 nm, D10 (dark) = 5.0 mm -> R = 1.25 m
    assert physics.radius_from_ring(5.0, 10, 500.0) == pytest.approx(1250.0, rel=1e-9)


def test_wavelength_by_difference_method_textbook_exercise():
    # textbook exercise: D15 = 0.590 cm, D5 = 0.336 cm, R = 100 cm -> lambda = 588.0 nm (rounded)
    lam = physics.wavelength_from_diameters(5.90, 3.36, 10, 1000.0)
    assert lam == pytest.approx(588.0, abs=0.5)


def test_wavelength_from_bright_rings_textbook_exercise():
    # textbook exercise: bright D_n = 4.2 mm, D_(n+8) = 7.0 mm, R = 2 m -> lambda = 490 nm
    assert physics.wavelength_from_diameters(7.0, 4.2, 8, 2000.0) == pytest.approx(490.0, rel=1e-9)


def test_wavelength_from_eighth_dark_ring_virtual_lab():
    # Amrita virtual lab: R = 3 m, D8 (dark) = 7.2 mm -> lambda = 540 nm
    lam = (7.2 / 2) ** 2 / (8 * 3000.0) * 1e6
    assert lam == pytest.approx(540.0, rel=1e-9)
    assert physics.radius_from_ring(7.2, 8, 540.0) == pytest.approx(3000.0, rel=1e-9)


def test_liquid_index_from_ring_diameters_virtual_lab():
    # Amrita virtual lab: D10 of 14 mm in air becomes 12.7 mm with the liquid -> n = 1.215
    assert physics.medium_index_from_diameters(14.0, 12.7) == pytest.approx(1.215, abs=0.0005)


def test_tenth_ring_radius_derived():
    # derived (DOMAIN.md §2, der): R = 1 m, lambda = 589.3 nm -> r10 = 2.4276 mm
    assert physics.ring_radius_mm(10, 589.3, 1000.0) == pytest.approx(2.4276, abs=5e-5)


def test_bright_ring_convention_is_half_an_order_inside():
    dark = physics.ring_radius_mm(5, 546.074, 1000.0, kind="dark")
    bright = physics.ring_radius_mm(5, 546.074, 1000.0, kind="bright")
    assert bright**2 == pytest.approx(dark**2 * 4.5 / 5, rel=1e-12)


# --- reflectance of the gap ------------------------------------------------------------------------------------

def test_fresnel_four_percent_per_face():
    # Fresnel equations at normal incidence, n = 1.5: ((n - 1)/(n + 1))^2 = 0.04 (a fact of the trade)
    assert synth.fresnel_reflectance(1.5, 1.0) == pytest.approx(0.04, rel=1e-12)


def test_airy_peak_reflectance_of_two_faces():
    # multiple-beam Airy with rho = 0.04 peaks at 4 rho (1 + rho)^-2 ... = F / (1 + F) = 14.8 %
    # (DOMAIN.md §1, der; two-beam estimate (0.2 + 0.2)^2 = 16 %), not 8 %
    lam = 546.074
    quarter = lam / 4  # gap of a quarter wave: delta = pi, sin^2 = 1
    R = synth.airy_reflectance(quarter, lam, 1.0, 1.5)
    assert R == pytest.approx(0.148, abs=0.0005)
    assert synth.airy_reflectance(0.0, lam, 1.0, 1.5) == pytest.approx(0.0, abs=1e-15)  # contact is dark


@pytest.mark.parametrize("n_glass,n_gap", [(1.52, 1.0), (1.52, 1.333), (1.75, 1.0)])
def test_airy_reflectance_matches_transfer_matrix_package(n_glass, n_gap):
    # reference library: `tmm` (transfer-matrix method, PyPI), normal incidence, glass | gap | glass
    tmm = pytest.importorskip("tmm")
    lam = 589.2938
    for t in np.linspace(0.0, 600.0, 25):
        ref = tmm.coh_tmm("s", [n_glass, n_gap, n_glass], [np.inf, t, np.inf], 0.0, lam)["R"]
        assert synth.airy_reflectance(t, lam, n_gap, n_glass) == pytest.approx(ref, abs=1e-10)


def test_exact_sagitta_against_the_sphere():
    # R - sqrt(R^2 - r^2), handbook geometry; checked at a point computed directly
    R, r = 50.0, 12.5
    assert synth.sphere_sag_mm(r * r, R) == pytest.approx(R - math.sqrt(R * R - r * r), rel=1e-12)


# --- wavelengths (NIST ASD; BIPM CIPM 2007 for HeNe) ------------------------------------------------------------

@pytest.mark.parametrize(
    "key,lam",
    [
        ("mercury-e", 546.074),  # NIST ASD Hg I
        ("helium-d", 587.5618),  # NIST ASD He I
        ("cadmium-red", 643.8469),  # NIST ASD Cd I
        ("hene", 632.816),  # BIPM CIPM 2007 632.9908 nm vacuum, in standard air (Birch & Downs 1994)
        ("sodium-d", 589.2938),  # NIST ASD Na I D2 588.9950, D1 589.5924; mean
    ],
)
def test_built_in_wavelengths_are_the_reference_values(key, lam):
    assert get_source(key).wavelength_nm == pytest.approx(lam, abs=5e-5)


def test_sodium_lines_and_brightness_ratio():
    # NIST ASD: D2 588.9950 nm, D1 589.5924 nm; D2 about twice as bright as D1 (HyperPhysics)
    lines = {round(l.wavelength_nm, 4): l.weight for l in SOURCES["sodium-d"].lines}
    assert set(lines) == {588.995, 589.5924}
    assert lines[588.995] == pytest.approx(2 * lines[589.5924])
    # the conventional mean and the brightness-weighted centroid differ by about 0.1 nm: the uncertainty covers it
    centroid = (2 * 588.995 + 589.5924) / 3
    assert abs(SOURCES["sodium-d"].wavelength_nm - centroid) <= math.sqrt(3) * SOURCES["sodium-d"].wavelength_u_nm + 1e-9


def test_hene_air_wavelength_from_vacuum_value():
    # BIPM: 632.9908 nm in vacuum; the refractive index of standard air at 633 nm is 1.000 2765 (Birch & Downs
    # 1994 — from memory to the digits shown)
    assert 632.9908 / 1.0002765 == pytest.approx(get_source("hene").wavelength_nm, abs=0.002)


@pytest.mark.parametrize("bad", [-5.0, 0.0, float("nan"), 5000.0, 50.0])
def test_impossible_wavelengths_are_refused(bad):
    with pytest.raises(InputError):
        custom_source(bad)
