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
    from ..sources import custom_source, get_source

    if not isinstance(s, dict) or not s.get("wavelength_nm") or not s.get("pixel_size_um"):
        raise InputError("the record keeps no usable bench set-up (wavelength and pixel size); re-analyse it "
                         "with 'ringgauge analyze' and give the result with --result")
    src = s.get("source") or {}
    source = None
    if src.get("key"):
        try:
            source = get_source(src["key"])
        except InputError:
            source = None
    lam = float(s["wavelength_nm"])
    if source is None or abs(source.wavelength_nm - lam) > 1e-9:
        source = custom_source(lam, s.get("wavelength_u_nm"), float(src.get("fwhm_nm") or 0.0))
    pix = s["pixel_size_um"] if isinstance(s["pixel_size_um"], list) else [s["pixel_size_um"]] * 2
    pixu = s.get("pixel_size_u_um") or [0.0, 0.0]
    pixu = pixu if isinstance(pixu, list) else [pixu] * 2
    kw = dict(
        source=source, pixel_size_um=float(pix[0]), pixel_size_u_um=float(pixu[0] or 0.0),
        medium_index=float(s.get("medium_index") or 1.0), medium_index_u=float(s.get("medium_index_u") or 0.0),
        fringe_kind=s.get("fringe_kind") or "dark", bench=s.get("bench"), bench_calibrated=s.get("bench_calibrated"),
        test_diameter_mm=s.get("test_diameter_mm"), tolerance=s.get("tolerance"), test_plate=s.get("test_plate"),
        press_test=s.get("press_test"), decision_rule=s.get("decision_rule") or "simple",
    )
    if len(pix) > 1 and pix[1] != pix[0]:
        kw["pixel_size_y_um"] = float(pix[1])
        kw["pixel_size_y_u_um"] = float(pixu[1] or 0.0) if len(pixu) > 1 else None
    if s.get("radius_tolerance"):
        kw["radius_tolerance"] = s["radius_tolerance"]
    return BenchSetup(**kw)


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
