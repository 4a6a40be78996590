"""Reading the rings' motion: are they still (settled), and which way do they move while the gap changes?

Physics (common practice, and the thin-film formula): the gap under a sphere of radius R touching the reference
at its centre is t(r) = t0 + r²/2R; a dark ring of order m sits where 2 n t = m λ, i.e. at
r² = 2R(mλ/2n − t0). When the uniform gap t0 shrinks — the air film squeezing out while the part settles, or
the part pressed gently — every ring grows outward; with edge contact (the gap widest in the middle) the same
closing of the gap draws the rings inward. Read in reverse, this is the press test: rings moving out while the
gap closes mean centre contact (power +), rings moving in mean edge contact (power −).

The reader assumes what the bench makes true: the motion that starts a *motion episode* — from the first frame
until the part first comes to rest (settling), or from rest until the rings stand still again (a press) — is the
gap closing. A lifted or sliding part breaks that assumption; the evidence kept with every reading shows what
was seen so an inspector can judge it.

References
----------
E. Hecht, *Optics*, section on Newton's rings and fringes of equal thickness (ring radii r² = mλR for a sphere
on a flat; rings move as the film thickness changes). The press test: common practice, no source.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

#: frames over which the fringes must stand still for the part to count as settled
SETTLE_FRAMES = 10
#: largest fringe motion (fractions of a fringe, peak to peak at any probe point) over those frames
SETTLE_FRINGES = 0.05
#: motion since the start of an episode needed before its direction is read, fringes
SIGN_MIN_FRINGES = 0.25

TWO_PI = 2 * math.pi


def probe_phases(x0: float, y0: float, q: float, phase: float, probes, aspect: float = 1.0) -> list[float]:
    """Fringe phase ``q s + phase`` of the ring model at fixed image points (x, y)."""
    return [q * ((x - x0) ** 2 + (aspect * (y - y0)) ** 2) + phase for x, y in probes]


class SettleDetector:
    """Fringes stationary within ``tol_fringes`` (peak to peak, at every probe point) over the last ``n`` frames.

    The probe points are fixed in the image (the ring centre found at the start and points on two circles around
    it), so a change of gap, of ring scale or a sideways slide of the part all count as motion.
    """

    def __init__(self, n: int = SETTLE_FRAMES, tol_fringes: float = SETTLE_FRINGES):
        if n < 2:
            raise ValueError("settling needs at least 2 frames")
        if not tol_fringes > 0:
            raise ValueError("the settle tolerance must be positive")
        self.n = int(n)
        self.tol = float(tol_fringes)
        self.probes = None
        self.aspect = 1.0
        self._hist: deque = deque(maxlen=self.n)
        self._last: list[float] | None = None

    def reset(self) -> None:
        self._hist.clear()
        self._last = None
        self.probes = None

    def set_probes(self, x0: float, y0: float, r_px: float, aspect: float = 1.0) -> None:
        pts = [(x0, y0)]
        for frac in (0.5, 0.95):
            for j in range(8):
                a = TWO_PI * j / 8
                pts.append((x0 + frac * r_px * math.cos(a), y0 + frac * r_px * math.sin(a) / aspect))
        self.probes = pts
        self.aspect = aspect

    def update(self, x0: float, y0: float, q: float, phase: float) -> tuple[bool, float]:
        """Add one tracked frame; returns (settled, fringe motion peak to peak over the window)."""
        ph = probe_phases(x0, y0, q, phase, self.probes, self.aspect)
        if self._last is not None:  # unwrap every probe against the previous frame
            ph = [lp + math.remainder(p - lp, TWO_PI) for p, lp in zip(ph, self._last)]
        self._last = ph
        self._hist.append(ph)
        if len(self._hist) < 2:
            return False, math.nan
        cols = list(zip(*self._hist))
        motion = max(max(c) - min(c) for c in cols) / TWO_PI
        return len(self._hist) >= self.n and motion <= self.tol, motion


#: largest ring motion between two frames that is read as it looks, fringes: a frame samples the ring motion, and
#: motion near half a fringe per frame cannot be told from the same motion the other way (as a wheel in a film
#: seems to turn backwards), so faster steps are not used for the sign
SAFE_STEP_FRINGES = 0.3


@dataclass
class Episode:
    first_frame: int
    start_phase: float
    kind: str  # "settling" (before the part first came to rest) or "press" (motion starting from rest)
    reading: dict | None = None
    path: list = field(default_factory=list)  # (frame, fringes moved since the start)
    safe_start: float = 0.0  # phase where the current run of slow steps began
    safe_first_frame: int = 0
    fast_steps: int = 0


class MotionSign:
    """The power's sign from which way the rings move while the gap closes.

    Feed every tracked frame with its index, the tracked phase (grows when the rings move in) and whether the
    part is settled. An episode starts with the first frame and whenever the part leaves rest.

    * Settling (the part laid down, the film thinning): the film closes fastest at first — often faster than the
      camera can follow — and slows to a stop, so the direction is read when the part comes to rest, from the
      last run of slow steps (each under ``SAFE_STEP_FRINGES``), if the rings moved ``min_fringes`` in it.
    * A press from rest starts slowly: the direction is read once the rings have moved ``min_fringes`` in slow
      steps from where they stood. A press too quick for the camera gives no reading (the release that follows
      moves the rings back and must not be read as the press).
    """

    def __init__(self, min_fringes: float = SIGN_MIN_FRINGES):
        self.min_fringes = float(min_fringes)
        self.episodes: list[Episode] = []
        self._open: Episode | None = None
        self._was_settled = False
        self._seen_rest = False
        self._last_phase = None
        self._last_frame = None

    def reset(self) -> None:
        self.__init__(self.min_fringes)

    def update(self, frame: int, phase: float, settled: bool) -> None:
        if self._open is None and not settled:
            # motion from the start, or the part left rest: the episode starts where the rings last stood
            start = self._last_phase if self._last_phase is not None else phase
            first = self._last_frame if self._last_frame is not None else frame
            self._open = Episode(first, start, "press" if self._seen_rest else "settling", safe_start=start,
                                 safe_first_frame=first)
            self.episodes.append(self._open)
        ep = self._open
        if ep is not None:
            moved = (phase - ep.start_phase) / TWO_PI
            ep.path.append((frame, moved))
            step = 0.0 if self._last_phase is None else (phase - self._last_phase) / TWO_PI
            if abs(step) > SAFE_STEP_FRINGES:
                ep.fast_steps += 1
                ep.safe_start, ep.safe_first_frame = phase, frame  # slow steps count again from here
            safe = (phase - ep.safe_start) / TWO_PI
            if ep.reading is None and abs(safe) >= self.min_fringes:
                if ep.kind == "press" and ep.fast_steps == 0:
                    ep.reading = self._reading(ep, frame, safe)
                elif ep.kind == "settling" and settled:
                    ep.reading = self._reading(ep, frame, safe)
            if settled:
                self._open = None
        if settled:
            self._seen_rest = True
        self._was_settled = settled
        self._last_phase = phase
        self._last_frame = frame

    @staticmethod
    def _reading(ep: Episode, frame: int, moved: float) -> dict:
        rings = "in" if moved > 0 else "out"
        return {
            "event": ep.kind,
            "first_frame": ep.first_frame,
            "read_from_frame": ep.safe_first_frame,
            "read_at_frame": frame,
            "rings": rings,
            "fringes_moved": round(moved, 3),
            "fast_steps_left_out": ep.fast_steps,
            "gap": "closing (assumed: settling or pressing)",
            "power_sign": "+" if rings == "out" else "-",
            "meaning": "centre contact" if rings == "out" else "edge contact",
        }

    @property
    def readings(self) -> list[dict]:
        return [e.reading for e in self.episodes if e.reading is not None]

    @property
    def sign(self) -> str:
        """'+' centre contact, '-' edge contact, 'unknown' without evidence or when episodes disagree."""
        signs = {r["power_sign"] for r in self.readings}
        return signs.pop() if len(signs) == 1 else "unknown"

    @property
    def detail(self) -> str:
        rs = self.readings
        if not rs:
            if self._open is not None and self._open.kind == "press" and self._open.fast_steps:
                return "the rings moved too fast for the camera to read: press more slowly"
            if self._open is not None and self._open.kind == "settling":
                return "the part is settling: the sign is read when the rings come to rest"
            return "no ring motion seen yet: let the part settle, or press it gently"
        signs = {r["power_sign"] for r in rs}
        if len(signs) > 1:
            return (f"the rings moved both ways in {len(rs)} episodes; sign unknown — press gently once and let "
                    "the part settle again")
        r = rs[-1]
        return (f"rings moved {r['rings']} by {abs(r['fringes_moved']):.2f} fringe while the gap closed "
                f"({r['event']}, from frame {r['first_frame']}): {r['meaning']}; {len(rs)} reading(s) agree")


def rings_direction(phases: list[float], tol_fringes_per_frame: float) -> str:
    """'in', 'out' or 'still' from the last few tracked phases (a straight-line slope, fringes per frame)."""
    n = len(phases)
    if n < 2:
        return "still"
    xm = (n - 1) / 2
    ym = sum(phases) / n
    num = sum((i - xm) * (p - ym) for i, p in enumerate(phases))
    den = sum((i - xm) ** 2 for i in range(n))
    v = num / den / TWO_PI
    if abs(v) <= tol_fringes_per_frame:
        return "still"
    return "in" if v > 0 else "out"
