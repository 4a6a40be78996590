"""One exception family, with messages a bench operator understands.

Every message is one line: what was wrong and, where possible, what to try. The CLI prints
``ringgauge: <message>`` on stderr and exits non-zero; the window shows the same text.
"""


class RinggaugeError(Exception):
    """Base class of every error ringgauge raises on purpose."""

    exit_code = 2


class InputError(RinggaugeError):
    """A file or a parameter given by the user cannot be used."""

    exit_code = 2


class ImageError(InputError):
    """An image file is missing, unreadable or unusable."""


class AnalysisError(RinggaugeError):
    """The image was read, but no trustworthy measurement could be made from it."""

    exit_code = 3


class CalibrationError(AnalysisError):
    """A calibration image or target description did not give a usable pixel scale."""


class ToleranceSyntaxError(InputError):
    """A tolerance string is not valid ISO 10110-5 notation."""


class StoreError(RinggaugeError):
    """The inspection records store cannot be opened or written."""

    exit_code = 4
