"""Every number printed from a real measurement matches the stored result it came from.

Generated lens images are analysed by `ringgauge analyze --record` (the text report is what the command prints),
kept in a temporary records store, and a certificate and a lot report are issued from that store. The printed
text (PDF text by pypdf, NFKC-normalised) is parsed and each figure compared with the JSON record: value, U, u,
centre x and y, slope, intercept, rings, budget rows; the lot report's n, mean, s, range, Cp and Cpk with the
same figures computed here from the records. A printed number matches when it equals the stored one rounded to
the digits printed (half a unit in the last printed digit).
"""

from __future__ import annotations

import contextlib
import io
import math
import re
import unicodedata

import numpy as np
import pypdf
import pytest

from ringgauge import cli
from ringgauge.records import open_store

RADII = (601.0, 602.5, 604.0, 603.2)  # generated lenses, mm
CENTRE = (210.3, 180.7)  # px: x and y deliberately different
LIMITS = (598.0, 606.0)  # radius specification for Cp/Cpk, mm
NUM = r"[-−]?\d+(?:\.\d+)?(?:e[-+]?\d+)?"


def resolution(text: str) -> float:
    """Half a unit in the last printed digit of a number as printed ("601.0", "3.63e-06", "1.83e+03", "150")."""
    t = text.replace("−", "-")
    mant, _, exp = t.lower().partition("e")
    dec = len(mant.split(".")[1]) if "." in mant else 0
    return 0.5 * 10.0 ** (int(exp or 0) - dec)


def matches(text: str, value: float) -> bool:
    p = float(text.replace("−", "-"))
    return abs(p - value) <= resolution(text) * (1 + 1e-9) + 1e-12


def check(text: str, value: float, what: str) -> None:
    assert matches(text, value), f"{what}: printed {text}, stored {value!r}"


def pdf_text(path) -> str:
    reader = pypdf.PdfReader(str(path))
    return unicodedata.normalize("NFKC", "\n".join(p.extract_text() for p in reader.pages))


def numbers(text: str) -> list[str]:
    """Stand-alone numbers in reading order (not digits inside words or units such as r2, mm2, 1/mm)."""
    return re.findall(rf"(?<![\w.^/]){NUM}(?![\w./])", text)


@pytest.fixture(scope="module")
def lot(tmp_path_factory):
    d = tmp_path_factory.mktemp("printed")
    db = str(d / "records.sqlite")
    texts = []
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("RINGGAUGE_HOME", str(d / "home"))
        for i, R in enumerate(RADII, 1):
            png = str(d / f"lens{i}.png")
            sim = ["simulate", "--source", "mercury-e", "--pixel-size", "8", "--width", "480", "--height", "400",
                   "--radius", str(R), "--centre", *map(str, CENTRE), "--seed", str(i), "--out", png]
            analyze = ["analyze", png, "--source", "mercury-e", "--pixel-size", "8", "--pixel-size-u", "0.0002",
                       "--quiet", "--record", "--lot", "LOT-P", "--serial", f"P-{i}", "--db", db]
            buf = io.StringIO()
            with contextlib.redirect_stdout(buf), contextlib.redirect_stderr(io.StringIO()):
                assert cli.main(sim) == 0
                assert cli.main(analyze) == 0
            texts.append(buf.getvalue())
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
            assert cli.main(["certificate", "1", "--out", str(d / "cert.pdf"), "--db", db]) == 0
            assert cli.main(["certificate", "--lot", "LOT-P", "--radius-limits", *map(str, LIMITS),
                             "--out", str(d / "lot.pdf"), "--db", db]) == 0
    with open_store(db) as s:
        recs = sorted(s.find(), key=lambda r: r.id)
    assert len(recs) == len(RADII)
    return {"texts": texts, "records": recs, "cert": pdf_text(d / "cert.pdf"), "lot": pdf_text(d / "lot.pdf")}


# --- the text report ------------------------------------------------------------------------------------------

def _one(pattern, text):
    m = re.search(pattern, text)
    assert m, f"not found in the report: {pattern}"
    return m.groups()


