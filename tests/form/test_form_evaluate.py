"""Surface form from generated test-plate images of known form, and from a plain cos² image made here.

Truth values: ``SurfaceForm.power`` is the ρ² coefficient (= ISO 10110-5 A), ``astig`` the difference of the
principal meridians, and ``zonal`` z adds 4z(ρ⁴ − ρ²), whose best-fit-sphere residual is z·(6ρ⁴ − 6ρ² + 1)·(2/3)
with PV z over the disc (derived), i.e. C = B = z for a zonal-only part. Tolerances below are the issue's
accuracy targets (power 0.15, astigmatism 0.2, irregularity 0.1 fringe) tightened where the method does better.
"""

import math
import re

import numpy as np
import pytest

from ringgauge import synth
from ringgauge.bench_setup import default_setup
from ringgauge.errors import AnalysisError, InputError
from ringgauge.form.evaluate import _disc_grid, evaluate_form, form_terms
from ringgauge.imaging import frame_from_array
from ringgauge.report.form_text import format_form

CAM = synth.Camera(width=224, height=224, pixel_um=100.0)
APERTURE_MM = 17.0


def _setup(**kw):
    return default_setup(100.0, "mercury-e", pixel_size_u_um=0.1, **kw)


def _image(form, *, rng=0, centre=None, dust=3, lighting=synth.Lighting()):
    s = synth.test_plate_fringes(
        form, camera=CAM, aperture_diameter_mm=APERTURE_MM, aperture_centre_px=centre, rng=rng,
        dust=synth.Dust(count=dust, radius_px=(1.0, 2.5)), lighting=lighting,
    )
    return frame_from_array(s.image), s


def test_form_terms_of_known_shapes():
    # analytic values over the unit disc (derived): pure ρ² -> A = p, B = 0; astigmatism a/2·(u² − v²) -> astig a,
    # B = a; 4z(ρ⁴ − ρ²) -> A = 0, B = C = z
    _, _, u, v = _disc_grid(1.0, 201)
    r2 = u * u + v * v
    t = form_terms(2.5 * r2 + 0.3 * u, u, v)
    assert t["power_fringes"] == pytest.approx(2.5) and t["irregularity_fringes"] == pytest.approx(0, abs=1e-9)
    t = form_terms(0.5 * 0.8 * (u * u - v * v), u, v)
    assert t["astigmatism_fringes"] == pytest.approx(0.8) and t["irregularity_fringes"] == pytest.approx(0.8, rel=1e-3)
    assert t["astigmatism_axis_deg"] == pytest.approx(0.0, abs=1e-6) or t["astigmatism_axis_deg"] == pytest.approx(180)
    t = form_terms(4 * 0.3 * (r2 * r2 - r2), u, v)
    assert t["power_fringes"] == pytest.approx(0, abs=1e-3)
    assert t["rot_sym_irregularity_fringes"] == pytest.approx(0.3, rel=2e-3)
    assert t["rms_asymmetric_fringes"] < 1e-4  # zero up to the square-grid sampling of the disc


CASES = {
    # name: (form, centre offset px, power tol, astig tol, irregularity tol)
    "astigmatic": (synth.SurfaceForm(power=3.0, astig=0.8, astig_axis_deg=35, piston=0.3), None, 0.06, 0.05, 0.05),
    "zonal": (synth.SurfaceForm(power=2.0, zonal=0.3, piston=0.4), None, 0.08, 0.05, 0.06),
    "off-centre rings": (synth.SurfaceForm(power=4.0, astig=0.3, tilt_x=2.5, tilt_y=-1.5, piston=1.6), None, 0.08,
                         0.05, 0.05),
    "off-centre part": (synth.SurfaceForm(power=1.5, astig=0.4, astig_axis_deg=100, piston=0.2), (100.0, 125.0),
                        0.06, 0.05, 0.05),
    "half fringe": (synth.SurfaceForm(power=0.5, piston=0.15), None, 0.15, 0.1, 0.1),
}


@pytest.fixture(scope="module")
def results():
    return {}


def _evaluate(name, results):
    if name not in results:
        form, centre, *_ = CASES[name]
        frame, s = _image(form, centre=centre, rng=list(CASES).index(name))  # fixed seeds
        results[name] = (evaluate_form([frame], _setup()), s)
    return results[name]


