"""What the window asks of bench calibration profiles, the test-plate register and the tolerance parser, in the
shape the set-up panel wants: plain lists and dicts, and a damaged profile or register file answered with an
empty list (the command line names the problem). No Qt here.
"""

from __future__ import annotations

from typing import Any

from ..calibration import profiles
from ..errors import RinggaugeError
from ..form import plates
from ..form.tolerance import parse_tolerance


# -- bench calibration profiles ---------------------------------------------------------------------------
def profile_names() -> list[str]:
    try:
        return list(profiles.names())
    except RinggaugeError:
        return []  # a damaged profile file: the panel offers typed values; the CLI names the problem


def profile_setup_kwargs(name: str) -> tuple[dict[str, Any], list[str]]:
    """BenchSetup keywords from a saved bench profile, and the warnings that go with it (overdue, ...)."""
    kw, warnings = profiles.setup_kwargs(name)
    return dict(kw), list(warnings)


def profile_defaults(name: str) -> dict[str, Any]:
    """The light source key and gap index a bench profile suggests (to preset the panel), when it has them."""
    prof = profiles.get(name)
    out: dict[str, Any] = {}
    if prof.source:
        out["source"] = prof.source
    elif prof.wavelength_nm:
        out.update(source="custom", custom_wavelength_nm=float(prof.wavelength_nm),
                   custom_wavelength_u_nm=float(prof.wavelength_u_nm or 0.005 / 3**0.5))
    if prof.medium_index is not None:
        n = float(prof.medium_index)
        out.update(medium="air") if n == 1.0 else out.update(medium="custom", medium_index=n, medium_index_u=0.0)
    return out


# -- test-plate register -----------------------------------------------------------------------------------
def plate_ids() -> list[str]:
    """Identifiers of the plates in service (retired plates are left out)."""
    try:
        register = plates.load_register()
    except RinggaugeError:
        return []  # a damaged register: the panel offers none; 'ringgauge plates' names the problem
    return [str(p.id) for p in register if not p.retired]


def plate_dict(plate_id: str) -> dict:
    """What an analysis needs and records about a plate (``TestPlate.setup_dict()``)."""
    return plates.get_plate(plate_id).setup_dict()


def plate_notes(plate_id: str) -> list[str]:
    """One line about the plate and its warnings (overdue, retired) for the set-up panel."""
    p = plates.get_plate(plate_id)
    return [f"Test plate {p.id}: {p.kind}, R = {p.radius_mm:g} mm (u = {p.radius_u_mm:g} mm), "
            f"calibrated {p.calibrated}.", *plates.plate_warnings(p)]


# -- ISO 10110-5 tolerance strings ----------------------------------------------------------------------------
def check_tolerance(text: str) -> None:
    """Raise the form module's own ToleranceSyntaxError for a bad string."""
    parse_tolerance(text)
