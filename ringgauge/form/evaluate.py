"""Surface form against a test plate: the entry point :func:`evaluate_form` and its frozen result.

Pipeline: clear aperture -> full-aperture gap fit (each frame) -> form terms over the test diameter with
Monte Carlo uncertainties from the fit covariance -> sign (frames / press test) -> radius deviation against
the plate -> tolerance verdict.

Form terms over the test diameter (fringes; one fringe = lambda / 2 of surface height; ISO 10110-5 meanings):

* power (A, sagitta deviation): the rho^2 coefficient of a least-squares fit of piston, tilt and rho^2 over
  the test diameter — the PV of the best-fit sphere's departure;
* irregularity (B): PV of what is left after that best-fit sphere; rms_irregularity (RMSi) its RMS;
* rot_sym_irregularity (C): PV of the rotationally symmetric part of the irregularity (its projection on
  even radial polynomials); rms_asymmetric (RMSa): RMS of the irregularity less that part;
* rms_total (RMSt): RMS after piston and tilt;
* astigmatism: difference between the principal meridians' power, with the axis of the meridian of larger
  power magnitude (degrees from the image x axis toward y, i.e. clockwise as displayed with y down).
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np

from ..blas import one_thread
from ..errors import AnalysisError, InputError
from ..physics import fringe_height_nm
from .aperture import aperture_for
from .fit import GapFit, finesse_coefficient, fit_gap
from .phase import PhaseMap, ansi_nm, phase_map, zernike_fit
from .geometry import STEEP_LIMIT, delta_r_axial, delta_r_normal, delta_r_paraxial, radius_budget
from .sign import UNKNOWN, SignResult, sign_from_pistons, sign_from_press
from .tolerance import Tolerance, judge, parse_tolerance
from .terms import TERM_KEYS
from .result import (FitSummary, FormResult, FormTerm, HeightMap, Mask, PhaseSummary,
                     SurfaceRadius, ZernikeSet, ZernikeTerm, u_nm)
from ..conformity import Verdict
from ..uncertainty import Quantity

MC_DRAWS = 300


def finesse_candidates(n: float) -> tuple[float, ...]:
    """Fringe shapes tried: two-beam (F = 0: low reflectance, e.g. an index-matched or coated face) and
    uncoated glass of index 1.45 and 1.9 against the gap medium (Fresnel)."""
    return (0.0, finesse_coefficient(1.45, n), finesse_coefficient(1.90, n))
GLASS_INDEX = 1.52  # typical crown glass; sets the multiple-beam fringe shape (common practice, no source)

FORM_TERMS = TERM_KEYS  # result keys of the form terms, in order (ringgauge.form.terms.FORM_TERMS)


RIM = 720  # points on the test disc's edge used for the PV terms (a square grid misses the rim's extremes)


def _disc_grid(k: float, n: int = 61, rim: int = 0):
    """Points on a square grid inside the disc of radius k (aperture-normalised), and the same scaled to 1;
    ``rim`` points on the edge are appended last (for the PV terms only, see :func:`form_terms_batch`)."""
    t = np.linspace(-1, 1, n)
    U, V = np.meshgrid(t, t)
    m = U * U + V * V <= 1.0
    Un, Vn = U[m], V[m]
    if rim:
        a = np.linspace(0, 2 * np.pi, rim, endpoint=False)
        Un, Vn = np.concatenate([Un, np.cos(a)]), np.concatenate([Vn, np.sin(a)])
    return Un * k, Vn * k, Un, Vn


def _lsq(cols, w):
    X = np.stack(cols, axis=1)
    coef, *_ = np.linalg.lstsq(X, w, rcond=None)
    return coef, w - X @ coef


def form_terms(W: np.ndarray, u: np.ndarray, v: np.ndarray, rim: int = 0) -> dict:
    """Form terms (fringes) of gap samples ``W`` at points (u, v) on the unit test disc (a regular grid; the
    last ``rim`` points lie on the edge and count for the PV terms only)."""
    t = form_terms_batch(np.asarray(W, dtype=float)[None, :], u, v, rim)
    return {k: float(x[0]) for k, x in t.items()}


def form_terms_batch(Ws: np.ndarray, u: np.ndarray, v: np.ndarray, rim: int = 0) -> dict:
    """:func:`form_terms` of many gap sample sets at once (rows of ``Ws``): every least-squares fit is one
    projection matrix applied to all rows. Returns name -> array of length ``len(Ws)``. Fits and RMS use the
    grid (area) points; PV values also the last ``rim`` edge points."""
    Ws = np.atleast_2d(np.asarray(Ws, dtype=float))
    na = Ws.shape[1] - rim
    uf, vf = u, v
    u, v = u[:na], v[:na]
    one = np.ones_like(u)
    r2 = u * u + v * v

    def proj(cols):
        X = np.stack(cols, axis=1)
        return X, np.linalg.pinv(X)

    Xt, Pt = proj([one, u, v])
    Xs, Ps = proj([one, u, v, r2])
    Xa, Pa = proj([one, u, v, r2, u * u - v * v, 2 * u * v])
    Xr, Pr = proj([one, r2, r2 * r2, r2**3])
    Wa = Ws[:, :na]
    # the same fits evaluated at every point (rim included) for the PV terms
    one_f, r2f = np.ones_like(uf), uf * uf + vf * vf
    Xtf = np.stack([one_f, uf, vf], axis=1)
    Xsf = np.stack([one_f, uf, vf, r2f], axis=1)
    Xrf = np.stack([one_f, r2f, r2f * r2f, r2f**3], axis=1)
    wt_f = Ws - (Wa @ Pt.T) @ Xtf.T
    sph = Wa @ Ps.T
    wi_f = Ws - sph @ Xsf.T
    ast = Wa @ Pa.T
    a1, a2 = ast[:, 4], ast[:, 5]
    wt, wi = wt_f[:, :na], wi_f[:, :na]
    rot_f = (wi @ Pr.T) @ Xrf.T
    wa = wi - rot_f[:, :na]
    return {
        "power_fringes": sph[:, 3],
        "astigmatism_fringes": 2 * np.hypot(a1, a2),
        "astigmatism_axis_deg": np.degrees(0.5 * np.arctan2(a2, a1)) % 180.0,
        "irregularity_fringes": np.ptp(wi_f, axis=1),
        "rot_sym_irregularity_fringes": np.ptp(rot_f, axis=1),
        "rms_total_fringes": np.sqrt(np.mean(wt * wt, axis=1)),
        "rms_irregularity_fringes": np.sqrt(np.mean(wi * wi, axis=1)),
        "rms_asymmetric_fringes": np.sqrt(np.mean(wa * wa, axis=1)),
        "pv_total_fringes": np.ptp(wt_f, axis=1),
    }


def _masks(mask: np.ndarray | None, pixel_um, saturated: np.ndarray | None, frame_index: int) -> list[dict]:
    from scipy import ndimage

    out = []
    for kind, m in (("dust or defect", mask), ("glare (saturated)", saturated)):
        if m is None or not m.any():
            continue
        lab, n = ndimage.label(m)
        objs = ndimage.find_objects(lab)
        for i, sl in enumerate(objs[:200]):
            ys, xs = np.nonzero(lab[sl] == i + 1)
            out.append({
                "kind": kind,
                "frame": frame_index,
                "centre_px": [float(xs.mean() + sl[1].start), float(ys.mean() + sl[0].start)],
                "area_px": int(xs.size),
                "area_mm2": float(xs.size * pixel_um[0] * pixel_um[1] * 1e-6),
            })
    return out


def evaluate_form(frames, setup, *, progress=None) -> FormResult:
    """Evaluate the surface form of a part on a test plate from one or more frames (see :func:`_evaluate_form`;
    run with the BLAS library held to one thread: its matrices are small and the machine is shared)."""
    with one_thread():
        return _evaluate_form(frames, setup, progress=progress)


def _evaluate_form(frames, setup, *, progress=None) -> FormResult:
    """Evaluate the surface form of a part on a test plate from one or more frames.

    The steps: the part's edge (:func:`~ringgauge.form.aperture.aperture_for`); a phase map from three or more
    frames (:func:`_phase_route`) or the gap model fitted to each frame (:func:`_frame_fits`); the aperture's
    uncertainty and the test diameter (:func:`_test_disc`); the form terms with their uncertainty budget
    (:func:`_terms`); the sign (:func:`_sign`); then the plate radius, the height map and the verdict.

    Parameters
    ----------
    frames : list of ringgauge.imaging.Frame
        One frame, or several of the same part with the gap changed between them (for the sign).
    setup : ringgauge.bench_setup.BenchSetup
        Source, pixel scale, gap medium; form options ``test_diameter_mm``, ``tolerance``, ``test_plate``
        (dict: id, radius_mm, radius_u_mm, kind, calibrated...), ``press_test``, ``decision_rule``;
        ``setup.gap_change`` ("increasing" default) for frame sets.
    progress : callable(fraction, message), optional
        Called with the fraction done (0-1) and a short message during the long steps.
    """
    t0 = time.perf_counter()
    if not frames:
        raise InputError("no frames given")
    def say(frac: float, msg: str) -> None:
        if progress:
            progress(frac, msg)

    warnings: list[str] = []
    notes: list[str] = []
    tol = None
    if setup.tolerance:
        tol = setup.tolerance if isinstance(setup.tolerance, Tolerance) else parse_tolerance(setup.tolerance)
    if setup.decision_rule not in ("simple", "guard-banded"):
        raise InputError(f"decision rule must be 'simple' or 'guard-banded', got {setup.decision_rule!r}")
    lam = setup.wavelength_nm
    n = setup.medium_index
    fr = fringe_height_nm(lam, n)
    px, py = setup.pixel_size_xy_um
    aspect = py / px
    shape0 = frames[0].data.shape
    for f in frames[1:]:
        if f.data.shape != shape0:
            raise InputError(f"{f.name}: frame size {f.data.shape[::-1]} differs from the first frame's "
                             f"{shape0[::-1]}; frames of one part must come from the same camera set-up")
    say(0.0, "finding the part's edge")
    ap = aperture_for(frames[0].data, aspect=aspect, given=setup.aperture_px)
    warnings += list(ap.notes)
    route = "one-frame fit" if len(frames) == 1 else f"model fit with piston steps ({len(frames)} frames)"
    pm, masks, masked_px = _phase_route(frames, ap, aspect, setup, (px, py), say, warnings)
    fits: list[GapFit] = []
    if pm is not None:
        route = f"phase map from {len(frames)} frames (Wang–Han)"
    else:
        fits, m2, mp2 = _frame_fits(frames, ap, aspect, n, (px, py), say, warnings, notes)
        masks += m2
        masked_px += mp2
    ap, ap_diam_mm, td, td_src, k_td = _test_disc(ap, fits, pm, px, setup, tol, warnings)
    say(0.92, "form terms and their uncertainties")
    terms, terms_u, axis_u, budget_rows, map_sign, W, un, vn = _terms(pm, fits, k_td, ap, warnings)
    sign = _sign(setup, pm, map_sign, fits, warnings)
    if sign.sign == 0:
        notes.append("power sign unknown: power is reported as a magnitude")
    power_signed = terms["power_fringes"] * (sign.sign if sign.sign else 1)
    terms["power_fringes"] = power_signed
    # radius against the plate
    radius = None
    plate = setup.test_plate
    if plate and plate.get("radius_mm") and math.isfinite(float(plate["radius_mm"])):
        radius, rw = _radius_block(terms["power_fringes"], terms_u.get("power_fringes", 0.0), td,
                                   ap, px, setup, plate, sign)
        warnings += rw
    hmap, hext = _height_map(pm, fits, ap, fr, sign)
    verdict = judge(tol, terms, terms_u, measured_fringe_nm=fr, measured_wavelength_nm=lam,
                    rule=setup.decision_rule, sign_known=bool(sign.sign))
    if verdict.get("wavelength_note"):
        notes.append(verdict["wavelength_note"])
    u_lam = setup.source.wavelength_u_nm
    k = 2.0
    quantities = tuple(
        FormTerm(name.removesuffix("_fringes"),
                 Quantity(float(terms[name]), _opt(terms_u.get(name)), "fringes", k),
                 Quantity(float(terms[name]) * fr,
                          None if terms_u.get(name) is None else u_nm(terms[name], terms_u[name], fr, u_lam, lam),
                          "nm", k))
        for name in FORM_TERMS
    )
    return FormResult(
        wavelength_nm=lam, wavelength_u_nm=u_lam, medium_index=n, fringe_nm=fr, quantities=quantities,
        astigmatism_axis=Quantity(float(terms["astigmatism_axis_deg"]), _opt(axis_u), "°", k),
        test_diameter_mm=float(td), test_diameter_source=td_src, aperture=ap,
        aperture_diameter=Quantity(float(ap_diam_mm), 2 * float(ap.radius_u_px) * px * 1e-3, "mm", k),
        masks=tuple(Mask.from_dict(m) for m in masks),
        masked_fraction=float(masked_px / max(1, len(frames) * math.pi * ap.radius_px**2 / aspect)),
        sign=sign, fits=tuple(FitSummary.of(f) for f in fits), radius=SurfaceRadius.from_dict(radius),
        tolerance=tol, verdict=Verdict.from_dict(verdict),
        warnings=tuple(dict.fromkeys(warnings)), pixel_size_um=(px, py),
        elapsed_s=time.perf_counter() - t0, notes=tuple(notes),
        budget_rows={key: tuple((src, float(u)) for src, u in v) for key, v in budget_rows.items()},
        route=route,
        zernike_ansi=_ansi_block(W[:-RIM], un[:-RIM], vn[:-RIM], td, fr),
        height_map=None if hmap is None else HeightMap.of(hmap, hext, bool(sign.sign)),
        phase=None if pm is None else PhaseSummary.of(pm),
        engine_fits=tuple(fits),
    )


def _phase_route(frames, ap, aspect: float, setup, pixel_um, say, warnings: list[str]):
    """Three or more frames: the phase of every pixel from the frames' unknown steps (Wang-Han), no model.
    (phase map or None, masks, masked pixels); None when it cannot be made (then each frame is fitted)."""
    px, py = pixel_um
    shape0 = frames[0].data.shape
    gap_change = setup.gap_change
    masks: list[dict] = []
    masked_px = 0
    pm = None
    if len(frames) >= 3 and setup.form_route != "model":
        # three or more frames: the phase of every pixel from the frames' unknown steps (Wang-Han), no model
        say(0.05, f"phase map from {len(frames)} frames")
        sat0 = None
        if frames[0].saturated_fraction > 0:
            from scipy import ndimage

            sat0 = ndimage.binary_dilation(np.asarray(frames[0].data) >= 0.999, iterations=2)
        try:
            pm = phase_map([f.data for f in frames], ap.centre_px, ap.radius_px, aspect=aspect,
                           gap_change=gap_change, exclude=sat0, progress=lambda m: say(0.3, m))
        except AnalysisError as exc:
            warnings.append(f"no phase map from the frames ({exc}); each frame was fitted with the gap model")
        if pm is not None and not pm.converged:
            # few fringes or steps that barely differ leave the unknown-step problem ill-posed: the iteration
            # wanders instead of settling, and its map would be wrong
            warnings.append(f"the phase steps of the {len(frames)} frames did not settle ({pm.iterations} rounds; "
                            "few fringes or small steps); each frame was fitted with the gap model instead")
            pm = None
    if pm is not None:
        pm_mask = np.zeros(shape0, dtype=bool)
        xs_m, ys_m = pm.pixel_xy()
        st_m = pm.stride
        for dy in range(st_m):
            for dx in range(st_m):
                yy_m, xx_m = ys_m + dy, xs_m + dx
                okr, okc = yy_m < shape0[0], xx_m < shape0[1]
                pm_mask[np.ix_(yy_m[okr], xx_m[okc])] |= pm.masked[np.ix_(okr, okc)]
        masks += _masks(pm_mask, (px, py), None, 0)
        masked_px += int(pm.masked.sum()) * st_m * st_m * len(frames)
        warnings += list(pm.notes)
    return pm, masks, masked_px


def _frame_fits(frames, ap, aspect: float, n: float, pixel_um, say, warnings: list[str], notes: list[str]):
    """The gap model fitted to each frame, later frames from the first frame's fit: (fits, masks, masked px)."""
    px, py = pixel_um
    F = finesse_coefficient(GLASS_INDEX, n)
    fits: list[GapFit] = []
    masks: list[dict] = []
    masked_px = 0
    for i, fr_ in enumerate(frames):
        f0 = 0.05 + 0.85 * i / len(frames)
        say(f0, f"frame {i + 1}/{len(frames)}: fitting the gap")
        data = np.asarray(fr_.data, dtype=np.float32)
        sat = data >= 0.999 if fr_.saturated_fraction > 0 else None
        if sat is not None:
            from scipy import ndimage

            sat = ndimage.binary_dilation(sat, iterations=2)
        try:
            # later frames start from the first frame's fit (shape, light, contrast, fringe shape; piston and
            # tilt free first): fitted alone, cos(2 pi W) lets each frame land on W or -W or in another minimum,
            # and their pistons -- the frame steps that give the sign -- would not be comparable
            g = fit_gap(data, ap.centre_px, ap.radius_px, aspect=aspect, exclude=sat,
                        finesse=F, finesse_candidates=finesse_candidates(n) if i == 0 else None,
                        prior=fits[0] if i > 0 else None,
                        progress=(lambda m, i=i, f0=f0: say(f0, f"frame {i + 1}: {m}")))
        except np.linalg.LinAlgError:
            raise AnalysisError(f"{fr_.name}: the gap model could not be fitted (singular); check focus and "
                                "that the part's whole face is in view") from None
        fits.append(g)
        masks += _masks(g.masked_px, (px, py), sat, i)
        masked_px += int(g.masked_px.sum()) if g.masked_px is not None else 0
        warnings += [f"{fr_.name}: {m}" for m in g.notes if not m.startswith("fringe shape")]
        notes += [m for m in g.notes if m.startswith("fringe shape") and i == 0]
    return fits, masks, masked_px


