"""Lot statistics: process capability against published worked examples, individuals-chart limits, the chart."""

from __future__ import annotations

import statistics

import numpy as np
import pytest

from ringgauge.errors import InputError
from ringgauge.records import RecordMeta, open_store
from ringgauge.records.lot import (
    D2_N2,
    capability,
    capability_from,
    chart_png,
    individuals_chart,
    summarise_lot,
)


def test_cp_cpk_nist_handbook_example():
    # NIST/SEMATECH e-Handbook of Statistical Methods §6.1.6, worked example (from memory):
    # USL = 20, LSL = 8, mean = 16, sigma = 2  ->  Cp = 1.0, Cpk = 0.6667.
    c = capability_from(16.0, 2.0, 8.0, 20.0)
    assert c.cp == pytest.approx(1.0, abs=1e-12)
    assert c.cpk == pytest.approx(0.6667, abs=5e-5)


def test_cp_connecting_rod_worked_example():
    # Worked example "Process capability", brainmass.com (connecting rods, diameter 1 ± 0.01 in, sample mean
    # 1.002 in, s = 0.003 in): Cp = 0.02 / (6 * 0.003) = 1.11. Cpk = 0.008 / 0.009 = 0.889 [derived].
    c = capability_from(1.002, 0.003, 0.99, 1.01)
    assert round(c.cp, 2) == 1.11
    assert c.cpk == pytest.approx(0.008 / 0.009, rel=1e-9)


def test_capability_uses_the_sample_standard_deviation():
    vals = [1.8, 2.1, 1.6, 2.4, 1.9, 2.2, 2.0]
    c = capability(vals, -3.0, 3.0, quantity="power", unit="fringes")
    s = statistics.stdev(vals)  # Python's statistics module as reference (n - 1)
    assert c.sd == pytest.approx(s, rel=1e-12) and c.mean == pytest.approx(statistics.fmean(vals))
    assert c.cp == pytest.approx(6.0 / (6 * s))
    assert c.cpk == pytest.approx((3.0 - statistics.fmean(vals)) / (3 * s))


def test_one_sided_specification_has_only_cpk():
    # SAS/QC user's guide, SHEWHART procedure, "The Index Cpk": with only USL, Cpk = (USL - mean) / 3 sigma
    c = capability_from(0.4, 0.1, None, 1.0)
    assert c.cp is None and c.cpk == pytest.approx(2.0)


@pytest.mark.parametrize("vals,lsl,usl,msg", [
    ([1, 2], None, None, "at least one specification limit"),
    ([1, 2], 3, 1, "must be above"),
    ([1], 0, 3, "at least two"),
    ([2, 2, 2], 0, 3, "identical"),
    ([1000.2299999999999] * 999 + [1000.23], 990, 1010, "identical"),
])
def test_capability_bad_input(vals, lsl, usl, msg):
    with pytest.raises(InputError, match=msg):
        capability(vals, lsl, usl)


def test_individuals_chart_limits():
    vals = [10.0, 12.0, 11.0, 15.0, 13.0, 30.0]
    ch = individuals_chart(vals)
    mr = [2, 1, 4, 2, 17]  # moving ranges by hand [derived]
    mr_bar = sum(mr) / 5
    assert ch.mr_bar == pytest.approx(mr_bar)
    assert ch.centre == pytest.approx(sum(vals) / 6)
    # X-chart limits x̄ ± 3 MR̄ / d2, d2 = 1.128; MR-chart UCL = 3.267 MR̄ (NIST/SEMATECH e-Handbook §6.3.2,
    # control-chart constants for n = 2 — from memory)
    assert ch.ucl == pytest.approx(sum(vals) / 6 + 3 * mr_bar / 1.128)
    assert ch.lcl == pytest.approx(sum(vals) / 6 - 3 * mr_bar / 1.128)
    assert ch.mr_ucl == pytest.approx(3.267 * mr_bar)
    assert D2_N2 == 1.128


def test_chart_flags_a_shifted_point():
    rng = np.random.default_rng(3)
    vals = list(rng.normal(0.0, 0.1, 30))
    vals[20] = 1.5
    ch = individuals_chart(vals)
    assert 20 in ch.out_of_limits and len(ch.out_of_limits) <= 2


def test_lot_summary_and_chart_png(tmp_path, make_result):
    s = open_store(tmp_path / "r.sqlite")
    powers = [1.1, 1.3, 0.9, 1.2, 1.0, 1.4]
    for i, p in enumerate(powers):
        s.add(RecordMeta(lot="L7", serial=f"{i:03d}"), make_result(str(i), power=p, radius_mm=50 + i / 100,
                                                                   verdict="pass" if p < 1.35 else "fail"))
    s.add(RecordMeta(lot="L7"), None, image_path="/x/b.png", image_sha256="cd" * 32, failure="no rings")
    summ = summarise_lot(s.find(), "L7", power_limits=(-2.0, 2.0))
    assert summ.counts == {"pass": 5, "fail": 1, "analysis failed": 1}
    assert summ.power.mean == pytest.approx(statistics.fmean(powers))
    assert summ.power.sd == pytest.approx(statistics.stdev(powers))
    assert summ.radius.n == 6
    (cap,) = summ.capabilities
    assert cap.cp == pytest.approx(4.0 / (6 * statistics.stdev(powers)))
    assert [c.quantity for c in summ.charts] == ["power", "radius"]
    assert summ.charts[0].labels[0] == "000"
    png = tmp_path / "chart.png"
    chart_png(summ.charts, png, title="Lot L7")
    data = png.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000
    s.close()