@pytest.mark.parametrize("i", range(len(RADII)))
def test_text_report_numbers_are_the_record(lot, i):
    text, d = lot["texts"][i], lot["records"][i].result
    R, U = _one(rf"R = ({NUM}) ± ({NUM}) mm", text)
    check(R, d["radius_mm"], "R")
    check(U, d["radius_U_mm"], "U of R")
    (k,) = _one(rf"expanded uncertainty U, k = ({NUM})\)", text)
    check(k, d["k"], "k")
    (u,) = _one(rf"standard uncertainty u = ({NUM}) mm", text)
    check(u, d["radius_u_mm"], "u of R")
    cx, ucx, cy, ucy = _one(rf"ring centre \(x, y\) = \(({NUM}) ± ({NUM}), ({NUM}) ± ({NUM})\) px", text)
    check(cx, d["centre_px"][0], "centre x")
    check(cy, d["centre_px"][1], "centre y")
    check(ucx, d["k"] * d["centre_u_px"][0], "U of centre x")
    check(ucy, d["k"] * d["centre_u_px"][1], "U of centre y")

    fr = d["fringes"]
    n, rmin, rmax = _one(rf"Fringe data: (\d+) dark rings from r = ({NUM}) to ({NUM}) mm", text)
    assert int(n) == fr["rings_used"]
    check(rmin, fr["r_min_mm"], "r_min")
    check(rmax, fr["r_max_mm"], "r_max")
    slope, us, icpt, ui, off = _one(
        rf"slope ({NUM}) mm²/fringe \(u ({NUM})\); intercept ({NUM}) mm² \(u ({NUM})\) \(contact offset ({NUM}) fringe",
        text)
    check(slope, fr["slope_mm2_per_fringe"], "slope")
    check(us, fr["slope_u_mm2_per_fringe"], "u of slope")
    check(icpt, fr["intercept_mm2"], "intercept")
    check(ui, fr["intercept_u_mm2"], "u of intercept")
    check(off, fr["contact_offset_fringes"], "contact offset")
    chi, nd = _one(rf"reduced chi-square ({NUM}) \((\d+) rings", text)
    check(chi, fr["redchi"], "reduced chi-square")
    assert int(nd) == fr["ndata"]

    rows = re.findall(rf"^\s+({NUM})\s+({NUM})\s+({NUM})\s+({NUM})\s+({NUM})\s*$", text, re.M)
    by_order = {r["order"]: r for r in fr["rings"]}
    assert len(rows) == (len(fr["rings"]) if len(fr["rings"]) <= 12 else 11)  # long lists: first 6, last 5
    for order, r_mm, r_px, r2, res in rows:
        ring = by_order[float(order)]
        check(r_mm, ring["radius_mm"], f"ring {order} r/mm")
        check(r_px, ring["radius_px"], f"ring {order} r/px")
        check(r2, ring["r2_mm2"], f"ring {order} r²")
        check(res, ring["residual_mm2"], f"ring {order} residual")

    ff_R, ff_r = _one(rf"full-field model fit gives R = ({NUM}) mm over r ≤ ({NUM}) mm", text)
    check(ff_R, d["fullfield"]["radius_mm"], "full-field R")
    check(ff_r, d["fullfield"]["r_max_mm"], "full-field r_max")

    b = d["budget"]
    for row in b["rows"]:
        line = next(l for l in text.splitlines() if l.strip().startswith(row["quantity"][:46]))
        nums = numbers(line[len(row["quantity"][:46]) + 2:])
        est, u_i, c_i, contrib, share = nums[0], nums[-4], nums[-3], nums[-2], nums[-1]
        check(est, row["estimate"], f"{row['quantity']}: estimate")
        check(u_i, row["u"], f"{row['quantity']}: u")
        check(c_i, row["sensitivity"], f"{row['quantity']}: c")
        check(contrib, row["contribution"], f"{row['quantity']}: contribution")
        check(share, 100 * row["share"], f"{row['quantity']}: share")
    uc, Ub, kb = _one(rf"u_c = ({NUM}) mm .*expanded uncertainty U = ({NUM}) mm \(k = ({NUM})", text)
    check(uc, b["u_c"], "u_c")
    check(Ub, b["U"], "U")
    check(kb, b["k"], "k of the budget")


# --- the certificate -------------------------------------------------------------------------------------------

