"""A lot of images for the QA reviewer, as plain Python: one row per file with its status, key values and
verdict, and CSV export. The window runs each row's analysis off the GUI thread and hands results back."""

from __future__ import annotations

import csv
import os
from dataclasses import dataclass
from typing import Any

from ..errors import InputError, RinggaugeError
from ..imaging import load_frame
from ..result import AnalysisResult
from .display import verdict_view
from .model import Signal, image_files, progress_adapter

QUEUED, RUNNING, DONE, FAILED = "queued", "analysing", "done", "failed"


@dataclass
class LotRow:
    path: str
    status: str = QUEUED
    message: str = ""
    result: Any = None
    summary: dict | None = None
    record_id: int | None = None  # once kept in the inspection records

    @property
    def name(self) -> str:
        return os.path.basename(self.path)


#: the table's columns: key, header (with unit)
COLUMNS = (
    ("name", "Image"),
    ("status", "Status"),
    ("radius_mm", "R / mm"),
    ("radius_U_mm", "U(R) / mm"),
    ("power", "Power / fringes"),
    ("irregularity", "Irregularity / fringes"),
    ("verdict", "Verdict"),
    ("radius_verdict", "Radius verdict"),
    ("message", "Note"),
)


def summarise(result: AnalysisResult) -> dict:
    """The lot table's values from a typed result."""
    form = result.form
    v = verdict_view(result)
    rv = result.verdict.radius if result.verdict is not None else None
    radius_word = None
    if rv is not None:
        radius_word = rv.verdict + ("" if rv.accepted is None or rv.accepted else " (not accepted)")
    return {
        "radius_mm": result.radius_mm,
        "radius_U_mm": result.radius_U_mm,
        "k": result.k,
        "power": None if form is None else form.term("power").fringes.value,
        "irregularity": None if form is None else form.term("irregularity").fringes.value,
        "verdict": v.word,
        "radius_verdict": radius_word,
        "radius_tolerance": None if rv is None else rv.tolerance.describe(),
        "decision_rule": v.decision_rule,
        "sha256": result.image.sha256,
        "wavelength_nm": result.setup.wavelength_nm,
        "warnings": "; ".join(result.warnings),
    }


