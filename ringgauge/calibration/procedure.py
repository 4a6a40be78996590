"""One calibration as a bench operator asks for it — images, a target of certified size, optionally a bench
profile to save it in — checked, measured and saved in one place, so that ``ringgauge calibrate`` and the
window's calibration dialog apply the same checks and the same measurement.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from ..errors import InputError


@dataclass(frozen=True)
class CalibrationRun:
    """What one calibration produced: the measurement and, when a bench name was given, the saved profile."""

    calibration: Any  # ScaleCalibration
    profile: Any = None  # BenchProfile or None


def check_request(images: Sequence[str], *, grating_pitch_um: float | None = None, pitch_u_um: float | None = None,
                  disc_diameter_mm: float | None = None, diameter_u_mm: float | None = None, target: str = "auto",
                  bench: str | None = None, source: str | None = None, wavelength_nm: float | None = None) -> None:
    """Refuse an incomplete or contradictory request before any image is read (a typo costs nothing)."""
    if (grating_pitch_um is None) == (disc_diameter_mm is None):
        raise InputError("give the target's certified size: a line pitch in µm or a disc diameter in mm (one)")
    if not images:
        raise InputError("no calibration image given")
    if len(images) > 2:
        raise InputError("give one calibration image, or two of a line scale turned by about 90°")
    for name, v in (("pitch", grating_pitch_um), ("disc diameter", disc_diameter_mm)):
        if v is not None and not v > 0:
            raise InputError(f"the {name} must be a positive number")
    for name, v in (("pitch uncertainty", pitch_u_um), ("diameter uncertainty", diameter_u_mm)):
        if v is not None and not v >= 0:
            raise InputError(f"the {name} cannot be negative")
    if disc_diameter_mm is not None and pitch_u_um is not None:
        raise InputError("--pitch-u goes with --grating-pitch; for a disc give --diameter-u")
    if grating_pitch_um is not None and diameter_u_mm is not None:
        raise InputError("--diameter-u goes with --disc-diameter; for a line scale give --pitch-u")
    if disc_diameter_mm is not None and len(images) != 1:
        raise InputError("a disc calibration takes one image")
    if len(images) == 2 and target not in ("auto", "lines"):
        raise InputError("two images are read as one line scale turned by 90°; use --target lines or auto")
    if source and wavelength_nm:
        raise InputError("give either --source or --wavelength, not both")
    if bench:
        from . import profiles

        profiles.check_name(bench)
    from ..sources import custom_source, get_source

    if source:
        get_source(source)
    if wavelength_nm:
        custom_source(wavelength_nm)


def calibrate(images: Sequence[str], *, grating_pitch_um: float | None = None, pitch_u_um: float | None = None,
              disc_diameter_mm: float | None = None, diameter_u_mm: float | None = None, target: str = "auto",
              target_id: str | None = None, bench: str | None = None, operator: str = "",
              camera: str | None = None, lens: str | None = None, source: str | None = None,
              wavelength_nm: float | None = None, medium_index: float | None = None,
              recalibration_days: int | None = None,
              progress: Callable[[str], None] | None = None) -> CalibrationRun:
    """Check the request, read the image(s), measure the pixel scale and (with ``bench``) save it in that
    bench profile — the previous calibration goes to the profile's history."""
    from . import measure_disc, measure_grating, measure_line_pair
    from . import profiles
    from ..imaging import load_frame

    say = progress or (lambda _m: None)
    check_request(images, grating_pitch_um=grating_pitch_um, pitch_u_um=pitch_u_um,
                  disc_diameter_mm=disc_diameter_mm, diameter_u_mm=diameter_u_mm, target=target, bench=bench,
                  source=source, wavelength_nm=wavelength_nm)
    frames = []
    for path in images:
        say(f"reading {path} ...")
        frames.append(load_frame(path))
    if disc_diameter_mm is not None:
        say("finding the disc edge and fitting it ...")
        cal = measure_disc(frames[0], disc_diameter_mm, diameter_u_mm, target_id=target_id)
    elif len(frames) == 2:
        say("finding the line period in both images ...")
        cal = measure_line_pair(frames[0], frames[1], grating_pitch_um, pitch_u_um, target_id=target_id)
    else:
        say("finding the line pattern and fitting its period ...")
        cal = measure_grating(frames[0], grating_pitch_um, pitch_u_um, kind=target, target_id=target_id)
    saved = None
    if bench:
        entry = profiles.calibration_entry(cal, operator=operator)
        saved = profiles.record_calibration(
            bench, entry, camera=camera, lens=lens, source=source, wavelength_nm=wavelength_nm,
            medium_index=medium_index, recalibration_days=recalibration_days,
        )
    return CalibrationRun(cal, saved)
