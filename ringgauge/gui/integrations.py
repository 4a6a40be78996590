"""Guarded access to the parts of ringgauge the window uses when they are present: bench calibration
profiles, the test-plate register, the tolerance parser, the records store and certificates.

Each function works (with a plain answer) when the part is missing from this build, so the window runs
before every module has landed. No Qt here.
"""

from __future__ import annotations

import importlib
from typing import Any

from ..errors import InputError, RinggaugeError


def _module(name: str):
    try:
        return importlib.import_module(name)
    except ImportError:
        return None


# -- bench calibration profiles ---------------------------------------------------------------------------
def profiles_available() -> bool:
    mod = _module("ringgauge.calibration.profiles")
    return mod is not None and hasattr(mod, "setup_kwargs")


def profile_names() -> list[str]:
    mod = _module("ringgauge.calibration.profiles")
    if mod is None:
        return []
    for attr in ("profile_names", "list_profiles", "names"):
        fn = getattr(mod, attr, None)
        if callable(fn):
            try:
                out = fn()
            except RinggaugeError:
                return []  # a damaged profile file: the panel offers typed values; the CLI names the problem
            return [p if isinstance(p, str) else str(getattr(p, "name", p)) for p in out]
    return []


def profile_setup_kwargs(name: str) -> tuple[dict[str, Any], list[str]]:
    """BenchSetup keywords from a saved bench profile, and the warnings that go with it (overdue, ...)."""
    mod = _module("ringgauge.calibration.profiles")
    if mod is None or not hasattr(mod, "setup_kwargs"):
        raise InputError(f"bench profile '{name}' cannot be used: this build has no bench calibration profiles")
    out = mod.setup_kwargs(name)
    if isinstance(out, tuple):
        kw, warnings = out
        return dict(kw), list(warnings)
    return dict(out), []


def profile_defaults(name: str) -> dict[str, Any]:
    """The light source key and gap index a bench profile suggests (to preset the panel), when it has them."""
    mod = _module("ringgauge.calibration.profiles")
    if mod is None or not hasattr(mod, "get"):
        return {}
    prof = mod.get(name)
    out: dict[str, Any] = {}
    if getattr(prof, "source", None):
        out["source"] = prof.source
    elif getattr(prof, "wavelength_nm", None):
        out.update(source="custom", custom_wavelength_nm=float(prof.wavelength_nm),
                   custom_wavelength_u_nm=float(prof.wavelength_u_nm or 0.005 / 3**0.5))
    if getattr(prof, "medium_index", None) is not None:
        n = float(prof.medium_index)
        out.update(medium="air") if n == 1.0 else out.update(medium="custom", medium_index=n, medium_index_u=0.0)
    return out


# -- test-plate register -----------------------------------------------------------------------------------
def plates_available() -> bool:
    return _module("ringgauge.form.plates") is not None


def plate_ids() -> list[str]:
    """Identifiers of the plates in service (retired plates are left out)."""
    mod = _module("ringgauge.form.plates")
    fn = getattr(mod, "load_register", None) if mod is not None else None
    if not callable(fn):
        return []
    try:
        plates = fn()
    except RinggaugeError:
        return []  # a damaged register: the panel offers none; 'ringgauge plates' names the problem
    return [str(p.id) for p in plates if not getattr(p, "retired", None)]


def plate_dict(plate_id: str) -> dict:
    """What an analysis needs and records about a plate (``TestPlate.setup_dict()``)."""
    mod = _module("ringgauge.form.plates")
    fn = getattr(mod, "get_plate", None) if mod is not None else None
    if not callable(fn):
        raise InputError(f"test plate '{plate_id}' cannot be used: this build has no test-plate register")
    p = fn(plate_id)
    return p.setup_dict() if hasattr(p, "setup_dict") else p.to_dict()


def plate_notes(plate_id: str) -> list[str]:
    """One line about the plate and its warnings (overdue, retired) for the set-up panel."""
    mod = _module("ringgauge.form.plates")
    if mod is None:
        return []
    p = mod.get_plate(plate_id)
    lines = [f"Test plate {p.id}: {p.kind}, R = {p.radius_mm:g} mm (u = {p.radius_u_mm:g} mm), "
             f"calibrated {p.calibrated}."]
    warn = getattr(mod, "plate_warnings", None)
    if callable(warn):
        lines.extend(warn(p))
    return lines


# -- ISO 10110-5 tolerance strings ----------------------------------------------------------------------------
def check_tolerance(text: str) -> None:
    """Raise the form module's own ToleranceSyntaxError for a bad string; accept anything when it is absent."""
    for name in ("ringgauge.form.tolerance", "ringgauge.form"):
        mod = _module(name)
        fn = getattr(mod, "parse_tolerance", None) if mod is not None else None
        if callable(fn):
            fn(text)
            return


# -- records and certificates ----------------------------------------------------------------------------
def records_available() -> bool:
    return _module("ringgauge.records") is not None


def certificates_available() -> bool:
    mod = _module("ringgauge.records.documents")
    return mod is not None and hasattr(mod, "issue_certificate")
