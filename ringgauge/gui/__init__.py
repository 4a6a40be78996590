"""The bench window: a thin PySide6 layer over :func:`ringgauge.pipeline.analyse`.

Plain-Python models (no Qt) live in ``model``, ``training``, ``lot`` and ``display``; Qt widgets in the other
modules. This package is the only part of ringgauge that imports PySide6, and only its widget modules do.
"""