def test_certificate_numbers_are_the_record(lot):
    text, rec = lot["cert"], lot["records"][0]
    d = rec.result
    R, U, k = _one(rf"Radius of curvature R\s+({NUM}) mm\s+({NUM}) mm\s+({NUM})", text)
    check(R, d["radius_mm"], "certificate R")
    check(U, d["radius_U_mm"], "certificate U")
    check(k, d["k"], "certificate k")
    (n,) = _one(r"Rings used in the fit\s+(\d+)", text)
    assert int(n) == d["fringes"]["rings_used"]
    (wl,) = _one(rf"Wavelength\s+({NUM}) nm", text)
    check(wl, d["setup"]["wavelength_nm"], "wavelength")
    # the budget table: six numbers per row (estimate, u_i, divisor, c_i, contribution, share %)
    b = d["budget"]
    start = text.index("Uncertainty budget")
    start = text.index("Share", start) + len("Share")
    end = text.index("Combined standard uncertainty", start)
    nums = numbers(text[start:end])
    assert len(nums) == 6 * len(b["rows"]), nums
    for j, row in enumerate(b["rows"]):
        est, u_i, div, c_i, contrib, share = nums[6 * j: 6 * j + 6]
        q = row["quantity"]
        check(est, row["estimate"], f"{q}: estimate")
        check(u_i, row["u"], f"{q}: u")
        check(div, row["divisor"], f"{q}: divisor")
        check(c_i, row["sensitivity"], f"{q}: c")
        check(contrib, row["contribution"], f"{q}: contribution")
        check(share, 100 * row["share"], f"{q}: share")
    uc, Ub = _one(rf"u_c = ({NUM}) mm.*?expanded\s+uncertainty U = ({NUM}) mm", text.replace("\n", " "))
    check(uc, b["u_c"], "certificate u_c")
    check(Ub, b["U"], "certificate budget U")


# --- the lot report --------------------------------------------------------------------------------------------

def test_lot_report_statistics_are_those_of_the_records(lot):
    text, recs = lot["lot"], lot["records"]
    R = np.array([r.result["radius_mm"] for r in recs])
    mean, s = float(R.mean()), float(R.std(ddof=1))
    lsl, usl = LIMITS
    # NIST/SEMATECH e-Handbook of Statistical Methods §6.1.6: Cp = (USL - LSL) / 6s, Cpk = min(USL - mean,
    # mean - LSL) / 3s, s the sample standard deviation
    cp, cpk = (usl - lsl) / (6 * s), min(usl - mean, mean - lsl) / (3 * s)
    n, m, sd, lo, hi = _one(rf"Radius of curvature\s+(\d+)\s+({NUM}) mm\s+({NUM}) mm\s+({NUM}) to ({NUM}) mm", text)
    assert int(n) == len(recs)
    check(m, mean, "lot mean")
    check(sd, s, "lot s")
    check(lo, R.min(), "lot smallest R")
    check(hi, R.max(), "lot largest R")
    l1, l2, n2, m2, sd2, cp_p, cpk_p = _one(
        rf"radius\s+({NUM}) to ({NUM}) mm\s+(\d+)\s+({NUM}) mm\s+({NUM}) mm\s+({NUM})\s+({NUM})", text)
    check(l1, lsl, "LSL")
    check(l2, usl, "USL")
    assert int(n2) == len(recs)
    check(m2, mean, "capability mean")
    check(sd2, s, "capability s")
    check(cp_p, cp, "Cp")
    check(cpk_p, cpk, "Cpk")
    # every part's row: R ± U as recorded
    for rec in recs:
        v, U = _one(rf"{rec.meta.serial}\s+{rec.id}\s+[a-z ]+?\s+({NUM}) ± ({NUM})", text)
        check(v, rec.result["radius_mm"], f"{rec.meta.serial} R")
        check(U, rec.result["radius_U_mm"], f"{rec.meta.serial} U")


def test_the_comparison_can_fail():
    # the comparator itself: a number printed with too few or wrong digits does not match
    assert matches("601.00", 601.004) and not matches("601.00", 601.006)
    assert matches("3.63e-06", 3.634e-6) and not matches("3.63e-06", 3.64e-6)
    assert matches("150", 150.3) and not matches("150", 150.6)
    assert not math.isnan(resolution("1.2"))
