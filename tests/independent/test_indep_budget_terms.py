"""Two properties of the radius budget that the random set's coverage rests on: the ring-vs-full-field row never
lets a larger Type A shrink the total, and rings cut by the frame still get a sector scatter (Type A)."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

import rings_model as M
from engine_runs import setup_for
from ringgauge.bench_setup import BenchSetup
from ringgauge.fit.orders import Extremum, fit_orders
from ringgauge.imaging import frame_from_array
from ringgauge.pipeline import analyse, radius_budget
from ringgauge.sources import get_source


def test_total_uncertainty_never_falls_as_type_a_grows():
    # GUM (JCGM 100:2008, 5.1.2): u_c^2 is a sum of non-negative terms, so raising one input's u cannot lower u_c.
    px = 0.008
    m = np.arange(1, 21, dtype=float)
    ext = [Extremum(float(0.45 * k / px**2), 2.0, "dark", float(k - 1), 0.5, 1000) for k in m]
    fit = fit_orders(ext, kind="dark", px_mm=px)
    setup = BenchSetup(get_source("mercury-e"), 8.0)
    R = 824.0
    R_ff = R * (1 + 3e-4)  # the full-field fit 300 ppm away
    prev = 0.0
    for rel in np.linspace(1e-6, 4e-4, 200):  # Type A from 1 to 400 ppm, across the old 3 u_A switch at 100 ppm
        f = dataclasses.replace(fit, slope_u_mm2=rel * fit.slope_mm2)
        u = radius_budget(R, f, setup, R_ff).u_c
        assert u >= prev * (1 - 1e-12), f"u_c fell from {prev:.4g} to {u:.4g} mm as Type A rose to {1e6 * rel:.0f} ppm"
        prev = u


def test_rings_cut_by_the_frame_get_a_sector_scatter():
    # centre 14.6 px beyond the left edge: only half-rings are seen; the sectors must still spread over them
    W, H = 640, 480
    centre = (-14.6, 210.4)
    R = M.radius_for_rings(W, H, centre, 40.0, 6.0, M.HG_E_NM)
    sc = M.Scene(width=W, height=H, pixel_um=6.0, radius_mm=R, centre_px=centre, visibility=0.8, level=0.6,
                 vignette_sigma=1.2, vignette_centre=(0.45, 0.55), ramp=(0.15, -0.1), stray=0.04, blur_px=0.8,
                 full_well_e=10000.0, read_noise_e=6.0, bits=8)
    res = analyse(frame_from_array(M.render(sc, 3).counts), setup_for(sc))
    sec = res.fullfield.sectors
    assert sec is not None and sec.n_sectors >= 6, sec
    ang = np.array(sec.angles_deg)
    assert np.all(np.abs(ang) < 90.0)  # all on the side the frame shows
    err = res.radius_mm / R - 1
    assert abs(err) <= 3 * res.radius_u_mm / R, (err, res.radius_u_mm / R)
    assert math.isfinite(res.radius_u_mm)
