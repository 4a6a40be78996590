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
from dataclasses import dataclass, field
from typing import Iterable, Sequence

import numpy as np

from ..errors import InputError

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
        }


def summarise_lot(records, lot: str, *, power_limits: tuple[float | None, float | None] | None = None,
                  radius_limits: tuple[float | None, float | None] | None = None) -> LotSummary:
    """Summarise the current records of a lot (oldest first).

    ``power_limits`` are (LSL, USL) for power in fringes (an ISO 10110-5 ``3/A`` gives −A..+A);
    ``radius_limits`` (LSL, USL) in mm. Capability and charts need at least two measured values.
    """
    records = sorted(records, key=lambda r: r.id)
    counts: dict[str, int] = {}
    for r in records:
        key = "analysis failed" if r.status == "failed" else (r.verdict or "not evaluated")
        counts[key] = counts.get(key, 0) + 1
    ok = [r for r in records if r.status == "ok"]
    rad = [(r, r.radius_mm) for r in ok if r.radius_mm is not None and math.isfinite(r.radius_mm)]
    pw = [(r, r.power_fringes) for r in ok if r.power_fringes is not None and math.isfinite(r.power_fringes)]
    notes: list[str] = []
    caps: list[Capability] = []
    charts: list[IndividualsChart] = []

    def label(r) -> str:
        return r.meta.serial or r.image_name or str(r.id)

    for name, unit, pairs, limits in (("power", "fringes", pw, power_limits), ("radius", "mm", rad, radius_limits)):
        vals = [v for _, v in pairs]
        if limits is not None and any(x is not None for x in limits):
            try:
                caps.append(capability(vals, limits[0], limits[1], quantity=name, unit=unit))
            except InputError as exc:
                notes.append(f"{name}: no capability figures ({exc})")
        if len(vals) >= 2:
            charts.append(individuals_chart(vals, [label(r) for r, _ in pairs], quantity=name, unit=unit))
    if ok and len(ok) < 25:
        notes.append(f"only {len(ok)} measured parts: capability indices from fewer than about 25 values are "
                     "rough estimates (common practice, no source)")
    return LotSummary(lot, len(records), counts, spread([v for _, v in rad], "radius", "mm"),
                      spread([v for _, v in pw], "power", "fringes"), tuple(caps), tuple(charts), tuple(notes))


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
        for y, style, lab in ((ch.centre, "-", f"centre {ch.centre:.4g}"), (ch.ucl, "--", f"UCL {ch.ucl:.4g}"),
                              (ch.lcl, "--", f"LCL {ch.lcl:.4g}")):
            ax.axhline(y, ls=style, color="#555555" if style == "-" else "#c55a11", lw=1.0)
            ax.annotate(lab, (1.0, y), xycoords=("axes fraction", "data"), xytext=(3, 0),
                        textcoords="offset points", va="center", fontsize=7)
        ax.set_ylabel(f"{ch.quantity} / {ch.unit}")
        ax.grid(alpha=0.3)
        ax.set_xlim(0.5, len(ch.values) + 0.5)
        ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=2, fontsize=7, frameon=False)
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    axes[-1].set_xlabel("part, in measurement order")
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout(rect=(0, 0, 0.93, 1))
    fig.savefig(path, format="png")
