"""An anisotropic pixel scale changes the rings' shape and the fitted radius as the geometry says.

Geometry (derived here): a ring of object radius r seen with pixel sizes s_x, s_y is an axis-aligned ellipse of
semi-axes r/s_x and r/s_y pixels. Read with one scale s_x for both axes, its squared radius in the x metric is
s(theta) = r^2 / (cos^2 theta + (s_y/s_x)^2 sin^2 theta) and the angular mean of s is r^2 s_x / s_y (the integral
(1/2 pi) int dtheta / (a^2 cos^2 + b^2 sin^2) = 1 / (a b)). R follows the slope of r^2 against order, so a fit
that averages around the rings gives R s_x / s_y; with weights symmetric about 45° (a field that is square on the
part) any weighting lies between R 2 s_x^2 / (s_x^2 + s_y^2) and R (1 + s_x^2 / s_y^2) / 2, within 0.05 % of
R s_x / s_y for s_y / s_x = 1.03.
"""

import math

import numpy as np
import pytest

from ringgauge.bench_setup import BenchSetup
from ringgauge.imaging import frame_from_array
from ringgauge.sources import get_source
from ringgauge.synth import Camera, Lighting, newton_rings

SX, SY = 5.0, 5.15


def test_one_ring_is_an_ellipse_with_axes_in_the_ratio_of_the_scales():
    from skimage.measure import EllipseModel, find_contours

    cam = Camera(width=412, height=400, pixel_um=SX, pixel_y_um=SY, blur_px=0.0)
    im = newton_rings(150.0, camera=cam, source="sodium-d", lighting=Lighting(falloff=0, gradient=0, stray=0),
                      noise=False, rng=0)
    # near the 5th dark ring: r^2 = 5 lambda R (lens on a flat, dark rings in reflection); any iso-intensity
    # contour is a circle of constant gap on the part
    lam_mm = get_source("sodium-d").wavelength_nm * 1e-6
    r_true = math.sqrt(5 * lam_mm * 150.0) * 1000.0  # µm
    contours = find_contours(im.intensity, 0.5 * float(im.intensity.max()))
    cx, cy = im.truth["centre_px"]
    best, best_d = None, np.inf
    for c in contours:
        pts = c[:, ::-1]  # (row, col) -> (x, y)
        d = float(np.median(np.hypot((pts[:, 0] - cx) * SX, (pts[:, 1] - cy) * SY)))
        if len(pts) > 100 and abs(d - r_true) < best_d:
            best, best_d = pts, abs(d - r_true)
    assert best is not None
    model = EllipseModel.from_estimate(best)  # scikit-image's ellipse fitter as the reference
    assert model
    a, b = model.axis_lengths
    th = model.theta
    ax = 1.0 / math.sqrt((math.cos(th) / a) ** 2 + (math.sin(th) / b) ** 2)  # semi-axis along x
    ay = 1.0 / math.sqrt((math.sin(th) / a) ** 2 + (math.cos(th) / b) ** 2)  # along y
    assert ax / ay == pytest.approx(SY / SX, rel=1e-3)
    assert ax * SX == pytest.approx(ay * SY, rel=1e-3)  # a circle on the part
    # within half a fringe of the 5th dark ring (r^2 / (lambda R) = order)
    assert (ax * SX / 1000.0) ** 2 / (lam_mm * 150.0) == pytest.approx(5.0, abs=0.5)


def test_engine_radius_with_both_scales_and_with_one():
    from ringgauge.pipeline import analyse

    R = 150.0
    cam = Camera(width=412, height=400, pixel_um=SX, pixel_y_um=SY, blur_px=0.8)  # 2.06 mm x 2.06 mm on the part
    im = newton_rings(R, camera=cam, source="sodium-d", rng=4)
    frame = frame_from_array(im.image)
    both = analyse(frame, BenchSetup(source=get_source("sodium-d"), pixel_size_um=SX, pixel_size_u_um=0.005,
                                     pixel_size_y_um=SY, pixel_size_y_u_um=0.005))
    assert abs(both.radius_mm - R) < both.radius_U_mm  # truth from the generator
    one = analyse(frame, BenchSetup(source=get_source("sodium-d"), pixel_size_um=SX, pixel_size_u_um=0.005))
    assert one.radius_mm / R == pytest.approx(SX / SY, rel=5e-3)  # geometry above
    assert abs(one.radius_mm - R) > 10 * abs(both.radius_mm - R)
    assert any("elliptical" in w for w in one.warnings)
