"""Pixel scale from a reference disc or ring gauge, against generated discs of known truth."""

import math

import numpy as np
import pytest

from ringgauge.calibration import measure_disc
from ringgauge.calibration import targets as T
from ringgauge.calibration.disc import disc_edge_points
from ringgauge.errors import CalibrationError, ImageError, InputError
from ringgauge.synth import Camera, Lighting

CAM = dict(width=400, height=320, blur_px=1.0)


@pytest.mark.parametrize(
    "dark, sx, sy, centre",
    [(True, 10.0, 10.0, (0.0, 0.0)), (False, 10.0, 10.0, (150.0, -80.0)), (True, 8.0, 8.2, (-200.0, 100.0))],
)
def test_disc_scale_x_y_within_uncertainty(dark, sx, sy, centre):
    im = T.disc(2.0, dark=dark, centre_um=centre, camera=Camera(pixel_um=sx, pixel_y_um=sy, **CAM), rng=3)
    cal = measure_disc(im.image, 2.0, 0.0)
    assert cal.method == "disc"
    for got, true in ((cal.scale_x, sx), (cal.scale_y, sy)):
        assert abs(got.value - true) < 2 * got.u  # truth from the generator; u includes the edge-definition term
        assert abs(got.value - true) / true < 3e-4  # the 50 % edge itself is much better than its bound
    assert abs(cal.squareness.value) < 2 * cal.squareness.u + 1e-3
    assert cal.anisotropic == (sx != sy)
    cx, cy = cal.details["centre_px"]
    assert cx == pytest.approx(im.truth["centre_px"][0], abs=0.05)
    assert cy == pytest.approx(im.truth["centre_px"][1], abs=0.05)


def test_disc_under_uneven_light_and_dust():
    im = T.disc(2.5, camera=Camera(pixel_um=10.0, **CAM), lighting=Lighting(falloff=0.5, gradient=0.4),
                dust=5, rng=9)
    cal = measure_disc(im.image, 2.5, 0.001)
    assert abs(cal.scale_x.value - 10.0) < 2 * cal.scale_x.u
    assert abs(cal.scale_x.value - 10.0) / 10.0 < 1e-3


def test_geometric_fit_agrees_with_reference_ellipse_fitter():
    # Reference: scikit-image's EllipseModel (Halir & Flusser direct least squares, a general-purpose conic
    # fitter) on the same edge points; its semi-axes along x and y must match our metric fit's.
    from skimage.measure import EllipseModel

    im = T.disc(2.0, camera=Camera(pixel_um=8.0, pixel_y_um=8.3, **CAM), rng=5)
    pts, _ = disc_edge_points(im.image)
    cal = measure_disc(im.image, 2.0, 0.0)
    model = EllipseModel.from_estimate(pts[0.5])
    assert model
    (xc, yc), (a, b), theta = model.center, model.axis_lengths, model.theta
    # express the reference's axes along x and y whatever its axis order and angle convention
    c, s = math.cos(theta), math.sin(theta)
    ax = 1.0 / math.sqrt((c / a) ** 2 + (s / b) ** 2)
    ay = 1.0 / math.sqrt((s / a) ** 2 + (c / b) ** 2)
    dx, dy = cal.details["diameter_px"]
    assert 2 * ax == pytest.approx(dx, abs=0.02)
    assert 2 * ay == pytest.approx(dy, abs=0.02)
    assert (xc, yc) == pytest.approx(tuple(cal.details["centre_px"]), abs=0.01)


def test_edge_definition_term_grows_with_blur():
    u = []
    for blur in (0.7, 2.0):
        im = T.disc(2.0, camera=Camera(pixel_um=10.0, width=400, height=320, blur_px=blur), rng=1)
        cal = measure_disc(im.image, 2.0, 0.0)
        rows = {r.quantity: r for r in cal.budget_x.rows}
        u.append(rows["edge definition"].contribution)
        # derived here: for a Gaussian edge spread sigma_e the 25 % and 75 % crossings lie ±0.674 sigma_e from the
        # edge (normal quantiles), so the half-width is s * 0.674 sigma_e / r and u = that / sqrt(3), r the disc
        # radius in px; sigma_e^2 = blur^2 + 1/12 (the pixel's own box integration)
        r_px = 1000.0 / 10.0
        sigma_e = math.sqrt(blur**2 + 1.0 / 12.0)
        assert rows["edge definition"].contribution == pytest.approx(10.0 * 0.674 * sigma_e / r_px / math.sqrt(3),
                                                                     rel=0.1)
    assert u[1] > 2 * u[0]


def test_budget_has_certificate_fit_and_edge_rows():
    im = T.disc(2.0, camera=Camera(pixel_um=10.0, **CAM), rng=2)
    cal = measure_disc(im.image, 2.0, 0.001)
    names = [r.quantity for r in cal.budget_x.rows]
    assert names == ["certified diameter", "fit to the target image", "edge definition"]
    assert cal.budget_x.rows[0].contribution == pytest.approx(cal.scale_x.value * 0.001 / 2.0, rel=1e-5)


def test_default_diameter_uncertainty_is_stated():
    im = T.disc(2.0, camera=Camera(pixel_um=10.0, **CAM), rng=2)
    cal = measure_disc(im.image, 2.0)
    assert any("no diameter uncertainty given" in w for w in cal.warnings)


def test_no_disc_and_cut_disc_are_refused():
    noise = np.random.default_rng(0).normal(0.5, 0.05, (320, 400))
    with pytest.raises(CalibrationError, match="no complete disc"):
        measure_disc(noise, 2.0, 0.001)
    cut = T.disc(2.0, centre_um=(1900.0, 0.0), camera=Camera(pixel_um=10.0, **CAM), rng=1)  # runs off the frame
    with pytest.raises(CalibrationError, match="no complete disc"):
        measure_disc(cut.image, 2.0, 0.001)
    with pytest.raises(ImageError):
        measure_disc(np.zeros((320, 400), dtype=np.uint8), 2.0, 0.001)


def test_nonsense_diameter_is_refused():
    im = T.disc(2.0, camera=Camera(pixel_um=10.0, **CAM), rng=2)
    with pytest.raises(CalibrationError, match="outside the plausible"):
        measure_disc(im.image, 20000.0, 1.0)  # micrometres typed where millimetres belong
    with pytest.raises(InputError, match="positive number of millimetres"):
        measure_disc(im.image, 0.0, 0.001)
    with pytest.raises(InputError, match="between 0 and 5 %"):
        measure_disc(im.image, 2.0, 0.5)
