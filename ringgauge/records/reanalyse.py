"""Corrections that come from measurements: analyse a record's image again with the record's own bench set-up.

The set-up stored with a record (``BenchSetup.to_dict()``) is turned back into a :class:`BenchSetup`, so a
re-analysis uses the same lamp, pixel scale, gap medium and form options as the first one.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError


def setup_from_dict(s: dict):
    """A :class:`~ringgauge.bench_setup.BenchSetup` from the dict a record stores."""
    from ..bench_setup import BenchSetup

    if not isinstance(s, dict) or not s.get("wavelength_nm") or not s.get("pixel_size_um"):
        raise InputError("the record keeps no usable bench set-up (wavelength and pixel size); re-analyse it "
                         "with 'ringgauge analyze' and give the result with --result")
    return BenchSetup.from_dict(s)


def reanalyse(record, image_path: str | None = None) -> tuple[dict, str]:
    """Analyse the record's image (or ``image_path``) again with its set-up: (result dict, note)."""
    from ..pipeline import analyse_files

    path = image_path or record.image_path
    if not path:
        raise InputError(f"record {record.id} names no image file; give the image with --image PATH")
    if not Path(path).is_file():
        raise InputError(f"{path}: no such image file (give the image with --image PATH)")
    setup = setup_from_dict(record.setup or (record.result or {}).get("setup") or {})
    result = analyse_files([str(path)], setup).to_dict()
    same = result.get("image", {}).get("sha256") == record.image_sha256
    note = "the same image as the record's" if same else "a different image from the record's"
    return result, note