@pytest.mark.slow
@pytest.mark.parametrize("name", list(CASES))
def test_generated_images_of_known_form(name, results):
    form, _, tp, ta, ti = CASES[name]
    r, s = _evaluate(name, results)
    _, _, u, v = _disc_grid(1.0, 201)
    truth = form_terms(form.gap_fringes(u, v), u, v)
    t = r.terms
    assert r.sign.sign == 0  # one frame: the sign is unknown and power is a magnitude
    weak = any("weak fit" in w for w in r.warnings)
    if weak:
        # the rule for sub-1.5-fringe parts under uneven light: either within the tolerance, or a
        # "weak fit" warning with an expanded uncertainty that covers the error
        assert abs(form.power) < 1.6
        for key, true in (("power_fringes", abs(form.power)), ("irregularity_fringes", truth["irregularity_fringes"])):
            assert abs(t[key] - true) <= max(0.05, 2 * r.terms_u[key]), key
    else:
        assert t["power_fringes"] == pytest.approx(abs(form.power), abs=tp)
        assert t["irregularity_fringes"] == pytest.approx(truth["irregularity_fringes"], abs=ti)
        assert t["rot_sym_irregularity_fringes"] == pytest.approx(truth["rot_sym_irregularity_fringes"], abs=ti)
    assert t["astigmatism_fringes"] == pytest.approx(form.astig, abs=ta)
    if form.astig >= 0.3:
        d = (r.astigmatism_axis_deg - form.astig_axis_deg + 90) % 180 - 90
        assert abs(d) < 4.0
    # the aperture: generated centre and diameter
    ax, ay = s.truth["aperture_centre_px"]
    assert r.aperture.centre_px == pytest.approx((ax, ay), abs=1.0)
    assert r.aperture_diameter.value == pytest.approx(APERTURE_MM, rel=0.01) and r.aperture_diameter.unit == "mm"
    # units: one fringe = λ/2 of surface height (ISO 10110-5:2015, fringe spacing in reflection — from memory)
    d = r.to_dict()
    assert d["power_nm"] == pytest.approx(d["power_fringes"] * 546.074 / 2)
    assert d["power_u_fringes"] > 0 and d["power_u_nm"] > 0


def test_plain_cosine_image_made_here():
    """Robustness: not the project's generator — I = a(x, y)·(1 + 0.9 cos 2πW) inside a disc, with noise."""
    n = 180
    yy, xx = np.mgrid[0:n, 0:n].astype(float)
    cx, cy, R = 92.0, 86.0, 70.0
    u, v = (xx - cx) / R, (yy - cy) / R
    inside = u * u + v * v <= 1
    W = 0.2 + 2.2 * (u * u + v * v) + 0.5 * 0.6 * (u * u - v * v) + 0.7 * v
    illum = 0.45 * (1 - 0.15 * (u * u + v * v)) * (1 + 0.1 * u)
    img = np.where(inside, illum * (1 + 0.9 * np.cos(2 * np.pi * W)), 0.02)
    img = img + np.random.default_rng(5).normal(0, 0.01, img.shape)
    frame = frame_from_array(np.clip(img, 0, 1).astype(np.float32))
    r = evaluate_form([frame], default_setup(100.0, "hene", pixel_size_u_um=0.1))
    assert r.aperture.centre_px == pytest.approx((cx, cy), abs=0.7)
    assert r.aperture.radius_px == pytest.approx(R, abs=0.7)
    assert r.terms["power_fringes"] == pytest.approx(2.2, abs=0.06)
    assert r.terms["astigmatism_fringes"] == pytest.approx(0.6, abs=0.05)
    assert r.terms["irregularity_fringes"] == pytest.approx(0.6, abs=0.06)
    assert r.fringe_nm == pytest.approx(632.816 / 2)


@pytest.mark.parametrize(
    "value, U, rule, expected",
    [
        (1.50, 0.10, "simple", "pass"),
        (1.95, 0.10, "simple", "conditional pass"),
        (2.05, 0.10, "simple", "conditional fail"),
        (2.30, 0.10, "simple", "fail"),
        (1.85, 0.10, "guard-banded", "pass"),
        (1.95, 0.10, "guard-banded", "conditional pass"),
        (2.05, 0.10, "guard-banded", "conditional fail"),
        (2.15, 0.10, "guard-banded", "fail"),
    ],
)
def test_decision_rules(value, U, rule, expected):
    from ringgauge.form.evaluate import _verdict
    from ringgauge.form.sign import UNKNOWN
    from ringgauge.form.tolerance import parse_tolerance

    tol = parse_tolerance("3/2")
    v = _verdict({"power_fringes": value}, {"power_fringes": U / 2}, tol, tol.wavelength_nm, rule, UNKNOWN)
    assert v["overall"] == expected and v["terms"][0]["verdict"] == expected
    assert v["decision_rule"].startswith({"simple": "simple acceptance", "guard-banded": "guard-banded"}[rule])
    assert "power_note" in v  # compared by magnitude while the sign is unknown
    # a tolerance at another wavelength compares in its own fringes: 1 fringe at 632.8 nm = 1.1588 at 546.07
    tol2 = parse_tolerance("3/1.1; λ = 632.8")
    v2 = _verdict({"power_fringes": 1.0}, {"power_fringes": 0.001}, tol2, 546.07, "simple", UNKNOWN)
    assert v2["terms"][0]["value_fringes"] == pytest.approx(546.07 / 632.8) and v2["overall"] == "pass"


