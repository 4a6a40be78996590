"""Practice interferograms for new metrology staff, with hidden truth, scoring and a per-trainee log.

Each exercise is a convex part on a concave test plate of known radius, seen under a line lamp: a few fringes
over the part (power, astigmatism, a zone, tilt, noise, dust by difficulty). Two frames are shown: the second
with the gap grown uniformly by λ/8 (a quarter fringe), so the fringes move toward the contact point — that is
how the sign is read. The trainee reads the fringe count, power, astigmatism, sign and the part's radius; the
score compares each with the truth and explains the difference in fringes. No Qt here.
"""

from __future__ import annotations

import json
import re
import time
from dataclasses import asdict, dataclass, field

import numpy as np

from ..errors import InputError
from ..physics import part_radius_mm, power_from_radius
from ..settings import home
from ..sources import get_source
from ..synth import Camera, Dust, Lighting, SurfaceForm, test_plate_fringes

SIGNS = {
    "centre": "contact at the centre (rings shrink inward as the gap grows)",
    "edge": "contact at the edge (rings grow outward as the gap grows)",
}


@dataclass(frozen=True)
class Level:
    key: str
    title: str
    power: tuple[float, float]  # |power| range, fringes
    astig: tuple[float, float]  # fringes
    zonal: float  # |zonal| up to, fringes
    tilt: float  # |tilt| up to, fringes across the radius
    dust: int  # specks up to
    read_noise_e: float
    falloff: float
    # What counts as a correct reading. A trained eye reads to about 0.1-0.25 fringe (common practice,
    # no source); the starter level allows half a fringe.
    power_tol: float
    astig_tol: float


LEVELS: dict[str, Level] = {
    lv.key: lv
    for lv in (
        Level("starter", "Starter: round rings, clean image", (1.0, 4.0), (0.0, 0.0), 0.0, 0.0, 0, 6.0, 0.10,
              0.5, 0.5),
        Level("bench", "Bench: some astigmatism, tilt and dust", (0.5, 6.0), (0.0, 2.0), 0.0, 0.6, 3, 12.0, 0.25,
              0.25, 0.5),
        Level("expert", "Expert: zones, astigmatism, noise", (0.3, 8.0), (0.0, 3.0), 0.8, 1.0, 6, 25.0, 0.35,
              0.25, 0.25),
    )
}

#: the gap step between the two frames of a pair, in fringes (λ/8 of gap = a quarter fringe)
PAIR_STEP_FRINGES = 0.25
IMAGE_PX = 480
PIXEL_UM = 60.0


@dataclass
class Exercise:
    """One practice case. ``truth`` is hidden from the trainee until the reading is scored."""

    id: str
    level: str
    seed: int
    source: str
    wavelength_nm: float
    test_diameter_mm: float
    plate_radius_mm: float
    form: SurfaceForm
    frames: tuple[np.ndarray, np.ndarray]  # uint8 images: as laid, and with the gap grown by λ/8
    truth: dict = field(default_factory=dict)

    @property
    def aperture_px(self) -> tuple[float, float, float]:
        c = (IMAGE_PX - 1) / 2
        return (c, c, self.test_diameter_mm / 2 / (PIXEL_UM * 1e-3))

    def brief(self) -> str:
        return (f"Convex part on a concave test plate of radius {self.plate_radius_mm:.3f} mm. "
                f"Light: {get_source(self.source).name}, λ = {self.wavelength_nm:g} nm. "
                f"Test diameter {self.test_diameter_mm:g} mm (the whole part). "
                f"Frame B shows the gap grown by λ/8 (a quarter fringe).")


def count_crossings(form: SurfaceForm, *, samples: int = 4001) -> int:
    """Dark fringes crossed from the centre of the part to its edge along the horizontal meridian (+x).

    Dark fringes lie at whole numbers of fringes of gap (zero gap is dark in reflection).
    """
    u = np.linspace(0.0, 1.0, samples)
    g = np.floor(form.gap_fringes(u, np.zeros_like(u)))
    return int(np.abs(np.diff(g)).sum())


