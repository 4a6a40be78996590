"""Do the reported uncertainties mean what they say? Monte Carlo over noise and dust seeds.

GUM (JCGM 100:2008): a standard uncertainty u should cover the error about 68 % of the time and U = 2u about
95 % for a normal distribution. With eight seeded images the fraction is coarse, so the check asks for at
least half within 1u and all but one within 2u, over power and astigmatism together (16 values).
"""

import numpy as np
import pytest

from ringgauge import synth
from ringgauge.bench_setup import default_setup
from ringgauge.form.evaluate import evaluate_form
from ringgauge.imaging import frame_from_array


@pytest.mark.slow
@pytest.mark.xfail(
    strict=True,
    reason="known defect: the aperture finder reads this rim about 0.2 px large on every seed, so the power and "
    "astigmatism errors share a bias of about 1u (all 16 |z| lie in 0.8-1.35, 7 of 16 within 1u)",
)
def test_coverage_over_seeds():
    # the rim lies on a bright fringe (gap about 3.5 fringes there), so the aperture finder is not the limit;
    # its weakness on dark rims is measured by scripts/bench_form.py
    form = synth.SurfaceForm(power=2.6, astig=0.5, astig_axis_deg=60, zonal=0.15, tilt_x=0.8, piston=0.9)
    cam = synth.Camera(width=224, height=224, pixel_um=100.0)
    setup = default_setup(100.0, "mercury-e", pixel_size_u_um=0.1)
    z = []
    for seed in range(8):
        s = synth.test_plate_fringes(form, camera=cam, aperture_diameter_mm=17.0, rng=100 + seed,
                                     dust=synth.Dust(count=3, radius_px=(1.0, 2.5)))
        r = evaluate_form([frame_from_array(s.image)], setup)
        z.append((r.terms["power_fringes"] - 2.6) / r.terms_u["power_fringes"])
        z.append((r.terms["astigmatism_fringes"] - 0.5) / r.terms_u["astigmatism_fringes"])
    z = np.abs(np.array(z))
    assert np.mean(z <= 1) >= 0.5, z
    assert np.sum(z > 2) <= 1, z
