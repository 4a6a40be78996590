"""Which way the surface departs from the test plate: centre contact or edge contact.

One frame cannot tell: the intensity is even in the gap, so a gap W and -W give the same image. The trade
resolves it in two ways, both supported here.

* Frames with a changed gap. When the gap grows uniformly, fringes move toward the contact point: rings
  collapse into a centre contact and grow out of an edge contact. In the fit's convention (power >= 0) the
  mean gap (piston) of each frame is known modulo one fringe; between frames it moves by +d if the true gap
  is the fitted one (centre contact) and by -d if it is its mirror (edge contact), d being the gap change.
  The operator states the direction of the change (default: the gap grows from frame to frame). Steps of
  about a quarter fringe (lambda/8 of gap) are best; steps near half a fringe cannot be told apart.
* Press test. Pressing the part gently at its centre narrows the gap; fringes move toward the wider gap, so
  rings that spread outward mean centre contact, rings that shrink toward the centre mean edge contact.

Sign convention: +1 = centre contact (gap grows toward the edge), -1 = edge contact (gap largest at the
centre). Without evidence the sign is reported as unknown — never guessed.

References
----------
Fringe motion under a gap change and the press test: standard contact-interferometry practice (e.g. NPTEL
physical optics, contact method; amateur telescope makers' practice) — common practice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import InputError

PRESS_CHOICES = ("rings-spread", "rings-shrink")
GAP_CHANGES = ("increasing", "decreasing")


@dataclass(frozen=True)
class SignResult:
    sign: int  # +1, -1, or 0 = unknown
    confidence: float | None  # probability the sign is right, 0.5-1; None when unknown / stated by operator
    method: str  # "frames", "press test", "none"
    detail: str
    steps_fringes: tuple[float, ...] = ()
    steps_u_fringes: tuple[float, ...] = ()

    @property
    def label(self) -> str:
        return {1: "centre contact (gap grows toward the edge)", -1: "edge contact (gap largest at the centre)",
                0: "unknown"}[self.sign]

    def to_dict(self) -> dict:
        return {
            "sign": {1: "+", -1: "-", 0: "unknown"}[self.sign],
            "meaning": self.label,
            "confidence": self.confidence,
            "method": self.method,
            "detail": self.detail,
            "piston_steps_fringes": list(self.steps_fringes),
            "piston_steps_u_fringes": list(self.steps_u_fringes),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "SignResult":
        return cls({"+": 1, "-": -1}.get(d.get("sign"), 0), None if d.get("confidence") is None else
                   float(d["confidence"]), str(d.get("method") or "none"), str(d.get("detail") or ""),
                   tuple(float(x) for x in d.get("piston_steps_fringes") or ()),
                   tuple(float(x) for x in d.get("piston_steps_u_fringes") or ()))


UNKNOWN = SignResult(0, None, "none", "one frame cannot tell centre from edge contact; take a second frame with "
                     "the gap changed, or give the press-test observation")


def _phi(z: float) -> float:
    return 0.5 * (1.0 + math.erf(z / math.sqrt(2.0)))


def wrap_half(x: float) -> float:
    """x modulo 1, in (-0.5, 0.5]."""
    y = (x + 0.5) % 1.0 - 0.5
    return 0.5 if y == -0.5 else y


def sign_from_pistons(pistons, u_pistons, *, gap_change: str = "increasing") -> SignResult:
    """Sign from the mean gap (fringes, in the fit's power >= 0 convention) of frames taken in order.

    Parameters
    ----------
    pistons : sequence of float
        Mean gap of each frame modulo 1 fringe.
    u_pistons : sequence of float
        Their standard uncertainties (fringes).
    gap_change : {"increasing", "decreasing"}
        How the gap changed from each frame to the next.
    """
    if gap_change not in GAP_CHANGES:
        raise InputError(f"gap change must be one of {', '.join(GAP_CHANGES)}, got {gap_change!r}")
    if len(pistons) < 2:
        return UNKNOWN
    d = 1.0 if gap_change == "increasing" else -1.0
    steps, us = [], []
    for i in range(1, len(pistons)):
        steps.append(wrap_half(pistons[i] - pistons[i - 1]))
        us.append(math.hypot(u_pistons[i], u_pistons[i - 1]))
    # each step says "+" when it moved with the stated gap change; combine as independent evidence:
    # P(step sign right) = Phi(|s|/u) * Phi((0.5 - |s|)/u)  (a step near half a fringe is ambiguous)
    log_odds = 0.0
    for s, u in zip(steps, us):
        u = max(u, 1e-4)
        p = _phi(abs(s) / u) * _phi((0.5 - abs(s)) / u)
        p = min(max(p, 0.5), 1 - 1e-12)
        log_odds += math.copysign(math.log(p / (1 - p)), s * d)
    small = [abs(s) < 0.02 for s in steps]
    if all(small):
        return SignResult(0, None, "frames", "the fringes did not move between frames (step below 0.02 fringe); "
                          "change the gap by about a quarter fringe between frames",
                          tuple(steps), tuple(us))
    sign = 1 if log_odds > 0 else -1
    conf = 1.0 / (1.0 + math.exp(-abs(log_odds))) if abs(log_odds) < 700 else 1.0
    if conf < 0.9:
        return SignResult(0, conf, "frames", f"frame steps {', '.join(f'{s:+.2f}' for s in steps)} fringe do not "
                          "decide the sign with 90 % confidence; use steps of about a quarter fringe",
                          tuple(steps), tuple(us))
    detail = (
        f"{len(steps)} frame step(s) of {', '.join(f'{s:+.2f}' for s in steps)} fringe with the gap "
        f"{gap_change}: fringes moved {'toward' if sign * d > 0 else 'away from'} the centre"
    )
    return SignResult(sign, conf, "frames", detail, tuple(steps), tuple(us))


def sign_from_press(observation: str) -> SignResult:
    """Sign from the press test: what the rings did when the part was pressed gently at its centre."""
    obs = (observation or "").strip().lower()
    if obs not in PRESS_CHOICES:
        raise InputError(f"press-test observation must be one of {', '.join(PRESS_CHOICES)}, got {observation!r}")
    if obs == "rings-spread":
        return SignResult(1, None, "press test", "operator: rings spread outward when the centre was pressed")
    return SignResult(-1, None, "press test", "operator: rings shrank toward the centre when the centre was pressed")
