"""Bad numbers, bad names and ordinary mistakes: one line, a documented exit status, nothing written."""

from __future__ import annotations

import json
import math
import shutil
import sqlite3
from pathlib import Path

import pytest

from ringgauge import options, settings
from ringgauge.commands import _options as cli_options
from ringgauge.bench_setup import BenchSetup
from ringgauge.cli import main
from ringgauge.errors import InputError, RinggaugeError
from ringgauge.sources import custom_source, get_source

REPO = Path(__file__).resolve().parents[1]
LOT = REPO / "sample_images" / "lot-FH2604"
IMG = str(LOT / "FH2604-01.png")


def run(capsys, *argv) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


# ----------------------------------------------------------------------------------------- numeric options


@pytest.mark.parametrize("extra, option, shown", [
    (["--source", "sodium-d", "--pixel-size-u", "nan"], "--pixel-size-u", "'nan' is not a finite number"),
    (["--source", "sodium-d", "--medium-index-u", "inf"], "--medium-index-u", "'inf' is not a finite number"),
    (["--wavelength", "589", "--wavelength-u", "nan"], "--wavelength-u", "'nan' is not a finite number"),
    (["--wavelength", "589", "--bandwidth", "nan"], "--bandwidth", "'nan' is not a finite number"),
    (["--wavelength", "589", "--wavelength-u", "1e308"], "--wavelength-u", "must be between 0 and 50 nm, got 1e308"),
    (["--source", "sodium-d", "--pixel-size-u", "-0.1"], "--pixel-size-u", "must be between 0 and 1000 µm, got -0.1"),
    (["--source", "sodium-d", "--medium-index", "NaN"], "--medium-index", "'NaN' is not a finite number"),
    (["--source", "sodium-d", "--radius-limits", "nan", "nan"], "--radius-limits", "'nan' is not a finite number"),
    (["--source", "sodium-d", "--radius-limits", "1", "1e400"], "--radius-limits", "'1e400' is not a finite number"),
    (["--source", "sodium-d", "--pixel-size-y", "0"], "--pixel-size-y", "must be a positive number up to 10000 µm"),
])
@pytest.mark.parametrize("mode", [[], ["--json"]])
def test_analyze_refuses_non_finite_and_out_of_range(capsys, extra, option, shown, mode):
    code, out, err = run(capsys, "analyze", IMG, "--pixel-size", "8", *extra, *mode)
    assert code == 2 and out == ""
    assert err.startswith(f"ringgauge: argument {option}: {shown}") and err.count("\n") == 1


@pytest.mark.parametrize("extra, option", [
    (["--pixel-size-u", "nan"], "--pixel-size-u"),
    (["--radius-limits", "nan", "nan"], "--radius-limits"),
    (["--temperature", "inf"], "--temperature"),
])
def test_batch_refuses_before_any_image_is_analysed(capsys, tmp_path, extra, option):
    db = tmp_path / "r.sqlite"
    code, out, err = run(capsys, "batch", str(LOT), "--db", str(db), *extra)
    assert code == 2 and err.startswith(f"ringgauge: argument {option}: ") and err.count("\n") == 1
    assert not db.exists()


@pytest.mark.parametrize("argv", [
    ["simulate", "--width", "1000000000"], ["simulate", "--blur", "nan"], ["simulate", "--radius", "inf"],
    ["bench", "add", "B", "--pixel-size", "nan"], ["bench", "add", "B", "--pixel-size", "1", "--pixel-size-u", "inf"],
    ["plates", "add", "TP-1", "--radius", "nan", "--radius-u", "0", "--kind", "convex", "--calibrated",
     "2026-01-01"],
    ["calibrate", IMG, "--grating-pitch", "inf"], ["certificate", "--radius-limits", "1", "nan"],
    ["records", "list", "--limit", "x"],
])
def test_every_command_validates_its_numbers(capsys, argv):
    code, out, err = run(capsys, *argv)
    assert code == 2 and err.startswith("ringgauge: argument --") and err.count("\n") == 1


def test_option_types_directly():
    parse = cli_options.number("--x", lo=0, hi=10)
    assert parse("2.5") == 2.5 and parse(" 10 ") == 10.0
    for bad in ("nan", "inf", "-inf", "1e400", "", "0x10", "-1", "10.0001"):
        with pytest.raises(Exception):
            parse(bad)
    n = cli_options.integer("--n", lo=1, hi=5)
    assert n("3") == 3
    for bad in ("0", "6", "1.5", "nan", "1e3"):
        with pytest.raises(Exception):
            n(bad)
    with pytest.raises(InputError, match=r"^--medium-index must be a finite number, got 'nan'$"):
        options.check_number("nan", "--medium-index", lo=1, hi=2.5)
    with pytest.raises(InputError, match=r"^bandwidth must be between 0 and 500 nm, got 501$"):
        options.check_number(501, "bandwidth", lo=0, hi=500, unit="nm")


