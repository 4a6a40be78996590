"""The trade's names for the form terms a result carries under internal keys — one table for the text report,
the window and any other view, so no internal key ("rot_sym_irregularity", "rms_total") reaches a reader.

ISO 10110-5 writes a surface-form tolerance as 3/A(B/C) with A power (sagitta deviation), B irregularity and C
rotationally symmetric irregularity, and names the RMS limits RMSt, RMSi and RMSa.
"""

from __future__ import annotations

#: internal key (with or without the "_fringes" ending) -> label for people
TERM_LABELS = {
    "power": "power (A)",
    "astigmatism": "astigmatism",
    "irregularity": "irregularity (B)",
    "rot_sym_irregularity": "rotationally symmetric irregularity (C)",
    "rms_total": "RMSt (total RMS after tilt)",
    "rms_irregularity": "RMSi (RMS irregularity)",
    "rms_asymmetric": "RMSa (RMS asymmetric)",
    "pv_total": "PV after tilt removal",
}


def term_label(key: str) -> str:
    """The label for an internal term key; an unknown key comes back with its underscores as spaces."""
    k = str(key or "").removesuffix("_fringes").removesuffix("_nm")
    return TERM_LABELS.get(k, k.replace("_", " "))
