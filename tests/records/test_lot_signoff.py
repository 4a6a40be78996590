"""Lot sign-off: radius verdicts per part, the lot sheet, and the lot report read back from the PDF.

Verdict zones (ILAC-G8:09/2019 §4.2.3, figure 5, from memory of its numbering) for R 1000 mm ± 0.5 % (TL 995 and
1005 mm) measured with U = 2.0 mm (k = 2): 1000.0 pass; 1003.5 conditional pass (inside TL, U interval straddles
it); 1006.0 conditional fail; 1010.0 fail. Under guarded acceptance w = U (§4.2.2, figure 4) only the values
inside the acceptance limits 997 … 1003 mm are accepted; under simple acceptance (§4.2.1, figure 3) everything
inside 995 … 1005 mm is. The radii are invented values; the zones follow from the arithmetic above.
"""

from __future__ import annotations

import copy
import hashlib
import json
import re
import shutil
import unicodedata
from pathlib import Path

import pytest
from records_sample import _BASE

from ringgauge.cli import main as cli
from ringgauge.conformity import combined_verdict, judge_radius, parse_radius_tolerance
from ringgauge.records import RecordFilter, RecordMeta, open_store
from ringgauge.records.lot import lot_tables, natural_key, summarise_lot

ROOT = Path(__file__).resolve().parents[2]
LOT = ROOT / "sample_images" / "lot-FH2604"
LONG_NOTE = ("the image is all black (no fringe contrast); check the lamp, exposure and focus, then take the "
             "picture again with the part centred on the flat")

# serial, radius (mm), expected zone, accepted under guarded acceptance (w = U)
PARTS = [
    ("P-10", 1000.0, "pass", True),
    ("P-2", 1003.5, "conditional pass", False),
    ("P-1", 1006.0, "conditional fail", False),
    ("P-9", 1010.0, "fail", False),
    ("P-3", 998.25, "pass", True),
]


def _result(tag: str, radius: float, rule: str) -> dict:
    d = copy.deepcopy(_BASE)
    d["image"]["sha256"] = hashlib.sha256(tag.encode()).hexdigest()
    d["image"]["path"] = f"/bench/{tag}.png"
    d["setup"].update(radius_tolerance="1000 ± 0.5 %", decision_rule=rule, tolerance=None, test_plate=None,
                      test_diameter_mm=None)
    d["form"] = None
    d["radius_mm"], d["radius_u_mm"], d["radius_U_mm"] = radius, 1.0, 2.0
    rv = judge_radius(radius, 2.0, parse_radius_tolerance("1000 ± 0.5 %"), rule)
    d["verdict"] = combined_verdict(None, rv, rule)
    return d


@pytest.fixture
def lot_store(tmp_path):
    s = open_store(tmp_path / "r.sqlite")
    for serial, radius, _zone, _acc in PARTS:
        s.add(RecordMeta(lot="FH-T", serial=serial, part="PCX-1000", operator="A. Tester"),
              _result(serial, radius, "guard-banded"))
    s.add(RecordMeta(lot="FH-T", serial="P-11"), None, image_path="/bench/P-11.png", image_sha256="ab" * 32,
          failure=LONG_NOTE)
    yield s
    s.close()


def test_natural_serial_order():
    assert sorted(["P-10", "P-2", "P-1", "p-3"], key=natural_key) == ["P-1", "P-2", "p-3", "P-10"]


