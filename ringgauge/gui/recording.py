"""Keeping the window's results in the inspection records and issuing certificates — through
:mod:`ringgauge.records` (the only part that talks to a database). Plain Python, run on a worker thread: each
call opens its own store connection and closes it again."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

from ..errors import InputError

ProgressFn = Callable[[float, str], None]


@dataclass(frozen=True)
class ToRecord:
    """One analysed (or failed) image to keep."""

    image_path: str
    result: object | None  # an AnalysisResult, or None for a failed analysis
    failure: str | None = None
    image_sha256: str | None = None


def _noop(f: float, m: str) -> None:
    pass


def _file_sha(path: str) -> str | None:
    """Checksum of the file's bytes (also for an image that failed to decode), None when unreadable."""
    from ..imaging import sha256_file

    try:
        return sha256_file(path)
    except OSError:
        return None


def save_records(items: Sequence[ToRecord], *, lot: str | None, operator: str | None, setup: dict | None,
                 part: str | None = None, target: str | None = None,
                 progress: ProgressFn | None = None, details: dict | None = None) -> list[int]:
    """Append one inspection record per item; a lot never gets the same image twice (it returns the record
    already kept instead). Returns the record ids in the order of ``items``."""
    from ..records import RecordMeta, open_store

    if not items:
        raise InputError("nothing to keep: analyse the images first")
    progress = progress or _noop
    base_meta = RecordMeta(part=part or None, lot=lot or None, operator=operator or None)
    if details:  # inspection details for every item (a failed analysis carries no set-up of its own)
        base_meta = base_meta.with_(**{k: v for k, v in details.items() if k != "serial" or not lot})
    ids = []
    with open_store(target) as store:
        for i, it in enumerate(items):
            d = it.result.to_dict() if it.result is not None else None
            meta = _item_meta(base_meta, it)
            sha = it.image_sha256 or ((d or {}).get("image") or {}).get("sha256") or _file_sha(it.image_path)
            rec = store.add(meta, d, image_path=it.image_path, image_sha256=sha,
                            failure=None if d is not None else (it.failure or "analysis failed"),
                            setup=(d or {}).get("setup") or setup, once_per_lot=bool(lot))
            ids.append(rec.id)
            progress((i + 1) / len(items), f"kept {os.path.basename(it.image_path)} as record {rec.id}")
    return ids


def _item_meta(base, it: ToRecord):
    """The record details of one item: the set-up panel's inspection details (kept in the set-up's
    ``inspection``), the serial defaulting to the image's name."""
    details = {k: v for k, v in (getattr(getattr(it.result, "setup", None), "inspection", None) or ()) if v}
    if base.lot:
        details.pop("serial", None)  # a lot's images each have their own serial: their names
    meta = base.with_(**{k: v for k, v in details.items() if getattr(base, k, None) is None})
    if meta.serial is None and it.image_path:
        meta = meta.with_(serial=os.path.splitext(os.path.basename(it.image_path))[0])
    return meta


def issue_certificates(record_ids: Sequence[int], out_dir: str | os.PathLike, *, lot: str | None = None,
                       target: str | None = None, progress: ProgressFn | None = None) -> list[Path]:
    """A certificate PDF per record that holds a result (failed analyses get none), and a lot report when
    ``lot`` is given. Asking again for the same record reprints its certificate with the same number."""
    from ..records import open_store
    from ..certificates import issue_certificate, issue_lot_report
    from ..shop import load_shop

    out = Path(out_dir)
    if not out.is_dir():
        raise InputError(f"{out}: no such folder for the certificates")
    progress = progress or _noop
    shop = load_shop()
    paths: list[Path] = []
    with open_store(target) as store:
        good = [rid for rid in record_ids if store.get(rid).status == "ok"]
        if not good:
            raise InputError("none of these records holds a measurement; no certificate can be issued")
        steps = len(good) + (1 if lot else 0)
        for i, rid in enumerate(good):
            doc, path, _reprint = issue_certificate(store, rid, out / f"record-{rid}.pdf", shop)
            final = out / f"{doc.number}.pdf"
            if Path(path) != final:
                os.replace(path, final)
            paths.append(final)
            progress((i + 1) / steps, f"certificate {doc.number}")
        if lot:
            doc, path = issue_lot_report(store, lot, out / "lot-report.pdf", shop)
            final = out / f"{doc.number}.pdf"
            os.replace(path, final)
            paths.append(final)
            progress(1.0, f"lot report {doc.number}")
    return paths
