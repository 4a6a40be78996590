"""The part's edge on images from this folder's own test-plate model (plate_model.py, not ringgauge's generator).

The rim may fall on a dark, grey or bright fringe, under even or uneven light; the clear aperture must come out
where the model put it. Targets (common practice, no source): centre and radius within 0.3 px on a 150 px
radius rim for dark, mid-grey and bright rims; the reported radius uncertainty covers the error at k = 3.
A rim whose brightness matches the plate's (about 1/8 fringe past a dark fringe here) shows only a change of
slope; it is measured with a larger scatter, which the uncertainty must then say.
"""

import math

import numpy as np
import pytest

import plate_model as P
from ringgauge.errors import AnalysisError
from ringgauge.form.aperture import find_aperture
from ringgauge.imaging import frame_from_array

BASE = P.Part()
pytestmark = pytest.mark.slow  # about 2-5 s per image on a busy machine


def _find(part, seed=1):
    return find_aperture(frame_from_array(P.render(part, seed)[0]).data)


@pytest.mark.parametrize("power", [2.0, -3.0, 0.8])
@pytest.mark.parametrize("rim", [0.0, 0.25, 0.5], ids=["dark-rim", "grey-rim", "bright-rim"])
def test_rim_on_any_fringe(power, rim):
    part = BASE.with_(power=power, rim_phase=rim)
    ap = _find(part)
    dc = math.hypot(ap.centre_px[0] - part.centre_px[0], ap.centre_px[1] - part.centre_px[1])
    dr = ap.radius_px - part.aperture_px
    assert dc < 0.3 and abs(dr) < 0.3, (dc, dr)
    assert abs(dr) <= 3 * ap.radius_u_px, (dr, ap.radius_u_px)


@pytest.mark.parametrize(
    "name, part",
    [
        # the case: a 0.8-fringe part under uneven light (fall-off off-centre plus a ramp)
        ("low power, uneven light", BASE.with_(power=0.8, ramp=(0.6, 0.3), falloff_sigma=0.8,
                                               falloff_centre=(0.5, 0.3))),
        ("0.3 fringe, dark rim, uneven", BASE.with_(power=0.3, rim_phase=0.0, ramp=(-0.5, 0.4), falloff_sigma=0.9,
                                                     falloff_centre=(-0.4, 0.3))),
        ("0.8 fringe, grey rim, uneven", BASE.with_(power=0.8, rim_phase=0.3, ramp=(0.6, 0.3), falloff_sigma=0.8,
                                                     falloff_centre=(0.5, 0.3))),
        ("saddle: astigmatism, no power", BASE.with_(power=0.0, astig=4.0, astig_axis_deg=20)),
        ("off-centre smaller part", BASE.with_(width=360, height=300, centre_px=(170.3, 160.7), aperture_px=110.0,
                                               power=-1.5, rim_phase=0.0)),
        ("dust and a glint near the rim", BASE.with_(power=2.0, rim_phase=0.5, specks=(
            P.Speck(150, 170, 4), P.Speck(240, 230, 3, "glint", 0.6), P.Speck(200, 345, 5)))),
    ],
)
def test_edge_under_uneven_light_and_odd_fringes(name, part):
    ap = _find(part)
    dc = math.hypot(ap.centre_px[0] - part.centre_px[0], ap.centre_px[1] - part.centre_px[1])
    dr = ap.radius_px - part.aperture_px
    # the issue saw this aperture 5 % too large and 21 px off centre; a fifth of a pixel is asked here
    assert dc < 0.3 and abs(dr) < 0.3, (name, dc, dr)


def test_uneven_light_gives_no_phantom_dust_region():
    # the plate's smooth light is divided out before the part is looked for: nothing outside the part departs
    from ringgauge.form.aperture import _coarse_region

    part = BASE.with_(power=0.8, ramp=(0.6, 0.3), falloff_sigma=0.8, falloff_centre=(0.5, 0.3))
    img = frame_from_array(P.render(part, 3)[0]).data
    _, region = _coarse_region(np.asarray(img, dtype=float))
    yy, xx = np.mgrid[0 : part.height, 0 : part.width]
    r = np.hypot(xx - part.centre_px[0], yy - part.centre_px[1])
    assert not (region & (r > part.aperture_px + 8)).any()  # no region on the plate
    assert region[r < part.aperture_px - 8].all()  # the whole part


def test_slope_only_rim_is_uncertain_not_confidently_wrong():
    # rim brightness equal to the plate's: only the slope changes there. Scatter is allowed, but the
    # reported u must cover the error at k = 3
    part = BASE.with_(power=2.0, rim_phase=0.125)
    ap = _find(part)
    dr = ap.radius_px - part.aperture_px
    assert abs(dr) < 1.5 and abs(dr) <= 3 * ap.radius_u_px, (dr, ap.radius_u_px)


def test_no_edge_is_refused():
    # fringes fill the frame: no plate around the part, so no rim to find — refused, not guessed
    part = BASE.with_(aperture_px=400.0, power=3.0)
    with pytest.raises(AnalysisError, match="edge was not found.*by hand"):
        _find(part)
    # a plain frame (plate only, no part)
    blank = BASE.with_(aperture_px=0.5, power=0.0, falloff_sigma=float("inf"))
    with pytest.raises(AnalysisError):
        _find(blank)
