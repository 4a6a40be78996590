"""Export records as CSV (one row per record, units in the column names) or JSON (full records)."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path
from typing import Iterable, TextIO

CSV_COLUMNS = (
    "id", "created_utc", "status", "lot", "part", "drawing", "surface", "serial", "operator", "customer",
    "order_ref", "temperature_c", "verdict", "radius_mm", "radius_U_mm", "k", "power_fringes", "power_U_fringes",
    "wavelength_nm", "source", "pixel_size_um", "pixel_size_u_um", "medium_index", "test_diameter_mm",
    "tolerance", "test_plate", "image_name", "image_sha256", "failure_reason", "supersedes", "supersede_reason",
    "superseded_by", "software_version", "uid", "content_sha256",
)


def csv_row(rec) -> dict:
    d = rec.to_dict(with_result=False)
    s = rec.setup or {}
    pix = s.get("pixel_size_um")
    pixu = s.get("pixel_size_u_um")
    plate = s.get("test_plate")
    d.update({
        "k": (rec.result or {}).get("k"),
        "wavelength_nm": s.get("wavelength_nm"),
        "source": (s.get("source") or {}).get("key"),
        "pixel_size_um": pix[0] if isinstance(pix, list) else pix,
        "pixel_size_u_um": pixu[0] if isinstance(pixu, list) else pixu,
        "medium_index": s.get("medium_index"),
        "test_diameter_mm": s.get("test_diameter_mm"),
        "tolerance": s.get("tolerance"),
        "test_plate": (plate.get("id") or json.dumps(plate, sort_keys=True)) if isinstance(plate, dict) else plate,
    })
    return {k: ("" if d.get(k) is None else d.get(k)) for k in CSV_COLUMNS}


def write_csv(records: Iterable, fh: TextIO) -> int:
    w = csv.DictWriter(fh, fieldnames=CSV_COLUMNS, lineterminator="\n")
    w.writeheader()
    n = 0
    for r in records:
        w.writerow(csv_row(r))
        n += 1
    return n


def write_json(records: Iterable, fh: TextIO) -> int:
    items = [r.to_dict() for r in records]
    json.dump({"format": "ringgauge records", "version": 1, "records": items}, fh, indent=2, ensure_ascii=False)
    fh.write("\n")
    return len(items)


def check_out_path(out: str | Path) -> Path:
    """Refuse an export target that cannot be written, before any work is done (one-line message)."""
    from ..errors import InputError

    out = Path(out)
    if out.is_dir():
        raise InputError(f"cannot write the export to {out}: it is a folder; give a file name, e.g. {out / 'records.csv'}")
    if out.exists() and not out.is_file():
        raise InputError(f"cannot write the export to {out}: it is not a regular file")
    if not out.parent.is_dir():
        raise InputError(f"cannot write {out}: folder {out.parent} does not exist")
    return out


def export_to_file(records: Iterable, out: str | Path, fmt: str) -> int:
    """Write an export file atomically under its lock (a reader never sees half an export); returns the count."""
    from ..settings import write_text_atomic

    out = check_out_path(out)
    buf = io.StringIO(newline="")
    n = (write_json if fmt == "json" else write_csv)(records, buf)
    write_text_atomic(out, buf.getvalue(), lock=False)
    return n
