"""The uncertainty budget against the GUM's worked example H.1 (calibration of an end gauge), through
ringgauge.uncertainty's real code: combination of the rows, effective degrees of freedom (Welch–Satterthwaite),
the coverage factor from Student's t, and the rounding of the stated uncertainty.

Source: JCGM 100:2008 (GUM), annex H.1, Table H.1. The figures below are quoted from memory of that annex (not
checked against the published text here): contributions u_i(l) of 25 nm (calibration of the standard, nu = 18),
9.7 nm (measured difference, nu = 25.6), 2.9 nm (difference of expansion coefficients, nu = 50) and 16.6 nm
(temperature difference, nu = 2); the two first-order-zero rows (alpha_s, theta) contribute nothing. Result:
u_c = 32 nm, nu_eff = 16, and with t_99(16) = 2.92 the expanded uncertainty U_99 = 93 nm, stated as
l = (50.000 838 +- 0.000 093) mm.
"""

import math

import pytest
from scipy import stats

from ringgauge.uncertainty import BudgetRow, format_value, make_budget, round_uncertainty

NM = 1e-6  # mm


def row(name, u_nm, c=1.0, dof=math.inf):
    return BudgetRow(name, 0.0, "mm", u_nm * NM, "normal", 1.0, c, "", abs(c) * u_nm * NM, dof=dof)


def measured_difference_budget():
    # GUM H.1.3.2: u(d) from the repeated observations (5.8 nm, nu = 24), the comparator's random effects
    # (3.9 nm, nu = 5) and its systematic effects (6.7 nm, nu = 8) — from memory
    return make_budget("d", "mm", 0.000215, [
        row("repeated observations", 5.8, dof=24), row("comparator, random", 3.9, dof=5),
        row("comparator, systematic", 6.7, dof=8),
    ])


def end_gauge_budget():
    d = measured_difference_budget()
    return make_budget("l", "mm", 50.000838, [
        row("calibration of the standard l_s", 25.0, dof=18),
        row("measured difference d", d.u_c / NM, dof=d.dof_eff),
        BudgetRow("expansion coefficient alpha_s", 11.5e-6, "1/°C", 1.2e-6, "rectangular", math.sqrt(3), 0.0,
                  "mm °C", 0.0, dof=100),  # first-order sensitivity zero (GUM H.1.3.3)
        BudgetRow("temperature of the table theta", -0.1, "°C", 0.41, "normal", 1.0, 0.0, "mm/°C", 0.0),
        row("difference of expansion coefficients", 2.9, dof=50),
        row("difference of temperatures", 16.6, dof=2),
    ])


def test_measured_difference_combines_to_the_annex_value():
    d = measured_difference_budget()
    assert d.u_c / NM == pytest.approx(9.7, abs=0.05)  # GUM H.1.3.2: u(d) = 9.7 nm (from memory)
    assert d.dof_eff == pytest.approx(25.6, abs=0.5)  # GUM H.1.3.2: nu(d) = 25.6 (from memory)


def test_end_gauge_combined_uncertainty_and_degrees_of_freedom():
    b = end_gauge_budget()
    assert round_uncertainty(b.u_c / NM) == 32  # GUM H.1.4: u_c(l) = 32 nm (from memory)
    assert b.u_c / NM == pytest.approx(31.7, abs=0.1)  # sqrt(25^2 + 9.7^2 + 2.9^2 + 16.6^2) = 31.67
    # GUM H.1.6: nu_eff = 16 (Welch–Satterthwaite, GUM G.4.1 eq. G.2b, truncated to the next lower integer)
    assert math.floor(b.dof_eff) == 16
    assert sum(r.share for r in b.rows) == pytest.approx(1.0, abs=1e-12)
    assert b.rows[-1].share == pytest.approx(16.6**2 / (b.u_c / NM) ** 2, rel=1e-3)


def test_coverage_factor_from_student_t():
    b = end_gauge_budget()
    # GUM G.3 / Table G.2: k = t_p(nu_eff) for p = 95.45 %; Table G.2 gives 2.17 at nu = 16 and 2.16 at 17 — from
    # memory; ringgauge interpolates at the non-integer nu_eff (GUM G.6.4 allows interpolation or truncation)
    assert b.k == pytest.approx(stats.t.ppf(0.97725, b.dof_eff), rel=1e-9)
    assert 2.15 <= b.k <= 2.18
    assert b.U == pytest.approx(b.k * b.u_c, rel=1e-12)
    # the annex's own statement uses p = 99 %: t_99(16) = 2.92, U_99 = 2.92 x 32 nm = 93 nm
    t99 = stats.t.ppf(0.995, math.floor(b.dof_eff))
    assert t99 == pytest.approx(2.92, abs=0.005)
    assert round_uncertainty(t99 * round_uncertainty(b.u_c / NM)) == 93


def test_result_stated_with_two_significant_digits_of_uncertainty():
    # GUM 7.2.6 (from memory): u_c and U given to at most two significant digits, the value rounded to match;
    # H.1.6 states l = (50.000 838 +- 0.000 093) mm
    assert format_value(50.000838, 93.4 * NM, "mm") == "50.000838 ± 0.000093 mm"
    assert round_uncertainty(0.0934) == pytest.approx(0.093, abs=1e-15)
    assert round_uncertainty(0.0935) == pytest.approx(0.094, abs=1e-15)
    assert round_uncertainty(1.96) == pytest.approx(2.0, abs=1e-15)


def test_many_degrees_of_freedom_give_k_two():
    # GUM G.6.6: with nu_eff large (here every row infinite) k = 2 gives about 95 %
    b = make_budget("x", "mm", 1.0, [row("a", 3.0), row("b", 4.0)])
    assert b.u_c / NM == pytest.approx(5.0, rel=1e-12)  # root sum of squares
    assert math.isinf(b.dof_eff) and b.k == 2.0