@pytest.mark.slow
def test_tolerance_verdict_and_report():
    frame, _ = _image(synth.SurfaceForm(power=1.5, astig=0.2, piston=0.3))
    setup = _setup(tolerance="3/2(0.5)", test_plate={"id": "TP-0412", "radius_mm": 51.68, "radius_u_mm": 0.002,
                                                      "kind": "concave"})
    r = evaluate_form([frame], setup)
    d = r.to_dict()
    v = d["verdict"]
    assert v["overall"] == "pass" and {t["term"] for t in v["terms"]} == {"power", "irregularity"}
    assert "simple acceptance" in v["decision_rule"]
    rad = d["radius"]
    assert rad["surface_radius_mm"] is None and len(rad["surface_radius_candidates_mm"]) == 2  # sign unknown
    assert rad["delta_r_axial_mm"] == pytest.approx(
        1.5 * 546.074e-6 * math.sqrt(1 - (d["test_diameter_mm"] / 2 / 51.68) ** 2)
        / (2 * (1 - math.sqrt(1 - (d["test_diameter_mm"] / 2 / 51.68) ** 2))), rel=0.05)
    text = format_form(r)
    for needle in ("power (sagitta deviation, A)", "PASS", "decision rule", "sign: unknown", "paraxial shop formula"):
        assert needle in text
    # the printed numbers are the result's, to the digits printed (half a unit in the last digit)
    num = r"(-?[0-9]+(?:[.][0-9]+)?)"

    def same(printed, value):
        dec = len(printed.split(".")[1]) if "." in printed else 0
        return abs(float(printed) - value) <= 0.5 * 10.0**-dec + 1e-12

    k = d["k"]
    for key, label in (("power", "power (sagitta deviation, A)"), ("irregularity", "irregularity (B)")):
        m = re.search(re.escape(label) + rf"\s+{num} ± {num} fr\s+{num} ± {num} nm", text)
        assert m, label
        assert same(m[1], d[f"{key}_fringes"]) and same(m[2], k * d[f"{key}_u_fringes"]), m[0]
        assert same(m[3], d[f"{key}_nm"]) and same(m[4], k * d[f"{key}_u_nm"]), m[0]
    for t in v["terms"]:
        m = re.search(rf"measured {num} fr \(U {num}\) vs limit {num} fr: (\w[\w ]*)", text.split("Tolerance")[1]
                      .split(t["term"], 1)[1])
        assert m and same(m[1], t["value_fringes"]) and same(m[2], t["U_fringes"]), t["term"]
        assert float(m[3]) == t["limit_fringes"] and m[4] == t["verdict"]
    # tight limits: guard-banded makes a value near its limit conditional, simple acceptance does not hide it
    p = r.terms["power_fringes"]
    tight = evaluate_form([frame], _setup(tolerance=f"3/{p + 0.01:.3f}", decision_rule="guard-banded"))
    assert tight.verdict.overall == "conditional pass"
    fail = evaluate_form([frame], _setup(tolerance=f"3/{p - 0.3:.3f}"))
    assert fail.verdict.overall == "fail"


@pytest.mark.slow
def test_test_diameter_and_bad_input():
    frame, _ = _image(synth.SurfaceForm(power=2.0, piston=0.3))
    r = evaluate_form([frame], _setup(test_diameter_mm=10.0))
    assert r.test_diameter_mm == 10.0
    # power scales with the square of the diameter for a pure sphere: (10/17)^2 * 2 (derived)
    assert r.terms["power_fringes"] == pytest.approx(2.0 * (10 / APERTURE_MM) ** 2, abs=0.05)
    r = evaluate_form([frame], _setup(test_diameter_mm=30.0))
    assert any("larger than the clear aperture" in w for w in r.warnings)



def test_images_without_a_part_edge_are_refused():
    ramp = frame_from_array(np.zeros((40, 50), dtype=np.uint8) + np.arange(50, dtype=np.uint8)[None, :])
    yy, xx = np.mgrid[0:200, 0:200]
    full = frame_from_array((0.5 + 0.4 * np.cos(((xx - 100) ** 2 + (yy - 90) ** 2) / 300.0)).astype(np.float32))
    for frame in (ramp, full):
        with pytest.raises(AnalysisError, match="edge was not found"):
            evaluate_form([frame], _setup())
    with pytest.raises(InputError):
        evaluate_form([], _setup())


@pytest.mark.slow
def test_progress_reports_fraction_and_message():
    frame, _ = _image(synth.SurfaceForm(power=2.0, piston=0.3))
    seen = []
    evaluate_form([frame], _setup(), progress=lambda f, m: seen.append((f, m)))
    assert seen and all(0.0 <= f <= 1.0 and isinstance(m, str) and m for f, m in seen)
    assert [f for f, _ in seen] == sorted(f for f, _ in seen)