class Lot:
    """The rows of one lot folder. ``changed`` emits ``("rows", None)`` after loading and ``("row", i)``
    after row ``i`` changed."""

    def __init__(self):
        self.folder: str | None = None
        self.lot_name = ""  # as typed on the lot page (or from the folder's lot sheet); "" = the folder's name
        self.rows: list[LotRow] = []
        self.generation = 0
        self.changed = Signal()

    def load_folder(self, folder: str | os.PathLike) -> None:
        files = image_files(folder)
        if not files:
            raise InputError(f"{folder}: the folder holds no images (PNG, TIFF, JPEG, BMP)")
        self.folder = os.fspath(folder)
        self.lot_name = _sheet_lot_name(self.folder)
        self.rows = [LotRow(p) for p in files]
        self.generation += 1
        self.changed.emit("rows", None)

    def cancel(self) -> None:
        self.generation += 1

    def counts(self) -> dict[str, int]:
        out = {QUEUED: 0, RUNNING: 0, DONE: 0, FAILED: 0}
        for r in self.rows:
            out[r.status] = out.get(r.status, 0) + 1
        return out

    def mark_running(self, i: int) -> None:
        self.rows[i].status = RUNNING
        self.changed.emit("row", i)

    def set_result(self, i: int, result) -> None:
        row = self.rows[i]
        row.status, row.result, row.message, row.record_id = DONE, result, "", None
        row.summary = summarise(result)
        warn = row.summary.get("warnings")
        if warn:
            row.message = warn
        self.changed.emit("row", i)

    def set_failure(self, i: int, message: str) -> None:
        row = self.rows[i]
        row.status, row.result, row.summary, row.message, row.record_id = FAILED, None, None, message, None
        self.changed.emit("row", i)

    def cell(self, i: int, key: str):
        """The raw value of a table cell (numbers stay numbers so sorting is numeric)."""
        row = self.rows[i]
        if key == "name":
            return row.name
        if key == "status":
            return row.status
        if key == "message":
            return row.message
        return (row.summary or {}).get(key)

    @property
    def name(self) -> str:
        """The lot's name: as typed (or from the lot sheet), else its folder's name."""
        if self.lot_name.strip():
            return self.lot_name.strip()
        return os.path.basename(os.path.normpath(self.folder)) if self.folder else ""

    def entries(self):
        """The rows as :class:`ringgauge.records.lot.LotEntry` (finished rows only), in folder order."""
        from ..records.lot import entry_from_result

        out = []
        for i, r in enumerate(self.rows):
            if r.status == DONE and r.result is not None:
                out.append(entry_from_result(r.result, order=i, serial=os.path.splitext(r.name)[0], image_name=r.name,
                                             record_id=r.record_id))
            elif r.status == FAILED:
                out.append(entry_from_result(None, order=i, serial=os.path.splitext(r.name)[0], image_name=r.name,
                                             failed=True, failure=r.message, record_id=r.record_id))
        return out

    def statistics(self):
        """(summary, tables) of the finished rows — the same figures, digits and chart data the lot report
        prints (``ringgauge.records.lot``); (None, None) before any row is finished."""
        from ..records.lot import lot_tables, summarise_lot

        entries = self.entries()
        if not entries:
            return None, None
        summary = summarise_lot(entries, self.name)
        return summary, lot_tables(entries, summary)

    def finished_rows(self) -> list[int]:
        return [i for i, r in enumerate(self.rows) if r.status in (DONE, FAILED)]

    @staticmethod
    def analyse_one(path: str, setup, analyse, progress=None):
        """What a worker runs for one row: load the frame and analyse it."""
        frame = load_frame(path)
        return analyse([frame], setup, progress=progress_adapter(progress))

    def export_csv(self, target: str | os.PathLike) -> int:
        """Write every row to a CSV file (units in the headers); returns the number of rows written."""
        if not self.rows:
            raise InputError("the lot is empty; open a folder of images first")
        k = next((r.summary["k"] for r in self.rows if r.summary and r.summary.get("k")), 2.0)
        headers = ["image", "path", "status", "radius_mm", f"radius_U_mm_k{k:g}", "power_fringes",
                   "irregularity_fringes", "wavelength_nm", "verdict", "decision_rule", "radius_verdict",
                   "radius_tolerance", "image_sha256", "note"]
        try:
            with open(target, "w", newline="", encoding="utf-8") as fh:
                w = csv.writer(fh)
                w.writerow(headers)
                for r in self.rows:
                    s = r.summary or {}
                    w.writerow([r.name, r.path, r.status, _csv(s.get("radius_mm")), _csv(s.get("radius_U_mm")),
                                _csv(s.get("power")), _csv(s.get("irregularity")), _csv(s.get("wavelength_nm")),
                                s.get("verdict", ""), s.get("decision_rule", ""), s.get("radius_verdict") or "",
                                s.get("radius_tolerance") or "", s.get("sha256", ""), r.message])
        except OSError as exc:
            raise InputError(f"{target}: cannot write the CSV file ({exc.strerror or exc})") from None
        return len(self.rows)


def _sheet_lot_name(folder: str) -> str:
    """The lot name from the folder's lot sheet (lot.json), or "" when there is none or it cannot be read."""
    import json

    p = os.path.join(folder, "lot.json")
    try:
        with open(p, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        return ""
    name = data.get("lot") if isinstance(data, dict) else None
    return name.strip()[:200] if isinstance(name, str) else ""


def _csv(v) -> str:
    return "" if v is None else repr(float(v))


def failure_text(exc: BaseException) -> str:
    return str(exc) if isinstance(exc, RinggaugeError) else f"{type(exc).__name__}: {exc}"
