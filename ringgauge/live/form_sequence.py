"""Generated bench sequences against a test plate: a part with power and astigmatism settling on the plate,
resting, pressed gently and released.

The part's form (power, astigmatism, axis) stays fixed; the uniform part of the gap (the piston, in fringes)
follows the same plan as the Newton's-rings sequences (:class:`ringgauge.live.sequence.SequencePlan`: eased to
a stop while the air film thins, still, pressed and released, still). Each frame is drawn by the test-plate
renderer :func:`ringgauge.synth.test_plate_fringes`, so the frames have the camera model of single images.

Centre contact: power > 0 (the gap grows toward the edge); edge contact: power < 0, the piston raised so the
gap stays open over the whole aperture (the part bears outside the field).
"""

from __future__ import annotations

import os
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from .. import synth
from ..errors import InputError
from ..sources import get_source
from .sequence import CONTACTS, SequencePlan, write_frames


@dataclass(frozen=True)
class FormPlan:
    """A test-plate sequence: the form of the part (fringes, magnitudes; the contact gives the power's sign) and
    the gap plan (``base``; its gaps in nm become pistons, its radius and rim are unused)."""

    power_fringes: float = 2.5
    astigmatism_fringes: float = 0.6
    axis_deg: float = 30.0
    contact: str = "centre"
    aperture_diameter_mm: float = 20.0
    base: SequencePlan = SequencePlan()

    @property
    def n_frames(self) -> int:
        return self.base.n_frames

    def signed_power(self) -> float:
        return abs(self.power_fringes) * (1.0 if self.contact == "centre" else -1.0)

    def pistons_fringes(self, fringe_nm: float) -> np.ndarray:
        lift = abs(self.astigmatism_fringes) / 2 + (abs(self.power_fringes) if self.contact == "edge" else 0.0)
        return self.base.gap_offsets_nm() / fringe_nm + lift


def _check(plan: FormPlan) -> None:
    if plan.contact not in CONTACTS:
        raise InputError(f"contact must be one of {', '.join(CONTACTS)}, got {plan.contact!r}")
    if not 0.3 <= abs(plan.power_fringes) <= 12:
        raise InputError("the power of a test-plate sequence must lie between 0.3 and 12 fringes")
    if not 0 <= plan.astigmatism_fringes <= 6:
        raise InputError("the astigmatism of a test-plate sequence must lie between 0 and 6 fringes")


def render_form_sequence(plan: FormPlan, *, source="mercury-e",
                         camera: synth.Camera = synth.Camera(width=512, height=512, pixel_um=50.0),
                         lighting: synth.Lighting = synth.Lighting(), medium_index: float = 1.0,
                         noise: bool = True, rng: int = 0):
    """Yield ``(index, codes, piston_fringes)`` for every frame of ``plan``."""
    _check(plan)
    src = get_source(source) if isinstance(source, str) else source
    fringe_nm = src.wavelength_nm / (2 * medium_index)
    form = synth.SurfaceForm(power=plan.signed_power(), astig=plan.astigmatism_fringes,
                             astig_axis_deg=plan.axis_deg)
    for i, piston in enumerate(plan.pistons_fringes(fringe_nm)):
        img = synth.test_plate_fringes(replace(form, piston=float(piston)),
                                       aperture_diameter_mm=plan.aperture_diameter_mm, source=src, camera=camera,
                                       lighting=lighting, medium_index=medium_index, noise=noise, rng=(rng, i))
        codes = img.image if noise else np.clip(np.rint(img.intensity * 255), 0, 255).astype(np.uint8)
        yield i, codes, float(piston)


def form_sequence_truth(plan: FormPlan, *, source="mercury-e",
                        camera: synth.Camera = synth.Camera(width=512, height=512, pixel_um=50.0),
                        medium_index: float = 1.0) -> dict:
    src = get_source(source) if isinstance(source, str) else source
    fringe_nm = src.wavelength_nm / (2 * medium_index)
    pist = plan.pistons_fringes(fringe_nm)
    return {
        "kind": "test_plate_sequence",
        "plan": {**asdict(plan), "base": asdict(plan.base)},
        "power_fringes": plan.signed_power(),
        "astigmatism_fringes": plan.astigmatism_fringes,
        "astigmatism_axis_deg": plan.axis_deg,
        "aperture_diameter_mm": plan.aperture_diameter_mm,
        "contact": plan.contact,
        "power_sign": "+" if plan.contact == "centre" else "-",
        "source": src.key,
        "wavelength_nm": src.wavelength_nm,
        "fringe_nm": fringe_nm,
        "medium_index": medium_index,
        "pixel_um": [camera.pixel_um, camera.pixel_y_um or camera.pixel_um],
        "width": camera.width,
        "height": camera.height,
        "fps": plan.base.fps,
        "frames": plan.n_frames,
        "piston_fringes": [float(v) for v in pist],
        "events": plan.base.events(),
    }


def write_form_sequence(out: str | os.PathLike, plan: FormPlan, *, source="mercury-e",
                        camera: synth.Camera = synth.Camera(width=512, height=512, pixel_um=50.0),
                        lighting: synth.Lighting = synth.Lighting(), medium_index: float = 1.0,
                        noise: bool = True, rng: int = 0, progress=None) -> tuple[Path, Path]:
    """Write the sequence as an MJPG ``.avi`` (``out`` ends in .avi) or numbered PNG frames in the folder ``out``;
    the truth goes to ``<out>.truth.json`` or ``truth.json`` in the folder. Returns (frames, truth) paths."""
    _check(plan)
    out = Path(out)
    if camera.bits != 8:
        raise InputError("sequences are written with 8-bit frames")
    truth = form_sequence_truth(plan, source=source, camera=camera, medium_index=medium_index)
    frames = ((i, codes) for i, codes, _p in render_form_sequence(plan, source=source, camera=camera,
                                                                  lighting=lighting, medium_index=medium_index,
                                                                  noise=noise, rng=rng))
    return write_frames(out, frames, truth, n_frames=plan.n_frames, fps=plan.base.fps,
                        size=(camera.width, camera.height), progress=progress)
