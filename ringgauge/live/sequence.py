"""Generated bench sequences: a part settling on the reference, resting, then pressed gently and released.

The gap over the field is ``t(r) = t0(frame) + sag(r)`` for centre contact (the part touches at its middle, the gap
grows outward) and ``t(r) = t0(frame) + sag(r_rim) - sag(r)`` for edge contact (the part bears on a rim outside
the field, the gap is widest in the middle). ``t0`` is the uniform part of the gap, which is what changes while
the air film thins and when the part is pressed. Each frame is drawn by :func:`ringgauge.synth.render` (Airy
reflectance, lamp spectrum, blur, noise), so the sequence has exactly the camera model of single images.

The truth carries ``t0`` of every frame, the events (settling, still, pressing, releasing) and the sign a
correct reading must give: ``+`` for centre contact, ``-`` for edge contact.
"""

from __future__ import annotations

import os
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from .. import physics, synth
from ..errors import InputError
from ..sources import LightSource, get_source

CONTACTS = ("centre", "edge")


@dataclass(frozen=True)
class SequencePlan:
    """What happens in a sequence, frame by frame.

    ``settle_frames`` frames of the air film thinning from ``start_gap_nm`` to ``rest_gap_nm`` (fast at first,
    slowing to a stop), ``rest_frames`` frames still, then ``press_frames`` frames in which the part is pressed
    (the gap falls by ``press_depth_nm`` and comes back), then ``after_frames`` frames still.
    """

    radius_mm: float = 400.0
    contact: str = "centre"
    settle_frames: int = 40
    rest_frames: int = 15
    press_frames: int = 16
    after_frames: int = 12
    start_gap_nm: float = 1200.0
    rest_gap_nm: float = 300.0
    press_depth_nm: float = 250.0
    rim_mm: float | None = None  # edge contact: radius of the bearing rim (default: beyond the field corners)
    fps: float = 25.0

    @property
    def n_frames(self) -> int:
        return self.settle_frames + self.rest_frames + self.press_frames + self.after_frames

    def gap_offsets_nm(self) -> np.ndarray:
        """Uniform gap t0 of every frame, nm."""
        t: list[float] = []
        n = self.settle_frames
        for i in range(n):
            u = (i + 1) / n
            # eased to a stop: speed falls to zero at the end, as an air film squeezing out slows down
            t.append(self.rest_gap_nm + (self.start_gap_nm - self.rest_gap_nm) * (1 - u) ** 3)
        t += [self.rest_gap_nm] * self.rest_frames
        for j in range(self.press_frames):
            t.append(self.rest_gap_nm - self.press_depth_nm * np.sin(np.pi * (j + 1) / (self.press_frames + 1)) ** 2)
        t += [self.rest_gap_nm] * self.after_frames
        return np.array(t, dtype=np.float64)

    def events(self) -> list[dict]:
        a = self.settle_frames
        b = a + self.rest_frames
        c = b + self.press_frames
        half = b + (self.press_frames + 1) // 2
        return [
            {"event": "settling", "first": 0, "last": a - 1, "gap": "closing"},
            {"event": "still", "first": a, "last": b - 1, "gap": "steady"},
            {"event": "pressing", "first": b, "last": half - 1, "gap": "closing"},
            {"event": "releasing", "first": half, "last": c - 1, "gap": "opening"},
            {"event": "still", "first": c, "last": self.n_frames - 1, "gap": "steady"},
        ]


def render_sequence(
    plan: SequencePlan,
    *,
    source: LightSource | str = "sodium-d",
    camera: synth.Camera = synth.Camera(width=640, height=512, pixel_um=8.0),
    lighting: synth.Lighting = synth.Lighting(),
    medium_index: float = 1.0,
    noise: bool = True,
    rng: int = 0,
):
    """Yield ``(index, codes, t0_nm)`` for every frame of ``plan`` and return nothing; see :func:`sequence_truth`."""
    if plan.contact not in CONTACTS:
        raise InputError(f"contact must be one of {', '.join(CONTACTS)}, got {plan.contact!r}")
    if not plan.radius_mm > 0:
        raise InputError("the radius of the sequence must be positive")
    src = get_source(source) if isinstance(source, str) else source
    W, H = camera.width, camera.height
    cx, cy = (W - 1) / 2, (H - 1) / 2
    px = camera.pixel_um * 1e-3
    py = (camera.pixel_y_um or camera.pixel_um) * 1e-3
    far_mm = max(np.hypot(x * px, y * py) for x in (cx, W - 1 - cx) for y in (cy, H - 1 - cy))
    rim = plan.rim_mm or 1.05 * far_mm
    if plan.contact == "edge" and rim < far_mm:
        raise InputError("the bearing rim of an edge-contact sequence must lie outside the field")
    sag_rim_nm = float(synth.sphere_sag_mm(rim * rim, plan.radius_mm)) * 1e6
    freq = physics.fringe_frequency_per_mm(far_mm, plan.radius_mm, src.wavelength_nm, medium_index) * max(px, py)
    for i, t0 in enumerate(plan.gap_offsets_nm()):

        def gap(x_mm, y_mm, t0=t0):
            r2 = (x_mm - cx * px) ** 2 + (y_mm - cy * py) ** 2
            sag = synth.sphere_sag_mm(r2, plan.radius_mm) * 1e6
            g = t0 + sag if plan.contact == "centre" else t0 + sag_rim_nm - sag
            return np.maximum(g, 0.0)

        img = synth.render(
            gap, source=src, camera=camera, lighting=lighting, medium_index=medium_index, noise=noise,
            rng=(rng, i), max_fringe_freq=min(freq, 1.0),
        )
        codes = img.image if noise else np.clip(np.rint(img.intensity * 255), 0, 255).astype(np.uint8)
        yield i, codes, float(t0)