def _test_disc(ap, fits, pm, px: float, setup, tol, warnings: list[str]):
    """The aperture's radius uncertainty (with the fringe model's own edge as a cross-check) and the test
    diameter: (aperture, its diameter in mm, test diameter in mm, where it came from, its radius in the fit's
    normalised units)."""
    # The rim is fitted directly (form.aperture: a blurred step-and-slope model along rays, one circle through
    # all of them); the gap model's own extent (where its fringes stop) is only a cross-check: where the two
    # disagree, the difference enters the aperture radius's uncertainty as a rectangular term (Type B).
    fit_radius = ap.radius_px
    u_edge = 0.0
    if not ap.manual and pm is None and fits[0].edge_scale and math.isfinite(fits[0].edge_scale):
        d_edge = (fits[0].edge_scale - 1.0) * ap.radius_px
        u_edge = abs(d_edge) / (2 * math.sqrt(3))
        if abs(d_edge) > max(1.0, 3 * ap.radius_u_px):
            warnings.append(f"the fringe model's edge differs from the rim found by {d_edge:+.1f} px; check the "
                            "aperture (set it by hand if the rim is hidden)")
    ap = replace(ap, radius_u_px=math.hypot(ap.radius_u_px, u_edge))
    ap_diam_mm = 2 * ap.radius_px * px * 1e-3
    # test diameter: the option, else the tolerance's, else the clear aperture
    if setup.test_diameter_mm:
        td, td_src = float(setup.test_diameter_mm), "given"
    elif tol is not None and tol.test_diameter_mm:
        td, td_src = float(tol.test_diameter_mm), "tolerance"
    else:
        td, td_src = ap_diam_mm, "clear aperture"
    if td > ap_diam_mm * 1.005:
        warnings.append(f"test diameter {td:.2f} mm is larger than the clear aperture found "
                        f"({ap_diam_mm:.2f} mm); evaluated over the clear aperture")
        td, td_src = ap_diam_mm, "clear aperture (requested diameter too large)"
    k_td = min(1.0, td / ap_diam_mm) * ap.radius_px / fit_radius  # in the fit's normalised radius
    return ap, ap_diam_mm, td, td_src, k_td


