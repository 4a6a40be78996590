"""Bench calibration: the object-space pixel scale from a calibration target, with its uncertainty, kept as
named bench profiles.

- :func:`measure_grating` -- a line scale, line grating, crossed grid or dot grid of certified pitch;
- :func:`measure_line_pair` -- one line scale photographed twice, turned by about 90°;
- :func:`measure_disc` -- a reference disc or ring gauge of certified diameter;
- :mod:`.profiles` -- bench profiles (``benches.json`` in the user's ringgauge folder) and
  :func:`.profiles.setup_kwargs`, which turns a profile into :class:`ringgauge.bench_setup.BenchSetup` arguments;
- :mod:`.targets` -- synthetic target images with known truth.
"""

from .disc import measure_disc
from .grating import measure_grating, measure_line_pair
from .result import ScaleCalibration

__all__ = ["measure_grating", "measure_line_pair", "measure_disc", "ScaleCalibration"]
