"""Export records as CSV (one row per record, units in the column names) or JSON (full records)."""

from __future__ import annotations

import csv
import json
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
