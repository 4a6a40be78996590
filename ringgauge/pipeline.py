"""analyse(frames, setup) -> AnalysisResult: the one pipeline behind the CLI, the window and batch runs.

Pure computation: no Qt, no database, no printing. Long steps report through ``progress(fraction, message)``.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import cv2
import numpy as np

from . import physics
from .blas import one_thread
from .bench_setup import BenchSetup
from .conformity import with_radius_verdict
from .errors import AnalysisError, InputError
from .fit.fullfield import fit_full_field
from .fit.orders import fit_orders, locate_extrema
from .imaging import Frame, load_frame
from .fit.result import Sectors
from .result import AnalysisResult, FullField, ImageInfo
from .rings.centre import gradient_centre, refine_by_sharpness
from .rings.profile import dominant_period, s_profile, s_profiles_by_label
from .fit.sectors import sector_scatter
from .uncertainty import BudgetRow, Quantity, make_budget

Progress = Callable[[float, str], None]

#: finest fringe period (pixels) still used: below it fringes are under-sampled and blur wipes them out
MIN_PERIOD_PX = 3.0
#: frame-edge band left out of the fits, pixels
BORDER_PX = 3
#: angular sectors for the scatter (Type A) and roundness check
N_SECTORS = 8
#: largest relative Type A uncertainty of the ring-fit slope accepted: beyond it the rings around the found centre
#: disagree so much that the centre itself is in doubt, and a radius would mislead
MAX_TYPE_A = 0.0025
#: fewest rings for a radius
MIN_RINGS = 4


def _noop(*args) -> None:  # pragma: no cover - trivial
    pass


def _adapt(progress: Progress) -> Callable:
    """Accept both ``progress(fraction, message)`` and ``progress(message)`` from the analysis steps."""

    def call(*args) -> None:
        if len(args) == 1:
            progress(float("nan"), str(args[0]))
        else:
            progress(float(args[0]), str(args[1]))

    return call


def image_info(frame: Frame) -> ImageInfo:
    h, w = frame.shape
    return ImageInfo(frame.path, frame.sha256, w, h, frame.bit_depth, frame.channel, frame.saturated_fraction)


def wants_form(setup: BenchSetup, n_frames: int) -> bool:
    """Surface form against a test plate is evaluated when any form option is given or several frames are."""
    return bool(
        n_frames > 1
        or setup.test_diameter_mm is not None
        or setup.tolerance
        or setup.test_plate
        or setup.press_test  # a press-test observation only makes sense against a test plate
        or setup.mode == "form"
    ) and setup.mode != "radius"


def analyse(frames: Frame | Sequence[Frame], setup: BenchSetup, *, progress: Progress | None = None) -> AnalysisResult:
    """Analyse one frame (or a frame set) taken with ``setup``.

    A single frame without form options is read as Newton's rings of a lens on an optical flat and gives the
    radius of curvature with its uncertainty budget. With form options (test diameter, tolerance, test plate) or
    several frames, the surface form against a test plate is evaluated as well.

    Parameters
    ----------
    frames : Frame or sequence of Frame
        The image (see :func:`ringgauge.imaging.load_frame`), or several frames of one part with the gap changed
        between them (the form's sign, and a phase map from three or more).
    setup : BenchSetup
        Light source (wavelength in nm), pixel scale (µm per pixel, x and y, with standard uncertainties), gap
        medium, and the form and tolerance options.
    progress : callable, optional
        ``progress(fraction, message)`` during the long steps (fraction 0-1).

    Returns
    -------
    AnalysisResult
        ``radius`` (mm, standard uncertainty u, coverage factor k; U = k·u), the ring fit and its GUM budget, or
        ``form`` (power, astigmatism, irregularity… in fringes of λ/(2n) and in nm, each with u), the verdicts
        against the set-up's tolerances and the warnings. ``to_dict()`` gives the JSON ``--json`` prints.

    Raises
    ------
    InputError
        When the input cannot be used (no frame, frames of different sizes, an option out of range).
    AnalysisError
        When no trustworthy measurement can be made; the message says why and what to try.
    """
    # Small dense solves run fastest single-threaded; several BLAS threads fighting other processes (batch
    # workers, the window) slow them a hundredfold on a 2-core machine.
    with one_thread():
        return _analyse(frames, setup, _adapt(progress) if progress else _noop)


def _analyse(frames, setup: BenchSetup, progress: Progress) -> AnalysisResult:
    if isinstance(frames, Frame):
        frames = [frames]
    frames = list(frames)
    if not frames:
        raise InputError("no image given")
    t0 = time.perf_counter()
    if wants_form(setup, len(frames)):
        from .form.evaluate import evaluate_form  # form evaluation is its own sub-package

        form = evaluate_form(frames, setup, progress=progress)
        return with_radius_verdict(AnalysisResult(
            image=image_info(frames[0]), setup=setup, centre_px=None, centre_u_px=None, radius=None,
            k=2.0, budget=None, fit=None, form=form, verdict=form.verdict,
            warnings=form.warnings, elapsed_s=time.perf_counter() - t0,
            frames=tuple(image_info(f) for f in frames),
        ))
    res = analyse_rings(frames[0], setup, progress=progress)
    extra = ()
    if len(frames) > 1:
        extra = (f"radius mode reads one frame: only {frames[0].name} was used, {len(frames) - 1} more ignored",)
    return with_radius_verdict(AnalysisResult(
        **{**res.__dict__, "elapsed_s": time.perf_counter() - t0, "warnings": res.warnings + extra}
    ))


def analyse_files(paths: Sequence[str], setup: BenchSetup, *, progress: Progress | None = None) -> AnalysisResult:
    """Load the image files and analyse them as one measurement.

    Parameters
    ----------
    paths : sequence of str or path-like
        Image files (PNG, TIFF, JPEG, BMP, PGM/PPM): one frame, or the frames of one part in the order taken.
    setup : BenchSetup
        As for :func:`analyse`.
    progress : callable, optional
        ``progress(fraction, message)`` during the long steps.

    Returns
    -------
    AnalysisResult
        As for :func:`analyse`.

    Raises
    ------
    ImageError
        A file that cannot be read, or is refused before decoding (too many pixels, not a regular file).
    InputError, AnalysisError
        As for :func:`analyse`.
    """
    with one_thread():  # decoding too: a BLAS thread woken there would spin on through the analysis
        frames = [load_frame(p) for p in paths]
    return analyse(frames, setup, progress=progress)


@dataclass
class _Geometry:
    """Where the rings are: the pixels used, the centre's first estimate and the radii the frame covers (px)."""

    valid: np.ndarray
    aspect: float
    c0: object  # the gradient vote (ringgauge.rings.centre)
    cx: float
    cy: float
    rfar: float
    rnear: float
    small_mask: np.ndarray  # ``valid`` on the vote's reduced image


@dataclass
class _Rings:
    """The ring fit and its cross-checks, before the budget."""

    fit: object
    R: float
    R_ff: float
    a2: float
    blur: float
    sag_rel: float
    sectors: object
    extrema: list
    prof: object


def analyse_rings(frame: Frame, setup: BenchSetup, *, progress: Progress | None = None, rng=0) -> AnalysisResult:
    """Radius of curvature from Newton's rings of a lens resting on an optical flat.

    The steps: usable pixels and the centre's first estimate (:func:`_locate`), the fringe period
    (:func:`_period`), the full-field ring model (:func:`_full_field`), rings located and fitted as r² against
    order with the sector repeat (:func:`_ring_fit`), then the GUM budget and the result."""
    progress = progress or _noop
    warnings: list[str] = list(frame.notes)
    px_mm = setup.pixel_size_xy_um[0] * 1e-3
    lam_nm = fringe_wavelength_nm(setup.source)
    n = setup.medium_index

    progress(0.05, "finding the ring centre")
    g = _locate(frame, setup, warnings)
    progress(0.15, "measuring the fringe period")
    period_s, r_lim = _period(g, px_mm, warnings)
    progress(0.3, "fitting the ring model to all pixels")
    ff, contrast = _full_field(frame.data, g, period_s, r_lim, lam_nm * 1e-6 / px_mm / n, rng, warnings)
    period_s = ff.period_s
    r_lim = min(g.rfar, period_s / (2.0 * MIN_PERIOD_PX))
    cu = np.sqrt(np.clip(np.diag(ff.cov)[:2], 0, None))
    progress(0.7, "locating rings and fitting r² against order")
    rings = _ring_fit(frame.data, g, ff, period_s, r_lim, setup, lam_nm, px_mm, warnings, progress)

    progress(0.9, "uncertainty budget")
    R, R_ff, a2, fit = rings.R, rings.R_ff, rings.a2, rings.fit
    budget = radius_budget(R, fit, setup, R_ff * (1 - a2 / 2), rings.sectors, blur_rel=a2 / 2, blur_px=rings.blur,
                           sag_rel=rings.sag_rel)
    if abs(R - R_ff * (1 - a2 / 2)) > 3 * budget.rows[0].contribution:
        # enough decimals that the two values printed differ (at least the difference's first two digits)
        diff = abs(R - R_ff * (1 - a2 / 2))
        dec = min(9, max(2, 1 - math.floor(math.log10(diff)))) if diff > 0 else 6
        warnings.append(
            f"the ring fit (R = {R:.{dec}f} mm) and the full-field fit (R = {R_ff * (1 - a2 / 2):.{dec}f} mm) "
            f"differ by {diff:.2g} mm, beyond their statistical uncertainty; the difference is carried in the "
            "budget — check the image for distortion"
        )
    if setup.pixel_size_u_um == 0:
        warnings.append(
            "pixel size given without uncertainty: the budget treats it as exact, yet it enters R squared; give "
            "--pixel-size-u or use a calibrated bench profile"
        )
    fullfield = FullField(
        method="joint least-squares fit of the ring model to all pixels (variable projection)",
        radius_mm=R_ff * (1 - a2 / 2),
        blur_sigma_px=rings.blur,
        blur_correction_ppm=1e6 * a2 / 2,
        centre_px=(float(ff.x0), float(ff.y0)),
        centre_u_px=(float(cu[0]), float(cu[1])),
        period_px2_per_fringe=period_s,
        fringe_contrast=contrast,
        modulation=ff.modulation,
        background=ff.background,
        residual_rms=ff.sigma,
        pixels_used=int(ff.npix),
        r_max_px=ff.r_max,
        r_max_mm=ff.r_max * px_mm,
        coarse_centre_px=(float(g.cx), float(g.cy)),
        gradient_centre_px=(float(g.c0.x), float(g.c0.y)),
        **_profile_for_display(rings.prof, px_mm),
        extrema_r_px=tuple(float(math.sqrt(e.s)) for e in rings.extrema),
        extrema_kind=tuple(e.kind for e in rings.extrema),
        sectors=None if rings.sectors is None else Sectors.of(rings.sectors),
    )
    progress(1.0, "done")
    fit = replace(fit, fringe_wavelength_nm=lam_nm)
    return AnalysisResult(
        image=image_info(frame), setup=setup, centre_px=(float(ff.x0), float(ff.y0)),
        centre_u_px=(float(cu[0]), float(cu[1])), radius=Quantity(float(R), float(budget.u_c), "mm", float(budget.k)),
        k=float(budget.k), budget=budget, fit=fit, fullfield=fullfield, warnings=tuple(warnings),
    )


def _locate(frame: Frame, setup: BenchSetup, warnings: list[str]) -> _Geometry:
    """The pixels to use (not saturated, not the frame's edge band, inside a hand-set aperture) and the ring
    centre's first estimate (gradient vote; the profile's sharpness decides between candidates when the vote is
    weak or a centre was set by hand)."""
    data = frame.data
    h, w = data.shape
    px_um, py_um = setup.pixel_size_xy_um
    aspect = py_um / px_um
    valid = data < (1.0 - 0.5 / ((1 << frame.bit_depth) - 1))
    # a thin band along the frame edge is left out: filtering and demosaicing in cameras (and blur in simulated
    # images) are unreliable there
    b = BORDER_PX if min(h, w) > 20 * BORDER_PX else 0
    if b:
        valid[:b, :] = valid[-b:, :] = False
        valid[:, :b] = valid[:, -b:] = False
    if frame.saturated_fraction > 0.001:
        warnings.append(
            f"{100 * frame.saturated_fraction:.1f} % of pixels are saturated (left out); reduce exposure or lamp power"
        )
    c0 = gradient_centre(data, aspect=aspect)
    sc = c0.scale
    small = c0.small
    vs = cv2.resize(valid.astype(np.uint8), (small.shape[1], small.shape[0]), interpolation=cv2.INTER_NEAREST) > 0
    region = None
    aperture = setup.aperture_px  # set by hand (x, y, radius) for a part smaller than the field
    if aperture:
        ax, ay, ar = (float(v) for v in aperture)
        if ar <= 0:
            raise InputError("the aperture set by hand has no size")
        yy, xx = np.ogrid[0:h, 0:w]
        valid &= (xx - ax) ** 2 + (aspect * (yy - ay)) ** 2 <= ar * ar
        region = cv2.resize(valid.astype(np.uint8), (small.shape[1], small.shape[0]), interpolation=cv2.INTER_AREA) > 0
        if not region.any():
            raise InputError("the aperture set by hand lies outside the image")
        vs &= region
    manual = setup.centre_px
    starts = [(c0.x, c0.y)] + ([c0.vote] if c0.vote else []) + ([tuple(manual)] if manual else [])
    cx, cy = c0.x, c0.y
    # On clean rings nearly every strong gradient line passes the estimate; where few do (faint, blurred or
    # noisy rings, mottled light, a centre near or beyond the edge) the sharpness of the s-profile decides
    # between the candidates and refines the best, at some cost in time.
    if c0.inlier_fraction < 0.6 or manual:
        cx, cy = _sharpest_centre(small, vs, starts, sc, aspect)
    if region is None:
        corners = [(x, y) for x in (0, w - 1) for y in (0, h - 1)]
        rfar = max(math.hypot(x - cx, aspect * (y - cy)) for x, y in corners)
    else:
        ax, ay, ar = (float(v) for v in aperture)
        rfar = math.hypot(ax - cx, aspect * (ay - cy)) + ar
    rnear = 0.0
    if not (0 <= cx <= w - 1 and 0 <= cy <= h - 1):
        rnear = math.hypot(min(max(cx, 0), w - 1) - cx, aspect * (min(max(cy, 0), h - 1) - cy))
    return _Geometry(valid, aspect, c0, cx, cy, rfar, rnear, vs)


def _period(g: _Geometry, px_mm: float, warnings: list[str]) -> tuple[float, float]:
    """The fringe period in s = r² (px² per fringe) from the area-averaged working image (fast; it only seeds
    the fit), and the radius (px) out to which fringes are sampled finely enough."""
    sc = g.c0.scale
    cs = ((g.cx - 0.5 * (sc - 1)) / sc, (g.cy - 0.5 * (sc - 1)) / sc)
    prof0 = s_profile(g.c0.small, cs, aspect=g.aspect, s_max=(g.rfar / sc) ** 2, ds=max(g.rfar / sc / 2.0, 1.0),
                      mask=g.small_mask)
    period_s, snr = dominant_period(prof0, min_period=None)
    period_s *= sc * sc
    if not math.isfinite(period_s) or snr < 12.0:
        raise AnalysisError(
            "no ring system found (no regular fringe spacing around any centre); check that the image shows "
            "Newton's rings in focus, with the lamp on"
        )
    # under-sampling limit: local period in r is P_s / (2 r)
    r_lim = min(g.rfar, period_s / (2.0 * MIN_PERIOD_PX))
    n_fringes = (r_lim**2 - g.rnear**2) / period_s
    if n_fringes < MIN_RINGS - 0.5:
        raise AnalysisError(
            f"only about {max(n_fringes, 0):.1f} rings are resolved in the image; need at least {MIN_RINGS}: widen "
            "the field of view, or measure the surface against a test plate (form mode: --test-diameter)"
        )
    if r_lim < g.rfar * 0.98:
        warnings.append(
            f"fringes beyond r = {r_lim * px_mm:.3f} mm are under-sampled (period under {MIN_PERIOD_PX:g} px) "
            "and were excluded"
        )
    return period_s, r_lim


def _full_field(data, g: _Geometry, period_s: float, r_lim: float, lam_px_over_n: float, rng, warnings):
    """The ring model fitted to all usable pixels (centre, phase rate, blur): (fit, fringe contrast)."""
    h, w = data.shape
    try:
        ff = fit_full_field(
            data, (g.cx, g.cy), period_s, aspect=g.aspect, lam_px_over_n=lam_px_over_n, r_max=r_lim, valid=g.valid,
            rng=rng,
        )
    except (ValueError, np.linalg.LinAlgError) as exc:
        raise AnalysisError(f"the ring model could not be fitted ({exc}); check focus and exposure") from None
    if not math.isfinite(ff.q) or ff.q <= 0:
        raise AnalysisError("the ring model fit did not converge; check that the image shows Newton's rings")
    contrast = ff.modulation / max(ff.background, 1e-9)
    if ff.modulation < 3 * ff.sigma / math.sqrt(max(ff.npix, 1)) * 10 or contrast < 0.02:
        raise AnalysisError(
            "no ring system found: the fitted rings have no real contrast; check the lamp, focus and exposure"
        )
    if contrast < 0.15:
        warnings.append(f"low fringe contrast ({contrast:.2f}); clean the surfaces and check the lamp and focus")
    if not (-0.5 <= ff.x0 <= w - 0.5 and -0.5 <= ff.y0 <= h - 0.5):
        warnings.append(
            f"the ring centre ({ff.x0:.1f}, {ff.y0:.1f}) px lies outside the frame; the result rests on arcs only"
        )
    return ff, contrast


def _ring_fit(data, g: _Geometry, ff, period_s: float, r_lim: float, setup: BenchSetup, lam_nm: float,
              px_mm: float, warnings: list[str], progress) -> _Rings:
    """Rings located on the azimuthal profile about the fitted centre, r² fitted against fringe order (with and
    without the sphere's sagitta correction), the blur correction, and the fit repeated in angular sectors."""
    lam_mm = lam_nm * 1e-6
    n = setup.medium_index
    centre = (ff.x0, ff.y0)
    ds = period_s / 24.0
    labels, sector_angles = _sectors_over_visible_arc(g.valid, centre, g.aspect, r_lim, N_SECTORS)
    sector_profiles, prof = s_profiles_by_label(
        data, centre, labels, N_SECTORS, aspect=g.aspect, s_max=r_lim**2, ds=ds, mask=g.valid
    )
    s_min = max(g.rnear**2, 0.0)
    extrema = locate_extrema(prof, period_s, ff.phase0, s_min=s_min, s_max=r_lim**2)
    # the model's phase rate q (rad/px^2) is a slope of 2 pi / q px^2 per fringe
    R_ff = physics.radius_from_slope(2 * math.pi / ff.q * px_mm**2, lam_nm, n)
    fit = fit_orders(
        extrema, kind=setup.fringe_kind, px_mm=px_mm, radius_guess_mm=R_ff, lam_mm_over_n=lam_mm / n,
    )
    # the same rings without the sphere's sagitta correction (the paraxial r^2 = 2 R t): how much the surface model
    # matters over the measured zone, carried in the budget
    fit_par = fit_orders(extrema, kind=setup.fringe_kind, px_mm=px_mm)
    sag_rel = abs(fit.slope_mm2 / fit_par.slope_mm2 - 1) if fit.success and fit_par.success else 0.0
    used = [r for r in fit.rings if r.used]
    if not fit.success or len(used) < MIN_RINGS - 1:
        raise AnalysisError(
            f"too few {setup.fringe_kind} rings could be located ({len(used)}); check focus and contrast"
        )
    if len(used) < 6:
        warnings.append(f"only {len(used)} rings used: the radius rests on few fringes")
    R_raw = physics.radius_from_slope(fit.slope_mm2, lam_nm, n)
    # a band source (LED) fades the fringes with order just as blur does: the contrast cannot tell them apart there,
    # so no blur correction is made for it (its wavelength uncertainty is far larger anyway)
    blur = 0.0 if setup.source.fwhm_nm > 0 else estimate_blur(extrema, period_s, setup.fringe_kind)
    # Blur (defocus, pixel integration) of a ring pattern with phase q s scales its apparent phase rate by
    # 1 / (1 + a^2), a = 2 q sigma^2, so rings look slightly wider apart: R appears (1 + a^2) too long. sigma comes
    # from the fall of fringe contrast with fringe frequency, which other causes (band width, stray light) also
    # produce, so a^2 is an upper bound: correct by half of it and carry the other half as a rectangular term.
    a2 = (2 * (2 * math.pi / period_s) * blur**2) ** 2
    R = R_raw * (1 - a2 / 2)

    progress(0.8, "repeating the fit in angular sectors")
    sectors = sector_scatter(
        sector_profiles, period_s=period_s, phase0=ff.phase0, s_min=s_min, s_max=r_lim**2, kind=setup.fringe_kind,
        px_mm=px_mm, radius_guess_mm=R_ff, lam_mm_over_n=lam_mm / n, angles=sector_angles,
    )
    if sectors is not None and sectors.ellipticity > max(3 * sectors.ellipticity_u, 0.002):
        warnings.append(
            f"the rings are elliptical: r² differs by {100 * sectors.ellipticity:.2f} % between the long axis "
            f"({sectors.long_axis_deg:.0f}° from +x toward +y) and the short axis; astigmatism of the surface or unequal "
            "pixel scales in x and y (calibrate both)"
        )
    # scatter left after allowing for elliptical rings (astigmatism, unequal pixel scales: warned about above)
    type_a = (sectors.u_mean_round_mm2 if sectors is not None else fit.slope_u_mm2) / fit.slope_mm2
    if type_a > MAX_TYPE_A:
        raise AnalysisError(
            f"the rings do not agree with one sphere around the centre (the ring fit scatters by "
            f"{100 * type_a:.2f} % between sectors); the centre was probably not found — check focus and contrast, "
            "or set the centre by hand in the window"
        )
    return _Rings(fit, R, R_ff, a2, blur, sag_rel, sectors, extrema, prof)


def _sectors_over_visible_arc(valid, centre, aspect: float, r_max: float, n: int):
    """Sector labels spread over the arc of rings the frame shows, with their mid-angles (radians).

    Rings cut by the frame edge (a centre near or beyond it) cover only part of the circle: equal sectors of the
    whole circle would leave most of them empty, and the scatter between the few left says little. Where the
    visible arc is under three quarters of the circle the sectors divide that arc instead. (None, None) for the
    usual equal sectors of the whole circle.
    """
    h, w = valid.shape
    step = max(1, int(math.sqrt(h * w / 2.0e5)))
    ys, xs = np.nonzero(valid[::step, ::step])
    dx, dy = xs * step - centre[0], aspect * (ys * step - centre[1])
    near = dx * dx + dy * dy <= r_max * r_max
    if near.sum() < 100:
        return None, None
    th = np.sort(np.arctan2(dy[near], dx[near]))
    gaps = np.diff(np.concatenate([th, [th[0] + 2 * np.pi]]))
    g = int(np.argmax(gaps))
    span = 2 * np.pi - gaps[g]
    if span >= 1.5 * np.pi:
        return None, None
    start = th[(g + 1) % len(th)]
    yy, xx = np.mgrid[0:h, 0:w]
    theta = np.arctan2(aspect * (yy - centre[1]), xx - centre[0])
    rel = np.mod(theta - start, 2 * np.pi)
    lab = np.clip((rel / span * n).astype(np.int64), 0, n - 1)
    angles = start + (np.arange(n) + 0.5) / n * span
    return lab, np.mod(angles + np.pi, 2 * np.pi) - np.pi


def _sharpest_centre(small, mask, starts, scale: float, aspect: float) -> tuple[float, float]:
    """Refine the coarse centre where the s-profile of the working image is sharpest."""
    f = scale  # original pixels per working pixel (area-averaged: pixel centre offset (f - 1) / 2)
    to_small = [((x - 0.5 * (f - 1)) / f, (y - 0.5 * (f - 1)) / f) for x, y in starts]
    c, _ = refine_by_sharpness(small, to_small, aspect, mask, step=8.0)
    return float(c[0] * f + 0.5 * (f - 1)), float(c[1] * f + 0.5 * (f - 1))


def _profile_for_display(prof, px_mm: float, max_points: int = 1500) -> dict:
    good = prof.count > 0
    s = prof.s[good]
    i = prof.mean[good]
    step = max(1, len(s) // max_points)
    return {
        "profile_r_px": tuple(float(v) for v in np.sqrt(s[::step])),
        "profile_i": tuple(float(v) for v in i[::step]),
    }


def fringe_wavelength_nm(source) -> float:
    """The wavelength the fringes of ``source`` follow: the reciprocal of its intensity-weighted mean wavenumber.

    Light of wavenumbers k (weights w) makes fringes sum_k w cos(2 pi k D) at optical path difference D = 2 n t.
    About the mean wavenumber k_bar = sum w k / sum w this is Re[exp(2 pi i k_bar D) sum w exp(2 pi i (k - k_bar) D)],
    and the sum has no phase to first order in D (its first cumulant is zero; the first phase term is the third
    cumulant, order D^3), so the fringe order advances by k_bar per unit D: r^2 = m R / (n k_bar). This is the
    mean wavenumber, not the mean wavelength: for the sodium doublet with D2 twice as bright as D1 it is
    589.194 nm against the plain line mean 589.294 nm (170 ppm of R); for a Gaussian band of standard deviation
    s_lam it is about lam_c (1 - (s_lam / lam_c)^2), e.g. 580 ppm short for 30 nm FWHM at 530 nm. (Two-beam
    interference with broadband light: Born & Wolf, Principles of Optics, ch. 7, quasi-monochromatic light —
    from memory.)
    """
    if source.lines and len(source.lines) > 1:
        w = np.array([line.weight for line in source.lines], dtype=np.float64)
        lam = np.array([line.wavelength_nm for line in source.lines], dtype=np.float64)
        return float(w.sum() / np.sum(w / lam))
    if not source.lines and source.fwhm_nm > 0:
        # Gaussian band in wavelength (FWHM as given), integrated well into its tails
        sig = source.fwhm_nm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
        lam = source.wavelength_nm + np.linspace(-6.0 * sig, 6.0 * sig, 481)
        lam = lam[lam > 0]
        w = np.exp(-0.5 * ((lam - source.wavelength_nm) / sig) ** 2)
        return float(w.sum() / np.sum(w / lam))
    return float(source.wavelength_nm)


def _wavelength_note(source, lam_eff: float) -> str:
    ref = source.reference or source.name
    if abs(lam_eff - source.wavelength_nm) < 5e-5:
        return ref
    return (f"fringe-effective (mean wavenumber of the spectrum) {lam_eff:.4f} nm, source value "
            f"{source.wavelength_nm:.4f} nm; {ref}")


def estimate_blur(extrema, period_s: float, kind: str) -> float:
    """Gaussian blur sigma (px) from the fall of ring contrast with local fringe frequency f = 2 r / P_s.

    ln(contrast) = c0 - 2 pi^2 sigma^2 f^2 (the Gaussian MTF) fitted over the rings; 0 when contrast does not fall.
    """
    e = [x for x in extrema if x.kind == kind and x.contrast > 0]
    if len(e) < 4:
        return 0.0
    f2 = np.array([4 * x.s / period_s**2 for x in e])
    y = np.log(np.array([x.contrast for x in e]))
    if np.ptp(f2) <= 0:
        return 0.0
    slope = np.polyfit(f2, y, 1)[0]
    return float(math.sqrt(-slope / (2 * math.pi**2))) if slope < 0 else 0.0


def radius_budget(R: float, fit, setup: BenchSetup, R_ff: float, sectors=None, *, blur_rel=0.0, blur_px=0.0,
                  sag_rel=0.0):
    """GUM budget for R = n * slope / lambda, slope of r^2 (mm^2) against fringe order.

    The Type A row takes the larger of the least-squares standard error of the slope and the standard error of
    the mean of the sector slopes (which also sees illumination, dust and centre effects that vary around the
    rings). The full-field estimate of R is a cross-check: the part of its difference from the ring fit beyond the
    Type A enters the budget as a rectangular term. Band sources and the sphere's sagitta correction carry
    rectangular terms of the size of their first-order corrections.
    """
    lam = fringe_wavelength_nm(setup.source)
    n = setup.medium_index
    (px, py), (ux, uy) = setup.pixel_size_xy_um, setup.pixel_size_xy_u_um
    c_slope = physics.radius_from_slope(1.0, lam, n) * (R / physics.radius_from_slope(fit.slope_mm2, lam, n))
    u_slope, dof, note = fit.slope_u_mm2, max(1, fit.ndata - 2), f"{fit.ndata} rings, reduced chi-square {fit.redchi:.2f}"
    if sectors is not None and sectors.u_mean_slope_mm2 > u_slope:
        u_slope, dof = sectors.u_mean_slope_mm2, sectors.dof
        note = f"scatter of {sectors.n_sectors} sector fits (larger than the single-fit error, {note})"
    rows = [
        BudgetRow(
            "slope of r² vs order (ring positions)", fit.slope_mm2, "mm²/fringe", u_slope, "normal (Type A)", 1.0,
            c_slope, "1/mm", c_slope * u_slope, dof=dof, note=note,
        ),
    ]
    if setup.pixel_size_y_um is None:
        rows.append(
            BudgetRow(
                "pixel scale (enters squared)", px, "µm/px", ux, "normal (calibration)", 1.0, 2 * R / px, "mm/(µm/px)",
                2 * R / px * ux, note="from the bench calibration" if setup.bench else "as entered",
            )
        )
    elif setup.bench:
        # both scales come from one target whose certified pitch dominates: treat them as fully correlated
        rows.append(
            BudgetRow(
                "pixel scales x and y (one calibration, correlated)", math.sqrt(px * py), "µm/px",
                math.sqrt(ux * uy), "normal (calibration)", 1.0, 2 * R / math.sqrt(px * py), "mm/(µm/px)",
                R * (ux / px + uy / py), note=f"x {px:g} ± {ux:.2g}, y {py:g} ± {uy:.2g} µm/px",
            )
        )
    else:
        rows += [
            BudgetRow("pixel scale x", px, "µm/px", ux, "normal (calibration)", 1.0, R / px, "mm/(µm/px)", R / px * ux),
            BudgetRow("pixel scale y", py, "µm/px", uy, "normal (calibration)", 1.0, R / py, "mm/(µm/px)", R / py * uy),
        ]
    rows.append(
        BudgetRow(
            "wavelength", lam, "nm", setup.source.wavelength_u_nm, "normal (source table)", 1.0, -R / lam,
            "mm/nm", R / lam * setup.source.wavelength_u_nm, note=_wavelength_note(setup.source, lam),
        )
    )
    rows.append(
        BudgetRow(
            "gap medium index", n, "", setup.medium_index_u, "normal (as entered)", 1.0, R / n, "mm",
            R / n * setup.medium_index_u,
        )
    )
    band = abs(lam - setup.source.wavelength_nm) / lam if (setup.source.fwhm_nm > 0 and not setup.source.lines) else 0.0
    if band > 0:
        # A band's fringe phase is linear in the path difference only to first order (the mean wavenumber); beyond
        # it the spectrum's shape (its skewness, which a centre and FWHM do not give) and the fading of contrast with
        # order move the rings again, by amounts of the same order as the first-order correction over the orders
        # a band source shows. The correction's own size is carried as the half-width of a rectangular term.
        rows.append(
            BudgetRow(
                "band source: fringe-effective wavelength", lam, "nm", band * lam / math.sqrt(3.0), "rectangular",
                math.sqrt(3.0), -R / lam, "mm/nm", R * band / math.sqrt(3.0),
                note=f"mean-wavenumber correction {1e6 * band:.0f} ppm of R (FWHM {setup.source.fwhm_nm:g} nm); "
                "higher orders depend on the spectrum's shape",
            )
        )
    if sag_rel > 0:
        # The ring fit takes the surface for a sphere (r^2 = 2 R t - t^2). A real surface's conic constant K over the
        # measured zone is not known: the sag is r^2 / 2R + (1 + K) r^4 / 8 R^3 + ..., so between a paraboloid
        # (K = -1, r^2 = 2 R t exactly) and a sphere (K = 0) R moves by the whole sphere correction. Carried as a
        # rectangular term of that half-width (sagitta of conic surfaces: ISO 10110-12, aspheric surface form —
        # from memory). It matters for strongly curved parts seen over many rings; for most it is a few ppm.
        rows.append(
            BudgetRow(
                "surface model (sphere vs paraboloid sag)", 0.0, "relative", sag_rel / math.sqrt(3.0), "rectangular",
                math.sqrt(3.0), R, "mm", R * sag_rel / math.sqrt(3.0),
                note=f"the sphere's sagitta correction changes R by {1e6 * sag_rel:.1f} ppm over the rings used",
            )
        )
    if blur_rel > 0:
        rows.append(
            BudgetRow(
                "image blur (defocus) correction", -blur_rel, "relative", blur_rel / math.sqrt(3.0), "rectangular",
                math.sqrt(3.0), R, "mm", R * blur_rel / math.sqrt(3.0),
                note=f"blur sigma ≈ {blur_px:.2f} px from the contrast fall-off; R corrected by {1e6 * blur_rel:.1f} ppm",
            )
        )
    # The two estimates see the same image through different models; the part of their difference beyond the ring
    # fit's Type A (the full-field fit's own statistical error is far smaller: it uses every pixel) is a model
    # error neither fit shows alone. Carried as a rectangular term of half-width sqrt(d^2 - u_A^2): zero where the
    # difference is statistical and growing smoothly with it, so a larger Type A never shrinks the total (an
    # on/off switch at 3 u_A did: raising u_A could drop the row and lower u).
    diff, u_a = abs(R - R_ff), c_slope * u_slope
    if diff > u_a:
        half = math.sqrt(diff * diff - u_a * u_a)
        rows.append(
            BudgetRow(
                "method agreement (ring fit vs full-field fit)", R_ff, "mm", half / math.sqrt(3.0), "rectangular",
                math.sqrt(3.0), 1.0, "", half / math.sqrt(3.0),
                note=f"the two estimates of R from the same image differ by {diff:.3g} mm; half-width = the part "
                "beyond the ring fit's Type A",
            )
        )
    return make_budget("radius of curvature R", "mm", R, rows)
