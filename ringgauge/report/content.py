"""What a certificate or lot report says: its content dict, the tables it prints, checksums and value formats.

A document is made in two steps. :func:`certificate_content` / :func:`lot_report_content` gather what the
document says into a plain dict (this is what the records store keeps when the document is issued and what
the content checksum covers); :mod:`ringgauge.report.layout` only lays that dict out on pages. A reprint lays
out the same stored dict again, so it carries the same content checksum.

The table builders below (``certificate_item_rows`` … ``lot_parts_table``) turn the content into the cells
the pages print; the layout draws them and :mod:`ringgauge.report.verify` reads the same cells back from a
PDF, so a check compares exactly what was printed.

The content a certificate carries follows ISO/IEC 17025:2017 §7.8 (title, unique identification on every
page, page x of y and a clear end, laboratory and customer, method, item, dates, results with units and
uncertainty, decision rule, traceability, conditions, authorisation).
"""

from __future__ import annotations

import json
import math

from .. import __version__
from ..errors import InputError, RinggaugeError
from ..form.result import FORM_TERMS, term_spec
from ..presentation import FIGURE, SETTING, TEXT, Row, certificate_rows, document_label, figure_text, typed_result
from ..uncertainty import format_value, round_uncertainty

CONTENT_FILE = "ringgauge-content.json"
TITLE_CERT = "Certificate of Surface Inspection"
TITLE_LOT = "Lot Inspection Report"


class VerificationError(RinggaugeError):
    """A document failed verification (its content or printed text does not match its checksum)."""

    exit_code = 1


# ---------------------------------------------------------------------------------------------- content


def _canonical(obj) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def content_checksum(content: dict) -> str:
    import hashlib

    return hashlib.sha256(_canonical(content).encode("utf-8")).hexdigest()


def _fmt(v, digits: int = 6) -> str:
    if v is None:
        return "—"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, (int,)):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            return "—"
        return f"{v:.{digits}g}"
    return str(v)


def _g(v, n: int = 3) -> str:
    """``n`` significant digits, trailing zeros kept (2.0, not 2)."""
    if not isinstance(v, (int, float)) or not math.isfinite(v):
        return _fmt(v)
    if v == 0:
        return "0"
    t = f"{v:#.{n}g}"
    return t[:-1] if t.endswith(".") else t


def _value_u(value, U, unit: str) -> tuple[str, str]:
    """Value and expanded uncertainty as printed: U to two significant digits, value to the same place."""
    if value is None:
        return "—", "—"
    if U is None or not isinstance(U, (int, float)) or not math.isfinite(U) or U <= 0:
        return f"{value:.6g} {unit}".strip(), "not available"
    txt = format_value(float(value), float(U), unit)
    v, u = txt.split(" ± ")
    return f"{v} {unit}".strip(), u.strip()


# What each decision rule risks, in words a customer reads. Both figures follow from a normal distribution of
# the measurand around the measured value [derived]; ILAC-G8:09/2019 describes these rules (from memory).
RULE_NOTES = {
    "simple": "Simple acceptance: a measured value inside the tolerance passes. For a value closer to a limit "
              "than its expanded uncertainty U, the probability of a wrong decision rises towards 50 % at the "
              "limit itself.",
    "guard": "Guard-banded acceptance: a pass needs the value inside the tolerance by at least the guard band "
             "(the expanded uncertainty U); values within U of a limit are reported as conditional. The "
             "probability of a false pass is then at most about 2.3 % (normal distribution, k = 2).",
}


def _rule_note(rule: str | None) -> str:
    r = (rule or "").lower()
    if "guard" in r:
        return RULE_NOTES["guard"]
    if "simple" in r or not r:
        return RULE_NOTES["simple"]
    return ""


def _term_label(name: str) -> str:
    """A form term as certificates name it (``FORM_TERMS`` through :func:`ringgauge.presentation.document_label`);
    an unknown name with its underscores as spaces."""
    spec = term_spec(name)
    return document_label(spec) if spec is not None else str(name).replace("_", " ")


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _row(quantity: str, value, U, unit: str, k) -> dict:
    v, u = _value_u(value, U, unit)
    return {"quantity": quantity, "value": v, "U": u, "k": _fmt(k)}


