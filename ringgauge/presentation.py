"""One presentation of a result: sections of labelled rows, each a value with its uncertainty and unit.

The window's tables, the text report and the certificate all render these rows, so a quantity is named, ordered
and rounded the same way everywhere. Built from a typed :class:`~ringgauge.result.AnalysisResult`; it formats
nothing but numbers and computes nothing (no Qt, no database, no PDF).

Rounding: an expanded uncertainty U is printed to two significant digits and its value to the same decimal place
(:func:`ringgauge.uncertainty.format_value`); :func:`value_and_U` is that rule for a table's separate columns.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from .form.result import FORM_TERMS, TermSpec, term_spec
from .uncertainty import Quantity, format_value

if TYPE_CHECKING:  # pragma: no cover
    from .form.result import FormResult
    from .result import AnalysisResult

#: what a row holds
MEASURED = "measured"  # a result of the measurement: printed with its expanded uncertainty U
SETTING = "setting"  # an input of the set-up (wavelength, pixel size, test diameter): with U when it has one
FIGURE = "figure"  # a figure of the fit or the run with no uncertainty of its own (k, rings used, chi-square)
TEXT = "text"  # words (the sign of power, a test plate's name)

#: rows whose figure is a pure number (no unit)
DIMENSIONLESS = frozenset({"radius.k", "radius.dof", "rings.used", "rings.redchi", "setup.medium_index"})

#: the terms whose value the window also shows in nm on a row of its own
NM_ROWS = ("power", "irregularity")


def _capital(s: str) -> str:
    return s[:1].upper() + s[1:]


def lower_first(s: str) -> str:
    """First letter small, unless the word is an abbreviation (RMSt, PV)."""
    return s[:1].lower() + s[1:] if s[1:2].islower() else s


def term_label(name: str) -> str:
    """The trade's name of a form term (``FORM_TERMS``) for a name or key ("power", "rms_total_fringes");
    an unknown key comes back with its underscores as spaces, never as the internal key."""
    spec = term_spec(name)
    if spec is not None:
        return spec.label
    return str(name or "").removesuffix("_fringes").removesuffix("_nm").replace("_", " ")


def document_label(spec: TermSpec) -> str:
    """A form term as certificates and the text report name it (capitalised)."""
    return spec.document or _capital(spec.label)


def typed_result(result: "AnalysisResult | dict") -> "AnalysisResult":
    """The typed result; a stored result's JSON (``to_dict()``) is read back first. A stored result that cannot
    be read back is a one-line :class:`~ringgauge.errors.InputError`, never a traceback."""
    from .errors import InputError
    from .result import AnalysisResult

    if isinstance(result, AnalysisResult):
        return result
    try:
        return AnalysisResult.from_dict(result)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise InputError(f"the stored result cannot be read back ({type(exc).__name__}: {exc}); it was written by "
                         "another version or changed by hand") from None


# -- rows -------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Row:
    """One labelled line of a results table.

    ``value`` is the number with its standard uncertainty, unit and k (U = k·u); ``text`` stands in for it where
    the row holds words or a pair of numbers; ``alt`` is the same quantity in a second unit (a form term in nm
    beside fringes). ``decimals`` fixes the printed decimals (value and U) where a row is read as such (an
    axis angle to 0.1°); None rounds U to two significant digits and the value to the same place."""

    key: str
    label: str
    section: str
    value: Quantity | None = None
    text: str | None = None
    unit: str = ""  # the unit of ``text`` (rows with a ``value`` take its unit)
    kind: str = MEASURED
    alt: Quantity | None = None
    on_certificate: bool = False
    certificate_label: str | None = None
    note: str = ""  # a qualifier shown beside the value on documents ("given", a sign's meaning)
    fmt: str | None = None  # format of a figure printed without U (".3g", ".2f")
    decimals: int | None = None
    choices: tuple[float, ...] = ()  # values of which one is right (a surface radius of unknown sign)
    no_U: str | None = None  # what the U column says when there is no U ("exact (air)"); None: by ``kind``  # noqa: N815

    @property
    def shown_unit(self) -> str:
        return self.value.unit if self.value is not None else self.unit

    @property
    def document_label(self) -> str:
        return self.certificate_label or self.label


@dataclass(frozen=True)
class Section:
    title: str
    rows: tuple[Row, ...]


# -- numbers ----------------------------------------------------------------------------------------------------
def value_and_U(value: float | None, U: float | None, *, decimals: int | None = None) -> tuple[str, str | None]:  # noqa: N802, N803
    """Value and expanded uncertainty as printed in separate columns, rounded together: U to two significant
    digits and the value to the same decimal place (``uncertainty.format_value``). U comes back None when it is
    not available (the value then has six significant digits); the value "—" when there is none."""
    if value is None or not math.isfinite(value):
        return "—", None
    if U is None or not math.isfinite(U) or U <= 0:
        return (f"{value:.{decimals}f}" if decimals is not None else f"{value:.6g}"), None
    if decimals is not None:
        return f"{value:.{decimals}f}", f"{U:.{decimals}f}"
    val, _, unc = format_value(value, U, "").strip().partition(" ± ")
    return val, unc.strip()


def quantity_text(q: Quantity | None, *, unit: str | None = None) -> str:
    """``value ± U unit`` (U = k·u), or the value with "(uncertainty not available)"."""
    if q is None:
        return "n/a"
    return format_value(q.value, q.U, q.unit if unit is None else unit)


def no_U_text(row: Row) -> str:  # noqa: N802
    """What a table's U column says for a row without U: the row's own words, "not available" for a
    measurement or a set-up value whose uncertainty is not known, else "—"."""
    if row.no_U is not None:
        return row.no_U
    return "not available" if row.value is not None and row.kind in (MEASURED, SETTING) else "—"


def figure_text(row: Row) -> str:
    """The printed figure of a row without U: its words, its choices, or its value in the row's format."""
    if row.text is not None:
        return row.text
    if row.value is None:
        return "—"
    v = row.value.value
    if row.fmt is not None:
        return format(v, row.fmt)
    return value_and_U(v, None, decimals=row.decimals)[0]


