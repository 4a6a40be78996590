"""One-frame fits of parts without closed rings around a centre inside the part, and of low-power parts under
uneven light.

Truth values are the generated form's terms over the disc (ISO 10110-5 meanings, see test_form_evaluate).
The issue's figure: within 0.05 fringe, or a "weak fit" warning whose expanded uncertainty covers the error.
The aperture is given by hand (the generated one) so these tests judge the gap fit, not the edge finder.
"""

import numpy as np
import pytest

from ringgauge import synth
from ringgauge.bench_setup import default_setup
from ringgauge.form.evaluate import _disc_grid, evaluate_form, form_terms
from ringgauge.imaging import frame_from_array

CAM = synth.Camera(width=320, height=320, pixel_um=60.0)
AP_MM = 17.0
R_PX = AP_MM / 2 / 0.06
UNEVEN = synth.Lighting(falloff=0.4, gradient=0.3, gradient_angle_deg=200.0, stray=0.06)

SHAPES = {
    # hyperbolic fringes crossing at the centre: 4 fringes of astigmatism, no power
    "saddle": (synth.SurfaceForm(power=0.0, astig=4.0, astig_axis_deg=10, piston=2.2), synth.Lighting()),
    "saddle with a little power": (synth.SurfaceForm(power=0.5, astig=3.0, astig_axis_deg=60, piston=1.6),
                                   synth.Lighting()),
    "near-flat, straight fringes": (synth.SurfaceForm(power=0.0, tilt_x=3.0, tilt_y=1.0, piston=4.5),
                                    synth.Lighting()),
    "near-flat, curved fringes": (synth.SurfaceForm(power=0.3, tilt_x=3.0, piston=3.5), synth.Lighting()),
    "one fringe, uneven light": (synth.SurfaceForm(power=1.0, astig=0.2, piston=0.2), UNEVEN),
    "0.6 fringe, uneven light": (synth.SurfaceForm(power=0.6, piston=0.1), UNEVEN),
    "1.4 fringes, rings off the part": (synth.SurfaceForm(power=1.4, tilt_x=2.2, piston=2.4), UNEVEN),
}


@pytest.mark.slow
@pytest.mark.parametrize("name", list(SHAPES))
def test_one_frame_shapes(name):
    form, light = SHAPES[name]
    img = synth.test_plate_fringes(form, camera=CAM, aperture_diameter_mm=AP_MM, lighting=light,
                                   rng=7 + list(SHAPES).index(name), dust=synth.Dust(count=2, radius_px=(1, 2)))
    setup = default_setup(60.0, "mercury-e", pixel_size_u_um=0.06,
                          aperture_px=((320 - 1) / 2, (320 - 1) / 2, R_PX))
    r = evaluate_form([frame_from_array(img.image)], setup)
    _, _, u, v = _disc_grid(1.0, 201)
    truth = form_terms(form.gap_fringes(u, v), u, v)
    weak = any("weak fit" in w for w in r.warnings)
    for key in ("power_fringes", "astigmatism_fringes", "irregularity_fringes"):
        true = abs(truth[key]) if key == "power_fringes" else truth[key]
        err = abs(r.terms[key] - true)
        if weak:
            assert err <= max(0.05, 2 * r.terms_u[key]), (key, r.terms[key], true, r.terms_u[key])
        else:
            assert err <= 0.05, (key, r.terms[key], true)


@pytest.mark.slow
def test_half_fringe_with_tilt_under_strong_uneven_light_is_measured_or_reported_weak():
    """Half a fringe of power plus a little tilt under strongly uneven light: one frame barely pins the power
    (started from rings alone the fit stopped in a minimum ~0.13 fringe low; the orientation-based start values
    now reach the true one). The issue's rule: measure within 0.05 fringe, or warn that the fit is weak -- and
    in both cases U covers the power and irregularity errors (never a confident wrong answer)."""
    light = synth.Lighting(falloff=0.6, gradient=0.4, gradient_angle_deg=120.0, stray=0.08)
    form = synth.SurfaceForm(power=0.5, astig=0.1, tilt_x=0.3, piston=0.15)
    img = synth.test_plate_fringes(form, camera=CAM, aperture_diameter_mm=AP_MM, lighting=light, rng=51)
    setup = default_setup(60.0, "mercury-e", pixel_size_u_um=0.06,
                          aperture_px=((320 - 1) / 2, (320 - 1) / 2, R_PX))
    r = evaluate_form([frame_from_array(img.image)], setup)
    _, _, u, v = _disc_grid(1.0, 201)
    truth = form_terms(form.gap_fringes(u, v), u, v)
    errs = [abs(r.terms[k] - abs(truth[k])) for k in ("power_fringes", "irregularity_fringes")]
    assert max(errs) <= 0.05 or any("weak fit" in w for w in r.warnings), (errs, r.warnings)
    for key in ("power_fringes", "irregularity_fringes"):
        assert abs(r.terms[key] - abs(truth[key])) <= 2 * r.terms_u[key], key