def irregularity_pv(form: SurfaceForm, *, n: int = 201) -> float:
    """Irregularity as ISO 10110-5 counts it: the peak-to-valley of the gap, in fringes, left after the best-fit
    sphere (piston, tilt and power) is taken away over the whole part — astigmatism and zones are in it."""
    uu, vv = np.meshgrid(np.linspace(-1, 1, n), np.linspace(-1, 1, n))
    inside = uu**2 + vv**2 <= 1
    u, v = uu[inside], vv[inside]
    g = form.gap_fringes(u, v)
    A = np.column_stack([np.ones_like(u), u, v, u * u + v * v])
    res = g - A @ np.linalg.lstsq(A, g, rcond=None)[0]
    return float(np.round(res.max() - res.min(), 2))


def make_exercise(level: str = "starter", seed: int | None = None) -> Exercise:
    """Generate a practice case; the same ``seed`` and ``level`` give the same case."""
    if level not in LEVELS:
        raise InputError(f"unknown difficulty '{level}'; choose one of: {', '.join(LEVELS)}")
    lv = LEVELS[level]
    if seed is None:
        seed = int(np.random.default_rng().integers(0, 2**31 - 1))
    g = np.random.default_rng(seed)
    source = str(g.choice(["mercury-e", "sodium-d", "helium-d"]))
    lam = get_source(source).wavelength_nm
    sign = 1.0 if g.random() < 0.5 else -1.0
    power = sign * float(np.round(g.uniform(*lv.power), 2))
    astig = float(np.round(g.uniform(*lv.astig), 2)) if lv.astig[1] > 0 else 0.0
    axis = float(np.round(g.uniform(0, 180), 0)) if astig else 0.0
    zonal = float(np.round(g.uniform(-lv.zonal, lv.zonal), 2)) if lv.zonal else 0.0
    tilt_x = float(np.round(g.uniform(-lv.tilt, lv.tilt), 2)) if lv.tilt else 0.0
    tilt_y = float(np.round(g.uniform(-lv.tilt, lv.tilt), 2)) if lv.tilt else 0.0
    diameter = float(g.choice([20.0, 25.0, 25.4]))
    plate_r = float(np.round(g.uniform(30.0, 200.0), 3))
    base = SurfaceForm(power=power, astig=astig, astig_axis_deg=axis, zonal=zonal, tilt_x=tilt_x,
                       tilt_y=tilt_y, piston=0.0)
    # lift the part so the gap is never negative (the synthetic gap is clipped at contact), plus a little air
    uu, vv = np.meshgrid(np.linspace(-1, 1, 201), np.linspace(-1, 1, 201))
    inside = uu**2 + vv**2 <= 1
    lowest = float(base.gap_fringes(uu, vv)[inside].min())
    form = SurfaceForm(**{**asdict(base), "piston": float(np.round(-lowest + g.uniform(0.05, 0.3), 3))})
    camera = Camera(width=IMAGE_PX, height=IMAGE_PX, pixel_um=PIXEL_UM, read_noise_e=lv.read_noise_e,
                    blur_px=0.8)
    lighting = Lighting(falloff=lv.falloff, gradient=float(g.uniform(0, 0.2)),
                        gradient_angle_deg=float(g.uniform(0, 360)), stray=0.04)
    dust = Dust(count=int(g.integers(0, lv.dust + 1)) if lv.dust else 0)
    frames = []
    for step in (0.0, PAIR_STEP_FRINGES):
        f = SurfaceForm(**{**asdict(form), "piston": form.piston + step})
        img = test_plate_fringes(f, aperture_diameter_mm=diameter, source=source, camera=camera,
                                 lighting=lighting, dust=dust, rng=seed)  # same dust in both frames
        frames.append(img.image if img.image.dtype == np.uint8 else (img.image >> 8).astype(np.uint8))
    truth = {
        "fringe_count": count_crossings(form),
        "irregularity_fringes": irregularity_pv(form),
        "power_fringes": abs(power),
        "power_signed_fringes": power,
        "astigmatism_fringes": astig,
        "astigmatism_axis_deg": axis,
        "zonal_fringes": zonal,
        "tilt_fringes": [tilt_x, tilt_y],
        "sign": "centre" if power > 0 else "edge",
        "part_radius_mm": part_radius_mm(plate_r, power, diameter, lam),
    }
    return Exercise(f"{level}-{seed}", level, seed, source, lam, diameter, plate_r, form, tuple(frames), truth)


