"""The command line end to end: every exit status for its class of failure (and the help that lists them),
`simulate`, `sources`, `analyze --out/--record`, and surface form through `analyze` (tolerance, several frames,
press test, guard-banded rule). Images are made by `ringgauge simulate`; its truth file is the check value."""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys

import numpy as np
import pytest

from ringgauge import cli, errors
from ringgauge.imaging import load_frame, save_png
from ringgauge.sources import SAFETY_NOTES, SOURCES

SIM = ["--source", "mercury-e", "--pixel-size", "8", "--width", "480", "--height", "400", "--radius", "600",
       "--seed", "5"]
MEASURE = ["--source", "mercury-e", "--pixel-size", "8", "--pixel-size-u", "0.004", "--quiet"]


def run(capsys, *argv):
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def lens(tmp_path, capsys):
    png = tmp_path / "lens.png"
    code, out, err = run(capsys, "simulate", *SIM, "--out", png)
    assert code == 0, err
    return png


# --- exit statuses ----------------------------------------------------------------------------------------------

def test_help_lists_every_exit_status_the_code_uses(capsys):
    with pytest.raises(SystemExit) as ex:
        cli.main(["--help"])
    assert ex.value.code == 0
    out = capsys.readouterr().out
    listed = {int(line.split()[0]) for line in out.split("exit status:")[1].strip().splitlines()}
    used = {0, 1, 2, 5, 70, 130} | {c.exit_code for c in vars(errors).values()
                                    if isinstance(c, type) and issubclass(c, errors.RinggaugeError)}
    assert listed == used == {0, 1, 2, 3, 4, 5, 70, 130}
    assert "2    unusable input" in out and "3    no trustworthy measurement" in out
    assert "4    the records store" in out and "130  interrupted" in out


def test_success_is_zero(lens, capsys):
    code, out, err = run(capsys, "analyze", lens, *MEASURE)
    assert code == 0, err
    assert "radius of curvature" in out.lower()


@pytest.mark.parametrize("argv,message", [
    (["analyze", "{tmp}/missing.png", *MEASURE], "missing.png"),  # no such file
    (["analyze", "{tmp}/junk.png", *MEASURE], "junk.png"),  # not an image
    (["analyze", "{tmp}/blank.png", *MEASURE], "uniform"),  # nothing in the picture
    (["analyze", "{lens}", "--pixel-size", "8"], "name the light source"),  # no lamp given
    (["analyze", "{lens}", "--source", "mercury-e"], "give the pixel scale"),
    (["analyze", "{lens}", "--source", "no-such-lamp", "--pixel-size", "8"], "no-such-lamp"),
    (["analyze", "{lens}", "--wavelength", "5000", "--pixel-size", "8"], "5000"),
    (["analyze", "{lens}", *MEASURE, "--tolerance", "3/x(("], "tolerance"),
    (["analyze", "{lens}", "--source", "mercury-e", "--pixel-size", "eight"], "eight"),  # usage error: not a number
    (["no-such-command"], "invalid choice"),  # usage error
])
def test_unusable_input_is_two(tmp_path, lens, capsys, argv, message):
    (tmp_path / "junk.png").write_bytes(b"not a picture at all" * 50)
    save_png(tmp_path / "blank.png", np.full((40, 50), 0.5))
    argv = [a.format(tmp=tmp_path, lens=lens) for a in argv]
    try:
        code, out, err = run(capsys, *argv)
    except SystemExit as ex:  # argparse usage errors leave through SystemExit with the status
        code, err = ex.code, capsys.readouterr().err
    assert code == 2, err
    assert message in err and err.startswith("ringgauge: ") and err.count("\n") == 1
    assert "Traceback" not in err


@pytest.mark.parametrize("what", ["noise", "straight fringes", "few rings"])
def test_no_trustworthy_measurement_is_three(tmp_path, capsys, what):
    g = np.random.default_rng(1)
    yy, xx = np.mgrid[0:400, 0:480]
    img = {
        "few rings": 0.5 + 0.4 * np.cos(2 * np.pi * ((xx - 240.0) ** 2 + (yy - 200.0) ** 2) / 60000.0),
        "noise": g.uniform(0.2, 0.8, (400, 480)),
        "straight fringes": 0.5 + 0.4 * np.cos(2 * np.pi * xx / 23.0),
    }[what]
    save_png(tmp_path / "bad.png", img)
    code, out, err = run(capsys, "analyze", tmp_path / "bad.png", *MEASURE)
    assert code == 3, err
    assert err.startswith("ringgauge: ") and err.count("\n") == 1 and out == ""


def test_records_store_that_cannot_be_opened_is_four(tmp_path, lens, capsys):
    code, out, err = run(capsys, "analyze", lens, *MEASURE, "--record", "--lot", "L1",
                         "--db", tmp_path / "no-such-folder" / "r.sqlite")
    assert code == 4, err
    assert "does not exist" in err and err.count("\n") == 1
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not a database" * 100)
    code, out, err = run(capsys, "records", "list", "--db", junk)
    assert code == 4 and "not a ringgauge records store" in err


