"""Radius deviation from fringes against a test plate."""

import math

import pytest

from ringgauge.errors import InputError
from ringgauge.form.geometry import (
    delta_r_axial,
    delta_r_normal,
    delta_r_paraxial,
    radius_budget,
    radius_deviation,
)


def test_worked_example_of_the_exact_radius_difference():
    # Worked example computed by hand from the exact forms of Opt. Eng. 61(12) 125107 (2022), "Analysis of using
    # Newton's ring to test lens surface radius" (and the paraxial shop formula 4 N λ R² / D²):
    # R = 50 mm, D = 25 mm, N = 3, λ = 546.07 nm -> 26.21 µm paraxial, 25.80 µm normal, 24.98 µm axial
    assert 1e3 * delta_r_paraxial(3, 25, 50, 546.07) == pytest.approx(26.21, abs=0.005)
    assert 1e3 * delta_r_normal(3, 25, 50, 546.07) == pytest.approx(25.80, abs=0.005)
    assert 1e3 * delta_r_axial(3, 25, 50, 546.07) == pytest.approx(24.98, abs=0.005)


def test_forms_agree_on_shallow_parts_and_part_on_steep_ones():
    # paraxial limit: all three agree to first order in (h/R)^2 (derived from the formulas)
    d = radius_deviation(2, 10, 1000, 589.29)
    assert d.normal_mm == pytest.approx(d.paraxial_mm, rel=1e-4)
    assert d.axial_mm == pytest.approx(d.paraxial_mm, rel=1e-4)
    assert not d.steep
    # on steep parts the paraxial form overestimates: paraxial / normal = 2 / (1 + cos θ) and
    # normal / axial = 1 / cos θ (derived from the three formulas, sin θ = h/R)
    s = 0.87
    steep = radius_deviation(1, 2 * s * 10, 10, 546.07)
    cos = math.sqrt(1 - s * s)
    assert steep.steep
    assert steep.paraxial_mm / steep.normal_mm == pytest.approx(2 / (1 + cos), rel=1e-9)
    assert steep.normal_mm / steep.axial_mm == pytest.approx(1 / cos, rel=1e-9)


def test_sagitta_consistency():
    # Independent check from sphere geometry: the sag difference of two spheres over h equals N λ/2 when
    # R2 = R1 - dR_normal? Use exact sags: sag(R) = R - sqrt(R^2 - h^2) (handbook formula for a sphere's sag).
    R, D, N, lam = 100.0, 40.0, 4.0, 632.8
    h = D / 2
    dR = delta_r_axial(N, D, R, lam)

    def sag(r):
        return r - math.sqrt(r * r - h * h)

    # gap along the axis between spheres of radius R and R + dR with a common vertex
    gap_nm = (sag(R) - sag(R + dR)) * 1e6
    assert gap_nm == pytest.approx(N * lam / 2, rel=2e-3)


def test_budget_includes_the_plate_radius():
    b_dr, b_rs, warn = radius_budget(3.0, 0.02, 25.0, 0.01, 50.0, 0.002, 546.07, 0.001, sign=-1)
    names = [r.quantity for r in b_rs.rows]
    assert any("test plate radius" in n for n in names)
    row = next(r for r in b_rs.rows if "plate radius" in r.quantity)
    assert row.contribution == pytest.approx(abs(row.sensitivity) * 0.002)
    assert b_rs.value == pytest.approx(50.0 - 1e-3 * 24.976, abs=1e-5)
    assert b_dr.u_c > 0
    assert warn and "steep" in warn[0]  # h/R = 0.25 > 0.2: steep (Opt. Eng. 61(12) 125107 (2022))
    _, _, warn = radius_budget(1.0, 0.02, 10.0, 0.01, 50.0, 0.002, 546.07, 0.001)
    assert not warn


@pytest.mark.parametrize("R, D", [(0, 10), (-5, 10), (10, 25), (float("nan"), 10)])
def test_bad_geometry_is_refused(R, D):
    with pytest.raises(InputError):
        delta_r_axial(1, D, R, 546.07)
