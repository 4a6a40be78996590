"""Lot statistics: counts by verdict, mean and spread, process capability and an individuals control chart.

Process capability (two-sided specification LSL..USL, σ estimated by the sample standard deviation s):
Cp = (USL − LSL) / 6s, Cpk = min(USL − x̄, x̄ − LSL) / 3s; with one limit only Cpk is defined.
Individuals (X) chart with moving ranges of two: centre x̄, limits x̄ ± 3·MR̄/d2 with d2 = 1.128; the
moving-range chart's upper limit is D4·MR̄ with D4 = 3.267.

References
----------
NIST/SEMATECH e-Handbook of Statistical Methods, §6.1.6 "What is process capability?" and §6.3.2 (control
charts for individual observations, constants d2 and D4).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from ..bench_setup import BenchSetup
from ..errors import InputError
from ..result import AnalysisResult

#: the order verdict counts are listed in
VERDICT_ORDER = ("pass", "conditional pass", "conditional fail", "fail", "not evaluated", "analysis failed")


def verdict_sort_key(v: str) -> tuple:
    return (VERDICT_ORDER.index(v) if v in VERDICT_ORDER else len(VERDICT_ORDER), v)


D2_N2 = 1.128  # d2 for subgroups of 2 (moving range of consecutive values)
D4_N2 = 3.267  # D4 for subgroups of 2


@dataclass(frozen=True)
class Spread:
    """Mean and sample standard deviation of a quantity over a lot."""

    quantity: str
    unit: str
    n: int
    mean: float | None
    sd: float | None  # sample standard deviation (n - 1); None below two values
    minimum: float | None
    maximum: float | None

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class Capability:
    """Process capability of a quantity against its specification limits."""

    quantity: str
    unit: str
    lsl: float | None
    usl: float | None
    n: int
    mean: float
    sd: float
    cp: float | None  # None with a one-sided specification
    cpk: float
    sigma: str = "sample standard deviation s (n - 1)"

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class IndividualsChart:
    """Individuals chart with moving-range limits (subgroups of two)."""

    quantity: str
    unit: str
    labels: tuple[str, ...]
    values: tuple[float, ...]
    centre: float
    mr_bar: float
    ucl: float
    lcl: float
    mr_ucl: float
    out_of_limits: tuple[int, ...]  # indices of points outside ucl / lcl
    lsl: float | None = None  # specification limits, drawn beside the control limits
    usl: float | None = None
    decimals: int | None = None  # digits after the point the lot prints this quantity with

    @property
    def sigma_within(self) -> float:
        return self.mr_bar / D2_N2

    def to_dict(self) -> dict:
        d = dict(self.__dict__)
        d["labels"], d["values"], d["out_of_limits"] = list(self.labels), list(self.values), list(self.out_of_limits)
        d["sigma_within"] = self.sigma_within
        d["constants"] = {"d2": D2_N2, "D4": D4_N2}
        return d


def _clean(values: Iterable) -> np.ndarray:
    a = np.asarray([float(v) for v in values if v is not None], dtype=np.float64)
    return a[np.isfinite(a)]


def spread(values: Iterable, quantity: str, unit: str) -> Spread:
    a = _clean(values)
    if a.size == 0:
        return Spread(quantity, unit, 0, None, None, None, None)
    sd = float(np.std(a, ddof=1)) if a.size >= 2 else None
    return Spread(quantity, unit, int(a.size), float(a.mean()), sd, float(a.min()), float(a.max()))


def capability(values: Iterable, lsl: float | None, usl: float | None, *, quantity: str = "x",
               unit: str = "") -> Capability:
    """Cp and Cpk of ``values`` against ``lsl`` / ``usl`` (either may be None, not both)."""
    if lsl is None and usl is None:
        raise InputError("process capability needs at least one specification limit")
    if lsl is not None and usl is not None and not usl > lsl:
        raise InputError(f"upper specification limit {usl} must be above the lower one {lsl}")
    a = _clean(values)
    if a.size < 2:
        raise InputError("process capability needs at least two measured values")
    mean = float(a.mean())
    sd = float(np.std(a, ddof=1))
    if sd <= 1e-12 * max(1.0, abs(mean)):  # identical values (up to rounding in the mean)
        raise InputError(f"all {a.size} values of {quantity} are identical; capability is undefined")
    return capability_from(mean, sd, lsl, usl, n=int(a.size), quantity=quantity, unit=unit)


def capability_from(mean: float, sd: float, lsl: float | None, usl: float | None, *, n: int = 0,
                    quantity: str = "x", unit: str = "") -> Capability:
    """Cp and Cpk from a mean and standard deviation already at hand."""
    sides = []
    if usl is not None:
        sides.append((usl - mean) / (3 * sd))
    if lsl is not None:
        sides.append((mean - lsl) / (3 * sd))
    cp = (usl - lsl) / (6 * sd) if (usl is not None and lsl is not None) else None
    return Capability(quantity, unit, lsl, usl, n, mean, sd, cp, min(sides))


def individuals_chart(values: Sequence[float], labels: Sequence[str] | None = None, *, quantity: str = "x",
                      unit: str = "") -> IndividualsChart:
    """Individuals chart limits from the average moving range (needs at least two values)."""
    a = np.asarray([float(v) for v in values], dtype=np.float64)
    if a.size < 2 or not np.all(np.isfinite(a)):
        raise InputError("an individuals chart needs at least two finite values")
    mr = np.abs(np.diff(a))
    mr_bar = float(mr.mean())
    centre = float(a.mean())
    ucl = centre + 3 * mr_bar / D2_N2
    lcl = centre - 3 * mr_bar / D2_N2
    out = tuple(int(i) for i in np.flatnonzero((a > ucl) | (a < lcl)))
    labels = tuple(labels) if labels is not None else tuple(str(i + 1) for i in range(a.size))
    return IndividualsChart(quantity, unit, labels, tuple(float(v) for v in a), centre, mr_bar, ucl, lcl,
                            D4_N2 * mr_bar, out)


@dataclass(frozen=True)
class LotSummary:
    lot: str
    n_records: int
    counts: dict  # verdict (or "analysis failed") -> count
    radius: Spread
    power: Spread
    capabilities: tuple[Capability, ...] = ()
    charts: tuple[IndividualsChart, ...] = ()
    notes: tuple[str, ...] = field(default_factory=tuple)
    radius_tolerance: str | None = None  # as described by ringgauge.conformity, e.g. "R 1000 ± 5 mm (995 … 1005 mm)"
    decision_rule: str | None = None  # "simple" or "guard-banded" (None: no radius tolerance)
    radius_counts: dict = field(default_factory=dict)  # radius verdict -> count
    accepted: int | None = None  # parts accepted under the decision rule (radius), None without a tolerance
    decimals: dict = field(default_factory=dict)  # quantity -> digits after the point, the same everywhere

    def to_dict(self) -> dict:
        return {
            "lot": self.lot,
            "n_records": self.n_records,
            "counts": dict(self.counts),
            "radius": self.radius.to_dict(),
            "power": self.power.to_dict(),
            "capability": [c.to_dict() for c in self.capabilities],
            "charts": [c.to_dict() for c in self.charts],
            "notes": list(self.notes),
            "radius_tolerance": self.radius_tolerance,
            "decision_rule": self.decision_rule,
            "radius_counts": dict(self.radius_counts),
            "accepted": self.accepted,
            "decimals": dict(self.decimals),
        }


def summarise_lot(records, lot: str, *, power_limits: tuple[float | None, float | None] | None = None,
                  radius_limits: tuple[float | None, float | None] | None = None) -> LotSummary:
    """Summarise the current records of a lot (oldest first) — inspection records or :class:`LotEntry` rows.

    ``power_limits`` are (LSL, USL) for power in fringes (an ISO 10110-5 ``3/A`` gives −A..+A);
    ``radius_limits`` (LSL, USL) in mm — when not given, the radius tolerance the parts were judged against.
    Capability and charts need at least two measured values.
    """
    entries = sorted((as_entry(r) for r in records), key=lambda e: e.order)
    counts: dict[str, int] = {}
    for e in entries:
        counts[e.verdict] = counts.get(e.verdict, 0) + 1
    ok = [e for e in entries if e.status == "ok"]
    rad = [(e, e.radius_mm) for e in ok if e.radius_mm is not None and math.isfinite(e.radius_mm)]
    pw = [(e, e.power_fringes) for e in ok if e.power_fringes is not None and math.isfinite(e.power_fringes)]
    notes: list[str] = []
    caps: list[Capability] = []
    charts: list[IndividualsChart] = []
    tols = {e.radius_tolerance for e in entries if e.radius_tolerance}
    rules = {e.decision_rule for e in entries if e.radius_tolerance and e.decision_rule}
    tol_text = rule = None
    if len(tols) > 1:
        notes.append("the parts were judged against different radius tolerances: " + "; ".join(sorted(tols)))
    if len(rules) > 1:
        notes.append("the parts were judged under different decision rules: " + ", ".join(sorted(rules)))
    if tols:
        from ..conformity import parse_radius_tolerance

        t = parse_radius_tolerance(sorted(tols)[0])
        tol_text = t.describe() if len(tols) == 1 else "differs between parts"
        rule = sorted(rules)[0] if len(rules) == 1 else None
        if radius_limits is None and len(tols) == 1:
            radius_limits = (t.lower, t.upper)
    radius_counts: dict[str, int] = {}
    accepted = None
    if tols:
        accepted = 0
        for e in entries:
            rv = (e.radius_verdict or {}).get("verdict") or ("analysis failed" if e.status == "failed"
                                                             else "not evaluated")
            radius_counts[rv] = radius_counts.get(rv, 0) + 1
            accepted += bool((e.radius_verdict or {}).get("accepted"))
    decimals = {"radius": lot_decimals([e.radius_U_mm for e, _ in rad], 3),
                "power": lot_decimals([e.power_U_fringes for e, _ in pw], 3)}

    for name, unit, pairs, limits in (("power", "fringes", pw, power_limits), ("radius", "mm", rad, radius_limits)):
        vals = [v for _, v in pairs]
        lim = tuple(limits) if limits is not None and any(x is not None for x in limits) else (None, None)
        if lim != (None, None):
            try:
                caps.append(capability(vals, lim[0], lim[1], quantity=name, unit=unit))
            except InputError as exc:
                notes.append(f"{name}: no capability figures ({exc})")
        if len(vals) >= 2:
            ch = individuals_chart(vals, [e.label for e, _ in pairs], quantity=name, unit=unit)
            charts.append(replace(ch, lsl=lim[0], usl=lim[1], decimals=decimals[name]))
    if ok and len(ok) < 25:
        notes.append(f"only {len(ok)} measured parts: capability indices from fewer than about 25 values are "
                     "rough estimates (common practice, no source)")
    return LotSummary(lot, len(entries), counts, spread([v for _, v in rad], "radius", "mm"),
                      spread([v for _, v in pw], "power", "fringes"), tuple(caps), tuple(charts), tuple(notes),
                      tol_text, rule, radius_counts, accepted, decimals)


# --- one row per part, the same in the lot report and the window --------------------------------------------

@dataclass(frozen=True)
class LotEntry:
    """What the lot statistics need of one part: from an inspection record or from a result in the window."""

    order: int  # measurement order (record id)
    serial: str | None
    image_name: str | None
    status: str  # "ok" or "failed"
    verdict: str  # overall verdict, "not evaluated" or "analysis failed"
    radius_mm: float | None = None
    radius_U_mm: float | None = None  # noqa: N815
    power_fringes: float | None = None
    power_U_fringes: float | None = None  # noqa: N815
    note: str = ""
    radius_verdict: dict | None = None  # ringgauge.conformity.judge_radius fields
    radius_tolerance: str | None = None
    decision_rule: str | None = None
    record_id: int | None = None

    @property
    def label(self) -> str:
        return self.serial or (Path(self.image_name).stem if self.image_name else "") or str(self.order)


def as_entry(r) -> LotEntry:
    """A :class:`LotEntry` from an inspection record (or the entry itself)."""
    if isinstance(r, LotEntry):
        return r
    res = r.analysis if r.status == "ok" and r.has_result else None
    setup = res.setup if res is not None else (BenchSetup.from_dict(r.setup) if _usable_setup(r.setup) else None)
    return entry_from_result(res, order=r.id, serial=r.meta.serial, image_name=r.image_name,
                             failed=r.status == "failed", failure=r.failure_reason, setup=setup,
                             verdict=r.verdict, radius=(r.radius_mm, r.radius_U_mm),
                             power=(r.power_fringes, r.power_U_fringes), record_id=r.id)


def _usable_setup(s) -> bool:
    return isinstance(s, dict) and bool(s.get("wavelength_nm")) and bool(s.get("pixel_size_um"))


def entry_from_result(res: AnalysisResult | None, *, order: int, serial: str | None = None,
                      image_name: str | None = None, failed: bool = False, failure: str | None = None,
                      setup: BenchSetup | None = None, verdict: str | None = None, radius=None, power=None,
                      record_id: int | None = None) -> LotEntry:
    """A :class:`LotEntry` from a typed result; the keyword values, when given, take precedence (an inspection
    record's columns)."""
    setup = setup or (res.setup if res is not None else None)
    v = res.verdict if res is not None else None
    overall = verdict or (v.overall if v is not None else None) or "not evaluated"
    if failed:
        overall = "analysis failed"
    if radius is None:
        radius = (None, None) if res is None else (res.radius_mm, res.radius_U_mm)
    if power is None:
        power = (None, None)
        if res is not None and res.form is not None:
            q = res.form.term("power").fringes
            power = (q.value, q.U)
    tol = setup.radius_tolerance if setup is not None else None
    rule = (setup.decision_rule if setup is not None else None) or "simple"
    rv = v.radius.to_dict() if v is not None and v.radius is not None else None
    if rv is None and tol and not failed and radius[0] is not None:
        from ..conformity import judge_radius, parse_radius_tolerance

        rv = judge_radius(radius[0], radius[1], parse_radius_tolerance(tol), rule)
    notes = [failure] if failed and failure else []
    if rv and rv.get("verdict", "").startswith("conditional"):
        notes.append(f"radius {rv['verdict']}: the U interval straddles a limit"
                     + ("" if rv.get("accepted") else " (not accepted)"))
    if rv and rv.get("note"):
        notes.append(str(rv["note"]))
    return LotEntry(order=order, serial=serial, image_name=image_name, status="failed" if failed else "ok",
                    verdict=overall, radius_mm=_f(radius[0]), radius_U_mm=_f(radius[1]),
                    power_fringes=_f(power[0]), power_U_fringes=_f(power[1]), note="; ".join(notes),
                    radius_verdict=rv, radius_tolerance=tol, decision_rule=rule if tol else None,
                    record_id=record_id)


def _f(x) -> float | None:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def natural_key(text: str | None) -> tuple:
    """Sort key that puts 'FH-2' before 'FH-10' (digit runs compared as numbers)."""
    parts = re.split(r"(\d+)", (text or "").casefold())
    return tuple((0, int(p), "") if p.isdigit() else (1, 0, p) for p in parts if p != "")


def lot_decimals(Us: Iterable, default: int) -> int:
    """Digits after the point for a quantity over a whole lot: enough for two significant digits of the
    smallest expanded uncertainty (GUM 7.2.6: U with at most two significant digits, the value to match)."""
    a = _clean(u for u in Us if u is not None)
    a = a[a > 0]
    if a.size == 0:
        return default
    return int(min(6, max(0, 1 - math.floor(math.log10(float(a.min()))))))


def fmt_fixed(x: float | None, decimals: int, unit: str = "") -> str:
    if x is None or not math.isfinite(x):
        return "—"
    s = f"{x:.{decimals}f}"
    if s.startswith("-") and float(s) == 0:
        s = s[1:]
    return f"{s} {unit}".rstrip() if unit else s


def lot_tables(records, summary: LotSummary) -> dict:
    """The lot's figures as text, one number of digits per quantity: the parts by serial (natural order), the
    verdict counts, the spreads, the capability and the chart data. The lot report and the window print these."""
    entries = [as_entry(r) for r in records]
    entries.sort(key=lambda e: (natural_key(e.label), e.order))
    dr, dp = summary.decimals.get("radius", 3), summary.decimals.get("power", 3)
    dec = {"mm": dr, "fringes": dp}

    def pm(v, U, d):
        if v is None:
            return "—"
        return fmt_fixed(v, d) + (" (U not available)" if U is None else f" ± {fmt_fixed(U, d)}")

    rows = []
    for e in entries:
        rv = e.radius_verdict or {}
        rows.append({
            "record": "—" if e.record_id is None else str(e.record_id), "serial": e.label,
            "image": e.image_name or "—", "verdict": e.verdict,
            "radius_verdict": ("analysis failed" if e.status == "failed" else
                               rv.get("verdict") or ("—" if not e.radius_tolerance else "not evaluated")),
            "accepted": None if not rv or rv.get("accepted") is None else bool(rv["accepted"]),
            "radius": pm(e.radius_mm, e.radius_U_mm, dr),
            "power": pm(e.power_fringes, e.power_U_fringes, dp),
            "note": e.note,  # whole: the layout wraps it
        })

    def spread_text(sp: Spread) -> dict:
        d = dec[sp.unit]
        if not sp.n:
            return {"n": "0", "mean": "—", "sd": "—", "range": "—"}
        return {"n": str(sp.n), "mean": fmt_fixed(sp.mean, d, sp.unit),
                "sd": "—" if sp.sd is None else fmt_fixed(sp.sd, d + 1, sp.unit),
                "range": f"{fmt_fixed(sp.minimum, d)} to {fmt_fixed(sp.maximum, d, sp.unit)}"}

    caps = []
    for c in summary.capabilities:
        d = dec[c.unit]
        lim = lambda x: "—" if x is None else fmt_fixed(x, d)  # noqa: E731
        caps.append({"quantity": c.quantity, "limits": f"{lim(c.lsl)} to {lim(c.usl)} {c.unit}", "n": str(c.n),
                     "mean": fmt_fixed(c.mean, d, c.unit), "s": fmt_fixed(c.sd, d + 1, c.unit),
                     "Cp": "—" if c.cp is None else _index(c.cp), "Cpk": _index(c.cpk)})
    counts = [[k, str(summary.counts[k])] for k in sorted(summary.counts, key=verdict_sort_key)]
    rcounts = [[k, str(summary.radius_counts[k])] for k in sorted(summary.radius_counts, key=verdict_sort_key)]
    return {"rows": rows, "counts": counts, "radius_counts": rcounts,
            "radius": spread_text(summary.radius), "power": spread_text(summary.power), "capability": caps,
            "accepted": None if summary.accepted is None else f"{summary.accepted} of {summary.n_records}",
            "decimals": {"radius": dr, "power": dp}}


def _index(x: float) -> str:
    """A capability index: two decimals, or three significant digits when very large."""
    return f"{x:.2f}" if abs(x) < 100 else f"{x:.3g}"


def chart_png(charts: Sequence[IndividualsChart], path, *, title: str = "") -> None:
    """Draw individuals charts (one panel per quantity) with centre line and limits to a PNG (matplotlib Agg)."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    if not charts:
        raise InputError("no chart to draw: the lot needs at least two measured parts")
    fig = Figure(figsize=(8.0, 2.8 * len(charts) + 0.6), dpi=150)
    axes = fig.subplots(len(charts), 1, squeeze=False)[:, 0]
    for ax, ch in zip(axes, charts):
        x = np.arange(1, len(ch.values) + 1)
        ax.plot(x, ch.values, "-o", color="#1f4e79", ms=3.5, lw=1.0, label="individual values")
        bad = list(ch.out_of_limits)
        if bad:
            ax.plot(x[bad], np.asarray(ch.values)[bad], "o", color="#c00000", ms=6, label="outside limits")
        d = 3 if ch.decimals is None else ch.decimals
        lines = [(ch.centre, "-", "#555555", f"centre {ch.centre:.{d}f}"),
                 (ch.ucl, "--", "#c55a11", f"UCL {ch.ucl:.{d}f}"), (ch.lcl, "--", "#c55a11", f"LCL {ch.lcl:.{d}f}")]
        # the specification limits, in their own colour and style: a point inside the control limits can still
        # be outside the tolerance, and the reader must see both
        lines += [(y, "-.", "#7030a0", f"{nm} {y:.{d}f}") for y, nm in ((ch.usl, "USL"), (ch.lsl, "LSL"))
                  if y is not None]
        for y, style, colour, lab in lines:
            ax.axhline(y, ls=style, color=colour, lw=1.2 if style == "-." else 1.0)
        # labels right of the axes, nudged apart where two limits lie close together
        ys = sorted(lines, key=lambda t: t[0])
        lo, hi = ax.get_ylim()
        lo, hi = min([lo] + [t[0] for t in ys]), max([hi] + [t[0] for t in ys])
        pad = 0.06 * (hi - lo)
        ax.set_ylim(lo - pad, hi + pad)
        gap = 0.075 * (hi - lo + 2 * pad)
        placed: list[float] = []
        for y, _s, colour, lab in ys:
            yy = y if not placed or y - placed[-1] >= gap else placed[-1] + gap
            placed.append(yy)
            ax.annotate(lab, (1.0, yy), xycoords=("axes fraction", "data"), xytext=(3, 0),
                        textcoords="offset points", va="center", fontsize=7, color=colour)
        ax.set_ylabel(f"{ch.quantity} / {ch.unit}")
        ax.grid(alpha=0.3)
        ax.set_xlim(0.5, len(ch.values) + 0.5)
        if ch.usl is not None or ch.lsl is not None:
            ax.plot([], [], "-.", color="#7030a0", label="specification limits")
        ax.plot([], [], "--", color="#c55a11", label="control limits")
        ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=4, fontsize=7, frameon=False)
        if len(ch.labels) <= 30:
            ax.set_xticks(x)
            ax.set_xticklabels(ch.labels, rotation=30 if len(ch.labels) > 8 else 0, fontsize=7,
                               ha="right" if len(ch.labels) > 8 else "center")
        else:
            ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    axes[-1].set_xlabel("part (serial), in measurement order")
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout(rect=(0, 0, 0.9, 1))
    import io

    from ..settings import write_text_atomic

    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    write_text_atomic(path, buf.getvalue(), lock=False)  # whole or not at all: a killed run leaves no half chart
