"""Uncertain values and GUM uncertainty budgets (JCGM 100:2008).

A budget is a tuple of named contributions so a report or certificate can print it row by row:
quantity, estimate, standard uncertainty u_i, distribution, divisor, sensitivity c_i, contribution c_i*u_i,
and its share of u_c^2.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field


@dataclass(frozen=True)
class Quantity:
    """A measured value with its standard uncertainty (k = 1) and unit."""

    value: float
    u: float | None
    unit: str
    k: float = 2.0

    @property
    def U(self) -> float | None:  # noqa: N802 - GUM symbol
        return None if self.u is None else self.k * self.u

    def to_dict(self) -> dict:
        return {"value": self.value, "u": self.u, "unit": self.unit, "k": self.k, "U": self.U}

    @classmethod
    def from_dict(cls, d: dict) -> "Quantity":
        return cls(float(d["value"]), None if d.get("u") is None else float(d["u"]), str(d["unit"]),
                   float(d.get("k") or 2.0))


@dataclass(frozen=True)
class BudgetRow:
    quantity: str
    estimate: float
    estimate_unit: str
    u: float
    distribution: str
    divisor: float
    sensitivity: float
    sensitivity_unit: str
    contribution: float  # |c_i| * u_i, in the output unit
    share: float = 0.0  # fraction of u_c^2
    dof: float = math.inf
    note: str = ""

    def to_dict(self) -> dict:
        d = asdict(self)
        if math.isinf(d["dof"]):
            d["dof"] = None
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "BudgetRow":
        from .serialise import build

        return build(cls, {**d, "dof": math.inf if d.get("dof") is None else d["dof"]})


@dataclass(frozen=True)
class Budget:
    """An uncertainty budget for one output quantity (uncorrelated inputs)."""

    output: str
    output_unit: str
    value: float
    rows: tuple[BudgetRow, ...]
    u_c: float
    k: float
    U: float  # noqa: N815
    dof_eff: float
    coverage: str = "approximately 95 %"
    notes: tuple[str, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict:
        return {
            "output": self.output,
            "unit": self.output_unit,
            "value": self.value,
            "rows": [r.to_dict() for r in self.rows],
            "u_c": self.u_c,
            "k": self.k,
            "U": self.U,
            "dof_eff": None if math.isinf(self.dof_eff) else self.dof_eff,
            "coverage": self.coverage,
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "Budget":
        from .serialise import build

        return build(cls, {**d, "dof_eff": math.inf if d.get("dof_eff") is None else d["dof_eff"]},
                     {"output_unit": "unit"})


def make_budget(output: str, unit: str, value: float, rows: list[BudgetRow], *, notes=()) -> Budget:
    """Combine rows (root sum of squares), effective degrees of freedom by Welch-Satterthwaite, and the
    coverage factor for about 95 % (k = 2 for many degrees of freedom, else Student t)."""
    from scipy.special import stdtrit  # Student t quantile; lighter to import than scipy.stats

    uc2 = sum(r.contribution**2 for r in rows)
    uc = math.sqrt(uc2)
    denom = sum(r.contribution**4 / r.dof for r in rows if r.contribution > 0 and not math.isinf(r.dof))
    dof = math.inf if denom == 0 else uc2**2 / denom
    if math.isinf(dof) or dof > 100:
        k = 2.0
    else:
        k = float(stdtrit(dof, 0.97725))
    out = tuple(
        BudgetRow(**{**asdict(r), "share": (r.contribution**2 / uc2) if uc2 > 0 else 0.0}) for r in rows
    )
    return Budget(output, unit, value, out, uc, k, k * uc, dof, notes=tuple(notes))


def round_uncertainty(U: float, digits: int = 2) -> float:  # noqa: N803
    """Round an uncertainty to at most two significant digits (GUM 7.2.6 — from memory)."""
    if U is None or U <= 0 or not math.isfinite(U):
        return U
    exp = math.floor(math.log10(U)) - (digits - 1)
    return round(U / 10**exp) * 10**exp


def format_value(value: float, U: float | None, unit: str, digits: int = 2) -> str:  # noqa: N803
    """Format ``value ± U unit`` with U to two significant digits and the value to the same decimal place."""
    if U is None or not math.isfinite(U) or U <= 0:
        return f"{value:.6g} {unit} (uncertainty not available)"
    Ur = round_uncertainty(U, digits)
    dec = max(0, -(math.floor(math.log10(Ur)) - (digits - 1)))
    return f"{value:.{dec}f} ± {Ur:.{dec}f} {unit}"