def _results_rows(result: dict) -> list[dict]:
    """The certificate's results table: the presentation's rows marked for certificates
    (:func:`ringgauge.presentation.certificate_rows`), from the stored result read back as the typed result."""
    return [_certificate_row(r) for r in certificate_rows(typed_result(result))]


def _certificate_row(r: Row) -> dict:
    """One presentation row as the certificate prints it: value and U with their unit, and k."""
    label = r.document_label
    q = r.value
    if r.choices:  # a surface radius of unknown sign: both candidates, neither with U
        return {"quantity": label, "value": " or ".join(f"{c:.4f} {r.unit}" for c in r.choices), "U": "—", "k": "—"}
    if r.kind in (TEXT, FIGURE) or q is None or (r.kind == SETTING and q.U is None):
        note = f" ({r.note})" if r.note else ""
        return {"quantity": label, "value": f"{figure_text(r)} {r.shown_unit}".strip() + note, "U": "—", "k": "—"}
    if r.decimals is not None:  # read to a fixed step (an axis to 0.1°): value and U to the same decimals
        sep = "" if q.unit == "°" else " "
        return {"quantity": label, "value": f"{q.value:.{r.decimals}f}{sep}{q.unit}",
                "U": "not available" if q.U is None else f"{q.U:.{r.decimals}f}{sep}{q.unit}", "k": _fmt(q.k)}
    row = _row(label, q.value, q.U, q.unit, q.k)
    if r.alt is not None:  # ISO 10110-5 prefers nanometres; fringes are kept with their wavelength
        nm_v, nm_u = _value_u(r.alt.value, r.alt.U, r.alt.unit)
        row["value"] += f" = {nm_v}"
        if nm_u not in ("—", "not available"):
            row["U"] += f" = {nm_u}"
    return row


def _budget_table(b: dict | None) -> dict | None:
    """A GUM budget dict (``Budget.to_dict()``) as printed rows."""
    if not b or not b.get("rows"):
        return None
    rows = []
    for r in b["rows"]:
        rows.append({
            "quantity": r.get("quantity", ""),
            "estimate": f"{_fmt(r.get('estimate'))} {r.get('estimate_unit', '')}".strip(),
            "u": f"{_g(r.get('u'), 3)} {r.get('estimate_unit', '')}".strip(),
            "distribution": r.get("distribution", ""),
            "divisor": _fmt(r.get("divisor"), 4),
            "sensitivity": f"{_fmt(r.get('sensitivity'), 4)} {r.get('sensitivity_unit', '')}".strip(),
            "contribution": f"{_g(r.get('contribution'), 3)} {b.get('unit', '')}".strip(),
            "share": f"{100 * (r.get('share') or 0):.1f} %",
        })
    return {
        "output": b.get("output", ""), "unit": b.get("unit", ""), "rows": rows,
        "u_c": f"{_g(b.get('u_c'), 3)} {b.get('unit', '')}",
        "k": _fmt(b.get("k")),
        "U": f"{_g(round_uncertainty(b['U']) if b.get('U') else None, 2)} {b.get('unit', '')}",
        "dof_eff": "large (> 1000)" if b.get("dof_eff") is None or b["dof_eff"] > 1000 else f"{b['dof_eff']:.1f}",
        "coverage": b.get("coverage", ""),
    }


def _budgets(result: dict) -> list[dict]:
    out = [_budget_table(result.get("budget"))]
    rad = (result.get("form") or {}).get("radius") if isinstance(result.get("form"), dict) else None
    if isinstance(rad, dict):
        out.append(_budget_table(rad.get("budget_surface_radius") or rad.get("budget_delta_r")))
    return [b for b in out if b]


def _form_budget(result: dict) -> list[list[str]]:
    """Per-term uncertainty contributions of the form evaluation: term, source, u in fringes and nm."""
    form = result.get("form") if isinstance(result.get("form"), dict) else {}
    rows = []
    order = [t.name for t in FORM_TERMS]
    budget = form.get("uncertainty_budget") or {}

    def rank(key: str) -> tuple:
        t = key[: -len("_fringes")] if key.endswith("_fringes") else key
        return (order.index(t) if t in order else len(order), key)

    for key in sorted(budget, key=rank):
        items = budget[key]
        t = key[: -len("_fringes")] if key.endswith("_fringes") else key
        label = _term_label(t)
        for it in items or []:
            rows.append([label, str(it.get("source", "")), f"{_g(it.get('u_fringes'), 2)} fringes",
                         f"{_g(it.get('u_nm'), 2)} nm" if _num(it.get("u_nm")) else "—"])
    return rows


