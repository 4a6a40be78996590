"""The command line as a user reads it: option names that agree across commands (old spellings kept working),
report wording without internal names, u and U told apart, records pages with rounded values and local times,
and a cold start of ``--help`` that loads no numerical library."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from ringgauge import cli

SAMPLES = Path(__file__).resolve().parents[1] / "sample_images"


def run(capsys, *argv):
    code = cli.main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


# -- option names ---------------------------------------------------------------------------------------------
def test_bench_notes_and_interval_have_one_name_old_ones_still_work(capsys):
    from ringgauge.calibration import profiles

    assert run(capsys, "bench", "add", "b1", "--pixel-size", "5", "--pixel-size-u", "0.01", "--notes", "from a",
               "--recal-months", "12")[0] == 0
    p = profiles.get("b1")
    assert p.recalibration_days == 365  # 12 months of 365.25/12 days
    # the older spellings: --note on add, --recal-days in days
    assert run(capsys, "bench", "add", "b2", "--pixel-size", "5", "--note", "old", "--recal-days", "90")[0] == 0
    p2 = profiles.get("b2")
    assert p2.recalibration_days == 90
    code, out, _ = run(capsys, "bench", "edit", "b2", "--notes", "new notes")
    assert code == 0 and "notes: new notes" in out
    code, out, _ = run(capsys, "bench", "edit", "b2", "--note", "older spelling")
    assert code == 0 and "notes: older spelling" in out and "3 months (90 days" in out
    code, _, err = run(capsys, "bench", "edit", "b2", "--recal-months", "2", "--recal-days", "60")
    assert code == 2 and "once" in err
    # the help offers only the one name
    with pytest.raises(SystemExit):
        cli.main(["bench", "add", "--help"])
    helptext = capsys.readouterr().out
    assert "--recal-months" in helptext and "--recal-days" not in helptext and "--note " not in helptext


def test_plates_interval_in_months_under_the_shared_name(capsys):
    from ringgauge.form import plates

    assert run(capsys, "plates", "add", "TP-1", "--radius", "51.68", "--radius-u", "0.002", "--kind", "concave",
               "--calibrated", "2026-03-14", "--recal-months", "6", "--notes", "cert 17")[0] == 0
    assert run(capsys, "plates", "add", "TP-2", "--radius", "51.68", "--radius-u", "0.002", "--kind", "concave",
               "--calibrated", "2026-03-14", "--interval", "12", "--note", "old")[0] == 0
    got = {p.id: p for p in plates.load_register()}
    assert (got["TP-1"].interval_months, got["TP-1"].note) == (6, "cert 17")
    assert (got["TP-2"].interval_months, got["TP-2"].note) == (12, "old")
    with pytest.raises(SystemExit):
        cli.main(["plates", "add", "--help"])
    helptext = capsys.readouterr().out
    assert "--recal-months MONTHS" in helptext and "--interval" not in helptext


def test_analyze_accepts_a_flat_test_plate_and_refuses_a_flat_with_a_radius():
    from ringgauge.commands.analyze import setup_from_args

    p = cli.build_parser()
    a = p.parse_args(["analyze", "x.png", "--source", "sodium-d", "--pixel-size", "10", "--test-plate-kind", "flat"])
    setup, _ = setup_from_args(a)
    assert setup.test_plate["kind"] == "flat" and setup.test_plate["radius_mm"] is None
    a = p.parse_args(["analyze", "x.png", "--source", "sodium-d", "--pixel-size", "10", "--test-plate-kind", "flat",
                      "--test-plate-radius", "50"])
    from ringgauge.errors import InputError

    with pytest.raises(InputError, match="flat test plate has no radius"):
        setup_from_args(a)


def test_press_test_alone_asks_for_the_form_against_a_test_plate():
    from ringgauge.commands.analyze import setup_from_args
    from ringgauge.pipeline import wants_form

    a = cli.build_parser().parse_args(["analyze", "x.png", "--source", "sodium-d", "--pixel-size", "10",
                                       "--press-test", "rings-spread"])
    setup, _ = setup_from_args(a)
    assert wants_form(setup, 1)
    a = cli.build_parser().parse_args(["analyze", "x.png", "--source", "sodium-d", "--pixel-size", "10"])
    assert not wants_form(setup_from_args(a)[0], 1)


def test_help_example_breaks_only_between_options():
    from ringgauge.commands._help import wrap_example

    text = ("Example: ringgauge batch lot-0042/ --lot L-0042 --part PCX-25-50 --source mercury-e --bench bench-2 "
            "--tolerance '3/2(0.5)' --test-diameter 20")
    lines = wrap_example(text, 60).splitlines()
    assert len(lines) > 1 and all(len(line) <= 60 for line in lines)
    assert all(line.endswith(" \\") for line in lines[:-1])
    assert all(line.startswith("    --") for line in lines[1:])  # each continued line starts with an option
    # the pieces put back together are the example as written
    assert " ".join(line.rstrip("\\").strip() for line in lines) == text


def test_records_export_csv_option_is_the_same_as_format_csv():
    p = cli.build_parser()
    assert p.parse_args(["records", "export", "--csv"]).format == "csv"
    assert p.parse_args(["records", "export", "--format", "csv"]).format == "csv"
    assert p.parse_args(["records", "export", "--json"]).format == "json"
    assert p.parse_args(["records", "export"]).format is None


# -- reports ---------------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def radius_result():
    from ringgauge.bench_setup import BenchSetup
    from ringgauge.pipeline import analyse_files
    from ringgauge.sources import get_source

    setup = BenchSetup(source=get_source("sodium-d"), pixel_size_um=8.0, pixel_size_u_um=0.004)
    return analyse_files([str(SAMPLES / "lot-FH2604" / "FH2604-01.png")], setup).to_dict()


def test_radius_report_says_which_uncertainty_is_u_and_which_is_U(radius_result):
    from ringgauge.report.text import format_result

    text = format_result(radius_result)
    rline = next(line for line in text.splitlines() if line.strip().startswith("R = "))
    assert "± expanded uncertainty U, k = 2" in rline and "standard uncertainty u = " in rline and "k = 1" in rline
    comb = next(line for line in text.splitlines() if "combined standard uncertainty" in line)
    assert "(k = 1)" in comb and "expanded uncertainty U" in comb and "k = 2.00" in comb
    # the header's pixel scale is printed as ± U with k = 2, like 'ringgauge calibrate'
    assert "8.0000 ± 0.0080 µm/px" in text and "expanded uncertainties, k = 2" in text


@pytest.fixture(scope="module")
def plate_result():
    from ringgauge.bench_setup import BenchSetup
    from ringgauge.pipeline import analyse_files
    from ringgauge.sources import get_source

    setup = BenchSetup(source=get_source("mercury-e"), pixel_size_um=25.0, pixel_size_u_um=0.02,
                       test_diameter_mm=18.0)
    return analyse_files([str(sorted((SAMPLES / "testplate").glob("*.png"))[0])], setup)


def test_form_report_uses_the_trades_names_and_prints_each_warning_once(plate_result):
    from dataclasses import replace

    from ringgauge.conformity import TermVerdict, Verdict
    from ringgauge.form.tolerance import parse_tolerance
    from ringgauge.report.form_text import format_form
    from ringgauge.report.text import format_result

    def term(name, value, limit):
        return TermVerdict(name, value, 0.01, limit, "fringes", value, 0.01, limit, value * 273.037, 546.074,
                           False, "pass")

    verdict = Verdict("pass", (term("rot_sym_irregularity", 0.1, 0.3), term("rms_total", 0.2, 0.5)),
                      decision_rule="simple acceptance")
    form = replace(plate_result.form, tolerance=parse_tolerance("3/2(0.5/0.3) RMSt < 0.5"), verdict=verdict,
                   warnings=("weak fringe contrast (0.04)",))
    text = format_form(form)
    assert "rot_sym" not in text and "rms_total" not in text
    verdicts = text.split("Tolerance")[1]  # the names in the verdict lines, not only in the table of terms
    assert "rotationally symmetric irregularity (C)" in verdicts and "RMSt" in verdicts
    assert text.count("weak fringe contrast") == 1
    d = replace(plate_result, form=form, warnings=("weak fringe contrast (0.04)", "another"))
    full = format_result(d)
    assert full.count("weak fringe contrast") == 1 and "another" in full


def test_local_time_is_readable_and_never_raises(monkeypatch):
    import time

    from ringgauge.report.text import local_time

    monkeypatch.setenv("TZ", "Europe/Berlin")
    time.tzset()
    try:
        # 13:05 UTC is 14:05 in Berlin in December (CET = UTC+1; from memory)
        assert local_time("2026-12-02T13:05:09.123Z") == "2026-12-02 14:05 CET"
        assert local_time("2026-12-02T13:05:09+00:00", seconds=True) == "2026-12-02 14:05:09 CET"
    finally:
        monkeypatch.delenv("TZ")
        time.tzset()
    assert local_time("not a time") == "not a time" and local_time(None) == "—"


def test_records_show_rounds_values_and_a_correction_is_recorded_not_measured(capsys, radius_result):
    from ringgauge.records import RecordMeta, open_store

    with open_store() as store:
        rec = store.add(RecordMeta(lot="L-1", serial="01"), radius_result, image_path="a.png",
                        image_sha256="0" * 64, setup=radius_result["setup"])
    code, out, _ = run(capsys, "records", "supersede", str(rec.id), "--reason", "typo", "--serial", "001")
    assert code == 0
    code, out, _ = run(capsys, "records", "show", str(rec.id + 1))
    assert code == 0
    head = out.split("\n\n")[0]
    assert not re.search(r"\d\.\d{7,}", head), head  # no raw floats such as 7.999992111231253
    assert "Z UTC" not in out and "T13:" not in head
    assert "pixel size      8.0000 ± 0.0080 µm" in head
    when = next(line for line in head.splitlines() if line.strip().startswith(("recorded", "measured")))
    assert when.strip().startswith("recorded") and f"correction of record {rec.id}" in when
    code, out, _ = run(capsys, "records", "show", str(rec.id))
    assert next(line for line in out.splitlines() if "ringgauge 0" in line or "ringgauge " in line).strip() \
        .startswith(("measured", "record"))
    code, out, _ = run(capsys, "records", "lots")
    lines = out.splitlines()
    assert lines[0].split() == ["lot", "records"] and lines[1].split() == ["L-1", "1"]


def test_help_loads_no_numerical_library():
    """``ringgauge --help`` must start fast: the sub-commands import numpy/scipy only when they run."""
    r = subprocess.run([sys.executable, "-X", "importtime", "-m", "ringgauge", "--help"], capture_output=True,
                       text=True, check=True)
    loaded = {line.split("|")[-1].strip() for line in r.stderr.splitlines() if line.startswith("import time")}
    assert "ringgauge.cli" in loaded and "analyze" in r.stdout and "simulate" in r.stdout  # all registered
    for heavy in ("numpy", "scipy", "cv2", "PySide6", "matplotlib"):
        assert heavy not in loaded, f"--help imports {heavy}"


@pytest.mark.parametrize("argv", [["analyze", "--help"], ["batch", "--help"], ["plates", "add", "--help"],
                                  ["simulate", "--help"]])
@pytest.mark.parametrize("columns", ["60", "80", "100"])
def test_help_examples_keep_each_option_whole_on_a_narrow_terminal(capsys, monkeypatch, argv, columns):
    monkeypatch.setenv("COLUMNS", columns)
    with pytest.raises(SystemExit):
        cli.main(argv)
    out = capsys.readouterr().out
    example = out[out.index("Example:"):].split("\n\n")[0].splitlines()
    for line in example:
        # a break inside an option would leave "--pixel-" at a line's end
        assert not re.search(r"-\w*-$", line.rstrip(" \\")), line
    # each continued line starts with an option (kept with its value) and the one before ends in a continuation
    for before, line in zip(example, example[1:]):
        assert before.endswith(" \\") and line.lstrip().startswith("--"), (before, line)


def test_sodium_report_names_the_wavelength_the_fringes_follow(capsys):
    """A doublet lamp's fringes follow the reciprocal of its intensity-weighted mean wavenumber, not the plain line
    mean the source table names; the report says which λ entered R, and it is the one in the JSON and the budget.
    (D2 588.9950 nm, D1 589.5924 nm, NIST Atomic Spectra Database; D2 about twice as bright as D1 — common
    practice, no source.)"""
    import json

    img = str(SAMPLES / "lot-FH2604" / "FH2604-02.png")
    opts = ("--source", "sodium-d", "--pixel-size", "8", "--pixel-size-u", "0.004")
    code, out, _ = run(capsys, "analyze", img, *opts, "--json")
    assert code == 0
    d = json.loads(out)
    lam_f = d["fringes"]["fringe_wavelength_nm"]
    assert lam_f == pytest.approx(3.0 / (2.0 / 588.9950 + 1.0 / 589.5924), abs=1e-6)
    assert [r["estimate"] for r in d["budget"]["rows"] if r["quantity"] == "wavelength"] == [pytest.approx(lam_f)]
    code, out, _ = run(capsys, "analyze", img, *opts)
    assert code == 0
    assert f"the fringes follow λ = {lam_f:.4f} nm" in out and "λ = 589.2937 nm" in out