def _terms(pm, fits, k_td: float, ap, warnings: list[str]):
    """The form terms over the test disc with Monte Carlo uncertainties from the fit covariance and the Type B
    rows (model choice, aperture radius): (terms, their u, axis u, budget rows, the map's power sign, the disc's
    W and coordinates)."""
    map_sign = 0
    uu, vv, un, vn = _disc_grid(k_td, rim=RIM)
    if pm is None:
        # form terms from the first frame's fit (the other frames only move the piston)
        g = fits[0]
        Z = _basis(g, uu, vv)
        coef, cov, alternatives = g.coeffs, g.covariance, g.alternatives
        fit_row = "fit (pixel noise)"
    else:
        # form terms from the map's Zernike fit (ANSI, n <= MAP_NMAX) over the test diameter
        coef, cov, map_sign = _map_coefficients(pm, k_td)
        Z = zernike_fit(np.zeros(un.size), un, vn, MAP_NMAX)[1].T
        alternatives = {}
        fit_row = f"phase map: noise and ripple beyond the Zernike fit (n <= {MAP_NMAX})"
    W = coef @ Z
    terms = form_terms(W, un, vn, RIM)
    terms_u: dict = {}
    axis_u = None
    if cov is not None:
        rng = np.random.default_rng(12345)  # fixed: the same image always reports the same uncertainty
        try:
            draws = rng.multivariate_normal(coef, cov, size=MC_DRAWS, method="eigh")
        except (np.linalg.LinAlgError, ValueError):
            draws = None
        if draws is not None:
            samp = form_terms_batch(draws @ Z, un, vn, RIM)
            for name in FORM_TERMS:
                terms_u[name] = float(np.std(samp[name], ddof=1))
            ax = samp["astigmatism_axis_deg"]
            dax = (ax - terms["astigmatism_axis_deg"] + 90) % 180 - 90
            axis_u = float(np.std(dax, ddof=1))
    else:
        warnings.append("the fit covariance could not be estimated: uncertainties are not available")
    # Type B: model choice (fringe shape for an unknown glass index, illumination model) and the aperture
    # radius (the terms scale with the square of the normalisation radius for power-like terms)
    budget_rows: dict = {name: [] for name in FORM_TERMS}
    for name in FORM_TERMS:
        if name in terms_u:
            budget_rows[name].append((fit_row, terms_u[name]))
    for label, ca in alternatives.items():
        alt = form_terms(ca @ Z, un, vn, RIM)
        for name in FORM_TERMS:
            budget_rows[name].append((label, abs(alt[name] - terms[name]) / math.sqrt(3)))
    # a fit whose main terms move by more than 0.05 fringe (k = 2) with the model choice is weak: say so
    # (the budget already carries it); 0.05 fringe is the accuracy asked of the form terms
    sensitive = []
    for name in ("power_fringes", "astigmatism_fringes", "irregularity_fringes"):
        mc = math.sqrt(sum(x * x for label, x in budget_rows[name] if label in alternatives))
        if 2 * mc > 0.05:
            sensitive.append(f"{name.replace('_fringes', '')} ±{2 * mc:.2f}")
    if sensitive and not any(w.startswith("weak fit") or ": weak fit" in w for w in warnings):
        warnings.append("weak fit: the terms depend on the model's fringe shape and illumination "
                        f"({', '.join(sensitive)} fringe, k = 2); the uncertainty includes it — a frame set "
                        "(three or more frames) measures such parts without that model")
    rel_a = ap.radius_u_px / ap.radius_px
    for name in FORM_TERMS:
        budget_rows[name].append(("aperture radius", 2 * abs(terms[name]) * rel_a))
    if terms_u:
        for name in FORM_TERMS:
            terms_u[name] = math.sqrt(sum(x * x for _, x in budget_rows[name]))
    return terms, terms_u, axis_u, budget_rows, map_sign, W, un, vn