def test_lot_counts_rule_and_per_part_verdicts(lot_store):
    records = lot_store.find(RecordFilter(lot="FH-T"))
    s = summarise_lot(records, "FH-T")
    # ILAC-G8:09/2019 figure 5 zones, counted per part
    assert s.radius_counts == {"pass": 2, "conditional pass": 1, "conditional fail": 1, "fail": 1,
                               "analysis failed": 1}
    assert s.accepted == 2  # figure 4: guarded acceptance accepts only inside 997 … 1003 mm
    assert s.decision_rule == "guard-banded"
    assert s.radius_tolerance == "R 1000 ± 5 mm (995 … 1005 mm)"
    # the capability uses the tolerance the parts were judged against (no limits given here)
    (cap,) = s.capabilities
    assert (cap.lsl, cap.usl) == (995.0, 1005.0)
    assert s.charts[0].lsl == 995.0 and s.charts[0].usl == 1005.0
    t = lot_tables(records, s)
    assert [r["serial"] for r in t["rows"]] == ["P-1", "P-2", "P-3", "P-9", "P-10", "P-11"]
    by = {r["serial"]: r for r in t["rows"]}
    for serial, _r, zone, acc in PARTS:
        assert by[serial]["radius_verdict"] == zone and by[serial]["accepted"] is acc
    assert by["P-11"]["note"] == LONG_NOTE  # whole, never cut
    # one number of digits for the radius everywhere: U = 2.0 mm → one decimal
    assert t["decimals"]["radius"] == 1
    assert by["P-3"]["radius"] == "998.2 ± 2.0" or by["P-3"]["radius"] == "998.3 ± 2.0"
    for text in [r["radius"] for r in t["rows"] if r["radius"] != "—"] + [t["radius"]["mean"]]:
        assert re.fullmatch(r"\d+\.\d( ± \d+\.\d)?( mm)?", text), text


def test_simple_acceptance_accepts_inside_the_limits(tmp_path):
    # ILAC-G8:09/2019 §4.2.1 (figure 3): 1003.5 mm is accepted under simple acceptance, 1006.0 mm is not
    s = open_store(tmp_path / "r.sqlite")
    for serial, radius, _zone, _acc in PARTS:
        s.add(RecordMeta(lot="S", serial=serial), _result(serial, radius, "simple"))
    summ = summarise_lot(s.find(), "S")
    assert summ.accepted == 3 and summ.decision_rule == "simple"
    s.close()


def _pdf_text(path) -> str:
    from pypdf import PdfReader

    text = "\n".join(p.extract_text() or "" for p in PdfReader(str(path)).pages)
    return re.sub(r"[ \t]+", " ", unicodedata.normalize("NFKC", text))


def test_lot_report_read_back(lot_store, tmp_path):
    from ringgauge.certificates import issue_lot_report

    doc, path = issue_lot_report(lot_store, "FH-T", tmp_path / "lot.pdf", {"name": "Test Shop (invented)"})
    text = _pdf_text(path)
    flat = " ".join(text.split())
    assert unicodedata.normalize("NFKC", "R 1000 ± 5 mm (995 … 1005 mm)") in flat
    assert "guarded acceptance (w = U)" in flat and "ILAC-G8:09/2019" in flat
    assert "2.5 %" in flat  # the risk the rule implies
    # each part's line: serial, then its radius verdict and R ± U with the lot's one decimal
    parts = text[text.index("Parts (by serial)"):]
    for serial, radius, zone, acc in PARTS:
        i = parts.index(f"\n{serial}\n")
        row = " ".join(parts[i:i + 160].split())
        assert f"{zone} ({'accepted' if acc else 'not accepted'})" in row, (serial, row)
        assert re.search(rf"{int(radius)}\.\d ± 2\.0", row), (serial, row)
    # serial order in print: P-1 before P-2 before P-10
    assert parts.index("\nP-1\n") < parts.index("\nP-2\n") < parts.index("\nP-9\n") < parts.index("\nP-10\n")
    # the long failure note is printed whole (wrapped, not cut)
    assert " ".join(LONG_NOTE.split()) in flat
    # the specification shows the same digits as the parts table; Cp/Cpk with the small-sample caution
    assert "995.0 to 1005.0 mm" in flat
    assert "rough estimates" in flat
    assert "Prepared by" in flat and "Approved by" in flat and "Signature" in flat and "Date" in flat
    assert "guarded acceptance (w = U): 2 of 6 parts" in flat
    # the counts table
    assert re.search(r"conditional fail 1", flat)


