"""The one way to a :class:`~ringgauge.bench_setup.BenchSetup`: typed set-up choices in, set-up and warnings out.

The command line (``ringgauge analyze``, ``batch``, ``watch``) and the window's set-up panel both describe the
bench with a :class:`SetupOptions` and call :func:`build_setup`, so the same choices give the same set-up and the
same one-line refusals. Here are the bench-profile and test-plate register look-ups, the check of a tolerance's
text and of a hand-set aperture or centre against the image size. No argparse, no Qt.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .bench_setup import BenchSetup
from .errors import InputError
from .sources import SOURCES, custom_source, get_source

#: inspection details kept with a result, in the order they are stored (``order_ref`` is the customer's order)
INSPECTION_FIELDS = ("serial", "part", "drawing", "surface", "customer", "order_ref")

#: how the third number of a hand-set aperture is meant
APERTURE_SIZES = ("diameter", "radius")


@dataclass(frozen=True)
class SetupOptions:
    """The bench set-up as chosen by the user, before anything is looked up or checked.

    Light source: ``source`` (a key of :data:`ringgauge.sources.SOURCES`) or ``wavelength_nm`` with
    ``wavelength_u_nm`` and ``bandwidth_nm`` (FWHM) for a custom one; with a bench profile and neither, the
    profile's lamp. Pixel scale: ``pixel_size_um`` (``pixel_size_u_um``, and ``pixel_size_y_um`` /
    ``pixel_size_y_u_um`` when rows differ) or a bench profile by name in ``bench``. Gap: ``medium_index`` (None:
    the bench profile's, else air) and ``medium_index_u``.

    Surface form against a test plate: ``test_diameter_mm``, ``tolerance`` (ISO 10110-5 text), the plate by its
    register id in ``test_plate`` or by hand (``test_plate_radius_mm``, ``test_plate_radius_u_mm``,
    ``test_plate_kind`` convex / concave / flat), ``press_test``, ``gap_change``, ``form_route``. Verdicts:
    ``decision_rule``, ``radius_tolerance`` (text) or ``radius_limits_mm`` (lower, upper).

    Hand settings, pixels of the first image (x = column, y = row): ``centre_px`` (x, y) and ``aperture_px``
    (x, y, size) where ``aperture_size`` says whether size is the ``"diameter"`` (as a drawing gives it) or the
    ``"radius"``. Who and what: ``operator``, ``inspection`` ((name, value) pairs or a dict, names from
    :data:`INSPECTION_FIELDS`). ``motion_sign``: the live view's reading of the sign from the rings' motion.
    """

    source: str | None = None
    wavelength_nm: float | None = None
    wavelength_u_nm: float | None = None
    bandwidth_nm: float = 0.0
    pixel_size_um: float | None = None
    pixel_size_u_um: float = 0.0
    pixel_size_y_um: float | None = None
    pixel_size_y_u_um: float | None = None
    bench: str | None = None
    medium_index: float | None = None
    medium_index_u: float = 0.0
    fringe_kind: str = "dark"
    mode: str = "auto"
    test_diameter_mm: float | None = None
    tolerance: str | None = None
    test_plate: str | None = None
    test_plate_radius_mm: float | None = None
    test_plate_radius_u_mm: float | None = None
    test_plate_kind: str | None = None
    press_test: str | None = None
    decision_rule: str = "simple"
    gap_change: str = "increasing"
    form_route: str = "auto"
    radius_tolerance: str | None = None
    radius_limits_mm: tuple[float, float] | None = None
    centre_px: tuple[float, float] | None = None
    aperture_px: tuple[float, float, float] | None = None
    aperture_size: str = "diameter"
    operator: str | None = None
    inspection: tuple[tuple[str, str], ...] | dict = ()
    motion_sign: dict | None = None

    def asks_for_form(self, frames: int = 1) -> bool:
        """True when a form option is given, several frames are, or the mode says form."""
        given = (self.test_diameter_mm, self.tolerance, self.test_plate, self.test_plate_radius_mm,
                 self.test_plate_kind, self.press_test)
        return any(v is not None for v in given) or frames > 1 or self.mode == "form"


def build_setup(opts: SetupOptions, *, image_size: tuple[int, int] | None = None,
                frames: int = 1) -> tuple[BenchSetup, list[str]]:
    """The :class:`BenchSetup` for ``opts`` and the warnings that go with it (an overdue bench calibration or test
    plate, a plate radius without its uncertainty, a centre the form fit does not use).

    ``image_size`` (width, height) of the first image, when known, checks a hand-set aperture and centre against
    it; ``frames`` is how many frames the set-up will analyse. Anything unusable raises :class:`InputError` (or
    its subclass for a malformed tolerance) with one line saying what to change.
    """
    warnings: list[str] = []
    kw: dict = {}
    bench_warnings: list[str] = []
    if opts.bench:
        from .calibration import profiles

        bkw, bw = profiles.setup_kwargs(opts.bench)
        kw.update(bkw)
        bench_warnings = list(bw)
        warnings += bench_warnings
        if opts.pixel_size_um is not None:
            raise InputError("give either --bench or --pixel-size, not both")
    if opts.source and opts.wavelength_nm is not None:
        raise InputError("give either --source or --wavelength, not both")
    if opts.source:
        kw["source"] = get_source(opts.source)
    elif opts.wavelength_nm is not None:
        kw["source"] = custom_source(opts.wavelength_nm, opts.wavelength_u_nm, opts.bandwidth_nm or 0.0)
    if "source" not in kw:
        raise InputError(f"name the light source: --source NAME ({', '.join(SOURCES)}) or --wavelength NM")
    if not opts.bench:
        if opts.pixel_size_um is None:
            raise InputError("give the pixel scale: --pixel-size UM (µm per pixel) or --bench NAME (a calibrated "
                             "profile)")
        kw.update(pixel_size_um=opts.pixel_size_um, pixel_size_u_um=opts.pixel_size_u_um or 0.0,
                  pixel_size_y_um=opts.pixel_size_y_um, pixel_size_y_u_um=opts.pixel_size_y_u_um)
    if opts.medium_index is not None:
        kw["medium_index"] = opts.medium_index  # the user's gap wins over the bench profile's
    kw.update(medium_index_u=opts.medium_index_u or 0.0, fringe_kind=opts.fringe_kind, mode=opts.mode)

    fkw, fw = _form(opts)
    kw.update(fkw)
    warnings += fw
    manual, mw = _hand_settings(opts, image_size, frames)
    kw.update(manual)
    warnings += mw

    from .conformity import radius_tolerance_from

    rt = radius_tolerance_from(opts.radius_tolerance, opts.radius_limits_mm)
    if rt is not None:
        kw["radius_tolerance"] = rt.text
    operator = (opts.operator or "").strip() or None
    kw.update(operator=operator, inspection=inspection_pairs(opts.inspection), form_route=opts.form_route,
              motion_sign=dict(opts.motion_sign) if opts.motion_sign else None,
              bench_warnings=tuple(bench_warnings))
    return BenchSetup(**kw), warnings


def _form(opts: SetupOptions) -> tuple[dict, list[str]]:
    """The surface-form fields: test diameter, tolerance (its text checked now), test plate, press test."""
    from .form.plates import get_plate, plate_warnings
    from .form.tolerance import parse_tolerance

    kw: dict = {}
    warnings: list[str] = []
    if opts.test_diameter_mm is not None:
        kw["test_diameter_mm"] = float(opts.test_diameter_mm)
    if opts.tolerance is not None:
        parse_tolerance(opts.tolerance)  # a malformed string stops here with a message pointing at the bad part
        kw["tolerance"] = opts.tolerance
    kw["decision_rule"] = opts.decision_rule or "simple"
    radius = opts.test_plate_radius_mm
    if opts.test_plate and radius is not None:
        raise InputError("give either --test-plate ID or --test-plate-radius MM, not both")
    if opts.test_plate:
        pl = get_plate(opts.test_plate)
        kw["test_plate"] = pl.setup_dict()
        warnings += plate_warnings(pl)
    elif radius is not None:
        if opts.test_plate_kind == "flat":
            raise InputError("a flat test plate has no radius: drop --test-plate-radius, or give "
                             "--test-plate-kind convex or concave")
        u = opts.test_plate_radius_u_mm
        if u is None:
            warnings.append("test plate radius given without its certified uncertainty (--test-plate-radius-u): "
                            "the radius budget omits it")
            u = 0.0
        kw["test_plate"] = {"id": None, "radius_mm": float(radius), "radius_u_mm": float(u),
                            "kind": opts.test_plate_kind, "calibrated": None, "due": None}
    elif opts.test_plate_radius_u_mm is not None:
        raise InputError("--test-plate-radius-u needs --test-plate-radius")
    elif opts.test_plate_kind == "flat":
        # a reference flat: form (power, irregularity) against it, no radius to compare
        kw["test_plate"] = {"id": None, "radius_mm": None, "radius_u_mm": None, "kind": "flat",
                            "calibrated": None, "due": None}
    if opts.press_test:
        kw["press_test"] = opts.press_test
    kw["gap_change"] = opts.gap_change or "increasing"
    return kw, warnings


def _hand_settings(opts: SetupOptions, size: tuple[int, int] | None, frames: int) -> tuple[dict, list[str]]:
    """A hand-set aperture as ``aperture_px = (x, y, radius)`` and centre as ``centre_px = (x, y)``, checked
    against the first image's size when it is known."""
    kw: dict = {}
    warnings: list[str] = []
    ap, ce = opts.aperture_px, opts.centre_px
    if ap is not None:
        if opts.aperture_size not in APERTURE_SIZES:
            raise InputError(f"aperture size must be given as diameter or radius, got {opts.aperture_size!r}")
        if len(ap) != 3:
            raise InputError(f"aperture set by hand needs 3 numbers (x, y, {opts.aperture_size}), got {len(ap)}")
        x, y, s = (float(v) for v in ap)
        d = s if opts.aperture_size == "diameter" else 2 * s
        if not all(math.isfinite(v) for v in (x, y, d)):
            raise InputError("--aperture: the centre and size must be finite numbers of pixels")
        if not d > 0:
            raise InputError(f"--aperture: the diameter must be positive, got {d:g} px")
        if size is not None:
            w, h = size
            if not (-0.5 <= x <= w - 0.5 and -0.5 <= y <= h - 0.5):
                raise InputError(f"--aperture: the centre ({x:g}, {y:g}) px lies outside the image ({w} x {h} px)")
            if d < 8:
                raise InputError(f"--aperture: a diameter of {d:g} px is too small to evaluate (at least 8 px)")
        kw["aperture_px"] = (x, y, d / 2)
    if ce is not None:
        if len(ce) != 2:
            raise InputError(f"centre set by hand needs 2 numbers (x, y), got {len(ce)}")
        x, y = (float(v) for v in ce)
        if not (math.isfinite(x) and math.isfinite(y)):
            raise InputError("--centre: the position must be finite numbers of pixels")
        if size is not None:
            w, h = size
            if not (-0.5 <= x <= w - 0.5 and -0.5 <= y <= h - 0.5):
                raise InputError(f"--centre: ({x:g}, {y:g}) px lies outside the image ({w} x {h} px)")
        kw["centre_px"] = (x, y)
        if opts.asks_for_form(frames):
            warnings.append("--centre is used by the radius measurement only: the form fit needs no ring centre "
                            "(give the part's edge with --aperture X Y DIAMETER)")
    return kw, warnings


def inspection_pairs(details) -> tuple[tuple[str, str], ...]:
    """The inspection details as (name, value) pairs in :data:`INSPECTION_FIELDS` order, blank values left out."""
    pairs = details.items() if isinstance(details, dict) else (details or ())
    kept = {str(k): str(v).strip() for k, v in pairs if v is not None and str(v).strip()}
    order = {name: i for i, name in enumerate(INSPECTION_FIELDS)}
    return tuple(sorted(kept.items(), key=lambda kv: (order.get(kv[0], len(order)), kv[0])))