def _verdict_terms(verdict: dict) -> dict:
    """The per-term verdicts as a table: {"header": [...], "rows": [[...], ...]}."""
    header = ["Term", "Measured", "Limit", "λ of the tolerance", "Verdict", "Note"]
    rows, other = [], []
    for t in verdict.get("terms") or []:
        if isinstance(t, dict) and _num(t.get("value_fringes")):
            v, U = _value_u(t["value_fringes"], t.get("U_fringes"), "fringes")
            name = str(t.get("term", ""))
            rows.append([
                _term_label(name),
                v if U in ("—", "not available") else f"{v.replace(' fringes', '')} ± {U}",
                f"{_fmt(t.get('limit_fringes'))} fringes",
                f"{_fmt(t.get('wavelength_nm'))} nm" if t.get("wavelength_nm") else "—",
                str(t.get("verdict", "")),
                str(t.get("note") or ""),
            ])
        elif isinstance(t, dict):
            other.append(", ".join(f"{k}: {_fmt(v)}" for k, v in t.items()))
        else:
            other.append(str(t))
    rows += [[o, "", "", "", "", ""] for o in other]
    return {"header": header, "rows": rows} if rows else {"header": [], "rows": []}


def _with_radius_row(table: dict, verdict: dict) -> dict:
    """The per-term verdict table with the radius verdict (ringgauge.conformity) as a row of its own."""
    rv = verdict.get("radius")
    if not isinstance(rv, dict):
        return table
    header = table.get("header") or ["Term", "Measured", "Limit", "λ of the tolerance", "Verdict", "Note"]
    if rv.get("value") is None:
        measured = "—"
    else:
        v, U = _value_u(rv["value"], rv.get("U"), "mm")
        measured = v if U in ("—", "not available") else f"{v.replace(' mm', '')} ± {U}"
    word = str(rv.get("verdict", ""))
    if rv.get("accepted") is not None:
        word += " (accepted)" if rv["accepted"] else " (not accepted)"
    row = [str(rv.get("quantity", "radius")).capitalize(), measured,
           f"{_fmt(rv.get('lower'))} … {_fmt(rv.get('upper'))} mm", "—", word, str(rv.get("note") or "")]
    return {"header": header, "rows": list(table.get("rows") or []) + [row[:len(header)]]}


def _method(result: dict) -> str:
    if result.get("form"):
        form = result["form"] if isinstance(result["form"], dict) else {}
        how = f" Evaluation: {form['method']}." if form.get("method") else ""
        return ("Interference fringes of the surface against a test plate under a monochromatic source "
                "(one fringe = λ/2 of surface height). Form deviation evaluated over the test diameter and "
                f"reported in ISO 10110-5 terms (power / sagitta deviation, irregularity).{how} Uncertainty "
                "evaluated per GUM (JCGM 100:2008).")
    fr = result.get("fringes") or {}
    how = f" ({fr['method']})" if fr.get("method") else ""
    return ("Newton's rings in reflection, lens resting on an optical flat. Ring radii measured from the image "
            f"and fitted by least squares as r² = (λR/n)·m + c against fringe order m{how}; the intercept "
            "absorbs a contact offset. R follows from the slope. Uncertainty evaluated per GUM "
            "(JCGM 100:2008).")


def _plate_text(plate) -> str:
    if not isinstance(plate, dict):
        return str(plate) if plate else "none (optical flat, or not stated)"
    parts = [f"{plate['id']}" if plate.get("id") else "entered by hand (not in the plate register)"]
    if _num(plate.get("radius_mm")):
        u = plate.get("radius_u_mm")
        parts.append(f"certified radius {plate['radius_mm']:g} mm"
                     + (f", standard uncertainty {u:g} mm" if _num(u) and u > 0 else ", uncertainty not given"))
    if plate.get("kind"):
        parts.append(str(plate["kind"]))
    for key, label in (("certificate", "certificate"), ("calibrated", "calibrated"), ("due", "due")):
        if plate.get(key):
            parts.append(f"{label} {plate[key]}")
    if plate.get("overdue"):
        parts.append("CALIBRATION OVERDUE")
    return ", ".join(parts)