def _sign(setup, pm, map_sign: int, fits, warnings: list[str]) -> SignResult:
    """The power's sign: from the press test, the live view's motion, the phase map's steps or the frames'
    pistons (frames win over a contradicting press test)."""
    sign = UNKNOWN
    if setup.press_test:
        sign = sign_from_press(setup.press_test)
    motion = setup.motion_sign
    if sign.sign == 0 and isinstance(motion, dict) and motion.get("sign") in (1, -1):
        # the live view read the rings' motion while the gap changed before this frame was captured
        sign = SignResult(int(motion["sign"]), None, "live motion",
                          f"rings' motion in the live view before the capture: {motion.get('detail') or ''}".strip())
    if pm is not None:
        steps = tuple(pm.steps_fringes[1:])
        if pm.orientation and map_sign:
            sf = SignResult(map_sign, None, "frames (phase steps)",
                            f"{pm.orientation_detail}: the phase map's departure is "
                            f"{'centre' if map_sign > 0 else 'edge'} contact", steps)
        else:
            sf = SignResult(0, None, "frames (phase steps)",
                            pm.orientation_detail if not pm.orientation else "no power to give a sign to", steps)
        if sign.method == "press test" and sf.sign and sf.sign != sign.sign:
            warnings.append("the press-test observation contradicts the frame sequence; the frames are used")
        if sf.sign or sign.sign == 0:
            sign = sf
    if len(fits) > 1:
        # every later frame was fitted from the first frame's parameters and keeps its orientation of W
        orient = [1.0] * len(fits)
        pist = [o * f.coeffs[0] for o, f in zip(orient, fits)]
        upist = [math.sqrt(f.covariance[0, 0]) if f.covariance is not None else 0.05 for f in fits]
        sf = sign_from_pistons(pist, upist, gap_change=setup.gap_change)
        poor = [i + 1 for i, f in enumerate(fits[1:], start=1) if f.contrast < 0.5 * fits[0].contrast]
        if poor:
            # a frame whose fit found far less fringe contrast than the first landed in a wrong minimum: its
            # piston says nothing about the gap step, so no sign is drawn from the frames
            warnings.append(
                f"frame(s) {', '.join(map(str, poor))}: the gap fit found much weaker fringes than in frame 1 "
                "(a doubtful fit); the sign is not taken from the frames"
            )
            sf = UNKNOWN
        pw = [o * f.coeffs[3] for o, f in zip(orient, fits)]
        if max(pw) - min(pw) > 0.1:
            warnings.append("the frames differ in power by more than 0.1 fringe: did the part move or tilt?")
        if sign.method == "press test" and sf.sign and sf.sign != sign.sign:
            warnings.append("the press-test observation contradicts the frame sequence; the frames are used")
        if sf.sign or sign.sign == 0:
            sign = sf
    return sign