def sequence_truth(plan: SequencePlan, *, source, camera: synth.Camera, medium_index: float = 1.0) -> dict:
    src = get_source(source) if isinstance(source, str) else source
    t0 = plan.gap_offsets_nm()
    fringe_nm = src.wavelength_nm / (2 * medium_index)
    return {
        "kind": "bench_sequence",
        "plan": asdict(plan),
        "radius_mm": plan.radius_mm,
        "contact": plan.contact,
        "power_sign": "+" if plan.contact == "centre" else "-",
        "source": src.key,
        "wavelength_nm": src.wavelength_nm,
        "medium_index": medium_index,
        "pixel_um": [camera.pixel_um, camera.pixel_y_um or camera.pixel_um],
        "centre_px": [(camera.width - 1) / 2, (camera.height - 1) / 2],
        "width": camera.width,
        "height": camera.height,
        "fps": plan.fps,
        "frames": plan.n_frames,
        "gap_offset_nm": [float(v) for v in t0],
        "gap_offset_fringes": [float(v / fringe_nm) for v in t0],
        "events": plan.events(),
    }


def write_sequence(
    out: str | os.PathLike,
    plan: SequencePlan,
    *,
    source: LightSource | str = "sodium-d",
    camera: synth.Camera = synth.Camera(width=640, height=512, pixel_um=8.0),
    lighting: synth.Lighting = synth.Lighting(),
    medium_index: float = 1.0,
    noise: bool = True,
    rng: int = 0,
    progress=None,
) -> tuple[Path, Path]:
    """Write the sequence as an MJPG ``.avi`` video (``out`` ends in .avi) or as numbered PNG frames in the folder
    ``out``; the truth goes to ``<out>.truth.json`` (video) or ``truth.json`` inside the folder.

    Returns (where the frames went, where the truth went).
    """
    out = Path(out)
    if camera.bits != 8:
        raise InputError("sequences are written with 8-bit frames")
    truth = sequence_truth(plan, source=source, camera=camera, medium_index=medium_index)
    frames = ((i, codes) for i, codes, _t0 in render_sequence(plan, source=source, camera=camera, lighting=lighting,
                                                              medium_index=medium_index, noise=noise, rng=rng))
    return write_frames(out, frames, truth, n_frames=plan.n_frames, fps=plan.fps, size=(camera.width, camera.height),
                        progress=progress)


def write_frames(out: Path, frames, truth: dict, *, n_frames: int, fps: float, size: tuple[int, int],
                 progress=None) -> tuple[Path, Path]:
    """Write 8-bit grey ``frames`` ((index, codes) pairs) as an MJPG ``.avi`` (``out`` ends in .avi) or as numbered
    PNG frames in the new folder ``out``, and ``truth`` beside them (``<out>.truth.json``, or ``truth.json`` in the
    folder). Returns (where the frames went, where the truth went)."""
    import json

    import cv2

    if out.suffix.lower() == ".avi":
        if not out.parent.is_dir():
            raise InputError(f"folder {out.parent} does not exist")
        writer = cv2.VideoWriter(str(out), cv2.VideoWriter_fourcc(*"MJPG"), float(fps), size, True)
        if not writer.isOpened():
            raise InputError(f"cannot write the video {out} (this OpenCV has no MJPG writer?)")
        truth_path = out.with_suffix(".truth.json")
    else:
        if out.suffix:
            raise InputError(f"{out}: give a video file ending in .avi, or a folder name for numbered frames")
        if out.exists() and any(out.iterdir()):
            raise InputError(f"{out} exists and is not empty; choose a new folder for the frames")
        out.mkdir(parents=True, exist_ok=True)
        writer = None
        truth_path = out / "truth.json"
    try:
        for i, codes in frames:
            if writer is not None:
                writer.write(cv2.cvtColor(codes, cv2.COLOR_GRAY2BGR))
            else:
                cv2.imwrite(str(out / f"frame_{i:05d}.png"), codes)
            if progress:
                progress((i + 1) / n_frames, f"frame {i + 1} of {n_frames}")
    finally:
        if writer is not None:
            writer.release()
    truth["file"] = out.name
    truth_path.write_text(json.dumps(truth, indent=2))
    return out, truth_path