def test_bench_setup_refuses_nan_however_it_arrives():
    src = get_source("sodium-d")
    for kw, what in [({"pixel_size_u_um": math.nan}, "pixel size uncertainty"),
                     ({"medium_index_u": math.nan}, "medium index uncertainty"),
                     ({"medium_index_u": math.inf}, "medium index uncertainty")]:
        with pytest.raises(InputError, match=what):
            BenchSetup(source=src, pixel_size_um=8.0, **kw)
    with pytest.raises(InputError, match="wavelength uncertainty"):
        BenchSetup(source=custom_source(589.0, math.nan), pixel_size_um=8.0)
    with pytest.raises(InputError, match="bandwidth"):
        BenchSetup(source=custom_source(589.0, 0.1, math.nan), pixel_size_um=8.0)


def test_json_never_holds_nan():
    with pytest.raises(RinggaugeError, match="not finite"):
        settings.dumps_json({"a": [1.0, {"b": math.nan}]}, what="the result")
    text = settings.dumps_json({"a": 1.5})
    assert json.loads(text) == {"a": 1.5}


# ----------------------------------------------------------------------------------------------- names


@pytest.mark.parametrize("name, char", [("L-1\nL-2", "U+000A"), ("L\r1", "U+000D"), ("\x1b[31mL", "U+001B"),
                                        ("L\u202e1", "U+202E"), ("L\u200b1", "U+200B"), ("L\x001", "U+0000")])
def test_names_with_control_characters_refused(name, char):
    with pytest.raises(InputError) as ei:
        options.check_name(name, "the lot name")
    assert str(ei.value) == (f"the lot name contains a control or invisible character ({char}); use printable "
                             "characters only")


def test_name_length_and_blanks():
    with pytest.raises(InputError, match="is 121 characters long; at most 120"):
        options.check_name("x" * 121, "the serial")
    with pytest.raises(InputError, match="blanks at its start or end"):
        options.check_name(" L1", "the lot name")
    assert options.check_name("Lot 7 – Prüfung µ", "the lot name") == "Lot 7 – Prüfung µ"
    assert options.check_name("line one\nline two\tend", "notes", free_text=True)
    assert options.clean_name("a\nb") == "a\ufffdb"


def test_lot_name_with_newline_refused_before_work(capsys, tmp_path):
    db = tmp_path / "r.sqlite"
    code, out, err = run(capsys, "batch", str(LOT), "--lot", "FH\n2604", "--db", str(db))
    assert code == 2 and err.count("\n") == 1 and "U+000A" in err
    assert not db.exists()


def test_store_refuses_bad_names_whatever_the_caller(tmp_path):
    from ringgauge.records import RecordMeta, open_store

    with open_store(str(tmp_path / "r.sqlite")) as store:
        with pytest.raises(InputError, match="the operator contains a control"):
            store.add(RecordMeta(lot="L1", operator="A\nB"), None, image_path="/x.png", image_sha256="0" * 64,
                      failure="no rings")
        assert store.find() == []


def test_lot_sheet_name_checked(capsys, tmp_path):
    lot = tmp_path / "lot"
    shutil.copytree(LOT, lot)
    sheet = json.loads((lot / "lot.json").read_text())
    sheet["operator"] = "M.\nAshdown"
    (lot / "lot.json").write_text(json.dumps(sheet))
    db = tmp_path / "r.sqlite"
    code, out, err = run(capsys, "batch", str(lot), "--db", str(db))
    assert code == 2 and "the operator contains a control or invisible character (U+000A)" in err
    assert not db.exists() or sqlite3.connect(db).execute("SELECT count(*) FROM inspection").fetchone()[0] == 0


# ------------------------------------------------------------------------------- ordinary mistakes, exit 2


def test_batch_chart_folder_refused_before_the_lot_runs(capsys, tmp_path):
    db = tmp_path / "r.sqlite"
    code, out, err = run(capsys, "batch", str(LOT), "--db", str(db), "--chart", str(tmp_path))
    assert code == 2
    assert err.splitlines()[-1] == (f"ringgauge: --chart {tmp_path} is a folder; give a file name in it, e.g. "
                                    f"{tmp_path / 'out'}")
    assert not db.exists()  # nothing was analysed or recorded


def test_export_to_a_folder(capsys, tmp_path):
    code, out, err = run(capsys, "records", "export", "--db", str(tmp_path / "r.sqlite"), "--out", str(tmp_path))
    assert code == 2 and err == (f"ringgauge: cannot write the export to {tmp_path}: it is a folder; give a file "
                                 f"name, e.g. {tmp_path / 'records.csv'}\n")


def test_analyze_out_to_a_folder_refused_before_analysis(capsys, tmp_path):
    code, out, err = run(capsys, "analyze", IMG, "--source", "sodium-d", "--pixel-size", "8", "--out",
                         str(tmp_path))
    assert code == 2 and out == "" and err.startswith(f"ringgauge: --out {tmp_path} is a folder")


@pytest.mark.parametrize("argv", [["plates", "list"], ["bench", "list"], ["records", "list"],
                                  ["analyze", IMG, "--source", "sodium-d", "--bench", "B1"]])
def test_home_pointing_at_a_file(capsys, tmp_path, monkeypatch, argv):
    f = tmp_path / "not-a-folder"
    f.write_text("x")
    monkeypatch.setenv("RINGGAUGE_HOME", str(f))
    code, out, err = run(capsys, *argv)
    assert code == 2
    assert err == (f"ringgauge: RINGGAUGE_HOME {f} is not a folder; point RINGGAUGE_HOME at a folder (or unset "
                   "it)\n")
