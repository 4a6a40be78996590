"""ringgauge: lens metrology with interference rings.

Radius of curvature from Newton's rings on an optical flat, surface form against a test plate in fringes
(ISO 10110-5), with a GUM uncertainty budget, inspection records and certificates.
"""

__version__ = "0.1.0"

from .errors import RinggaugeError  # noqa: E402

__all__ = ["__version__", "RinggaugeError"]
