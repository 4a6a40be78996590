"""Bench light sources and their standard air wavelengths.

Wavelengths are standard air values in nanometres. References:
NIST Atomic Spectra Database (Hg e, He d, Na D1/D2, Cd red); BIPM CIPM 2007 recommended value for the
633 nm HeNe (632.9908 nm in vacuum, 632.816 nm in standard air by the Birch & Downs 1994 air index).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .errors import InputError


@dataclass(frozen=True)
class SpectralLine:
    wavelength_nm: float
    weight: float = 1.0


@dataclass(frozen=True)
class LightSource:
    """A lamp or laser: its effective wavelength and its spectrum (lines, or a band for an LED)."""

    key: str
    name: str
    wavelength_nm: float
    #: standard uncertainty of the effective wavelength (line identity, doublet weighting, air index)
    wavelength_u_nm: float
    lines: tuple[SpectralLine, ...] = field(default_factory=tuple)
    #: full width at half maximum of a broadband source (LED), nm; 0 for line sources
    fwhm_nm: float = 0.0
    reference: str = ""
    hazard: str = ""

    def spectrum(self, samples: int = 15) -> tuple[tuple[float, float], ...]:
        """Wavelengths (nm) and relative weights to integrate fringes over."""
        if self.lines:
            total = sum(line.weight for line in self.lines)
            return tuple((line.wavelength_nm, line.weight / total) for line in self.lines)
        if self.fwhm_nm > 0:
            import numpy as np

            sigma = self.fwhm_nm / 2.3548
            offs = np.linspace(-2.5 * sigma, 2.5 * sigma, samples)
            w = np.exp(-0.5 * (offs / sigma) ** 2)
            w /= w.sum()
            return tuple((self.wavelength_nm + o, float(wi)) for o, wi in zip(offs, w))
        return ((self.wavelength_nm, 1.0),)

    def to_dict(self) -> dict:
        return {
            "key": self.key,
            "name": self.name,
            "wavelength_nm": self.wavelength_nm,
            "wavelength_u_nm": self.wavelength_u_nm,
            "fwhm_nm": self.fwhm_nm,
            "reference": self.reference,
        }


_MERCURY = (
    "Mercury lamps emit ultraviolet light and contain mercury: keep the housing closed, never look at the bare "
    "arc, and handle a broken lamp as your shop's procedure for mercury spills says."
)
_SODIUM = "Sodium lamps run hot: let the lamp cool before touching the housing."
_LASER = (
    "Laser light: never look into the beam or its specular reflections; follow the class label and your "
    "local laser-safety rules."
)

# Sodium D: D2 588.9950 nm, D1 589.5924 nm (NIST ASD); D2 about twice as bright as D1 (HyperPhysics).
# The plain mean 589.2937 nm is the conventional "sodium D" value; the intensity-weighted centroid is
# 589.194 nm, so the effective wavelength depends on the lamp: u = half that spread, rectangular -> /sqrt(3).
_NA_U = abs(589.2937 - (2 * 588.9950 + 589.5924) / 3) / 3**0.5

SOURCES: dict[str, LightSource] = {
    s.key: s
    for s in (
        LightSource(
            "sodium-d", "Sodium D (doublet mean)", 589.2937, _NA_U,
            (SpectralLine(588.9950, 2.0), SpectralLine(589.5924, 1.0)),
            reference="NIST ASD (Na I D2 588.9950 nm, D1 589.5924 nm)", hazard=_SODIUM,
        ),
        LightSource(
            "mercury-e", "Mercury e-line (green)", 546.074, 0.001, (SpectralLine(546.074),),
            reference="NIST ASD (Hg I 546.074 nm)", hazard=_MERCURY,
        ),
        LightSource(
            "helium-d", "Helium d-line (yellow)", 587.5618, 0.001, (SpectralLine(587.5618),),
            reference="NIST ASD (He I 587.5618 nm)",
        ),
        LightSource(
            "cadmium-red", "Cadmium red line", 643.8469, 0.001, (SpectralLine(643.8469),),
            reference="NIST ASD (Cd I 643.8469 nm)",
        ),
        LightSource(
            "hene", "Helium-neon laser 633 nm (in air)", 632.816, 0.002, (SpectralLine(632.816),),
            reference="BIPM CIPM 2007 (632.9908 nm vacuum), standard air by Birch & Downs 1994", hazard=_LASER,
        ),
        LightSource(
            "green-hene", "Green helium-neon laser 543 nm (in air)", 543.365, 0.002, (SpectralLine(543.365),),
            reference="CIPM recommended radiations (543.516 nm vacuum, iodine-stabilised He-Ne), standard air by "
                      "the Edlén formula", hazard=_LASER,
        ),
        LightSource(
            "led-590", "Amber LED, 590 nm", 590.0, 1.0, (), fwhm_nm=15.0,
            reference="nominal; measure the LED's centroid with a spectrometer for better than 1 nm",
        ),
    )
}

#: The usual default when a drawing states none (Hg e-line) — from memory (common practice, no source).
DEFAULT_SOURCE = "mercury-e"


def get_source(key: str) -> LightSource:
    """Look up a built-in source by key (case-insensitive; ``_`` and spaces accepted for ``-``).

    Parameters
    ----------
    key : str
        e.g. ``"sodium-d"``, ``"mercury-e"``, ``"helium-neon"`` (``ringgauge sources`` lists them all).

    Returns
    -------
    LightSource
        Its effective wavelength and standard uncertainty (nm, from the NIST Atomic Spectra Database for the
        lamps), its lines or band, and its safety note.

    Raises
    ------
    InputError
        An unknown key; the message lists the known ones.
    """
    k = key.strip().lower().replace("_", "-").replace(" ", "-")
    if k not in SOURCES:
        raise InputError(f"unknown light source '{key}'; choose one of: {', '.join(SOURCES)}")
    return SOURCES[k]


def custom_source(wavelength_nm: float, wavelength_u_nm: float | None = None, fwhm_nm: float = 0.0) -> LightSource:
    """A source given only by its wavelength (nm); checks that the value is plausible for visible fringes."""
    if not (wavelength_nm == wavelength_nm) or wavelength_nm <= 0:
        raise InputError(f"wavelength must be a positive number of nanometres, got {wavelength_nm}")
    if not 200.0 <= wavelength_nm <= 2000.0:
        raise InputError(
            f"wavelength {wavelength_nm} nm is outside 200-2000 nm; give it in nanometres (e.g. 589.29)"
        )
    if wavelength_u_nm is None:
        # Typed by hand to the digits shown: half the last digit, rectangular, unless a source table is used.
        wavelength_u_nm = 0.005 / 3**0.5
    if wavelength_u_nm < 0:
        raise InputError("wavelength uncertainty cannot be negative")
    if fwhm_nm < 0:
        raise InputError("source bandwidth (FWHM) cannot be negative")
    return LightSource(
        "custom", f"Custom {wavelength_nm:g} nm", float(wavelength_nm), float(wavelength_u_nm),
        (SpectralLine(float(wavelength_nm)),) if fwhm_nm == 0 else (), fwhm_nm=float(fwhm_nm),
        reference="entered by the operator",
    )


SAFETY_NOTES: tuple[str, ...] = (
    _LASER,
    _MERCURY,
    _SODIUM,
    "Lay the part on the flat or test plate gently: pressure, grit or dry contact scratch and chip both "
    "surfaces. Clean both faces first and never slide glass on glass.",
    "Cleaning solvents (alcohol, acetone) are flammable and their vapour is harmful: use them sparingly, away "
    "from hot lamps, with ventilation.",
    "These notes do not replace your shop's procedures and local regulations; follow those.",
)
