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
    mod = _module("ringgauge.form.plates")
    if mod is None:
        return []
    for attr in ("plate_ids", "list_plates", "load_register", "register"):
        fn = getattr(mod, attr, None)
        if callable(fn):
            out = fn()
            if isinstance(out, dict):
                return [str(k) for k in out]
            return [p if isinstance(p, str) else str(getattr(p, "id", getattr(p, "plate_id", p))) for p in out]
    return []


def plate_dict(plate_id: str) -> dict:
    mod = _module("ringgauge.form.plates")
    if mod is None:
        raise InputError(f"test plate '{plate_id}' cannot be used: this build has no test-plate register")
    for attr in ("get_plate", "plate", "lookup"):
        fn = getattr(mod, attr, None)
        if callable(fn):
            p = fn(plate_id)
            return p.to_dict() if hasattr(p, "to_dict") else dict(p)
    raise InputError(f"test plate '{plate_id}' cannot be looked up in this build's register")


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