def certificate_content(record, shop: dict, *, approver: str | None = None) -> dict:
    """What a certificate of ``record`` (an :class:`~ringgauge.records.InspectionRecord`) says."""
    if record.status != "ok" or not record.result:
        raise InputError(f"record {record.id} is a failed analysis ({record.failure_reason}); "
                         "no certificate can be issued for it")
    if record.superseded_by is not None:
        raise InputError(f"record {record.id} was superseded by record {record.superseded_by}; "
                         f"certify record {record.superseded_by}")
    res = record.result
    setup = res.get("setup") or record.setup or {}
    m = record.meta
    src = setup.get("source") or {}
    pix = setup.get("pixel_size_um") or []
    pixu = setup.get("pixel_size_u_um") or []
    verdict = res.get("verdict") or {}
    if not isinstance(verdict, dict):
        verdict = {"overall": str(verdict)}
    form = res.get("form") if isinstance(res.get("form"), dict) else {}
    tol = form.get("tolerance") if isinstance(form.get("tolerance"), dict) else {}
    plate = setup.get("test_plate")
    pixel_text = "—"
    if pix:
        pixel_text = f"{_fmt(pix[0])} µm/pixel"
        if len(pix) > 1 and pix[1] != pix[0]:
            pixel_text = f"x {_fmt(pix[0])}, y {_fmt(pix[1])} µm/pixel"
        if len(pixu) > 1 and len(pix) > 1 and pix[1] != pix[0] and (pixu[0] or pixu[1]):
            # unequal scales: each has its own uncertainty (calibrated along x and along y)
            pixel_text += f", standard uncertainty x {_fmt(pixu[0], 3)}, y {_fmt(pixu[1], 3)} µm"
        elif pixu and pixu[0]:
            pixel_text += f", standard uncertainty {_fmt(pixu[0], 3)} µm"
        else:
            pixel_text += " (uncertainty not given)"
    cal = setup.get("bench") or "—"
    if setup.get("bench_calibrated"):
        cal += f", calibrated {setup['bench_calibrated']}"
    return {
        "kind": "certificate",
        "title": TITLE_CERT,
        "software": f"ringgauge {__version__}",
        "shop": {k: shop.get(k) for k in ("name", "address", "contact", "accreditation")},
        "customer": {"customer": m.customer or "—", "order": m.order_ref or "—"},
        "item": {"part": m.part or "—", "drawing": m.drawing or "—", "surface": m.surface or "—",
                 "serial": m.serial or "—", "lot": m.lot or "—"},
        # lists of pairs, not dicts: stored content has its keys sorted, and the print order matters
        "specification": [
            ["Tolerance", (setup.get("tolerance") or "not specified")
             + (f" (fringes of λ = {_fmt(tol['wavelength_nm'])} nm"
                + (")" if tol.get("wavelength_stated") else ", the usual value when none is stated)")
                if tol.get("wavelength_nm") else "")],
            ["Test diameter", f"{_fmt(setup.get('test_diameter_mm'))} mm" if setup.get("test_diameter_mm")
             else (f"{form['test_diameter_mm']:.2f} mm ({form.get('test_diameter_source') or 'measured'})"
                   if _num(form.get("test_diameter_mm")) else "full clear aperture")],
            ["Wavelength", f"{_fmt(setup.get('wavelength_nm'), 7)} nm" if setup.get("wavelength_nm") else "—"],
            ["Gap medium index", _fmt(setup.get("medium_index"))],
        ] + ([["Radius tolerance", verdict["radius"]["tolerance"]["described"]]]
             if isinstance(verdict.get("radius"), dict) else []) + ([] if form else [["Fringes counted", setup.get("fringe_kind") or "—"]]),
        "mode": "radius" if res.get("radius_mm") is not None or not form else "form",
        "method": _method(res),
        "dates": {"measured (UTC)": record.created_utc[:19].replace("T", " "),
                  "record": f"{record.id} ({record.uid})"},
        "results": _results_rows(res),
        "coverage": f"Expanded uncertainty U = k·u_c with coverage factor k = {_fmt(res.get('k') or 2.0)} "
                    "(coverage probability about 95 %).",
        "budgets": _budgets(res),
        "form_budget": _form_budget(res),
        "decision": {"verdict": verdict.get("overall") or "not evaluated",
                     "rule": (verdict["radius"]["rule_name"] if isinstance(verdict.get("radius"), dict)
                              else verdict.get("decision_rule") or setup.get("decision_rule") or "simple"),
                     "rule_note": (verdict["radius"]["rule_wording"] if isinstance(verdict.get("radius"), dict)
                                   else _rule_note(verdict.get("rule") or verdict.get("decision_rule")
                                                   or setup.get("decision_rule"))),
                     "meaning": " ".join(str(verdict[k]) for k in ("meaning", "power_note") if verdict.get(k)),
                     "terms": _with_radius_row(_verdict_terms(verdict), verdict)},
        "traceability": {
            "test plate": _plate_text(plate),
            "wavelength source": f"{src.get('name', '—')}, {_fmt(setup.get('wavelength_nm'), 7)} nm, "
                                 f"standard uncertainty {_fmt(setup.get('wavelength_u_nm'), 3)} nm; "
                                 f"{src.get('reference') or 'reference not stated'}",
            "pixel scale": pixel_text,
            "pixel-scale calibration": cal,
        },
        "environment": {"temperature": f"{m.temperature_c:.1f} °C" if m.temperature_c is not None
                        else "not recorded"},
        "image": {"name": record.image_name or "—", "sha256": record.image_sha256 or "—",
                  "size": f"{(res.get('image') or {}).get('width', '?')} × "
                          f"{(res.get('image') or {}).get('height', '?')} pixels"},
        "record_checksum": record.content_sha256,
        "correction": (f"This record corrects record {record.supersedes}: {record.supersede_reason}"
                       if record.supersedes is not None else None),
        "warnings": list(res.get("warnings") or []),
        "operator": m.operator or "—",
        "approver": approver or shop.get("approver") or "",
        "notes": m.notes or None,
        "record_id": record.id,
    }


