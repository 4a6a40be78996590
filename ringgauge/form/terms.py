"""The form terms a surface-form result carries: one list, used by the engine, the tolerance parser, the result
types and every view (ISO 10110-5: power A, irregularity B, rotationally symmetric irregularity C, and the RMS
limits RMSt, RMSi, RMSa)."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class TermSpec:
    """One form term: its name in results, its label for people and, where ISO 10110-5 tolerances it, the
    letter of its tolerance (A power, B irregularity, C rotationally symmetric irregularity, t/i/a the RMS
    limits RMSt, RMSi, RMSa)."""

    name: str  # "power"; the result's key is name + "_fringes"
    label: str  # as printed in reports and the window
    short: str  # for charts and narrow tables
    iso: str | None = None
    limit_name: str = ""  # how a tolerance message names its limit
    document: str = ""  # how certificates and the text report name it, when not the label capitalised

    @property
    def key(self) -> str:
        return f"{self.name}_fringes"


#: the form terms a result carries, in the order every view shows them — the one list of them
FORM_TERMS: tuple[TermSpec, ...] = (
    TermSpec("power", "power (A)", "power (A)", "A", "the power tolerance A", "Power (sagitta deviation, A)"),
    TermSpec("astigmatism", "astigmatism", "astigmatism"),
    TermSpec("irregularity", "irregularity (B)", "irregularity (B)", "B", "the irregularity tolerance B"),
    TermSpec("rot_sym_irregularity", "rotationally symmetric irregularity (C)", "rot. sym. irregularity (C)", "C",
             "the rotationally symmetric irregularity tolerance C"),
    TermSpec("rms_total", "RMSt (total RMS after tilt)", "RMSt", "t", "the RMSt limit", "RMSt"),
    TermSpec("rms_irregularity", "RMSi (RMS irregularity)", "RMSi", "i", "the RMSi limit", "RMSi"),
    TermSpec("rms_asymmetric", "RMSa (RMS asymmetric)", "RMSa", "a", "the RMSa limit", "RMSa"),
    TermSpec("pv_total", "PV after tilt removal", "PV total", None, "", "PV of the form deviation"),
)
TERM_KEYS: tuple[str, ...] = tuple(t.key for t in FORM_TERMS)
_BY_NAME = {t.name: t for t in FORM_TERMS}


def term_spec(key: str) -> TermSpec | None:
    """The term for a name or key ("power", "power_fringes", "power_nm"); None when there is none."""
    return _BY_NAME.get(str(key or "").removesuffix("_fringes").removesuffix("_nm"))