def _opt(x) -> float | None:
    return None if x is None else float(x)


# Zernike degree of the phase map's smooth description: 28 ANSI terms, as rich as the gap model. The map stops
# a few pixels inside the edge; the PV terms reach the edge, and degree 8 overshot there by ~0.06 fringe on a
# 4-fringe saddle (the multiple-beam fringe shape leaves a small ripple in the phase that high terms follow).
MAP_NMAX = 6
MAP_GRID = 96  # cells across the height map kept in the result


def _map_coefficients(pm: PhaseMap, k_td: float, max_samples: int = 40000):
    """ANSI Zernike coefficients (fringes) of the phase map over the test disc, their covariance from the
    misfit beyond the fit (scaled for its correlation at the sampling lattice), and the sign of the power of
    the map as oriented (0 when the orientation is unknown)."""
    from .fit import _correlation_factor

    uc, vr = pm.pixel_coords()
    gap = pm.gap_fringes
    use = np.isfinite(gap) & ((uc[None, :] ** 2 + vr[:, None] ** 2) <= k_td**2)
    n_use = int(use.sum())
    if n_use < 200:
        raise AnalysisError("the phase map covers too little of the test diameter (under 200 pixels)")
    st = max(1, int(math.ceil(math.sqrt(n_use / max_samples))))
    G, U, V, M = gap[::st, ::st], uc[::st], vr[::st], use[::st, ::st]
    iy, ix = np.nonzero(M)
    un, vn = U[ix] / k_td, V[iy] / k_td
    w = G[iy, ix]
    coef, X = zernike_fit(w, un, vn, MAP_NMAX)
    res = w - X @ coef
    dof = max(1, w.size - coef.size)
    rmap = np.zeros(M.shape)
    rmap[iy, ix] = res
    corr = _correlation_factor(rmap, M, 1)
    cov = np.linalg.inv(X.T @ X) * float(res @ res) / dof * corr
    # power of the map as oriented: ANSI Z(2,0) = sqrt(3)(2 rho^2 - 1) -> rho^2 coefficient 2 sqrt(3) c
    # (sign only; the reported power comes from the least-squares rho^2 fit in form_terms)
    p2 = coef[4] if len(coef) > 4 else 0.0
    sign = 0 if not pm.orientation else (1 if p2 >= 0 else -1)
    if sign < 0 or (not pm.orientation and p2 < 0):
        coef = -coef  # report in the power >= 0 orientation; the sign is carried separately
    return coef, cov, sign


