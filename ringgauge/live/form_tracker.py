"""Live form against a test plate: power and astigmatism frame by frame, the settle indicator and the sign.

The first frame (and any frame after the track is lost) goes through the one-frame form evaluation
(:func:`ringgauge.form.evaluate.evaluate_form`: clear aperture, gap-model fit, GUM budget). Every later frame is
fitted with the same gap model *warm-started* from the previous frame's fit (:func:`ringgauge.form.fit.fit_gap`
with ``prior``: the shape, illumination and fringe shape start where they were, the piston is scanned first),
on a block-averaged copy of the frame (aperture radius about 200 px): the form terms are in aperture-normalised
coordinates, so the averaging changes the cost, not the terms. The full evaluation stays the one used at capture.

Uncertainty of a live reading (k = 2): the fit's own covariance (Monte Carlo through the form-term definitions,
as a single evaluation does), the model-choice rows of the full evaluation at the start of the track, the
aperture radius, and — as a rectangular term — the difference between the live fit and the full evaluation
on that first frame.

Sign: the warm-started fits keep the first fit's orientation of the gap (W or −W, power ≥ 0), so their pistons
are comparable. When the uniform gap closes, the piston of that W falls for centre contact (the rings move
out) and rises for edge contact (they move in) — the same press-test reading as for Newton's rings, so the
piston (as a phase, 2π per fringe) is fed to :class:`ringgauge.live.motion.MotionSign`.

Settle: the fitted gap at fixed points of the aperture (centre, two circles) stands still within a stated
fraction of a fringe, peak to peak, over the last N analysed frames.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from ..bench_setup import BenchSetup
from ..errors import AnalysisError, RinggaugeError
from ..form.evaluate import evaluate_form, form_terms_batch
from ..form.fit import fit_gap, gap_basis
from ..imaging import frame_from_array
from ..pipeline import wants_form
from .motion import SETTLE_FRAMES, SETTLE_FRINGES, rings_direction
from .session import LiveOptions, LiveSession, LiveState

TWO_PI = 2 * math.pi
#: aperture radius (pixels) the live fit aims at after block averaging
LIVE_RADIUS_PX = 200.0
#: pixels in each live fit's subsample
LIVE_POINTS = 4000
#: Monte Carlo draws for a live reading's fit uncertainty (fixed seed: the same fit gives the same u)
LIVE_DRAWS = 400
#: a live fit whose fringe modulation falls under this fraction of the first frame's has lost the part
MIN_CONTRAST_RATIO = 0.5
LIVE_TERMS = ("power_fringes", "astigmatism_fringes")


def _grid(k_td: float, n: int = 41, rim: int = 360):
    """Points on the unit test disc (a square grid plus ``rim`` edge points) and the same scaled by ``k_td``."""
    t = np.linspace(-1, 1, n)
    U, V = np.meshgrid(t, t)
    m = U * U + V * V <= 1.0
    a = np.linspace(0, TWO_PI, rim, endpoint=False)
    un, vn = np.concatenate([U[m], np.cos(a)]), np.concatenate([V[m], np.sin(a)])
    return un * k_td, vn * k_td, un, vn, rim


@dataclass(frozen=True)
class FormPoint:
    """The form of one analysed frame, in the orientation of the track's first fit (power ≥ 0 there)."""

    ok: bool
    power_fringes: float = math.nan  # as fitted (orientation of the first fit)
    power_u_fringes: float = math.nan  # standard uncertainty, k = 1
    astigmatism_fringes: float = math.nan
    astigmatism_u_fringes: float = math.nan
    axis_deg: float = math.nan
    piston_fringes: float = math.nan  # unwrapped along the track
    probes_fringes: tuple = ()  # gap at fixed aperture points (fringes, unwrapped piston)
    contrast: float = math.nan
    centre_px: tuple | None = None
    radius_px: float = math.nan
    reinitialised: bool = False
    message: str = ""