def test_a_check_that_finds_a_problem_is_one(tmp_path, lens, capsys):
    db = tmp_path / "r.sqlite"
    code, _, err = run(capsys, "analyze", lens, *MEASURE, "--record", "--lot", "L1", "--db", db)
    assert code == 0, err
    assert run(capsys, "records", "check", "--db", db)[0] == 0
    con = sqlite3.connect(db)  # someone editing the store by hand, past its guards
    for (name,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'").fetchall():
        con.execute(f"DROP TRIGGER {name}")
    n = con.execute("UPDATE inspection SET result_json = replace(result_json, 'mercury', 'sodium')").rowcount
    assert n == 1
    con.commit()
    con.close()
    code, out, err = run(capsys, "records", "check", "--db", db)
    assert code == 1 and "ALTERED" in out


@pytest.mark.parametrize("exc,code,message", [
    (MemoryError(), 5, "out of memory"),
    (RuntimeError("boom"), 70, "internal error (RuntimeError: boom)"),
    (KeyboardInterrupt(), 130, "interrupted"),
])
def test_memory_bug_and_interrupt_statuses(lens, capsys, monkeypatch, tmp_path, exc, code, message):
    import ringgauge.pipeline as pipeline

    def fail(*a, **k):
        raise exc

    monkeypatch.setattr(pipeline, "analyse_files", fail)
    got, out, err = run(capsys, "analyze", lens, *MEASURE)
    assert got == code
    assert message in err and err.count("\n") == 1 and "Traceback" not in err
    if code == 70:  # the details go to a log file, not the terminal
        log = err.split("details in ")[1].split(" — ")[0]
        assert "RuntimeError: boom" in open(log, encoding="utf-8").read()


def test_exit_status_reaches_the_shell(tmp_path):
    # the installed entry point passes main()'s status to the operating system
    out = subprocess.run([sys.executable, "-m", "ringgauge", "analyze", str(tmp_path / "none.png"), *MEASURE],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2 and out.stderr.startswith("ringgauge: ")


# --- simulate, sources ------------------------------------------------------------------------------------------

def test_simulate_writes_the_image_and_its_truth(tmp_path, capsys):
    png = tmp_path / "sim.png"
    code, out, err = run(capsys, "simulate", *SIM, "--bits", "12", "--out", png)
    assert code == 0, err
    truth = json.loads(png.with_suffix(".truth.json").read_text())
    assert truth["radius_mm"] == 600.0 and truth["pixel_um"] == [8.0, 8.0] and truth["bits"] == 12
    frame = load_frame(png)
    assert frame.data.shape == (400, 480) and frame.bit_depth in (12, 16)
    assert str(png) in out


def test_simulate_refuses_bad_values(tmp_path, capsys):
    code, out, err = run(capsys, "simulate", "--radius", "-5", "--out", tmp_path / "x.png")
    assert code == 2 and "positive" in err
    code, out, err = run(capsys, "simulate", "--out", tmp_path / "no-folder" / "x.png")
    assert code == 2 and "does not exist" in err


def test_sources_lists_every_lamp_with_its_wavelength_and_the_safety_notes(capsys):
    code, out, err = run(capsys, "sources")
    assert code == 0
    for key, src in SOURCES.items():
        line = next(l for l in out.splitlines() if l.startswith(key + " "))
        assert f"{src.wavelength_nm:.4f}" in line
    assert "546.0740" in out  # NIST ASD Hg I e-line, 546.074 nm
    for note in SAFETY_NOTES:
        assert note in out


# --- analyze --out / --record -----------------------------------------------------------------------------------

def test_analyze_out_and_record_keep_the_same_result(tmp_path, lens, capsys):
    out_json, db = tmp_path / "res.json", tmp_path / "r.sqlite"
    code, out, err = run(capsys, "analyze", lens, *MEASURE, "--out", out_json, "--record", "--lot", "L7",
                         "--serial", "S-1", "--db", db)
    assert code == 0, err
    d = json.loads(out_json.read_text())
    truth = json.loads(lens.with_suffix(".truth.json").read_text())
    assert abs(d["radius_mm"] - truth["radius_mm"]) <= 3 * d["radius_u_mm"]  # truth of the generated image
    assert abs(d["radius_mm"] / truth["radius_mm"] - 1) < 5e-3
    assert "kept as inspection record 1" in out
    from ringgauge.records import open_store

    with open_store(str(db)) as s:
        (rec,) = s.find()
        assert rec.meta.lot == "L7" and rec.meta.serial == "S-1" and rec.intact()
        assert rec.result["radius_mm"] == d["radius_mm"] and rec.result["budget"] == d["budget"]


def test_analyze_json_is_the_out_file(tmp_path, lens, capsys):
    out_json = tmp_path / "res.json"
    code, out, err = run(capsys, "analyze", lens, *MEASURE, "--json", "--out", out_json)
    assert code == 0, err
    printed, written = json.loads(out), json.loads(out_json.read_text())
    printed.pop("elapsed_s", None), written.pop("elapsed_s", None)
    written.pop("ringgauge_seal", None)  # the file carries a seal of its content besides the result
    assert printed == written


def test_analyze_out_to_a_missing_folder_is_two_and_prints_nothing_half_done(tmp_path, lens, capsys):
    code, out, err = run(capsys, "analyze", lens, *MEASURE, "--out", tmp_path / "nope" / "r.json")
    assert code == 2 and "nope" in err and err.count("\n") == 1 and out == ""


# --- surface form through the command line ----------------------------------------------------------------------

FORM_SIM = ["--kind", "test-plate", "--source", "mercury-e", "--pixel-size", "25", "--width", "800", "--height",
            "800", "--aperture", "18", "--power", "2.0", "--astigmatism", "0.4", "--seed", "3"]
FORM_MEASURE = ["--source", "mercury-e", "--pixel-size", "25", "--pixel-size-u", "0.02", "--test-diameter", "16",
                "--quiet", "--json"]


@pytest.fixture(scope="module")
def plate_frames(tmp_path_factory):
    d = tmp_path_factory.mktemp("form")
    assert cli.main(["simulate", *FORM_SIM, "--frames", "3", "--out", str(d / "tp.png")]) == 0
    return [d / f"tp_{i}.png" for i in (1, 2, 3)]


def _form(capsys, frames, *extra):
    # the part's edge is given by hand from the generator's truth (the edge finder has tests of its own): centre
    # (399.5, 399.5) px, diameter 18 mm / 25 um = 720 px
    code, out, err = run(capsys, "analyze", *frames, *FORM_MEASURE, "--aperture", "399.5", "399.5", "720", *extra)
    assert code == 0, err
    return json.loads(out)


def _term(d, name):
    return next(t for t in d["verdict"]["terms"] if t["term"] == name)


def test_form_from_several_frames_with_a_tolerance(plate_frames, capsys):
    d = _form(capsys, plate_frames, "--tolerance", "3/2(0.5)")
    f = d["form"]
    # generated truth: power 2.0 and astigmatism 0.4 fringes over the 18 mm part; over a 16 mm test diameter a
    # quadratic term scales with (16/18)^2
    scale = (16 / 18) ** 2
    assert f["power_fringes"] == pytest.approx(2.0 * scale, abs=0.05)
    assert f["irregularity_fringes"] == pytest.approx(0.4 * scale, abs=0.05)
    assert f["power_nm"] == pytest.approx(f["power_fringes"] * 546.074 / 2, rel=2e-4)  # one fringe = lambda/2
    assert f["sign"]["sign"] == "+" and f["sign"]["method"].startswith("frames")  # gap grew between frames
    assert d["verdict"]["overall"] == "pass"
    assert _term(d, "power")["limit_fringes"] == 2.0 and _term(d, "irregularity")["limit_fringes"] == 0.5
    # a tighter drawing tolerance fails on irregularity
    d = _form(capsys, plate_frames, "--tolerance", "3/2(0.2)")
    assert _term(d, "irregularity")["verdict"] == "fail" and d["verdict"]["overall"] == "fail"


def test_form_press_test_gives_the_sign_from_one_frame(plate_frames, capsys):
    d = _form(capsys, plate_frames[:1], "--press-test", "rings-spread")
    assert d["form"]["sign"]["sign"] == "+"
    d = _form(capsys, plate_frames[:1], "--press-test", "rings-shrink")
    assert d["form"]["sign"]["sign"] == "-"


def test_form_guard_banded_rule_is_stricter_near_the_limit(plate_frames, capsys):
    d = _form(capsys, plate_frames[:1], "--tolerance", "3/2(0.5)")
    irr, U = _term(d, "irregularity")["value_fringes"], _term(d, "irregularity")["U_fringes"]
    limit = round(irr + U / 2, 4)  # inside the limit by less than U
    assert irr < limit < irr + U
    tol = f"3/2({limit:g})"
    simple = _form(capsys, plate_frames[:1], "--tolerance", tol)["verdict"]
    guarded = _form(capsys, plate_frames[:1], "--tolerance", tol, "--decision-rule", "guard-banded")["verdict"]
    # ILAC-G8:09/2019 §4.2.1-4.2.3 and ISO 14253-1:2017: a value inside the limit by less than U is a conditional
    # pass; simple acceptance accepts it, guarded acceptance (w = U) does not
    assert _term(d, "irregularity")["verdict"] == "pass"
    assert simple["overall"] == guarded["overall"] == "conditional pass"
    assert (simple["rule"], guarded["rule"]) == ("simple", "guard-banded")
    assert "not accepted" in guarded["meaning"] and "not accepted" not in simple["meaning"]
    # clear of the limit by more than U: accepted under either rule
    clear = _form(capsys, plate_frames[:1], "--tolerance", f"3/2({irr + 1.5 * U:.4f})", "--decision-rule",
                  "guard-banded")["verdict"]
    assert clear["overall"] == "pass" and "meaning" not in clear