def _copy_lot(tmp_path, n=3) -> Path:
    folder = tmp_path / "lot"
    folder.mkdir()
    for p in sorted(LOT.glob("FH2604-0*.png"))[:n]:
        shutil.copy(p, folder / p.name)
    return folder


def test_batch_reads_the_lot_sheet_and_options_override_it(tmp_path, capsys):
    folder = _copy_lot(tmp_path, 2)
    sheet = json.loads((LOT / "lot.json").read_text(encoding="utf-8"))
    assert sheet["decision_rule"] == "guard-banded"
    (folder / "lot.json").write_text(json.dumps(sheet, ensure_ascii=False), encoding="utf-8")
    db = tmp_path / "r.sqlite"
    rc = cli(["batch", str(folder), "--db", str(db), "--workers", "1", "--quiet", "--decision-rule", "simple",
              "--operator", "B. Override", "--chart", str(tmp_path / "c.png")])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert "lot sheet" in err
    assert "simple acceptance (w = 0)" in out and "R 1000 ± 5 mm" in out
    s = open_store(db)
    recs = s.find(RecordFilter(lot="FH-2604"))
    assert len(recs) == 2
    for r in recs:
        assert r.meta.operator == "B. Override"  # the command line wins
        assert r.meta.customer == sheet["customer"] and r.meta.drawing == sheet["drawing"]  # the sheet fills in
        assert r.setup["decision_rule"] == "simple"
        assert r.setup["radius_tolerance"] == "1000 ± 0.5 %"
        assert r.result["verdict"]["radius"]["rule"] == "simple"
        assert r.result["verdict"]["radius"]["verdict"] in ("pass", "conditional pass", "conditional fail", "fail")
    s.close()


def test_command_line_radius_limits_override_the_sheets_tolerance(tmp_path, capsys):
    folder = _copy_lot(tmp_path, 1)
    sheet = json.loads((LOT / "lot.json").read_text(encoding="utf-8"))
    p = tmp_path / "elsewhere.json"
    p.write_text(json.dumps(sheet, ensure_ascii=False), encoding="utf-8")
    db = tmp_path / "r.sqlite"
    rc = cli(["batch", str(folder), "--lot-sheet", str(p), "--db", str(db), "--workers", "1", "--quiet",
              "--radius-limits", "990", "1010", "--lot", "OTHER", "--chart", str(tmp_path / "c.png")])
    out, err = capsys.readouterr()
    assert rc == 0, err
    s = open_store(db)
    (r,) = s.find(RecordFilter(lot="OTHER"))
    assert r.result["verdict"]["radius"]["lower"] == 990.0 and r.result["verdict"]["radius"]["upper"] == 1010.0
    assert r.setup["decision_rule"] == "guard-banded"  # not given on the command line: from the sheet
    s.close()


@pytest.mark.parametrize("sheet,says", [
    ({"lot": "X", "radius_tol": "1000 ± 5"}, "unknown field 'radius_tol' (did you mean 'radius_tolerance'?)"),
    ({"lot": "X", "pixel_size_um": "eight"}, "field 'pixel_size_um' must be a number"),
    ({"lot": "X", "decision_rule": "lenient"}, "must be one of simple, guard-banded"),
    ({"lot": "X", "radius_tolerance": "1000 ±"}, "expected the tolerance value after '±'"),
    ({"lot": "X", "radius_limits_mm": [1005, 995]}, "must be below"),
    ({"lot": "X", "radius_tolerance": "1000 ± 5", "radius_limits_mm": [995, 1005]}, "not both"),
    (["lot", "X"], "expected a JSON object"),
    ("{not json", "not valid JSON"),
])
def test_bad_lot_sheet_is_one_pointed_line(tmp_path, capsys, sheet, says):
    folder = _copy_lot(tmp_path, 1)
    text = sheet if isinstance(sheet, str) else json.dumps(sheet)
    (folder / "lot.json").write_text(text, encoding="utf-8")
    db = tmp_path / "r.sqlite"
    rc = cli(["batch", str(folder), "--db", str(db), "--workers", "1", "--quiet", "--source", "sodium-d",
              "--pixel-size", "8"])
    out, err = capsys.readouterr()
    assert rc == 2
    lines = [ln for ln in err.splitlines() if ln.startswith("ringgauge:")]
    assert len(lines) == 1 and says in lines[0] and "lot.json" in lines[0], err
    assert "Traceback" not in err
    assert not db.exists() or not open_store(db).find(RecordFilter(lot="X"))  # nothing recorded


