"""Sign of the power: frames with a changed gap, the press test, and "unknown" without evidence.

Physics (common practice, no source; follows from fringes being contours of equal gap): when the gap grows
uniformly, fringes move toward the contact point; pressing gently moves fringes toward the wider gap.
"""

import numpy as np
import pytest

from ringgauge import synth
from ringgauge.bench_setup import default_setup
from ringgauge.errors import InputError
from ringgauge.form.aperture import find_aperture
from ringgauge.form.evaluate import evaluate_form
from ringgauge.form.fit import finesse_coefficient, fit_gap
from ringgauge.form.sign import sign_from_pistons, sign_from_press, wrap_half
from ringgauge.imaging import frame_from_array

CAM = synth.Camera(width=224, height=224, pixel_um=100.0)


def _frames(power, piston, step, n=2, rng=0):
    out = []
    for i in range(n):
        form = synth.SurfaceForm(power=power, astig=0.3, astig_axis_deg=20, piston=piston + i * step)
        out.append(synth.test_plate_fringes(form, camera=CAM, aperture_diameter_mm=17.0, rng=rng + i).image01)
    return out


def _pistons(images):
    ap = find_aperture(images[0])
    fits = [fit_gap(im, ap.centre_px, ap.radius_px, nterms=6, finesse=finesse_coefficient()) for im in images]
    return [f.coeffs[0] for f in fits], [float(np.sqrt(f.covariance[0, 0])) for f in fits]


@pytest.mark.slow
@pytest.mark.parametrize(
    "power, piston, step, gap_change, expected",
    [
        (2.0, 0.3, 0.2, "increasing", 1),  # centre contact, gap grows: rings move in
        (-2.0, 2.3, 0.2, "increasing", -1),  # edge contact (gap 2.3 - 2ρ² ≥ 0.3 fringe), gap grows
        (2.0, 0.5, -0.2, "decreasing", 1),  # the same part with the gap closing
        (-2.0, 2.5, -0.2, "decreasing", -1),
    ],
)
def test_sign_from_generated_frame_pairs(power, piston, step, gap_change, expected):
    p, u = _pistons(_frames(power, piston, step))
    res = sign_from_pistons(p, u, gap_change=gap_change)
    assert res.sign == expected
    assert res.confidence > 0.99
    assert abs(res.steps_fringes[0]) == pytest.approx(abs(step), abs=0.03)


def test_no_motion_or_half_fringe_steps_do_not_decide():
    assert sign_from_pistons([0.3, 0.305], [0.005, 0.005]).sign == 0
    res = sign_from_pistons([0.1, 0.6], [0.02, 0.02])  # half a fringe: either way
    assert res.sign == 0
    assert sign_from_pistons([0.3], [0.01]).sign == 0
    assert wrap_half(0.9) == pytest.approx(-0.1) and wrap_half(-0.7) == pytest.approx(0.3)
    with pytest.raises(InputError):
        sign_from_pistons([0.1, 0.2], [0.01, 0.01], gap_change="sideways")


def test_press_test():
    assert sign_from_press("rings-spread").sign == 1
    assert sign_from_press("rings-shrink").sign == -1
    with pytest.raises(InputError, match="press-test"):
        sign_from_press("rings-wobble")


@pytest.mark.slow
def test_evaluate_form_reports_the_sign_and_signed_radius():
    frames = [frame_from_array(im.astype(np.float32)) for im in _frames(-1.5, 1.8, 0.22)]
    setup = default_setup(100.0, "mercury-e", pixel_size_u_um=0.1,
                          test_plate={"id": "TP-0007", "radius_mm": 80.0, "radius_u_mm": 0.003, "kind": "convex"})
    r = evaluate_form(frames, setup)
    assert r.sign.sign == -1 and r.sign.method == "frames"
    assert r.terms["power_fringes"] == pytest.approx(-1.5, abs=0.06)
    d = r.to_dict()
    assert d["power_sign"] == "-"
    # convex plate (concave part), edge contact: the part is more curved than the plate, R_s = R_p - ΔR (derived)
    assert d["radius"]["surface_radius_mm"] == pytest.approx(80.0 - d["radius"]["delta_r_axial_mm"], rel=1e-9)
    one = evaluate_form(frames[:1], setup)
    assert one.sign.sign == 0 and one.terms["power_fringes"] > 0  # magnitude only
    pressed = evaluate_form(frames[:1], setup.with_(press_test="rings-shrink"))
    assert pressed.sign.sign == -1 and pressed.terms["power_fringes"] < 0
