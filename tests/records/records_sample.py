"""A hand-made result of the shape ``AnalysisResult.to_dict()`` gives, shared by the records tests and the
stand-in analysis (invented values, never check values). A module of its own, with a name no other test folder
uses, so worker processes and other folders' conftest files cannot shadow it."""

from __future__ import annotations

import json
from pathlib import Path

# the whole shape of a ring fit and of a form result, taken once from analyses of generated images
# (sample_parts.json); the values the records tests look at are set below
_PARTS = json.loads((Path(__file__).with_name("sample_parts.json")).read_text(encoding="utf-8"))

_BASE = {
    "ringgauge_version": "0.1.0",
    "image": {"path": "/bench/img.png", "sha256": "", "width": 640, "height": 480, "bit_depth": 8,
              "channel": "grey", "saturated_fraction": 0.0},
    "frames": [],
    "setup": {
        "source": {"key": "mercury-e", "name": "Mercury e-line (green)", "wavelength_nm": 546.074,
                   "wavelength_u_nm": 0.001, "fwhm_nm": 0.0, "reference": "NIST ASD (Hg I 546.074 nm)"},
        "wavelength_nm": 546.074, "wavelength_u_nm": 0.001, "pixel_size_um": [10.0, 10.0],
        "pixel_size_u_um": [0.02, 0.02], "medium_index": 1.0, "medium_index_u": 0.0, "fringe_kind": "dark",
        "bench": "bench 2", "bench_calibrated": "2026-10-01", "test_diameter_mm": 20.0, "tolerance": "3/2(0.5)",
        "test_plate": {"id": "TP-0117", "radius_mm": 51.68, "radius_u_mm": 0.002, "certificate": "TPC-88",
                       "calibrated": "2026-03-14"},
        "press_test": None, "decision_rule": "simple",
    },
    "coordinates": "x = column, y = row, pixel centres at integers, origin at the top-left pixel",
    "centre_px": [320.0, 240.0], "centre_u_px": [0.05, 0.05],
    "radius_mm": 51.7, "radius_u_mm": 0.02, "radius_U_mm": 0.04, "k": 2.0,
    "budget": {"output": "R", "unit": "mm", "value": 51.7, "u_c": 0.02, "k": 2.0, "U": 0.04, "dof_eff": None,
               "coverage": "approximately 95 %", "notes": [],
               "rows": [
                   {"quantity": "pixel size", "estimate": 10.0, "estimate_unit": "µm", "u": 0.02,
                    "distribution": "normal", "divisor": 1.0, "sensitivity": 10.34, "sensitivity_unit": "mm/µm",
                    "contribution": 0.0207, "share": 0.97, "dof": None, "note": ""},
                   {"quantity": "slope of r² against order", "estimate": 0.0282, "estimate_unit": "mm²",
                    "u": 1e-6, "distribution": "normal", "divisor": 1.0, "sensitivity": 1833.0,
                    "sensitivity_unit": "1/mm", "contribution": 0.0018, "share": 0.03, "dof": 12, "note": ""},
               ]},
    "fringes": {**_PARTS["fringes"], "slope_mm2_per_fringe": 0.0282, "rings_used": 3,
                "rings": [{"order": m, "kind": "dark", "radius_px": 16.8 * m ** 0.5, "radius_mm": 0.168 * m ** 0.5,
                           "r2_mm2": 0.0282 * m, "u_r2_mm2": 1e-5, "residual_mm2": 0.0, "used": True}
                          for m in (1, 2, 3)]},
    "fullfield": {},
    "form": {**_PARTS["form"], "power_fringes": 1.2, "power_u_fringes": 0.05, "irregularity_fringes": 0.3,
             "irregularity_u_fringes": 0.05},
    "verdict": {"overall": "pass", "terms": [], "decision_rule": "simple acceptance"},
    "warnings": [],
    "elapsed_s": 0.5,
}

#: the invented shop the certificate tests issue documents for
SHOP = {"name": "Fernhill Optical Workshop", "address": ["Unit 4, Quarry Lane", "Millbrook"],
        "contact": "bench-office@fernhill.invalid", "accreditation": "", "certificate_prefix": "FOW",
        "approver": "M. Oriel", "paper": "A4"}
