"""The benchmark's Hough baseline (scripts/bench_baseline.py): its order assignment and fit, and one real image."""

import math
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "scripts"))

import bench_baseline as bb  # noqa: E402

from ringgauge import synth  # noqa: E402
from ringgauge.sources import get_source  # noqa: E402

LAM_NA_NM = 589.2937  # sodium D doublet mean, NIST ASD (see ringgauge.sources)


def edge_circles(R_mm, lam_nm, px_um, m_values, centre=(400.0, 300.0)):
    """Ring-edge circles a quarter fringe either side of dark rings r_m^2 = m lambda R (reflection, air) —
    the dark-ring formula of the standard Newton's-rings lab texts (IIT Kanpur, Amrita virtual lab)."""
    out = []
    for m in m_values:
        for q in (-0.25, 0.25):
            s_mm2 = (m + q) * lam_nm * 1e-6 * R_mm
            if s_mm2 > 0:
                out.append((centre[0], centre[1], math.sqrt(s_mm2) / (px_um * 1e-3)))
    return out


def test_worked_example_radius_recovered_from_exact_edges():
    # R = 1 m, lambda = 589.3 nm gives r_10 = 2.4276 mm (derived from r^2 = m lambda R: Hecht, Optics, Newton's
    # rings — from memory)
    assert math.sqrt(10 * 589.3e-6 * 1000.0) == pytest.approx(2.4276, abs=1e-4)
    circles = edge_circles(1000.0, 589.3, 5.0, range(1, 15))
    R, centre, n = bb.fit_radius(circles, px_mm=5e-3, lam_mm=589.3e-6)
    assert R == pytest.approx(1000.0, rel=1e-9)
    assert centre == (400.0, 300.0)
    assert n == len(circles)


def test_missed_duplicate_and_spurious_edges_do_not_shift_orders():
    circles = edge_circles(500.0, LAM_NA_NM, 8.0, range(1, 20))
    del circles[7], circles[12], circles[20]  # missed edges
    circles.append(circles[5])  # the same edge seen twice
    x, y, r = circles[10]
    r_mid = math.sqrt(0.5 * (r**2 + circles[11][2] ** 2))
    circles.append((x, y, r_mid))  # a spurious circle half-way between two edges
    R, _, n = bb.fit_radius(circles, px_mm=8e-3, lam_mm=LAM_NA_NM * 1e-6)
    assert R == pytest.approx(500.0, rel=1e-9)  # the spurious circle is dropped, the duplicate is harmless
    assert n == len(circles) - 1


def test_too_few_circles_is_a_counted_failure():
    with pytest.raises(bb.BaselineFailure, match="only 4 ring edges"):
        bb.fit_radius(edge_circles(500.0, LAM_NA_NM, 8.0, range(1, 3)), px_mm=8e-3, lam_mm=LAM_NA_NM * 1e-6)


def test_baseline_on_a_generated_image_is_within_a_few_percent():
    # a plain case (centred rings, some 15 full rings, default camera effects); truth from the generator with a
    # fixed seed; tolerance: Hough's 1-px radius windows give percent-level R
    cam = synth.Camera(width=640, height=512, pixel_um=8.0)
    img = synth.newton_rings(383.0, contact_offset_nm=40.0, source="sodium-d", camera=cam, rng=3).image
    res = bb.hough_baseline(img, pixel_um=8.0, wavelength_nm=get_source("sodium-d").wavelength_nm)
    assert abs(res.radius_mm / 383.0 - 1) < 0.05
    assert math.dist(res.centre_px, ((640 - 1) / 2, (512 - 1) / 2)) < 2.0
    assert res.n_edges >= 12
