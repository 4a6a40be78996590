"""The independent ring model itself is checked against outside facts before it is trusted to check the engine."""

from __future__ import annotations

import math

import numpy as np
import pytest
import tmm
from scipy.optimize import least_squares

import rings_model as M


def _dark_ring_radius_mm(scene: M.Scene, m: int) -> float:
    """Radius of the m-th dark ring in the model: the minimum of the fringe shape near r^2 = m lambda R / n."""
    lam = M.centroid_nm(scene.spectrum) * 1e-6
    r_guess = math.sqrt(m * lam * scene.radius_mm / scene.medium_index)
    r = np.linspace(0.99 * r_guess, 1.01 * r_guess, 200_001)
    f = M._fringe_shape(M._gap_mm(r * r, scene), scene)
    return float(r[np.argmin(f)])


def test_dark_ring_textbook_examples():
    # lambda = 500 nm, D10 (dark) = 5.0 mm gives R = 1.25 m: course exercise, original book not traced (common
    # practice, no source); it follows from r_m^2 = m lambda R (Hecht, Optics, Newton's rings — from memory)
    sc = M.Scene(radius_mm=1250.0, spectrum=((500.0, 1.0),), sag="paraxial")
    assert 2 * _dark_ring_radius_mm(sc, 10) == pytest.approx(5.0, abs=1e-4)
    # R = 3 m, D8 (dark) = 7.2 mm gives lambda = 540 nm: Amrita Virtual Lab, Newton's rings exercises,
    # http://vlab.amrita.edu/?sub=1&brch=189&sim=335&cnt=5
    sc = M.Scene(radius_mm=3000.0, spectrum=((540.0, 1.0),), sag="paraxial")
    assert 2 * _dark_ring_radius_mm(sc, 8) == pytest.approx(7.2, abs=1e-4)
    # R = 1 m, lambda = 589.3 nm: r10 = sqrt(10 * 589.3e-6 * 1000) = 2.4276 mm (derived from r^2 = m lambda R)
    sc = M.Scene(radius_mm=1000.0, spectrum=((589.3, 1.0),), sag="exact")
    assert _dark_ring_radius_mm(sc, 10) == pytest.approx(2.4276, abs=1e-4)


def test_liquid_gap_shrinks_rings_by_root_n():
    # D10 of 14 mm in air becomes 12.7 mm with a liquid of n = 1.215: Amrita Virtual Lab, refractive index by
    # Newton's rings, http://vlab.amrita.edu/?sub=1&brch=189&sim=1520&cnt=5
    lam = 589.3
    R = (7.0**2) / (10 * lam * 1e-6)  # the radius that gives D10 = 14 mm in air
    sc = M.Scene(radius_mm=R, spectrum=((lam, 1.0),), sag="paraxial", medium_index=1.215)
    assert 2 * _dark_ring_radius_mm(sc, 10) == pytest.approx(12.7, abs=0.01)


def test_airy_shape_matches_transfer_matrix_reference():
    # gap reflectance of an air film between two n = 1.5 glasses at normal incidence: the general-purpose
    # transfer-matrix package tmm is the reference (Airy formula, Hecht, Optics, thin-film chapter)
    rho = ((1.5 - 1.0) / (1.5 + 1.0)) ** 2  # Fresnel, 4 % per face (Hecht, Optics, Fresnel equations — from memory)
    sc = M.Scene(spectrum=((546.074, 1.0),), face_reflectance=rho)
    F = 4 * rho / (1 - rho) ** 2
    rmax = F / (1 + F)
    for d_nm in (0.0, 30.0, 68.25, 136.5, 200.0, 400.0, 1234.5):
        ours = rmax * float(M._fringe_shape(np.array([d_nm * 1e-6]), sc)[0])
        ref = tmm.coh_tmm("s", [1.5, 1.0, 1.5], [math.inf, d_nm, math.inf], 0.0, 546.074)["R"]
        assert ours == pytest.approx(ref, abs=1e-9)
    assert rmax == pytest.approx(0.148, abs=0.001)  # 14.8 % peak for rho = 0.04 (derived: F / (1 + F))


def _visibility_at_order(scene: M.Scene, m: float) -> float:
    """Fringe visibility over the one fringe centred on order m: first Fourier coefficient over the mean."""
    lam = M.centroid_nm(scene.spectrum) * 1e-6
    t = np.linspace((m - 0.5) * lam / 2, (m + 0.5) * lam / 2, 4000, endpoint=False)
    f = M._fringe_shape(t, scene.with_(contact_gap_nm=0.0, sag="paraxial"))
    delta = 4 * np.pi * t / lam
    return float(2 * abs(np.mean(f * np.exp(1j * delta))) / np.mean(f))