class FormTracker:
    """Follows a part on a test plate through a sequence of frames (see the module notes)."""

    def __init__(self, setup: BenchSetup, *, n_points: int = LIVE_POINTS, target_radius_px: float = LIVE_RADIUS_PX):
        self.setup = setup
        self.n_points = int(n_points)
        self.target = float(target_radius_px)
        self.fringe_nm = setup.wavelength_nm / (2 * setup.medium_index)
        self.reset()
        self.last_full = None  # the FormResult of the last (re)initialisation

    def reset(self) -> None:
        self.prior = None
        self.f = 1
        self._shape = None
        self._piston = None

    @property
    def tracking(self) -> bool:
        return self.prior is not None

    def _small(self, codes: np.ndarray, full_scale: float) -> np.ndarray:
        import cv2

        data = np.asarray(codes, dtype=np.float32)
        if data.ndim == 3:
            data = cv2.cvtColor(data, cv2.COLOR_BGR2GRAY)
        data = data / np.float32(full_scale)
        f = self.f
        if f == 1:
            return data
        h, w = data.shape
        data = data[: h - h % f, : w - w % f]  # a whole number of blocks, so pixel (x, y) -> (x + 0.5)/f - 0.5
        return cv2.resize(data, (data.shape[1] // f, data.shape[0] // f), interpolation=cv2.INTER_AREA)

    def _initialise(self, codes, full_scale) -> None:
        h, w = codes.shape[:2]
        self._shape = (h, w)
        self.f = max(1, int(min(h, w) // (2.2 * self.target)))
        small = self._small(codes, full_scale)
        s = self.setup
        setup = s.with_(pixel_size_um=s.pixel_size_um * self.f,
                        pixel_size_y_um=None if s.pixel_size_y_um is None else s.pixel_size_y_um * self.f)
        res = evaluate_form([frame_from_array(small, full_scale=1.0)], setup)
        g0 = res.engine_fits[0]
        self.last_full = res
        self.prior = g0
        self.contrast0 = g0.contrast
        ap = res.aperture
        self.centre = ap.centre_px
        self.radius = ap.radius_px
        self.aspect = g0.aspect
        self.rel_a = ap.radius_u_px / ap.radius_px
        k_td = min(1.0, res.test_diameter_mm / res.aperture_diameter.value)
        uu, vv, self.un, self.vn, self.rim = _grid(k_td)
        self.Z = gap_basis(uu, vv, len(g0.coeffs))
        self._linear_maps()
        pa = np.linspace(0, TWO_PI, 8, endpoint=False)
        pu = np.concatenate([[0.0], 0.5 * np.cos(pa), 0.9 * np.cos(pa)])
        pv = np.concatenate([[0.0], 0.5 * np.sin(pa), 0.9 * np.sin(pa)])
        self.Zp = gap_basis(pu, pv, len(g0.coeffs))
        # fixed Type B rows of the full evaluation: model choice (fringe shape, illumination), not the fit's noise
        # and not the aperture row (recomputed for every frame's terms)
        self.model_u = {}
        for name in LIVE_TERMS:
            rows = [u for label, u in res.budget_rows.get(name, ()) if label != "aperture radius"
                    and not label.startswith("fit") and not label.startswith("phase map")]
            self.model_u[name] = math.sqrt(sum(u * u for u in rows))
        self.agreement = None
        self._piston = None

    def _linear_maps(self) -> None:
        """Power and the two astigmatism components are linear in the gap coefficients: their value for each
        basis term (through the form-term definitions of :func:`ringgauge.form.evaluate.form_terms_batch`) gives
        the maps, so a live frame costs two dot products instead of a fit over the test disc."""
        t = form_terms_batch(self.Z, self.un, self.vn, self.rim)
        half = 0.5 * t["astigmatism_fringes"]
        ax = np.radians(2 * t["astigmatism_axis_deg"])
        self.m_power = t["power_fringes"]
        self.m_a1, self.m_a2 = half * np.cos(ax), half * np.sin(ax)

    def _terms(self, coeffs, cov) -> tuple[dict, dict]:
        c = np.asarray(coeffs, dtype=float)
        a1, a2 = c @ self.m_a1, c @ self.m_a2
        terms = {"power_fringes": float(c @ self.m_power), "astigmatism_fringes": float(2 * math.hypot(a1, a2)),
                 "astigmatism_axis_deg": float(math.degrees(0.5 * math.atan2(a2, a1)) % 180.0)}
        u = {}
        if cov is not None:
            rng = np.random.default_rng(12345)
            try:
                d = rng.multivariate_normal(c, cov, size=LIVE_DRAWS, method="eigh")
            except (np.linalg.LinAlgError, ValueError):
                d = None
            if d is not None:
                u["power_fringes"] = float(np.std(d @ self.m_power, ddof=1))
                u["astigmatism_fringes"] = float(np.std(2 * np.hypot(d @ self.m_a1, d @ self.m_a2), ddof=1))
        return terms, u

    def update(self, codes: np.ndarray, full_scale: float = 255.0) -> FormPoint:
        """Analyse one frame (grey codes); initialises from the full form evaluation when not tracking."""
        reinit = False
        if self.prior is None or codes.shape[:2] != self._shape:
            try:
                self._initialise(codes, full_scale)
            except (RinggaugeError, np.linalg.LinAlgError, ValueError) as exc:
                self.reset()
                msg = (str(exc).splitlines() or ["no test-plate fringes"])[0]
                if msg.startswith("(in memory): "):  # the frame has no file name to give
                    msg = msg[len("(in memory): "):]
                return FormPoint(False, message=msg)
            reinit = True
        try:
            g = fit_gap(self._small(codes, full_scale), self.centre, self.radius, aspect=self.aspect,
                        prior=self.prior, max_points=self.n_points)
        except (AnalysisError, np.linalg.LinAlgError, ValueError) as exc:
            self.reset()
            return FormPoint(False, message=f"track lost ({exc})")
        if not (g.contrast >= MIN_CONTRAST_RATIO * self.contrast0) or not np.all(np.isfinite(g.coeffs)):
            self.reset()
            return FormPoint(False, message=f"track lost (fringe modulation {g.contrast:.2f}, was "
                                            f"{self.contrast0:.2f}: the part moved or the light changed)")
        terms, u_fit = self._terms(g.coeffs, g.covariance)
        if self.agreement is None:
            full = self.last_full.terms
            # the live fit against the full evaluation on the same first frame (power there is signed only when a
            # press test was given: compare magnitudes)
            self.agreement = {n: abs(abs(terms[n]) - abs(full[n])) for n in LIVE_TERMS}
        u = {}
        for n in LIVE_TERMS:
            rows = [u_fit.get(n, math.nan), self.model_u[n], 2 * abs(terms[n]) * self.rel_a,
                    self.agreement[n] / math.sqrt(3.0)]
            u[n] = math.sqrt(sum(r * r for r in rows))
        # piston unwrapped against the last frame (motion faster than half a fringe per frame is aliased; the sign
        # reader leaves such steps out)
        p = float(g.coeffs[0])
        un = p if self._piston is None else self._piston + math.remainder(p - self._piston, 1.0)
        self._piston = un
        c = np.array(g.coeffs, dtype=float)
        c[0] = un
        probes = tuple(float(x) for x in c @ self.Zp)
        self.prior = g
        f = self.f
        centre = ((self.centre[0] + 0.5) * f - 0.5, (self.centre[1] + 0.5) * f - 0.5)
        return FormPoint(True, terms["power_fringes"], u["power_fringes"], terms["astigmatism_fringes"],
                         u["astigmatism_fringes"], terms["astigmatism_axis_deg"], un, probes, float(g.contrast),
                         centre, self.radius * f, reinit)


class FormSettle:
    """Fitted gap at fixed aperture points still within ``tol`` fringe (peak to peak) over the last ``n`` frames."""

    def __init__(self, n: int = SETTLE_FRAMES, tol_fringes: float = SETTLE_FRINGES):
        if n < 2:
            raise ValueError("settling needs at least 2 frames")
        if not tol_fringes > 0:
            raise ValueError("the settle tolerance must be positive")
        self.n, self.tol = int(n), float(tol_fringes)
        self._hist: deque = deque(maxlen=self.n)

    def reset(self) -> None:
        self._hist.clear()

    def update(self, probes) -> tuple[bool, float]:
        self._hist.append(tuple(probes))
        if len(self._hist) < 2:
            return False, math.nan
        motion = max(max(c) - min(c) for c in zip(*self._hist))
        return len(self._hist) >= self.n and motion <= self.tol, motion


@dataclass(frozen=True)
class FormLiveState(LiveState):
    """A live state against a test plate: power and astigmatism (fringes, and nm) with k = 1 uncertainties.

    ``power_fringes`` carries the sign once the motion gave one (+ centre contact); until then it is a magnitude.
    """

    power_fringes: float | None = None
    power_u_fringes: float | None = None
    power_nm: float | None = None
    power_u_nm: float | None = None
    astigmatism_fringes: float | None = None
    astigmatism_u_fringes: float | None = None
    astigmatism_nm: float | None = None
    astigmatism_u_nm: float | None = None
    astigmatism_axis_deg: float | None = None
    fringe_nm: float | None = None
    piston_fringes: float | None = None
    aperture_radius_px: float | None = None


class FormLiveSession(LiveSession):
    """:class:`LiveSession` for a part on a test plate (form options given): the same loop, source, dropping,
    threading and capture, with :class:`FormTracker` in place of the ring tracker."""

    handles_form = True

    def __init__(self, source, setup: BenchSetup, options: LiveOptions | None = None):
        super().__init__(source, setup, options)
        self.tracker = FormTracker(setup)
        self.form_settle = FormSettle(self.options.settle_frames, self.options.settle_fringes)

    def analyse(self, f) -> FormLiveState:
        pt = self.tracker.update(f.codes, f.full_scale)
        dropped, latency, fps = self._pace(f)
        if not pt.ok:
            self.form_settle.reset()
            self._phases.clear()
            st = FormLiveState(f.index, False, pt.message, power_sign=self.sign.sign, sign_detail=self.sign.detail,
                               dropped=dropped, latency_ms=latency, analysed_fps=fps)
        else:
            if pt.reinitialised:
                self.form_settle.reset()
                self._phases.clear()
                if self.sign._last_phase is not None:  # a new track has its own piston origin (and orientation)
                    self.sign._open = None
                    self.sign._last_phase = None
            settled, motion = self.form_settle.update(pt.probes_fringes)
            phase = TWO_PI * pt.piston_fringes  # grows when the rings move in (see the module notes)
            self.sign.update(f.index, phase, settled)
            self._phases.append(phase)
            o = self.options
            rings = "still" if settled else rings_direction(list(self._phases), o.settle_fringes / o.settle_frames)
            sign = self.sign.sign
            if rings == "still":
                gap = "steady"
            elif sign == "unknown":
                gap = "unknown"
            else:
                gap = "closing" if (rings == "out") == (sign == "+") else "opening"
            power = abs(pt.power_fringes) * (-1.0 if sign == "-" else 1.0)
            fr = self.tracker.fringe_nm
            lam, u_lam = self.setup.wavelength_nm, self.setup.source.wavelength_u_nm

            def nm(v, u):
                return v * fr, math.hypot(u * fr, v * fr * u_lam / lam)

            p_nm, pu_nm = nm(power, pt.power_u_fringes)
            a_nm, au_nm = nm(pt.astigmatism_fringes, pt.astigmatism_u_fringes)
            st = FormLiveState(
                f.index, True, pt.message, pt.centre_px, pt.radius_px, None, phase, None, None, None, 2.0, settled,
                None if math.isnan(motion) else motion, rings, gap, sign, self.sign.detail, dropped, latency, fps,
                pt.contrast, len(self.sign.episodes),
                power_fringes=power, power_u_fringes=pt.power_u_fringes, power_nm=p_nm, power_u_nm=pu_nm,
                astigmatism_fringes=pt.astigmatism_fringes, astigmatism_u_fringes=pt.astigmatism_u_fringes,
                astigmatism_nm=a_nm, astigmatism_u_nm=au_nm, astigmatism_axis_deg=pt.axis_deg, fringe_nm=fr,
                piston_fringes=pt.piston_fringes, aperture_radius_px=pt.radius_px,
            )
        self.analysed += 1
        with self._lock:
            self.history.append((f.index, st))
            self.recent_frames.append(f)
            self.latest = st
            self.latest_frame = f
        return st

    def capture_set(self, n_frames: int = 1, *, at_frame: int | None = None) -> dict:
        out = super().capture_set(n_frames, at_frame=at_frame)
        last = out["states"][-1]
        ev = out["evidence"]
        ev.pop("tracked_radius_mm", None)
        ev.pop("tracked_radius_U_mm", None)
        ev["tracked_power_fringes"] = last.power_fringes
        ev["tracked_power_U_fringes"] = None if last.power_u_fringes is None else 2 * last.power_u_fringes
        ev["tracked_astigmatism_fringes"] = last.astigmatism_fringes
        ev["tracked_astigmatism_U_fringes"] = (None if last.astigmatism_u_fringes is None
                                              else 2 * last.astigmatism_u_fringes)
        ev["settle_rule"] = (f"gap at fixed aperture points still within {self.options.settle_fringes:g} fringe over "
                             f"the last {self.options.settle_frames} frames")
        for m in ev.get("motion_before", []):
            m["piston_fringes"] = m.pop("phase_fringes")
        return out


def open_session(source, setup: BenchSetup, options: LiveOptions | None = None) -> LiveSession:
    """The live session that fits the set-up: against a test plate when form options are given, else rings."""
    if wants_form(setup, 1):
        return FormLiveSession(source, setup, options)
    return LiveSession(source, setup, options)
