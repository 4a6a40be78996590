"""Tracking the ring model from frame to frame at camera rate.

The first frame (and any frame after the track is lost) goes through the full engine
(:func:`ringgauge.pipeline.analyse_rings`), which finds the centre and fringe scale from nothing. Every later frame
is fitted with the *same* full-field ring model (:mod:`ringgauge.fit.fullfield`: variable projection over centre,
phase rate q and phase), started from the previous frame's centre, scale and phase and fed a fixed random
subsample of the pixels — a few thousand instead of a million — so one frame costs a few milliseconds of
least squares. The full pipeline (ring positions, sectors, GUM budget) stays the one used at capture.

The tracked phase is that of ``I = A + M cos(q s + phase)`` with q > 0 and M > 0 (s the squared radius, pixels²):
dark rings sit where ``q s + phase`` is an odd multiple of pi, so when ``phase`` grows every ring moves to a
smaller radius — the rings move *in* — and when it falls they move *out*.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..bench_setup import BenchSetup
from ..errors import AnalysisError, RinggaugeError
from ..fit.fullfield import _Model, _start_phase
from ..imaging import frame_from_array
from ..pipeline import BORDER_PX, MIN_PERIOD_PX, analyse_rings
from ..uncertainty import BudgetRow, make_budget

#: pixels fed to each tracking fit
TRACK_PIXELS = 4000
#: fewest fringe contrast (modulation / background) for a frame to count as tracked
MIN_CONTRAST = 0.03
#: largest centre jump between frames, in fringe periods at the fitted edge, before the track counts as lost
MAX_JUMP_PERIODS = 3.0


@dataclass(frozen=True)
class TrackPoint:
    """The ring model of one tracked frame."""

    ok: bool
    x0: float = math.nan
    y0: float = math.nan
    q: float = math.nan  # rad per px² (phase per squared radius)
    phase: float = math.nan  # rad, unwrapped along the track; rings move in when it grows
    contrast: float = math.nan
    radius_mm: float = math.nan
    radius_u_mm: float = math.nan  # standard uncertainty, k = 1
    radius_U_mm: float = math.nan  # expanded
    k: float = 2.0
    r_fit_px: float = math.nan
    reinitialised: bool = False
    message: str = ""


class RingTracker:
    """Follows Newton's rings of a lens on an optical flat through a sequence of frames.

    Parameters
    ----------
    setup : BenchSetup
        Wavelength, pixel scale (with its uncertainty), gap medium: the same set-up as a single analysis.
    n_pixels : int
        Pixels in the tracking fit's subsample.
    rng : int
        Seed of the pixel subsample.
    """

    def __init__(self, setup: BenchSetup, *, n_pixels: int = TRACK_PIXELS, rng: int = 0):
        self.setup = setup
        self.n_pixels = int(n_pixels)
        self.rng = np.random.default_rng(rng)
        px_um, py_um = setup.pixel_size_xy_um
        self.aspect = py_um / px_um
        self.px_mm = px_um * 1e-3
        self.lam_px_over_n = setup.wavelength_nm * 1e-6 / self.px_mm / setup.medium_index
        self.p: np.ndarray | None = None  # (x0, y0, q, phi0) as the model fits it
        self.phase_unwrapped: float | None = None
        self.r_fit = None
        self._sample = None
        self._shape = None
        self.last_full = None  # the AnalysisResult of the last (re)initialisation
        self._agreement = None  # relative difference tracked vs full analysis on that frame

    @property
    def tracking(self) -> bool:
        return self.p is not None

    def reset(self) -> None:
        self.p = None
        self._sample = None

    # -- initialisation by the full engine ------------------------------------------------------------------
    def _initialise(self, codes: np.ndarray, full_scale: float) -> None:
        frame = frame_from_array(codes, full_scale=full_scale)
        res = analyse_rings(frame, self.setup)
        ff = res.fullfield
        q = 2 * math.pi / ff.period_px2_per_fringe
        h, w = codes.shape
        cx, cy = ff.centre_px
        self.r_fit = float(ff.r_max_px)
        self._shape = (h, w)
        self._new_sample(cx, cy)
        xs, ys, vals = self._values(codes, full_scale)
        phi = _start_phase(xs, ys, vals, (cx, cy, q), self.aspect)
        self.p = np.array([cx, cy, q, phi], dtype=np.float64)
        self.phase_unwrapped = None
        self.last_full = res
        self._agreement = None

    def _new_sample(self, cx: float, cy: float) -> None:
        h, w = self._shape
        b = BORDER_PX if min(h, w) > 20 * BORDER_PX else 0
        # draw candidates in the fitted disc (clipped to the frame), keep n_pixels of them
        r = self.r_fit
        x_lo, x_hi = max(b, int(cx - r)), min(w - 1 - b, int(cx + r) + 1)
        y_lo, y_hi = max(b, int(cy - r / self.aspect)), min(h - 1 - b, int(cy + r / self.aspect) + 1)
        if x_hi <= x_lo or y_hi <= y_lo:
            raise AnalysisError("the rings have left the frame")
        n_try = self.n_pixels * 4
        xs = self.rng.integers(x_lo, x_hi + 1, n_try)
        ys = self.rng.integers(y_lo, y_hi + 1, n_try)
        inside = (xs - cx) ** 2 + (self.aspect * (ys - cy)) ** 2 <= r * r
        xs, ys = xs[inside][: self.n_pixels], ys[inside][: self.n_pixels]
        if len(xs) < 200:
            raise AnalysisError("too few pixels of the rings inside the frame")
        self._sample = (xs.astype(np.intp), ys.astype(np.intp))
        self._sample_centre = (cx, cy)

    def _values(self, codes, full_scale):
        xi, yi = self._sample
        raw = codes[yi, xi]
        ok = raw < full_scale  # saturated pixels carry no fringe
        return xi[ok].astype(np.float64), yi[ok].astype(np.float64), raw[ok].astype(np.float64) / full_scale

    # -- one frame ---------------------------------------------------------------------------------------------
    def update(self, codes: np.ndarray, full_scale: float = 255.0) -> TrackPoint:
        """Fit one frame (grey codes); initialises from the full engine when not tracking."""
        reinit = False
        if self.p is None or codes.shape != self._shape:
            try:
                self._initialise(codes, full_scale)
            except RinggaugeError as exc:
                self.reset()
                return TrackPoint(False, message=str(exc))
            reinit = True
        try:
            pt = self._fit(codes, full_scale)
        except (ValueError, np.linalg.LinAlgError, AnalysisError) as exc:
            self.reset()
            return TrackPoint(False, message=f"track lost ({exc})")
        if not pt.ok:
            self.reset()
        return TrackPoint(**{**pt.__dict__, "reinitialised": reinit})

    def _fit(self, codes, full_scale) -> TrackPoint:
        cx, cy = self._sample_centre
        # a centre that wandered by more than a tenth of the disc gets a fresh sample around it
        if math.hypot(self.p[0] - cx, self.aspect * (self.p[1] - cy)) > 0.1 * self.r_fit:
            self._new_sample(self.p[0], self.p[1])
        xs, ys, vals = self._values(codes, full_scale)
        if len(xs) < 200:
            raise AnalysisError("the sampled pixels are saturated; reduce exposure")
        scale = max(self.r_fit, 10.0)
        model = _Model(xs, ys, vals, self.aspect, self.lam_px_over_n, scale, self.p[:2])
        p0 = self.p.copy()
        # the phase is linear in the model once centre and scale are fixed: a fresh linear estimate at the last
        # centre and scale starts the fit near the right fringe however far the rings moved since the last frame
        p0[3] = _start_phase(xs, ys, vals, p0[:3], self.aspect)
        nf = self.r_fit**2 * p0[2] / (2 * math.pi)
        x_scale = np.array([1.0, 1.0, p0[2] / max(1.0, nf * 2 * math.pi) + 1e-12, 1.0])
        res = least_squares(model.residual, p0, jac=model.jac, method="lm", x_scale=x_scale, xtol=1e-7,
                            ftol=1e-8, max_nfev=40)
        p = res.x
        M = model.contrast()
        A = model.env @ model.coef[: model.k]
        m_med = float(np.median(M))
        contrast = abs(m_med) / max(float(np.median(A)), 1e-9)
        period_edge = math.pi / (p[2] * self.r_fit) if p[2] > 0 else math.inf
        jump = math.hypot(p[0] - p0[0], self.aspect * (p[1] - p0[1]))
        if not (p[2] > 0) or not np.all(np.isfinite(p)):
            return TrackPoint(False, message="track lost (the ring scale collapsed)")
        if contrast < MIN_CONTRAST:
            return TrackPoint(False, message=f"track lost (fringe contrast {contrast:.3f})")
        if jump > MAX_JUMP_PERIODS * max(period_edge, MIN_PERIOD_PX):
            return TrackPoint(False, message=f"track lost (the centre jumped {jump:.0f} px)")
        # the phase of +cos with positive contrast, unwrapped against the last frame's
        phase = float(p[3]) + (math.pi if m_med < 0 else 0.0)
        if self.phase_unwrapped is None:
            un = math.remainder(phase, 2 * math.pi)
        else:
            # the nearest fringe to the last frame's: motion faster than half a fringe per frame is aliased (the
            # sign reader leaves such steps out rather than guess)
            un = self.phase_unwrapped + math.remainder(phase - self.phase_unwrapped, 2 * math.pi)
        self.phase_unwrapped = un
        self.p = p
        # statistical uncertainty of q from the fit (covariance scaled by the residual variance)
        r = res.fun
        dof = max(1, len(r) - 4 - model.X.shape[1])
        s2 = float(r @ r) / dof
        try:
            cov = np.linalg.inv(res.jac.T @ res.jac) * s2
            u_q = math.sqrt(max(cov[2, 2], 0.0))
        except np.linalg.LinAlgError:
            u_q = math.nan
        R = 2 * math.pi / (self.lam_px_over_n * p[2]) * self.px_mm
        if self._agreement is None and self.last_full is not None:
            # the tracking fit (subsample, circular model) against the full engine on the same first frame: the
            # difference is carried as a rectangular term for the rest of the track
            self._agreement = abs(R - self.last_full.radius_mm) / R
        budget = self.budget(R, u_q / p[2], dof)
        return TrackPoint(True, float(p[0]), float(p[1]), float(p[2]), un, contrast, R, budget.u_c, budget.U,
                          budget.k, self.r_fit)

    def budget(self, R: float, rel_q: float, dof: int):
        """GUM budget of a tracked radius R = 2 pi / (lambda/n per px * q) * pixel size.

        The phase rate q enters inversely (Type A from the fit), the pixel scale squared, the wavelength and the
        medium index to the first power — as in the radius budget of a single analysis.
        """
        s = self.setup
        (px, py), (ux, uy) = s.pixel_size_xy_um, s.pixel_size_xy_u_um
        lam, n = s.wavelength_nm, s.medium_index
        rows = [
            BudgetRow("phase rate of the ring model (tracking fit)", rel_q, "relative", rel_q, "normal (Type A)", 1.0,
                      R, "mm", R * rel_q if math.isfinite(rel_q) else 0.0, dof=dof),
        ]
        if s.pixel_size_y_um is None:
            rows.append(BudgetRow("pixel scale (enters squared)", px, "µm/px", ux, "normal (calibration)", 1.0,
                                  2 * R / px, "mm/(µm/px)", 2 * R / px * ux))
        else:
            rows += [
                BudgetRow("pixel scale x", px, "µm/px", ux, "normal (calibration)", 1.0, R / px, "mm/(µm/px)",
                          R / px * ux),
                BudgetRow("pixel scale y", py, "µm/px", uy, "normal (calibration)", 1.0, R / py, "mm/(µm/px)",
                          R / py * uy),
            ]
        if self._agreement:
            half = R * self._agreement
            rows.append(BudgetRow("agreement with the full analysis (first frame of the track)", half, "mm",
                                  half / math.sqrt(3.0), "rectangular", math.sqrt(3.0), 1.0, "", half / math.sqrt(3.0),
                                  note="half-width = difference of the tracked and the fully analysed radius"))
        rows += [
            BudgetRow("wavelength", lam, "nm", s.source.wavelength_u_nm, "normal (source table)", 1.0, -R / lam,
                      "mm/nm", R / lam * s.source.wavelength_u_nm),
            BudgetRow("gap medium index", n, "", s.medium_index_u, "normal (as entered)", 1.0, R / n, "mm",
                      R / n * s.medium_index_u),
        ]
        return make_budget("radius of curvature R (tracked)", "mm", R, rows)