def lot_report_content(records, summary, shop: dict, *, part: str | None = None,
                       tolerance: str | None = None, approver: str | None = None) -> dict:
    """What a lot report says: every current record of the lot (by serial), the verdicts and the rule they were
    reached under, the statistics and the control chart data — figures as text with one number of digits per
    quantity (``records.lot.lot_tables``, shared with the window's lot review)."""
    from ..conformity import RULE_NAMES, RULE_WORDING
    from ..records.lot import lot_tables

    ks = {float(r.result["k"]) for r in records if r.result and r.result.get("k")}
    t = lot_tables(records, summary)
    s = summary.to_dict()
    first = min((r.created_utc for r in records), default="")
    last = max((r.created_utc for r in records), default="")
    rule = summary.decision_rule
    return {
        "kind": "lot report",
        "title": TITLE_LOT,
        "software": f"ringgauge {__version__}",
        "shop": {k: shop.get(k) for k in ("name", "address", "contact", "accreditation")},
        "lot": summary.lot,
        "part": part or ", ".join(sorted({r.meta.part for r in records if r.meta.part})) or "—",
        "drawing": ", ".join(sorted({r.meta.drawing for r in records if r.meta.drawing})) or "—",
        "customer": ", ".join(sorted({r.meta.customer for r in records if r.meta.customer})) or "—",
        "order": ", ".join(sorted({r.meta.order_ref for r in records if r.meta.order_ref})) or "—",
        "tolerance": tolerance or ", ".join(sorted({(r.setup or {}).get("tolerance") for r in records
                                                    if (r.setup or {}).get("tolerance")})) or "not specified",
        "radius_tolerance": summary.radius_tolerance or "not specified",
        "decision_rule": RULE_NAMES.get(rule, "—") if rule else "—",
        "rule_note": RULE_WORDING.get(rule, "") if rule else "",
        "period": f"{first[:19].replace('T', ' ')} to {last[:19].replace('T', ' ')} UTC" if first else "—",
        # a list, not a dict: the stored content's keys are sorted, and the verdicts have an order of their own
        "counts": t["counts"],
        "radius_counts": t["radius_counts"],
        "accepted": t["accepted"],
        "k": "k = " + (", ".join(f"{k:g}" for k in sorted(ks)) or "2"),
        "n_records": str(s["n_records"]),
        "radius": t["radius"],
        "power": t["power"],
        "capability": t["capability"],
        "capability_note": "Cp = (USL − LSL)/6s, Cpk = min(USL − x̄, x̄ − LSL)/3s with s the sample standard "
                           "deviation (NIST/SEMATECH e-Handbook of Statistical Methods §6.1.6).",
        "charts": [{k: c[k] for k in ("quantity", "unit", "labels", "values", "centre", "mr_bar", "ucl", "lcl",
                                      "out_of_limits", "lsl", "usl", "decimals")} for c in s["charts"]],
        "chart_note": "Individuals chart: control limits x̄ ± 3·MR̄/d2, d2 = 1.128 (moving ranges of two); "
                      "specification limits (USL, LSL) dash-dotted.",
        "notes": s["notes"],
        "rows": t["rows"],
        "operators": ", ".join(sorted({r.meta.operator for r in records if r.meta.operator})) or "—",
        "approver": approver or shop.get("approver") or "",
        "record_checksums": _canonical_digest([r.content_sha256 for r in sorted(records, key=lambda r: r.id)]),
    }