# -- the sections of a result -----------------------------------------------------------------------------------
def sections(result: "AnalysisResult | None") -> tuple[Section, ...]:
    """The result's rows in the window's order, in sections: Radius, Rings, Surface form, Against the test
    plate, Set-up, Run (empty sections left out)."""
    if result is None:
        return ()
    out = [
        Section("Radius", tuple(_radius_rows(result))),
        Section("Rings", tuple(_ring_rows(result))),
    ]
    if result.form is not None:
        out.append(Section("Surface form", tuple(form_rows(result.form))))
        out.append(Section("Against the test plate", tuple(plate_rows(result.form))))
    out.append(Section("Set-up", tuple(_setup_rows(result))))
    out.append(Section("Run", (Row("run.elapsed", "Analysis time", "Run", Quantity(result.elapsed_s, None, "s"),
                                   kind=FIGURE, fmt=".2f"),)))
    return tuple(s for s in out if s.rows)


def rows(result: "AnalysisResult | None") -> list[Row]:
    """Every row of every section, in order."""
    return [r for s in sections(result) for r in s.rows]


def certificate_rows(result: "AnalysisResult | None") -> list[Row]:
    """The rows a certificate's results table shows, in order."""
    return [r for r in rows(result) if r.on_certificate]


def _radius_rows(result) -> list[Row]:
    g = "Radius"
    R = result.radius
    if R is None:
        return []
    out = [Row("radius", "Radius of curvature R", g, R, on_certificate=True)]
    if R.U is not None and R.value:
        rel = 100 * R.U / abs(R.value)
        q = Quantity(rel, None, "%") if rel >= 0.01 else Quantity(1e4 * rel, None, "ppm")
        out.append(Row("radius.relative_U", "Relative U", g, q, kind=FIGURE, fmt=".2g"))
    out.append(Row("radius.k", "Coverage factor k", g, Quantity(result.k, None, ""), kind=FIGURE, fmt="g"))
    dof = math.inf if result.budget is None else result.budget.dof_eff
    dof_text = "∞" if not math.isfinite(dof) else ("> 1000" if dof > 1000 else f"{dof:.0f}")
    out.append(Row("radius.dof", "Degrees of freedom", g, text=dof_text, kind=FIGURE))
    return out


def _ring_rows(result) -> list[Row]:
    g = "Rings"
    out: list[Row] = []
    k = result.k
    if result.centre_px is not None:
        cu = result.centre_u_px
        for i, axis in enumerate("xy"):
            out.append(Row(f"rings.centre_{axis}", f"Ring centre {axis}", g,
                           Quantity(result.centre_px[i], None if cu is None else cu[i], "px", k)))
    fit = result.fit
    if fit is None:
        return out
    out.append(Row("rings.slope", "Slope of r²", g, Quantity(fit.slope_mm2, fit.slope_u_mm2, "mm²/fringe", k)))
    out.append(Row("rings.used", "Rings used", g, text=str(len(fit.rings_used)), kind=FIGURE,
                   on_certificate=True, certificate_label="Rings used in the fit"))
    if fit.intercept_fringes is not None and math.isfinite(fit.intercept_fringes):
        out.append(Row("rings.contact_offset", "Contact offset", g, Quantity(fit.intercept_fringes, None, "fringes"),
                       kind=FIGURE, fmt=".2f", on_certificate=True))
    if fit.r_min_mm is not None and fit.r_max_mm is not None:
        out.append(Row("rings.radii", "Ring radii used", g, text=f"{fit.r_min_mm:.3f} – {fit.r_max_mm:.3f}",
                       unit="mm", kind=FIGURE))
    if fit.redchi is not None and math.isfinite(fit.redchi):
        out.append(Row("rings.redchi", "Reduced chi-square", g, Quantity(fit.redchi, None, ""), kind=FIGURE,
                       fmt=".3g"))
    return out


