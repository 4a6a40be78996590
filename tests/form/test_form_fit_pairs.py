"""Frame pairs with a changed gap: the second frame is fitted from the first frame's shape, and the piston step
gives the power's sign for parts with astigmatism, a zonal error and about one fringe of power, on both kinds
of contact.

Physics (common practice, no source): when the gap grows uniformly the fringes move toward the contact point,
so the mean gap of the fit's own orientation of W moves by +d when that orientation is the true one (centre
contact) and by -d when it is the mirror image (edge contact).
"""

import numpy as np
import pytest

from ringgauge import synth
from ringgauge.form.fit import finesse_coefficient, fit_gap
from ringgauge.form.sign import sign_from_pistons

CAM = synth.Camera(width=224, height=224, pixel_um=100.0)
AP_MM = 17.0
CENTRE = ((224 - 1) / 2, (224 - 1) / 2)
RADIUS_PX = AP_MM / 2 / 0.1


def _pair(form, step, seed, lighting=synth.Lighting()):
    out = []
    for i in range(2):
        f = synth.SurfaceForm(**{**form.__dict__, "piston": form.piston + i * step})
        s = synth.test_plate_fringes(f, camera=CAM, aperture_diameter_mm=AP_MM, rng=seed + i, lighting=lighting,
                                     dust=synth.Dust(count=2, radius_px=(1.0, 2.0)))
        out.append(s.image01)
    return out


def _fit_pair(images):
    g1 = fit_gap(images[0], CENTRE, RADIUS_PX, finesse=finesse_coefficient())
    g2 = fit_gap(images[1], CENTRE, RADIUS_PX, prior=g1)
    return g1, g2


PAIRS = {
    # name: (form, step (fringes), gap change, expected sign)
    "astigmatic, centre contact": (synth.SurfaceForm(power=2.5, astig=0.8, astig_axis_deg=35, piston=0.3), 0.15,
                                   "increasing", 1),
    "astigmatic, edge contact": (synth.SurfaceForm(power=-2.5, astig=0.8, astig_axis_deg=35, piston=3.2), 0.15,
                                 "increasing", -1),
    "zonal, centre contact": (synth.SurfaceForm(power=1.8, zonal=0.3, piston=0.4), 0.2, "increasing", 1),
    "zonal, edge contact": (synth.SurfaceForm(power=-1.8, zonal=-0.3, piston=2.5), -0.2, "decreasing", -1),
    "one fringe, centre contact": (synth.SurfaceForm(power=1.0, astig=0.2, piston=0.2), 0.12, "increasing", 1),
    "one fringe, edge contact": (synth.SurfaceForm(power=-1.0, astig=0.2, piston=1.4), 0.12, "increasing", -1),
}


@pytest.mark.slow
@pytest.mark.parametrize("name", list(PAIRS))
def test_pair_sign_and_step(name):
    form, step, change, expected = PAIRS[name]
    g1, g2 = _fit_pair(_pair(form, step, seed=10 + list(PAIRS).index(name)))
    # the second frame keeps the first frame's shape and orientation: the same power and contrast
    assert g2.coeffs[3] == pytest.approx(g1.coeffs[3], abs=0.03)
    assert g2.contrast == pytest.approx(g1.contrast, rel=0.2)
    res = sign_from_pistons([g1.coeffs[0], g2.coeffs[0]],
                            [float(np.sqrt(g.covariance[0, 0])) for g in (g1, g2)], gap_change=change)
    assert res.sign == expected, res.detail
    # the measured step is the generated one, with the sign the orientation implies
    assert res.steps_fringes[0] * expected == pytest.approx(step, abs=0.03)


@pytest.mark.slow
def test_second_frame_with_a_tilt_change():
    """The part rocks a little between frames: tilt is free in the second frame's first stage."""
    form = synth.SurfaceForm(power=2.0, astig=0.4, astig_axis_deg=70, piston=0.3)
    a = synth.test_plate_fringes(form, camera=CAM, aperture_diameter_mm=AP_MM, rng=40).image01
    f2 = synth.SurfaceForm(**{**form.__dict__, "piston": 0.45, "tilt_x": 0.3, "tilt_y": -0.2})
    b = synth.test_plate_fringes(f2, camera=CAM, aperture_diameter_mm=AP_MM, rng=41).image01
    g1, g2 = _fit_pair([a, b])
    assert g2.coeffs[1] - g1.coeffs[1] == pytest.approx(0.3, abs=0.03)
    assert g2.coeffs[2] - g1.coeffs[2] == pytest.approx(-0.2, abs=0.03)
    res = sign_from_pistons([g1.coeffs[0], g2.coeffs[0]], [0.01, 0.01])
    assert res.sign == 1 and res.steps_fringes[0] == pytest.approx(0.15, abs=0.03)