def _lim(x) -> str:
    """A specification limit: four significant digits (a limit converted between wavelengths carries no more)."""
    return "—" if x is None else f"{x:.4g}"


def _index(x: float) -> str:
    """A capability index: two decimals, or three significant digits when very large."""
    return f"{x:.2f}" if abs(x) < 100 else f"{x:.3g}"


def _pm(value, U) -> str:
    """``value ± U`` without the unit (the column heading carries it)."""
    if value is None:
        return "—"
    if U is None or not math.isfinite(U) or U <= 0:
        return f"{value:.6g} (U not available)"
    return format_value(float(value), float(U), "").strip()


def _canonical_digest(items) -> str:
    import hashlib

    return hashlib.sha256("\n".join(items).encode()).hexdigest()


# ------------------------------------------------------------------------------------------ table builders
# Shared by the layout (which draws them) and by verification (which reads the same cells back).


def certificate_item_rows(c: dict) -> list[tuple[str, str]]:
    """The certificate's first table: customer, order, item and dates as (label, value)."""
    return [("Customer", c["customer"]["customer"]), ("Order", c["customer"]["order"]),
            ("Part / drawing", f"{c['item']['part']} / {c['item']['drawing']}"),
            ("Surface", c["item"]["surface"]), ("Serial", c["item"]["serial"]), ("Lot", c["item"]["lot"]),
            ("Measured (UTC)", c["dates"]["measured (UTC)"]), ("Inspection record", c["dates"]["record"])]


def specification_rows(c: dict) -> list[tuple[str, str]]:
    """The specification as (label, value), labels capitalised (the method row is added by the layout)."""
    spec = c["specification"]
    return [(str(k)[:1].upper() + str(k)[1:], v) for k, v in (spec.items() if isinstance(spec, dict) else spec)]


def results_table(c: dict) -> tuple[list[str], list[list[str]]]:
    """The results table: header and one row (quantity, value, U, k) per result."""
    return (["Quantity", "Value", "Expanded uncertainty U", "k"],
            [[r["quantity"], r["value"], r["U"], r["k"]] for r in c["results"]])


def verdict_terms_table(c: dict) -> dict | None:
    """The verdict's terms as {"header", "rows"} (content issued before the terms became a table kept a list
    of dicts: it is turned into the same table), or None."""
    terms = c["decision"].get("terms")
    if isinstance(terms, list) and terms:
        keys = list(dict.fromkeys(k for t in terms for k in t))
        terms = {"header": keys, "rows": [[t.get(k, "") for k in keys] for t in terms]}
    return terms if isinstance(terms, dict) else None


BUDGET_HEADER = ["Input quantity", "Estimate", "Std. unc. u_i", "Distribution", "Divisor", "Sensitivity c_i",
                 "Contribution", "Share"]