def form_term_rows(form: "FormResult") -> list[Row]:
    """One row per measured form term, in ``FORM_TERMS`` order: fringes with U, and nm as ``alt``."""
    g = "Surface form"
    out = []
    for spec in FORM_TERMS:
        try:
            t = form.term(spec.name)
        except KeyError:
            continue
        out.append(Row(f"form.{spec.name}", _capital(spec.label), g, t.fringes, alt=t.nm, on_certificate=True,
                       certificate_label=document_label(spec)))
    return out


def form_rows(form: "FormResult") -> list[Row]:
    """The surface form: one fringe, the terms, the sign of power, the astigmatism axis, the test diameter,
    the aperture and what was left out."""
    g = "Surface form"
    out = [Row("form.fringe", "One fringe (λ/2n)", g, Quantity(form.fringe_nm, None, "nm"), kind=FIGURE,
               fmt=".2f")]
    out += form_term_rows(form)
    sign = form.sign.to_dict()["sign"]
    out.append(Row("form.sign", "Power sign", g, text=sign, kind=TEXT, on_certificate=True,
                   certificate_label="Sign of power", note=form.sign.label))
    out.append(Row("form.astigmatism_axis", "Astigmatism axis", g, form.astigmatism_axis, decimals=1,
                   on_certificate=any(t.name == "astigmatism" for t in form.quantities)))
    out.append(Row("form.test_diameter", "Test diameter", g, Quantity(form.test_diameter_mm, None, "mm"),
                   kind=SETTING, fmt=".2f", on_certificate=True, certificate_label="Test diameter used",
                   note=form.test_diameter_source or "", no_U="—"))
    out.append(Row("form.aperture", "Aperture diameter", g, form.aperture_diameter))
    out.append(Row("form.masked", "Masked (dust, glare)", g, Quantity(100 * form.masked_fraction, None, "%"),
                   kind=FIGURE, fmt=".1f"))
    return out


def plate_rows(form: "FormResult") -> list[Row]:
    """The part against its test plate: the plate, ΔR and the surface radius (or its two candidates)."""
    g = "Against the test plate"
    rad = form.radius
    if rad is None:
        return []
    out = []
    plate_id = (rad.plate or {}).get("id")
    if plate_id:
        out.append(Row("plate.id", "Test plate", g, text=str(plate_id), kind=TEXT))
    out.append(Row("plate.delta_r", "Radius deviation ΔR", g, rad.delta_r, on_certificate=True,
                   certificate_label="Radius difference to the test plate ΔR"))
    if rad.surface_radius is not None:
        out.append(Row("plate.surface_radius", "Surface radius", g, rad.surface_radius, on_certificate=True))
    elif rad.surface_radius_candidates_mm:
        c = tuple(float(x) for x in rad.surface_radius_candidates_mm)
        out.append(Row("plate.surface_radius", "Surface radius (sign unknown)", g,
                       text=" or ".join(f"{x:.4f}" for x in c), unit="mm", kind=FIGURE, choices=c,
                       on_certificate=True, certificate_label="Surface radius",
                       note=rad.surface_radius_note or ""))
    return out


def _setup_rows(result) -> list[Row]:
    g = "Set-up"
    st = result.setup
    k = result.k
    out = [Row("setup.wavelength", "Wavelength λ", g, Quantity(st.wavelength_nm, st.source.wavelength_u_nm, "nm", k),
               kind=SETTING)]
    px, pu = st.pixel_size_xy_um, st.pixel_size_xy_u_um
    for i, axis in enumerate("xy"):
        out.append(Row(f"setup.pixel_size_{axis}", f"Pixel size {axis}", g, Quantity(px[i], pu[i] or None, "µm", k),
                       kind=SETTING))
    out.append(Row("setup.medium_index", "Gap medium index n", g,
                   Quantity(st.medium_index, st.medium_index_u or None, "", k), kind=SETTING,
                   no_U=None if st.medium_index_u else "exact (air)"))
    return out


# -- the headline -----------------------------------------------------------------------------------------------
def headline(result: "AnalysisResult | None") -> str:
    """The values an inspector reads first: R ± U, or power and irregularity ± U in fringes."""
    if result is None:
        return ""
    if result.radius is not None:
        a, b = value_and_U(result.radius.value, result.radius.U)
        return f"R = {a}{'' if b is None else ' ± ' + b} mm  (k = {result.k:g})"
    form = result.form
    if form is not None:
        parts = []
        for name, label in (("power", "Power"), ("irregularity", "Irregularity")):
            try:
                q = form.term(name).fringes
            except KeyError:
                continue
            a, b = value_and_U(q.value, q.U)
            parts.append(f"{label} {a}{'' if b is None else ' ± ' + b}")
        if parts:
            return " · ".join(parts) + f" fringes  (k = {form.k:g})"
    return ""
