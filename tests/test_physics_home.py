"""physics.py as the one home of the fringe relations: the relations added for the synthetic images' fringe-rate
check, the lot report's tolerance conversion and the fringe height, checked against their definitions."""

from __future__ import annotations

import math

import pytest

from ringgauge import physics


def test_fringe_frequency_is_the_derivative_of_the_ring_order():
    # Newton's rings r_m^2 = m lambda R / n (E. Hecht, Optics, amplitude-splitting interferometers; from memory
    # as to the equation number): the order at radius r is n r^2 / (lambda R); its rate, by a central difference
    R, lam, n, r = 500.0, 589.194, 1.333, 4.0
    order = lambda x: n * x * x / (lam * 1e-6 * R)  # noqa: E731
    h = 1e-4
    numeric = (order(r + h) - order(r - h)) / (2 * h)
    assert physics.fringe_frequency_per_mm(r, R, lam, n) == pytest.approx(numeric, rel=1e-9)
    # agrees with the slope relation the engine uses (slope = lambda R / n mm^2 per fringe): d(r^2/slope)/dr
    assert physics.fringe_frequency_per_mm(r, R, lam, n) == pytest.approx(2 * r / physics.slope_from_radius(R, lam, n))


def test_fringes_convert_between_wavelengths_at_equal_height():
    # one fringe = lambda / 2 of surface height (ISO 10110-5, from memory as to the clause): N1 lambda1 / 2 = N2 lambda2 / 2
    n1, lam1, lam2 = 3.0, 632.8, 546.07
    n2 = physics.fringes_at(n1, lam1, lam2)
    assert n2 * physics.fringe_height_nm(lam2) == pytest.approx(n1 * physics.fringe_height_nm(lam1), rel=1e-12)
    assert n2 > n1  # a shorter wavelength counts more fringes for the same height
    assert physics.fringes_at(n1, lam1, lam1) == n1


def test_fringe_height_in_a_medium():
    # reflection: the optical path changes by 2 n t, one fringe per lambda, so t = lambda / (2 n) per fringe
    # (common practice, no source)
    assert physics.fringe_height_nm(600.0) == 300.0
    assert physics.fringe_height_nm(600.0, 1.5) == pytest.approx(200.0)
    assert math.isclose(physics.fringe_height_nm(589.194, 1.333) * 2 * 1.333, 589.194)