def budget_tables(c: dict) -> list[tuple[dict, list[list[str]]]]:
    """Each uncertainty budget with its rows of cells (older issued content kept one "budget")."""
    budgets = c.get("budgets") if "budgets" in c else ([c["budget"]] if c.get("budget") else [])
    return [(b, [[r["quantity"], r["estimate"], r["u"], r["distribution"], r["divisor"], r["sensitivity"],
                  r["contribution"], r["share"]] for r in b["rows"]]) for b in budgets]


def traceability_rows(c: dict) -> list[tuple[str, str]]:
    """Traceability and conditions as (label, value)."""
    tr = c["traceability"]
    plate = tr["test plate"]
    return [("Test plate", _plate_text(plate) if isinstance(plate, dict) else plate), ("Wavelength source", tr["wavelength source"]),
            ("Pixel scale", tr["pixel scale"]), ("Pixel-scale calibration", tr["pixel-scale calibration"]),
            ("Temperature", c["environment"]["temperature"]),
            ("Image file", f"{c['image']['name']}, {c['image']['size']}")]


def lot_counts_rows(c: dict) -> list[list[str]]:
    """The lot report's verdict counts: (verdict, parts)."""
    return [[k, v] for k, v in c["counts"]]


def lot_spread_rows(c: dict) -> list[list[str]]:
    """The lot report's spread table (quantity, n, mean, s, range): only quantities the lot measured.

    Shared by the layout and by verification, so a check reads exactly the cells that were printed.
    """
    return [[name, c[key]["n"], c[key]["mean"], c[key]["sd"], c[key]["range"]]
            for name, key in (("Radius of curvature", "radius"), ("Power", "power")) if c[key]["n"] != "0"]


def lot_parts_table(c: dict) -> tuple[list[str], list[list[str]], tuple[float, ...]]:
    """The lot report's parts table: header, one row of cells per part, relative column widths.

    Lenses measured on a flat get no power column of dashes; a lot judged on radius gets a radius-verdict
    column. Shared by the layout and by verification.
    """
    has_radius = any(r.get("radius_verdict", "—") != "—" for r in c["rows"])
    has_power = any(r.get("power", "—") != "—" for r in c["rows"])

    def radius_verdict(r: dict) -> str:
        return r["radius_verdict"] + ("" if r.get("accepted") is None else
                                      (" (accepted)" if r["accepted"] else " (not accepted)"))

    if has_radius and not has_power:
        header = ["Serial", "Record", "Verdict", "Radius verdict", "R ± U / mm", "Note"]
        rows = [[r["serial"], r["record"], r["verdict"], radius_verdict(r), r["radius"], r["note"]] for r in c["rows"]]
        return header, rows, (0.13, 0.09, 0.13, 0.17, 0.19, 0.29)
    if has_radius:
        header = ["Serial", "Record", "Verdict", "Radius verdict", "R ± U / mm", "Power ± U / fringes", "Note"]
        rows = [[r["serial"], r["record"], r["verdict"], radius_verdict(r), r["radius"], r["power"], r["note"]]
                for r in c["rows"]]
        return header, rows, (0.12, 0.085, 0.12, 0.15, 0.165, 0.13, 0.23)
    header = ["Serial", "Record", "Verdict", "R ± U / mm", "Power ± U / fringes", "Note"]
    rows = [[r["serial"], r["record"], r["verdict"], r["radius"], r["power"], r["note"]] for r in c["rows"]]
    return header, rows, (0.12, 0.08, 0.13, 0.22, 0.17, 0.28)


def load_record_image(record):
    """The record's image for the certificate's figures, if the file is still there and unchanged:
    (image01, note); ``record`` is an inspection record (it names the image file and its SHA-256)."""
    from ..imaging import load_frame

    if not record.image_path:
        return None, "Image not shown: the record names no image file."
    try:
        frame = load_frame(record.image_path)
    except InputError as exc:
        return None, f"Image not shown: {exc}."
    if record.image_sha256 and frame.sha256 != record.image_sha256:
        return None, (f"Image not shown: {record.image_path} has changed since the measurement "
                      "(its checksum differs from the record's).")
    return frame.data, None
