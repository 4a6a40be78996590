"""Bench profiles: a named camera set-up with its measured pixel scale, kept in the user's ringgauge folder.

A profile holds the camera and lens / magnification notes, the pixel scale along x and y with standard
uncertainties (from :mod:`ringgauge.calibration` or entered by hand), the calibration date, operator and target
identity, a re-calibration interval (default 180 days), and optionally the bench's default light source and
gap medium. Earlier calibrations are kept in the profile's history.

Profiles live in ``ringgauge.settings.path("benches.json")``. Every write goes through the shared atomic writer
of :mod:`ringgauge.settings` (temporary file in the same folder, flushed to disk, renamed over the old file, under
the file's lock), so a crash never leaves half a file; a damaged file is reported, never overwritten.

The engine reads a profile through :func:`setup_kwargs`.
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import re
from dataclasses import asdict, dataclass, field
from pathlib import Path

from ..errors import InputError
from ..settings import locked as settings_locked
from ..settings import path as settings_path
from ..settings import read_json, write_json_atomic
from ..sources import LightSource, custom_source, get_source

FILE_NAME = "benches.json"
FORMAT = "ringgauge bench profiles"
FORMAT_VERSION = 1
DEFAULT_RECAL_DAYS = 180
#: x and y count as different when they differ by more than this many standard uncertainties of the difference
ANISOTROPY_K = 2.0
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9 ._+#/()-]{0,63}$")


@dataclass
class BenchProfile:
    """One camera set-up and its calibration.

    ``calibration`` is a dict with at least ``date`` (ISO date), ``method``, ``scale_x_um`` and ``scale_x_u_um``
    (µm per pixel, standard uncertainty), ``scale_y_um`` / ``scale_y_u_um`` (None when y was not measured) and
    ``difference_u_um`` (standard uncertainty of x - y, when known).
    """

    name: str
    camera: str = ""
    lens: str = ""
    notes: str = ""
    source: str | None = None  # a built-in source key
    wavelength_nm: float | None = None  # or a custom wavelength
    wavelength_u_nm: float | None = None
    medium_index: float | None = None
    recalibration_days: int = DEFAULT_RECAL_DAYS
    calibration: dict | None = None
    history: list = field(default_factory=list)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "BenchProfile":
        known = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        return cls(**known)

    # -- derived views -------------------------------------------------------------------------------------

    @property
    def calibrated(self) -> str | None:
        return None if not self.calibration else self.calibration.get("date")

    def light_source(self) -> LightSource | None:
        if self.source:
            return get_source(self.source)
        if self.wavelength_nm:
            return custom_source(self.wavelength_nm, self.wavelength_u_nm)
        return None

    def age_days(self, today: dt.date | None = None) -> int | None:
        if not self.calibrated:
            return None
        today = today or dt.date.today()
        return (today - dt.date.fromisoformat(self.calibrated)).days

    def overdue(self, today: dt.date | None = None) -> bool:
        age = self.age_days(today)
        return age is not None and age > self.recalibration_days

    def scales(self):
        """(s_x, u_x, s_y or None, u_y or None, u of the difference or None), µm per pixel."""
        c = self.calibration or {}
        return (c.get("scale_x_um"), c.get("scale_x_u_um"), c.get("scale_y_um"), c.get("scale_y_u_um"),
                c.get("difference_u_um"))

    def anisotropic(self) -> bool:
        sx, ux, sy, uy, du = self.scales()
        if sx is None or sy is None:
            return False
        if du is None:
            du = math.hypot(ux or 0.0, uy or 0.0)
        return abs(sx - sy) > ANISOTROPY_K * du


# ---------------------------------------------------------------------------------------------- the file


def store_path() -> Path:
    return settings_path(FILE_NAME)


def _locked():
    """Serialise read-modify-write cycles between processes (the shared settings lock beside the file)."""
    return settings_locked(store_path())


def load_all() -> dict[str, BenchProfile]:
    """All profiles by name; an empty dict when there is no file yet."""
    p = store_path()
    if not p.exists():
        return {}
    doc = read_json(p, what="the bench profile file")
    if not isinstance(doc, dict) or doc.get("format") != FORMAT or not isinstance(doc.get("benches"), dict):
        raise InputError(f"{p}: not a ringgauge bench profile file; move it away")
    version = doc.get("version", 0)
    if not isinstance(version, int) or isinstance(version, bool):
        raise InputError(f"{p}: the bench profile file is damaged (bad format version); repair it or move it away")
    if version > FORMAT_VERSION:
        raise InputError(f"{p}: written by a newer ringgauge (format {doc.get('version')}); update ringgauge")
    try:
        return {name: BenchProfile.from_dict(d) for name, d in doc["benches"].items()}
    except (TypeError, ValueError, KeyError, AttributeError):
        raise InputError(f"{p}: a bench profile in the file is damaged; repair it or move it away") from None


def _write_all(profiles: dict[str, BenchProfile]) -> None:
    p = store_path()
    doc = {
        "format": FORMAT,
        "version": FORMAT_VERSION,
        "benches": {name: prof.to_dict() for name, prof in sorted(profiles.items())},
    }
    write_json_atomic(p, doc, what="the bench profile file")


def check_name(name: str) -> str:
    if not isinstance(name, str) or not _NAME_RE.match(name) or name != name.strip():
        raise InputError(
            f"bench name {name!r} is not usable: 1-64 characters, letters, digits, spaces and . _ + # / ( ) -, "
            "starting with a letter or digit"
        )
    return name


def _unknown(name: str, profiles: dict) -> InputError:
    if not profiles:
        return InputError(
            f"no bench profile named '{name}'; there are none yet -- make one with 'ringgauge calibrate IMAGE "
            "... --bench NAME' or 'ringgauge bench add NAME --pixel-size UM'"
        )
    close = difflib.get_close_matches(name, list(profiles), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    return InputError(f"no bench profile named '{name}'{hint}; known benches: {', '.join(sorted(profiles))}")


def get(name: str) -> BenchProfile:
    profiles = load_all()
    if name not in profiles:
        raise _unknown(name, profiles)
    return profiles[name]


def names() -> list[str]:
    return sorted(load_all())


def save(profile: BenchProfile, *, replace: bool = True) -> BenchProfile:
    check_name(profile.name)
    _validate(profile)
    with _locked():
        profiles = load_all()
        if not replace and profile.name in profiles:
            raise InputError(f"a bench profile named '{profile.name}' exists already; choose another name or "
                             "replace it")
        profiles[profile.name] = profile
        _write_all(profiles)
    return profile


def remove(name: str) -> BenchProfile:
    with _locked():
        profiles = load_all()
        if name not in profiles:
            raise _unknown(name, profiles)
        gone = profiles.pop(name)
        _write_all(profiles)
    return gone


def rename(old: str, new: str) -> BenchProfile:
    check_name(new)
    with _locked():
        profiles = load_all()
        if old not in profiles:
            raise _unknown(old, profiles)
        if new in profiles:
            raise InputError(f"a bench profile named '{new}' exists already")
        prof = profiles.pop(old)
        prof.name = new
        profiles[new] = prof
        _write_all(profiles)
    return prof


def _validate(p: BenchProfile) -> None:
    if not isinstance(p.recalibration_days, int) or p.recalibration_days < 1 or p.recalibration_days > 3650:
        raise InputError(f"re-calibration interval must be 1-3650 days, got {p.recalibration_days}")
    if p.source is not None:
        get_source(p.source)
    if p.wavelength_nm is not None:
        custom_source(p.wavelength_nm, p.wavelength_u_nm)
    if p.medium_index is not None and not 1.0 <= float(p.medium_index) <= 2.5:
        raise InputError(f"gap medium index {p.medium_index} is outside 1.0-2.5 (air is 1.0, water 1.333)")


# ------------------------------------------------------------------------------------- making and updating


def _today_iso(date: str | dt.date | None) -> str:
    if date is None:
        return dt.date.today().isoformat()
    if isinstance(date, dt.date):
        return date.isoformat()
    try:
        d = dt.date.fromisoformat(str(date))
    except ValueError:
        raise InputError(f"calibration date must be YYYY-MM-DD, got {date!r}") from None
    if d > dt.date.today():
        raise InputError(f"calibration date {d} lies in the future")
    return d.isoformat()


def calibration_entry(cal, *, operator: str = "", date=None) -> dict:
    """The ``calibration`` dict of a profile from a :class:`~ringgauge.calibration.ScaleCalibration`."""
    d = cal.to_dict()
    return {
        "date": _today_iso(date),
        "recorded_utc": dt.datetime.now(dt.timezone.utc).replace(microsecond=0).isoformat(),
        "method": cal.method,
        "method_text": d["method_text"],
        "operator": operator,
        "target": d["target"],
        "images": d["images"],
        "scale_x_um": cal.scale_x.value,
        "scale_x_u_um": cal.scale_x.u,
        "scale_y_um": None if cal.scale_y is None else cal.scale_y.value,
        "scale_y_u_um": None if cal.scale_y is None else cal.scale_y.u,
        "difference_u_um": cal.difference_u_um,
        "squareness_deg": None if cal.squareness is None else cal.squareness.value,
        "squareness_u_deg": None if cal.squareness is None else cal.squareness.u,
        "budget_x": d["budget_x"],
        "budget_y": d["budget_y"],
        "warnings": d["warnings"],
        "entered_by_hand": False,
    }


def hand_entry(pixel_size_um: float, pixel_size_u_um: float = 0.0, pixel_size_y_um: float | None = None,
               pixel_size_y_u_um: float | None = None, *, operator: str = "", date=None, note: str = "") -> dict:
    """A ``calibration`` dict for a scale typed in by hand (from another instrument's certificate, say)."""
    from ..bench_setup import check_positive

    sx = check_positive("pixel size", pixel_size_um, "µm")
    ux = float(pixel_size_u_um or 0.0)
    if not math.isfinite(ux) or ux < 0:
        raise InputError("pixel size uncertainty cannot be negative")
    sy = uy = None
    if pixel_size_y_um is not None:
        sy = check_positive("pixel size along y", pixel_size_y_um, "µm")
        uy = float(pixel_size_y_u_um if pixel_size_y_u_um is not None else ux)
        if not math.isfinite(uy) or uy < 0:
            raise InputError("pixel size uncertainty along y cannot be negative")
    for s, u in ((sx, ux), (sy, uy)):
        if s is not None and u > 0.2 * s:
            raise InputError(f"pixel size uncertainty {u:g} µm is over 20 % of the pixel size {s:g} µm")
    return {
        "date": _today_iso(date),
        "recorded_utc": dt.datetime.now(dt.timezone.utc).replace(microsecond=0).isoformat(),
        "method": "by-hand",
        "method_text": "entered by hand" + (f" ({note})" if note else ""),
        "operator": operator,
        "target": None,
        "images": [],
        "scale_x_um": sx,
        "scale_x_u_um": ux,
        "scale_y_um": sy,
        "scale_y_u_um": uy,
        "difference_u_um": None if sy is None else math.hypot(ux, uy),
        "squareness_deg": None,
        "squareness_u_deg": None,
        "warnings": [] if ux > 0 else ["no uncertainty given for the pixel size"],
        "entered_by_hand": True,
    }


def record_calibration(name: str, entry: dict, **meta) -> BenchProfile:
    """Store a new calibration in profile ``name`` (made when missing); the previous one goes to history.

    ``meta`` may set camera, lens, notes, source, wavelength_nm, wavelength_u_nm, medium_index,
    recalibration_days; values of None leave the profile's current setting.
    """
    check_name(name)
    with _locked():
        profiles = load_all()
        prof = profiles.get(name) or BenchProfile(name=name)
        for k, v in meta.items():
            if k not in BenchProfile.__dataclass_fields__ or k in ("name", "calibration", "history"):
                raise TypeError(f"unknown bench profile field {k!r}")
            if v is not None:
                setattr(prof, k, v)
        if meta.get("source"):
            prof.wavelength_nm = prof.wavelength_u_nm = None
        elif meta.get("wavelength_nm"):
            prof.source = None
        if prof.calibration:
            old = dict(prof.calibration)
            for k in ("budget_x", "budget_y", "images"):
                old.pop(k, None)
            prof.history = [old] + list(prof.history)
        prof.calibration = entry
        _validate(prof)
        profiles[name] = prof
        _write_all(profiles)
    return prof


def update(name: str, **meta) -> BenchProfile:
    """Change a profile's notes and defaults (not its calibration)."""
    with _locked():
        profiles = load_all()
        if name not in profiles:
            raise _unknown(name, profiles)
        prof = profiles[name]
        for k, v in meta.items():
            if k not in BenchProfile.__dataclass_fields__ or k in ("name", "calibration", "history"):
                raise TypeError(f"unknown bench profile field {k!r}")
            if v is not None:
                setattr(prof, k, v)
        if meta.get("source"):
            prof.wavelength_nm = prof.wavelength_u_nm = None
        elif meta.get("wavelength_nm"):
            prof.source = None
        _validate(prof)
        _write_all(profiles)
    return prof


# ----------------------------------------------------------------------------------------- engine contract


def profile_warnings(prof: BenchProfile, today: dt.date | None = None) -> list[str]:
    """What an analysis run with this profile must say about it."""
    out = []
    age = prof.age_days(today)
    if age is not None and age > prof.recalibration_days:
        out.append(
            f"bench '{prof.name}' was calibrated on {prof.calibrated}, {age} days ago -- past its "
            f"{prof.recalibration_days}-day re-calibration interval; recalibrate with 'ringgauge calibrate'"
        )
    sx, ux, sy, uy, du = prof.scales()
    if sx is not None and sy is None:
        out.append(f"bench '{prof.name}': pixel scale along y was not measured; x and y are taken as equal")
    if prof.anisotropic():
        out.append(
            f"bench '{prof.name}': x and y pixel scales differ ({sx:.5f} vs {sy:.5f} µm/px) by more than their "
            "uncertainty (anisotropic pixels or a tilted camera); both scales are used"
        )
    return out


def setup_kwargs(name: str, *, today: dt.date | None = None) -> tuple[dict, list[str]]:
    """BenchSetup keyword arguments from bench profile ``name``, and the warnings that go with them.

    Returns ``pixel_size_um, pixel_size_u_um, pixel_size_y_um, pixel_size_y_u_um, bench, bench_calibrated``
    (ISO date) and, when the profile has them, ``source`` (a LightSource) and ``medium_index``.
    ``pixel_size_y_um`` is None when x and y agree within their uncertainties (then the mean of x and y is
    used, with the larger of their uncertainties), else the measured y scale. Unknown name -> InputError
    listing the known benches.
    """
    prof = get(name)
    sx, ux, sy, uy, du = prof.scales()
    if sx is None:
        raise InputError(f"bench '{name}' has no pixel scale yet; calibrate it with 'ringgauge calibrate'")
    ux = float(ux or 0.0)
    if sy is None:
        px, pu, py, pyu = float(sx), ux, None, None
    elif prof.anisotropic():
        px, pu, py, pyu = float(sx), ux, float(sy), float(uy or 0.0)
    else:
        px, pu, py, pyu = 0.5 * (float(sx) + float(sy)), max(ux, float(uy or 0.0)), None, None
    kw = {
        "pixel_size_um": px,
        "pixel_size_u_um": pu,
        "pixel_size_y_um": py,
        "pixel_size_y_u_um": pyu,
        "bench": prof.name,
        "bench_calibrated": prof.calibrated,
    }
    src = prof.light_source()
    if src is not None:
        kw["source"] = src
    if prof.medium_index is not None:
        kw["medium_index"] = float(prof.medium_index)
    return kw, profile_warnings(prof, today)
