"""A strongly curved part seen over many rings whose surface is a paraboloid (this folder's model with the paraxial
sag r^2 = 2 R t): the engine fits a sphere, so its R is off by the sphere's sagitta correction, and its budget must
say so. Measured here: error +44 ppm, correction 47 ppm,
u 28 ppm with the surface-model row, |z| 1.6."""

from __future__ import annotations

import math

import numpy as np

import rings_model as M
from engine_runs import setup_for
from ringgauge.imaging import frame_from_array
from ringgauge.pipeline import analyse


def test_paraboloid_error_is_covered_by_the_surface_model_row():
    W, H = 800, 600
    centre = (322.5, 250.9)
    lam = M.HG_E_NM
    R = M.radius_for_rings(W, H, centre, 58.0, 3.26, lam)
    sc = M.Scene(width=W, height=H, pixel_um=3.26, radius_mm=R, centre_px=centre, sag="paraxial",
                 visibility=0.8, level=0.6, vignette_sigma=2.0, blur_px=0.7, full_well_e=20000.0, read_noise_e=4.0,
                 bits=12)
    res = analyse(frame_from_array(M.render(sc, 11).counts), setup_for(sc))
    err = res.radius_mm / R - 1
    z = (res.radius_mm - R) / res.radius_u_mm
    row = next(r for r in res.budget.rows if r.quantity.startswith("surface model"))
    half = row.contribution * math.sqrt(3.0) / res.radius_mm
    # The sphere correction on the rings' orders m, from the sagitta alone (common practice, no source): on a sphere
    # r^2 = 2 R t - t^2 with t = m lambda / 2 n, so the t^2 added to each ring's r^2 grows as m^2 lambda^2 / 4; its
    # least-squares slope over the rings used (weighted like the ring fit), against lambda R, is the relative
    # change of R.
    m = np.array([r.order for r in res.fit.rings])
    u = np.array([r.u_r2_mm2 for r in res.fit.rings])
    lam_mm = lam * 1e-6
    expect = np.polyfit(m, (m * lam_mm) ** 2 / 4, 1, w=1 / u)[0] / (lam_mm * R)
    print(f"err {1e6 * err:+.1f} ppm, u {1e6 * res.radius_u_mm / R:.1f} ppm, z {z:+.2f}, row half-width "
          f"{1e6 * half:.1f} ppm, sagitta estimate {1e6 * expect:.1f} ppm")
    assert half == np.clip(half, 0.9 * expect, 1.1 * expect)
    assert err > 0.5 * expect  # the paraboloid really is read long by the sphere fit: the row has work to do
    assert abs(z) <= 2.0