@dataclass(frozen=True)
class Reading:
    fringe_count: int | None = None
    power_fringes: float | None = None
    astigmatism_fringes: float | None = None
    sign: str | None = None  # "centre" or "edge"
    part_radius_mm: float | None = None
    irregularity_fringes: float | None = None


@dataclass(frozen=True)
class ItemScore:
    item: str
    given: str
    truth: str
    correct: bool
    comment: str


@dataclass(frozen=True)
class Score:
    items: tuple[ItemScore, ...]

    @property
    def points(self) -> int:
        return sum(1 for i in self.items if i.correct)

    @property
    def percent(self) -> float:
        return 100.0 * self.points / len(self.items) if self.items else 0.0

    def to_dict(self) -> dict:
        return {"points": self.points, "of": len(self.items), "percent": self.percent,
                "items": [asdict(i) for i in self.items]}


def _fr(x: float) -> str:
    return f"{x:.2f} fringe" + ("" if abs(x) == 1 else "s")


def _fringe_item(item: str, given, truth: float, tol: float, truth_text: str, hint: str) -> ItemScore:
    """One reading in fringes scored against its truth within the level's tolerance; ``hint`` when not given."""
    if given is None:
        return ItemScore(item, "not given", truth_text, False, hint)
    d = float(given) - truth
    ok = abs(d) <= tol + 1e-9
    return ItemScore(item, _fr(float(given)), truth_text, ok,
                     f"{'within' if ok else 'outside'} ±{tol:g} fringe: you read "
                     f"{_fr(abs(d))} {'high' if d > 0 else 'low'}" if d else "exact")


