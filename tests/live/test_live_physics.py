"""Ring motion against the gap, on frames drawn here from the textbook two-beam formula (not ringgauge's renderer).

E. Hecht, *Optics*, Newton's rings / fringes of equal thickness: in reflection the gap t gives
I ∝ sin²(2π n t / λ) (dark at contact, the half-wave flip), and for a sphere of radius R on a flat
t(r) = t0 + r²/2R (touching at the centre) so dark ring m sits at r² = 2R(mλ/2n − t0): closing the gap (t0 down)
moves every ring outward by one fringe per λ/2n of gap. Edge contact turns the curvature round:
t(r) = t0 + c − r²/2R, and the rings move inward as the gap closes. Press test: common practice, no source.
"""

import math

import cv2
import numpy as np
import pytest

from ringgauge.bench_setup import default_setup
from ringgauge.live.session import LiveSession
from ringgauge.live.source import open_source

LAM_NM = 546.074  # mercury e-line (NIST ASD)
PIX_UM = 10.0
R_MM = 500.0


def two_beam_frames(folder, contact, t0_nm):
    h, w = 240, 300
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float64)
    r2_mm2 = ((xx - 151.3) ** 2 + (yy - 118.6) ** 2) * (PIX_UM * 1e-3) ** 2
    sag_nm = r2_mm2 / (2 * R_MM) * 1e6
    for i, t0 in enumerate(t0_nm):
        t = t0 + sag_nm if contact == "centre" else t0 + 4000.0 - sag_nm
        img = 0.15 + 0.7 * np.sin(2 * math.pi * t / LAM_NM) ** 2
        cv2.imwrite(str(folder / f"f_{i:04d}.png"), np.round(img * 255).astype(np.uint8))


@pytest.mark.parametrize("contact,sign,rings", [("centre", "+", "out"), ("edge", "-", "in")])
def test_closing_gap_moves_rings_as_the_textbook_says(tmp_path, contact, sign, rings):
    # 40 nm of gap closed per frame for 12 frames (0.9 fringe in all), then still
    t0 = [600.0 - 40.0 * min(i, 12) for i in range(26)]
    two_beam_frames(tmp_path, contact, t0)
    with open_source(str(tmp_path)) as src:
        s = LiveSession(src, default_setup(PIX_UM, "mercury-e"))
        states = list(s)
    assert len(states) == 26 and all(st.ok for st in states)
    moving = states[2:12]
    assert {st.rings for st in moving} == {rings}
    assert states[-1].power_sign == sign
    # one fringe per half wavelength of gap: 40 nm per frame = 2 * 40 / 546.074 fringe per frame
    per_frame = np.diff([st.phase for st in states[:13]]) / (2 * math.pi)
    expect = 2 * 40.0 / LAM_NM * (-1 if contact == "centre" else 1)
    assert np.allclose(per_frame, expect, atol=0.005), per_frame
    # the radius is the sphere's (r² = m λ R for dark rings in air)
    assert abs(states[-1].radius_mm - R_MM) <= states[-1].radius_U_mm


@pytest.mark.parametrize("contact,sign", [("centre", "+"), ("edge", "-")])
def test_settling_faster_than_the_camera_gives_no_wrong_sign(tmp_path, contact, sign):
    # The film first closes by 0.77 fringe per frame: sampled once a frame that looks like 0.23 fringe the other
    # way (the stroboscopic effect; Nyquist: motion above half a fringe per frame is aliased). The reading must
    # come from the slow end of the settling, never from the aliased start.
    t0 = [300.0 + 1320.0 * max(0.0, 1 - i / 12) ** 2 for i in range(30)]
    steps = -np.diff(t0) * 2 / LAM_NM
    assert steps[0] > 0.5  # the generated start is indeed faster than half a fringe per frame
    two_beam_frames(tmp_path, contact, t0)
    with open_source(str(tmp_path)) as src:
        s = LiveSession(src, default_setup(PIX_UM, "mercury-e"))
        states = list(s)
    assert states[-1].settled
    assert states[-1].power_sign == sign
    assert all(st.power_sign in ("unknown", sign) for st in states)
