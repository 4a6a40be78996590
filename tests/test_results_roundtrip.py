"""A stored result reads back as the same typed result: ``AnalysisResult.from_dict(r.to_dict()) == r`` on the
sample images (radius, form against a test plate with and without the sign, verdicts), through JSON text as the
records store keeps it; and the schema version is written and checked."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import pytest

from ringgauge.bench_setup import BenchSetup
from ringgauge.errors import InputError
from ringgauge.imaging import load_frame
from ringgauge.pipeline import analyse
from ringgauge.result import SCHEMA_VERSION, AnalysisResult
from ringgauge.sources import get_source

SAMPLES = Path(__file__).resolve().parent.parent / "sample_images"
LOT = SAMPLES / "lot-FH2604"
PLATE = sorted((SAMPLES / "testplate").glob("*.png"))


def lens_setup(**kw) -> BenchSetup:
    return BenchSetup(source=get_source("sodium-d"), pixel_size_um=8.0, pixel_size_u_um=0.004, **kw)


def plate_setup(**kw) -> BenchSetup:
    plate = {"id": "TP-demo", "radius_mm": 51.68, "radius_u_mm": 0.002, "kind": "convex", "calibrated": None,
             "due": None}
    return BenchSetup(source=get_source("mercury-e"), pixel_size_um=25.0, pixel_size_u_um=0.02,
                      test_diameter_mm=18.0, tolerance="3/2(0.5)", test_plate=plate, **kw)


def through_json(r: AnalysisResult) -> AnalysisResult:
    return AnalysisResult.from_dict(json.loads(json.dumps(r.to_dict())))


@pytest.fixture(scope="module")
def lens():
    return analyse(load_frame(LOT / "FH2604-01.png"),
                   lens_setup(radius_tolerance="1000 ± 0.5 %", decision_rule="guard-banded", operator="A. Tester",
                              inspection={"serial": "FH2604-01"}, centre_px=(512.0, 384.0)))


@pytest.fixture(scope="module")
def plate_pair():
    return analyse([load_frame(p) for p in PLATE], plate_setup(radius_tolerance="51.70 ± 0.01"))


@pytest.fixture(scope="module")
def plate_single():
    return analyse(load_frame(PLATE[0]), plate_setup())


def test_radius_result_round_trip(lens):
    back = through_json(lens)
    assert back == lens
    assert back.radius.unit == "mm" and back.radius.U == pytest.approx(lens.radius_U_mm)
    assert back.verdict.radius is not None and back.verdict.radius.tolerance.upper == pytest.approx(1005.0)
    assert back.setup.operator == "A. Tester" and back.setup.centre_px == (512.0, 384.0)
    assert back.fullfield.sectors == lens.fullfield.sectors and back.fit.rings == lens.fit.rings


def test_form_pair_round_trip(plate_pair):
    back = through_json(plate_pair)
    assert back == plate_pair
    assert back.form.sign.sign == 1 and back.form.radius.surface_radius.unit == "mm"
    assert back.form.term("power").fringes.unit == "fringes" and back.form.term("power").nm.unit == "nm"
    assert back.form.height_map == plate_pair.form.height_map and back.form.verdict == plate_pair.form.verdict


def test_form_single_frame_round_trip(plate_single):
    # one frame: the sign is unknown and the surface radius is two candidates
    back = through_json(plate_single)
    assert back == plate_single
    assert back.form.sign.sign == 0 and back.form.radius.surface_radius is None
    assert back.form.radius.surface_radius_candidates_mm is not None


def test_round_trip_notices_a_change(lens, plate_pair):
    # equality is on every stored field: a changed number or text reads back unequal
    d = lens.to_dict()
    d["fringes"]["rings"][3]["radius_mm"] += 1e-9
    assert AnalysisResult.from_dict(d) != lens
    d = plate_pair.to_dict()
    d["form"]["power_u_nm"] *= 1.0001
    assert AnalysisResult.from_dict(d) != plate_pair
    assert replace(lens, warnings=("x",)) != through_json(lens)


def test_schema_version_written_and_checked(lens):
    d = lens.to_dict()
    assert d["schema_version"] == SCHEMA_VERSION
    old = {k: v for k, v in d.items() if k != "schema_version"}  # stored before the version was written
    assert AnalysisResult.from_dict(old) == lens
    with pytest.raises(InputError, match="newer ringgauge"):
        AnalysisResult.from_dict({**d, "schema_version": SCHEMA_VERSION + 1})
    with pytest.raises(InputError, match="not a ringgauge result"):
        AnalysisResult.from_dict({"radius_mm": 3.0})
