"""ringgauge: lens metrology with interference rings.

Radius of curvature from Newton's rings on an optical flat, surface form against a test plate in fringes
(ISO 10110-5), with a GUM uncertainty budget, inspection records and certificates.

The public API is loaded on first use, so ``import ringgauge`` (and ``ringgauge --help``) stays light::

    import ringgauge

    frame = ringgauge.load_frame("lens.png")
    setup = ringgauge.BenchSetup(ringgauge.get_source("sodium-d"), pixel_size_um=8.0, pixel_size_u_um=0.02)
    result = ringgauge.analyse(frame, setup)
    print(f"R = {result.radius_mm:.4f} mm ± {result.radius_U_mm:.4f} mm (k = {result.k:g})")
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

from .errors import RinggaugeError  # noqa: E402

#: name -> "module:attribute", imported on first use
_LAZY: dict[str, str] = {
    "analyse": "ringgauge.pipeline:analyse",
    "analyse_files": "ringgauge.pipeline:analyse_files",
    "BenchSetup": "ringgauge.bench_setup:BenchSetup",
    "load_frame": "ringgauge.imaging:load_frame",
    "get_source": "ringgauge.sources:get_source",
    "AnalysisResult": "ringgauge.result:AnalysisResult",
    "RingFit": "ringgauge.fit.result:RingFit",
    "Ring": "ringgauge.fit.result:Ring",
    "ImageInfo": "ringgauge.result:ImageInfo",
    "FormResult": "ringgauge.form.result:FormResult",
    "FormTerm": "ringgauge.form.result:FormTerm",
    "Quantity": "ringgauge.uncertainty:Quantity",
    "Budget": "ringgauge.uncertainty:Budget",
    "Verdict": "ringgauge.conformity:Verdict",
}

__all__ = ["__version__", "RinggaugeError", *_LAZY]


def __getattr__(name: str) -> Any:
    target = _LAZY.get(name)
    if target is None:
        raise AttributeError(f"module 'ringgauge' has no attribute {name!r}")
    module, _, attr = target.partition(":")
    value = getattr(importlib.import_module(module), attr)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