def _ansi_block(W, un, vn, td_mm, fringe_nm) -> ZernikeSet:
    """The form as ANSI Z80.28 Zernike coefficients over the test diameter (nm of surface height)."""
    coef, _ = zernike_fit(np.asarray(W, dtype=float), un, vn, 6)
    rows = []
    for j, c in enumerate(coef):
        n_, m_ = ansi_nm(j)
        rows.append(ZernikeTerm(j, n_, m_, float(c * fringe_nm)))
    return ZernikeSet(float(td_mm), tuple(rows))


def _height_map(pm, fits, ap, fringe_nm, sign):
    """The surface departure less piston and tilt on a grid of at most MAP_GRID cells across (nm)."""
    s = sign.sign if sign.sign else 1
    if pm is not None:
        uc, vr = pm.pixel_coords()
        gap = pm.gap_fringes
        st = max(1, int(math.ceil(max(gap.shape) / MAP_GRID)))
        G = gap[::st, ::st]
        U, V = np.meshgrid(uc[::st], vr[::st])
        ok = np.isfinite(G)
        if ok.sum() < 10:
            return None, None
        X = np.stack([np.ones(ok.sum()), U[ok], V[ok]], axis=1)
        c, *_ = np.linalg.lstsq(X, G[ok], rcond=None)
        out = np.full(G.shape, np.nan)
        vals = G[ok] - X @ c
        # the map as oriented by the steps; with the sign unknown, shown with power >= 0
        if not pm.orientation:
            r2 = U[ok] ** 2 + V[ok] ** 2
            if np.polyfit(r2, vals, 1)[0] < 0:
                vals = -vals
        out[ok] = vals * fringe_nm
        xs, ys = pm.pixel_xy()
        xs, ys = xs[::st], ys[::st]
        return out, (float(xs[0]), float(xs[-1]), float(ys[-1]), float(ys[0]))
    if not fits:
        return None, None
    from .fit import gap_basis

    f = fits[0]
    n = MAP_GRID
    cx, cy = f.centre_px
    r, aspect = float(f.radius_px), float(f.aspect or 1.0)
    xs = np.linspace(cx - r, cx + r, n)
    ys = np.linspace(cy - r / aspect, cy + r / aspect, n)
    X, Y = np.meshgrid(xs, ys)
    u, v = (X - cx) / r, (Y - cy) * aspect / r
    inside = u * u + v * v <= 1.0
    coeffs = np.asarray(f.coeffs, dtype=float).copy()
    coeffs[:3] = 0.0  # less piston and tilt
    out = np.full(u.shape, np.nan)
    out[inside] = s * (coeffs @ gap_basis(u[inside], v[inside], len(coeffs))) * fringe_nm
    return out, (float(xs[0]), float(xs[-1]), float(ys[-1]), float(ys[0]))