def score(ex: Exercise, reading: Reading) -> Score:
    """Compare a reading with the hidden truth; every comment states the difference in fringes."""
    lv = LEVELS[ex.level]
    t = ex.truth
    items = []
    # fringe count: whole fringes, exact
    n = t["fringe_count"]
    if reading.fringe_count is None:
        items.append(ItemScore("Fringe count", "not given", str(n), False, "count the dark fringes along the "
                               "horizontal line from the centre to the edge"))
    else:
        d = int(reading.fringe_count) - n
        items.append(ItemScore("Fringe count", str(reading.fringe_count), str(n), d == 0,
                               "exact" if d == 0 else f"{abs(d)} fringe{'s' if abs(d) > 1 else ''} "
                               f"{'too many' if d > 0 else 'too few'}: look again at the edge, where the "
                               "fringes crowd"))
    # power magnitude, astigmatism, irregularity (older logged exercises have no irregularity truth: not scored)
    p = t["power_fringes"]
    items.append(_fringe_item("Power", reading.power_fringes, p, lv.power_tol, _fr(p),
                              "power is the sagitta difference over the test diameter, in fringes"))
    a = t["astigmatism_fringes"]
    axis = f" (principal meridian at {t['astigmatism_axis_deg']:.0f}°)" if a else ""
    items.append(_fringe_item("Astigmatism", reading.astigmatism_fringes, a, lv.astig_tol, _fr(a) + axis,
                              "astigmatism is the difference of the fringe counts along the two principal "
                              "meridians"))
    if "irregularity_fringes" in t:
        b = float(t["irregularity_fringes"])
        items.append(_fringe_item("Irregularity", reading.irregularity_fringes, b, lv.astig_tol, _fr(b),
                                  "irregularity is what is left when the best-fit sphere is taken away: how far "
                                  "the fringes depart from evenly spaced circles"))
    # sign
    s = t["sign"]
    if reading.sign not in SIGNS:
        items.append(ItemScore("Sign", "not given", SIGNS[s], False, "compare frame A with frame B"))
    else:
        ok = reading.sign == s
        items.append(ItemScore("Sign", SIGNS[reading.sign], SIGNS[s], ok,
                               "right" if ok else "when the gap grows the fringes move toward the contact point: "
                               "watch which way the rings travel from frame A to frame B"))
    # radius, judged by the power it implies
    r = t["part_radius_mm"]
    if reading.part_radius_mm is None or not reading.part_radius_mm > 0:
        items.append(ItemScore("Part radius", "not given", f"{r:.4f} mm", False,
                               "radius from power: 1/R = 1/R_plate + 4Nλ/D² (N > 0 for contact at the centre)"))
    else:
        implied = power_from_radius(float(reading.part_radius_mm), ex.plate_radius_mm, ex.test_diameter_mm,
                                    ex.wavelength_nm)
        d = implied - t["power_signed_fringes"]
        ok = abs(d) <= lv.power_tol + 1e-9
        dr_um = (float(reading.part_radius_mm) - r) * 1e3
        items.append(ItemScore("Part radius", f"{float(reading.part_radius_mm):.4f} mm", f"{r:.4f} mm", ok,
                               f"{abs(dr_um):.1f} µm {'long' if dr_um > 0 else 'short'}, which is "
                               f"{_fr(abs(d))} of power over {ex.test_diameter_mm:g} mm "
                               f"({'within' if ok else 'outside'} ±{lv.power_tol:g} fringe)"))
    return Score(tuple(items))


def truth_overlay(ex: Exercise, frame: int = 0) -> np.ndarray:
    """The frame as RGB with the true dark-fringe lines (whole fringes of gap) drawn in orange, the aperture
    edge in green and the counting line in blue."""
    img = ex.frames[frame].astype(np.float64)
    lo, hi = np.percentile(img, [0.5, 99.5])
    grey = np.clip((img - lo) / max(hi - lo, 1e-6), 0, 1) * 255
    rgb = np.repeat(grey[..., None], 3, axis=2)
    cx, cy, r = ex.aperture_px
    yy, xx = np.mgrid[0:IMAGE_PX, 0:IMAGE_PX].astype(np.float64)
    u, v = (xx - cx) / r, (yy - cy) / r
    inside = u * u + v * v <= 1
    piston = ex.form.piston + (PAIR_STEP_FRINGES if frame else 0.0)
    gap = SurfaceForm(**{**asdict(ex.form), "piston": piston}).gap_fringes(u, v)
    level = np.floor(gap)
    edge = np.zeros_like(inside)
    edge[:, 1:] |= level[:, 1:] != level[:, :-1]
    edge[1:, :] |= level[1:, :] != level[:-1, :]
    rgb[edge & inside] = (230, 159, 0)  # Okabe & Ito orange
    rim = np.abs(np.hypot(xx - cx, yy - cy) - r) < 1.0
    rgb[rim] = (0, 158, 115)  # bluish green
    line = (np.abs(yy - cy) < 0.8) & (xx >= cx) & (xx <= cx + r)
    rgb[line] = (86, 180, 233)  # sky blue
    return np.ascontiguousarray(rgb.astype(np.uint8))


# -- the per-trainee log ----------------------------------------------------------------------------------
def _safe(name: str) -> str:
    name = name.strip()
    if not name:
        raise InputError("enter the trainee's name first")
    slug = re.sub(r"[^A-Za-z0-9_.-]+", "_", name)[:60].strip("._")
    if not slug:
        raise InputError(f"trainee name {name!r} has no letters or digits; use one that has")
    return slug


