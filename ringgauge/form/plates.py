"""The shop's test-plate register: a plain JSON file the user may edit by hand.

Each plate: identifier (e.g. ``TP-0412``), radius in mm (of the plate's working surface), ``convex`` or
``concave`` (the plate's surface; a convex plate tests concave parts), certified radius standard uncertainty
(mm, k = 1), calibration date and interval, diameter, free note, and whether it is retired. The file lives at
``ringgauge.settings.path("test_plates.json")``; writes go through the shared atomic writer (temporary file, then
replace in one step, under the register's lock), so an interrupted write never leaves half a file, and adding or
retiring a plate is one locked read-modify-write so two processes cannot lose each other's change.
"""

from __future__ import annotations

import datetime as _dt
import re
from dataclasses import asdict, dataclass, field
from pathlib import Path

from ..errors import InputError
from ..settings import locked, read_json, write_json_atomic

REGISTER_NAME = "test_plates.json"
DEFAULT_INTERVAL_MONTHS = 24  # common practice, no source: shops recalibrate test plates every one to two years
_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,39}$")


@dataclass(frozen=True)
class TestPlate:
    """One test plate in the register."""

    __test__ = False  # not a pytest test class

    id: str
    radius_mm: float
    kind: str  # "convex" | "concave" | "flat"
    radius_u_mm: float
    calibrated: str  # ISO date
    diameter_mm: float | None = None
    interval_months: int = DEFAULT_INTERVAL_MONTHS
    note: str = ""
    retired: str | None = None  # ISO date when retired
    extras: dict = field(default_factory=dict)

    def due(self) -> _dt.date:
        d = _dt.date.fromisoformat(self.calibrated)
        m = d.month - 1 + self.interval_months
        y = d.year + m // 12
        m = m % 12 + 1
        import calendar

        return _dt.date(y, m, min(d.day, calendar.monthrange(y, m)[1]))

    def overdue(self, today: _dt.date | None = None) -> bool:
        return (today or _dt.date.today()) > self.due()

    def to_dict(self) -> dict:
        d = asdict(self)
        d["due"] = self.due().isoformat()
        if not d["extras"]:
            d.pop("extras")
        return d

    def setup_dict(self, today: _dt.date | None = None) -> dict:
        """What an analysis needs and records about the plate."""
        return {
            "id": self.id,
            "radius_mm": None if self.kind == "flat" else self.radius_mm,
            "radius_u_mm": self.radius_u_mm,
            "kind": self.kind,
            "calibrated": self.calibrated,
            "due": self.due().isoformat(),
            "overdue": self.overdue(today),
            "diameter_mm": self.diameter_mm,
        }


def register_path() -> Path:
    from ..settings import path

    return path(REGISTER_NAME)


def _validate(d: dict, where: str) -> TestPlate:
    try:
        pid = str(d["id"]).strip()
        radius = float(d["radius_mm"])
        kind = str(d.get("kind", "")).strip().lower()
        u = float(d.get("radius_u_mm", 0.0))
        cal = str(d["calibrated"]).strip()
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"{where}: a test plate entry is missing or has a bad field ({exc})") from None
    if not _ID.match(pid):
        raise InputError(f"{where}: test plate identifier {pid!r} must be letters, digits, '.', '_' or '-'")
    if kind not in ("convex", "concave", "flat"):
        raise InputError(f"{where}: plate {pid}: kind must be convex, concave or flat, got {kind!r}")
    if kind == "flat":
        radius = float("inf") if radius <= 0 or radius != radius else radius
    elif not (radius > 0 and radius < 1e7):
        raise InputError(f"{where}: plate {pid}: radius must be a positive number of mm, got {d['radius_mm']}")
    if not (0 <= u < 1e7):
        raise InputError(f"{where}: plate {pid}: radius uncertainty must be a finite number of mm, not negative")
    try:
        _dt.date.fromisoformat(cal)
    except ValueError:
        raise InputError(f"{where}: plate {pid}: calibration date {cal!r} is not a date like 2026-03-14") from None
    diam = d.get("diameter_mm")
    if diam is not None:
        try:
            diam = float(diam)
        except (TypeError, ValueError):
            diam = float("nan")
        if not (0 < diam < 1e7):
            raise InputError(f"{where}: plate {pid}: diameter must be a positive number of mm")
    try:
        interval = int(d.get("interval_months", DEFAULT_INTERVAL_MONTHS))
    except (TypeError, ValueError, OverflowError):
        interval = 0
    if not 1 <= interval <= 240:
        raise InputError(f"{where}: plate {pid}: calibration interval must be 1-240 months")
    known = {"id", "radius_mm", "kind", "radius_u_mm", "calibrated", "diameter_mm", "interval_months", "note",
             "retired", "due"}
    extras = {k: v for k, v in d.items() if k not in known}
    return TestPlate(pid, radius, kind, u, cal, diam, interval, str(d.get("note", "")), d.get("retired"), extras)