def test_analyze_json_carries_the_radius_verdict(tmp_path, capsys):
    rc = cli(["analyze", str(LOT / "FH2604-04.png"), "--source", "sodium-d", "--pixel-size", "8",
              "--pixel-size-u", "0.004", "--radius-tolerance", "995..1005", "--decision-rule", "guard-banded",
              "--json", "--quiet"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    d = json.loads(out)
    rv = d["verdict"]["radius"]
    assert rv["lower"] == 995.0 and rv["upper"] == 1005.0 and rv["unit"] == "mm"
    assert rv["rule"] == "guard-banded" and rv["guard_band"] == pytest.approx(d["radius_U_mm"])
    # the zone from the measured value and its U, by plain arithmetic (ILAC-G8:09/2019 figure 5)
    R, U = d["radius_mm"], d["radius_U_mm"]
    zone = ("pass" if 995 <= R - U and R + U <= 1005 else
            "fail" if R - U > 1005 or R + U < 995 else
            "conditional pass" if 995 <= R <= 1005 else "conditional fail")
    assert rv["verdict"] == zone == d["verdict"]["overall"]
    assert rv["accepted"] is (995 + U <= R <= 1005 - U)


def test_bad_radius_tolerance_option(capsys):
    rc = cli(["analyze", str(LOT / "FH2604-01.png"), "--source", "sodium-d", "--pixel-size", "8",
              "--radius-tolerance", "1000 ± 5", "--radius-limits", "995", "1005"])
    err = capsys.readouterr().err
    assert rc == 2 and "not both" in err and "Traceback" not in err


def test_lot_sheet_given_but_missing_or_too_large(tmp_path, capsys):
    folder = _copy_lot(tmp_path, 1)
    rc = cli(["batch", str(folder), "--lot-sheet", str(tmp_path / "nope.json"), "--db", str(tmp_path / "r.sqlite")])
    err = capsys.readouterr().err
    assert rc == 2 and "lot sheet" in err and "not found" in err and "Traceback" not in err
    big = tmp_path / "big.json"
    big.write_text("{" + " " * 300_000 + "}", encoding="utf-8")
    rc = cli(["batch", str(folder), "--lot-sheet", str(big), "--db", str(tmp_path / "r.sqlite")])
    err = capsys.readouterr().err
    assert rc == 2 and "too large" in err


def test_radius_only_lot_report_verifies_against_its_store(lot_store, tmp_path):
    """A lot of lenses on a flat prints no power column; verification must read the cells that were printed
    (it once expected a power cell in every parts row and failed every such lot report)."""
    from ringgauge.certificates import issue_lot_report
    from ringgauge.report.verify import verify_pdf

    _doc, path = issue_lot_report(lot_store, "FH-T", tmp_path / "lot.pdf", {"name": "Test Shop (invented)"})
    v = verify_pdf(path, lot_store)
    assert v.ok, [w for ok, w in v.checks if not ok]
    assert "printed cells" not in v.failed()


def test_certificate_verify_refuses_a_named_pipe_without_hanging(tmp_path, capsys):
    import os

    fifo = tmp_path / "doc.pdf"
    os.mkfifo(fifo)
    assert cli(["certificate", "verify", str(fifo)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not a regular file" in err[0]