def test_sodium_doublet_beats_near_490_orders_with_contrast_one_third():
    sc = M.Scene(spectrum=M.sodium_doublet())
    orders = np.arange(400, 600, 2.0)
    vis = np.array([_visibility_at_order(sc, m) for m in orders])
    # beat at lambda / delta-lambda / 2 = about 490 orders (derived from the NIST ASD lines); D2 twice as bright as D1 (NIST,
    # HyperPhysics) leaves a visibility of (2 - 1) / (2 + 1) = 1/3 at the beat (derived)
    assert 470 <= orders[np.argmin(vis)] <= 510
    assert vis.min() == pytest.approx(1 / 3, abs=0.01)
    assert _visibility_at_order(sc, 5) > 0.99


def test_led_band_loses_half_its_contrast_at_the_expected_order():
    # For a Gaussian band of FWHM dl, visibility at order m is exp(-(pi m dl / lambda)^2 / (4 ln 2)): the
    # Fourier transform of a Gaussian spectrum (derived); half contrast at m = 2 ln 2 lambda / (pi dl).
    lam, dl = 590.0, 20.0
    sc = M.Scene(spectrum=M.gaussian_band(lam, dl, samples=201))
    m_half = 2 * math.log(2) * lam / (math.pi * dl)
    assert _visibility_at_order(sc, m_half) == pytest.approx(0.5, abs=0.02)
    assert _visibility_at_order(sc, 1.0) > 0.99


def _fit_rings(img: np.ndarray, guess) -> np.ndarray:
    """Own least-squares fit of a + exp(c0 + c1 s) cos(q s + phi), s = (x - x0)^2 + (y - y0)^2, to all pixels."""
    H, W = img.shape
    yy, xx = np.mgrid[5 : H - 5, 5 : W - 5]
    x, y, v = xx.ravel().astype(float), yy.ravel().astype(float), img[5 : H - 5, 5 : W - 5].ravel()

    def res(p):
        a, c0, c1, q, ph, x0, y0 = p
        s = (x - x0) ** 2 + (y - y0) ** 2
        return a + np.exp(c0 + c1 * s * 1e-5) * np.cos(q * s + ph) - v

    q0 = guess[3]
    sol = least_squares(res, guess, x_scale=[0.1, 0.1, 0.1, q0 * 1e-4, 0.1, 0.01, 0.01], xtol=1e-14, ftol=1e-14)
    return sol.x


@pytest.mark.parametrize("blur_px", [0.0, 2.0])
def test_noiseless_image_has_the_scene_centre_and_radius(blur_px):
    # Pixel centres at integers, origin at the top-left pixel (ringgauge's stated convention). Gaussian blur of a
    # pattern cos(q r^2) scales its phase rate to q / (1 + a^2), a = 2 q sigma^2 (derived: the Gaussian
    # convolution of a quadratic phase), sigma^2 = blur^2 + 1/12 with the pixel's own width (box variance 1/12).
    sc = M.Scene(width=320, height=240, pixel_um=6.0, centre_px=(150.3, 131.8), visibility=1.0,
                 vignette_sigma=math.inf, stray=0.0, sag="paraxial", blur_px=blur_px,
                 radius_mm=M.radius_for_rings(320, 240, (150.3, 131.8), 14.0, 6.0, M.HG_E_NM))
    img = M.render_noiseless(sc)
    q = 2 * math.pi / (M.HG_E_NM * 1e-6 * sc.radius_mm / (sc.pixel_um * 1e-3) ** 2)  # rad per px^2
    fit = _fit_rings(img, [0.3, math.log(0.3), 0.0, q * 1.001, math.pi, 150.0, 132.0])
    sig2 = blur_px**2 + 1 / 12
    a2 = (2 * q * sig2) ** 2
    assert fit[5] == pytest.approx(150.3, abs=2e-3) and fit[6] == pytest.approx(131.8, abs=2e-3)
    assert fit[3] / q == pytest.approx(1 / (1 + a2), abs=max(0.1 * a2, 2e-6))


def test_shot_and_read_noise_have_the_stated_variance():
    sc = M.Scene(width=200, height=200, visibility=0.0, vignette_sigma=math.inf, stray=0.0, level=0.5,
                 full_well_e=4000.0, read_noise_e=10.0, bits=16, blur_px=0.0)
    codes = M.render(sc, 11).counts.astype(float)
    gain = sc.full_scale / sc.full_well_e  # codes per electron
    # Poisson variance equals the mean count; read noise adds in quadrature
    expected_var = (0.5 * sc.full_well_e + sc.read_noise_e**2) * gain**2
    assert codes.mean() == pytest.approx(0.5 * sc.full_scale, rel=0.005)
    assert codes.var() == pytest.approx(expected_var, rel=0.05)