class TraineeLog:
    """One JSON line per scored attempt, one file per trainee, under ``<home>/training/``."""

    def __init__(self, folder=None):
        self.folder = (home() / "training") if folder is None else folder
        self.folder.mkdir(parents=True, exist_ok=True)

    def file(self, trainee: str):
        return self.folder / f"{_safe(trainee)}.jsonl"

    def record(self, trainee: str, ex: Exercise, reading: Reading, sc: Score) -> dict:
        entry = {
            "when": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            "trainee": trainee.strip(),
            "exercise": ex.id,
            "level": ex.level,
            "reading": asdict(reading),
            "truth": ex.truth,
            "score": sc.to_dict(),
        }
        try:
            with open(self.file(trainee), "a", encoding="utf-8") as fh:
                fh.write(json.dumps(entry) + "\n")
        except OSError as exc:
            raise InputError(f"cannot write the training log ({exc.strerror or exc})") from None
        return entry

    def trainees(self) -> list[str]:
        """The trainees' names as they were typed (the file names are only a safe spelling of them)."""
        names = []
        for p in self.folder.glob("*.jsonl"):
            name = p.stem
            try:
                with open(p, encoding="utf-8") as fh:
                    for line in fh:
                        try:
                            got = json.loads(line).get("trainee")
                        except (json.JSONDecodeError, AttributeError):
                            continue
                        if isinstance(got, str) and got.strip():
                            name = got.strip()
                            break
            except OSError:
                pass
            names.append(name)
        return sorted(names, key=str.casefold)

    def write_csv(self, trainee: str, out) -> int:
        """The trainee's attempts as CSV (one row each, local times); returns the number of rows."""
        import csv

        from ..report.text import local_time

        es = self.entries(trainee)
        try:
            with open(out, "w", newline="", encoding="utf-8") as fh:
                w = csv.writer(fh)
                w.writerow(["when (local)", "trainee", "level", "exercise", "points", "of", "percent", "missed"])
                for e in es:
                    sc = e.get("score") or {}
                    missed = "; ".join(i["item"] for i in sc.get("items", []) if not i.get("correct"))
                    w.writerow([local_time(e.get("when")), e.get("trainee", trainee), e.get("level", ""),
                                e.get("exercise", ""), sc.get("points", ""), sc.get("of", ""),
                                f"{float(sc.get('percent', 0)):.0f}", missed])
        except OSError as exc:
            raise InputError(f"{out}: cannot write ({exc.strerror or exc})") from None
        return len(es)

    def entries(self, trainee: str) -> list[dict]:
        p = self.file(trainee)
        if not p.exists():
            return []
        out = []
        for line in p.read_text(encoding="utf-8").splitlines():
            try:
                out.append(json.loads(line))
            except json.JSONDecodeError:
                continue  # a damaged line does not hide the rest
        return out

    def summary(self, trainee: str) -> dict:
        """Attempts and mean score per level, and the item most often missed."""
        es = self.entries(trainee)
        per: dict[str, list[float]] = {}
        missed: dict[str, int] = {}
        for e in es:
            per.setdefault(e.get("level", "?"), []).append(float(e["score"]["percent"]))
            for it in e["score"]["items"]:
                if not it["correct"]:
                    missed[it["item"]] = missed.get(it["item"], 0) + 1
        return {
            "attempts": len(es),
            "levels": {k: {"attempts": len(v), "mean_percent": float(np.mean(v))} for k, v in per.items()},
            "most_missed": max(missed, key=missed.get) if missed else None,
        }


def explain(sc: Score) -> str:
    """Plain-text debrief: one line per item."""
    lines = [f"Score: {sc.points} of {len(sc.items)} ({sc.percent:.0f} %)"]
    for i in sc.items:
        lines.append(f"{'✔' if i.correct else '✖'} {i.item}: you read {i.given}; truth {i.truth} — {i.comment}")
    return "\n".join(lines)