def load_register(path: Path | None = None) -> list[TestPlate]:
    """All plates (retired ones too). A missing file is an empty register."""
    p = Path(path) if path else register_path()
    if not p.exists():
        return []
    doc = read_json(p, what="the test-plate register")
    items = doc.get("plates") if isinstance(doc, dict) else doc
    if not isinstance(items, list):
        raise InputError(f"{p}: expected a list of plates under \"plates\"")
    plates = [_validate(d, str(p)) for d in items]
    ids = [pl.id.lower() for pl in plates]
    dup = {i for i in ids if ids.count(i) > 1}
    if dup:
        raise InputError(f"{p}: plate identifier listed twice: {', '.join(sorted(dup))}")
    return plates


def save_register(plates: list[TestPlate], path: Path | None = None) -> Path:
    """Write the register atomically (temporary file in the same folder, then replace)."""
    p = Path(path) if path else register_path()
    doc = {
        "about": "ringgauge test-plate register; edit by hand or with 'ringgauge plates'. Radii in mm, "
        "radius_u_mm is the certified standard uncertainty (k = 1), dates as YYYY-MM-DD.",
        "plates": [pl.to_dict() for pl in plates],
    }
    for d in doc["plates"]:
        d.pop("due", None)
        if d["radius_mm"] == float("inf"):
            d["radius_mm"] = 0
    write_json_atomic(p, doc, what="the test-plate register")
    return p


def get_plate(plate_id: str, path: Path | None = None) -> TestPlate:
    plates = load_register(path)
    for pl in plates:
        if pl.id.lower() == plate_id.strip().lower():
            return pl
    known = ", ".join(pl.id for pl in plates if not pl.retired) or "none yet"
    raise InputError(f"test plate '{plate_id}' is not in the register (known: {known}); add it with "
                     "'ringgauge plates add'")


def add_plate(plate: dict, path: Path | None = None) -> TestPlate:
    new = _validate(plate, "new plate")
    # read-modify-write under the register's lock: a second process adding a plate at the same time waits
    # and then reads the register with the first one's plate in it, so no update is lost
    with locked(Path(path) if path else register_path()):
        plates = load_register(path)
        if any(pl.id.lower() == new.id.lower() for pl in plates):
            raise InputError(f"test plate '{new.id}' is already in the register; retire it or choose another id")
        save_register(plates + [new], path)
    return new


def retire_plate(plate_id: str, when: str | None = None, path: Path | None = None) -> TestPlate:
    with locked(Path(path) if path else register_path()):
        plates = load_register(path)
        target = get_plate(plate_id, path)
        if target.retired:
            raise InputError(f"test plate '{target.id}' was already retired on {target.retired}")
        day = when or _dt.date.today().isoformat()
        out = []
        for pl in plates:
            if pl.id == target.id:
                pl = TestPlate(**{**asdict(pl), "retired": day})
                target = pl
            out.append(pl)
        save_register(out, path)
    return target


def plate_warnings(plate: dict | TestPlate, today: _dt.date | None = None) -> list[str]:
    """Warnings about using a plate: overdue calibration, retired."""
    pl = plate if isinstance(plate, TestPlate) else None
    if pl is None:
        d = plate
        if "calibrated" not in d:
            return []
        pl = _validate({**d, "kind": d.get("kind", "convex")}, "plate")
    out = []
    if pl.retired:
        out.append(f"test plate {pl.id} was retired on {pl.retired}")
    if pl.overdue(today):
        out.append(
            f"test plate {pl.id}: calibration overdue (calibrated {pl.calibrated}, due {pl.due().isoformat()}); "
            "its certified radius may no longer hold"
        )
    return out