def _basis(g: GapFit, u, v):
    from .fit import gap_basis

    return gap_basis(u, v, len(g.coeffs))


def _radius_block(N, uN, D, ap, px, setup, plate, sign: SignResult):
    warnings = []
    R = float(plate["radius_mm"])
    uR = float(plate.get("radius_u_mm") or 0.0)
    lam = setup.wavelength_nm
    n = setup.medium_index
    if D / 2 >= R:
        raise InputError(f"test diameter {D:g} mm does not fit on a plate of radius {R:g} mm")
    # the test diameter's uncertainty: aperture radius fit and pixel scale
    u_px = setup.pixel_size_u_um
    uD = D * math.hypot(ap.radius_u_px / ap.radius_px, (u_px / px) if px else 0.0)
    if u_px == 0:
        warnings.append("pixel size uncertainty not given: the test diameter's uncertainty is incomplete")
    kind = (plate.get("kind") or "").lower()
    # geometric sign: gap growing to the edge (power > 0) means the surface is more curved than a concave
    # plate (convex part: R_s = R_p - dR) or less curved than a convex plate (concave part: R_s = R_p + dR)
    geo = {"concave": -1, "convex": 1}.get(kind, 0)
    s = sign.sign * geo
    absN = abs(N)
    b_dr, b_rs, w = radius_budget(absN, uN, D, uD, R, uR, lam, setup.source.wavelength_u_nm, n=n,
                                  sign=s if s else 1)
    warnings += w
    block = {
        "plate": {k: plate.get(k) for k in ("id", "radius_mm", "radius_u_mm", "kind", "calibrated", "due")},
        "power_fringes_used": N,
        "test_diameter_mm": D,
        "h_over_r": D / (2 * R),
        "steep": D / (2 * R) > STEEP_LIMIT,
        "delta_r_paraxial_mm": delta_r_paraxial(absN, D, R, lam, n),
        "delta_r_normal_mm": delta_r_normal(absN, D, R, lam, n),
        "delta_r_axial_mm": delta_r_axial(absN, D, R, lam, n),
        "formula_used": "exact, gap along the axis: ΔR = Nλcosθ / (2(1 − cosθ)), sinθ = D/(2R)",
        "delta_r_mm": b_dr.value if s else abs(b_dr.value),
        "delta_r_u_mm": b_dr.u_c,
        "delta_r_U_mm": b_dr.U,
        "budget_delta_r": b_dr.to_dict(),
        "k": b_dr.k,
    }
    if s:
        block.update({
            "surface_radius_mm": b_rs.value,
            "surface_radius_u_mm": b_rs.u_c,
            "surface_radius_U_mm": b_rs.U,
            "budget_surface_radius": b_rs.to_dict(),
        })
    else:
        why = "the power sign is unknown" if sign.sign == 0 else "the plate's kind (convex/concave) is not given"
        block.update({
            "surface_radius_mm": None,
            "surface_radius_candidates_mm": [R - abs(b_dr.value), R + abs(b_dr.value)],
            "surface_radius_note": f"{why}: the surface radius is one of the two candidates",
        })
    return block, warnings


def _verdict(terms, terms_u, tol: Tolerance | None, lam, rule, sign: SignResult) -> dict:
    """The verdict in air (one fringe = λ/2); kept for callers of the earlier signature — see tolerance.judge."""
    return judge(tol, terms, terms_u, measured_fringe_nm=fringe_height_nm(lam), measured_wavelength_nm=lam, rule=rule,
                 sign_known=bool(sign.sign))
