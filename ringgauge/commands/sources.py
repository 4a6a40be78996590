"""``ringgauge sources``: the built-in light sources and the bench safety notes."""

from __future__ import annotations

from ..sources import SAFETY_NOTES, SOURCES


def register(sub) -> None:
    p = sub.add_parser("sources", help="list the built-in light sources and bench safety notes")
    p.set_defaults(func=run)


def run(args) -> int:
    print(f"{'name':13s} {'λ / nm (air)':>13s} {'u / nm':>8s}  description; reference")
    for s in SOURCES.values():
        band = f", FWHM {s.fwhm_nm:g} nm" if s.fwhm_nm else ""
        print(f"{s.key:13s} {s.wavelength_nm:>13.4f} {s.wavelength_u_nm:>8.3f}  {s.name}{band}; {s.reference}")
    print("\nSafety at the bench:")
    for n in SAFETY_NOTES:
        print(f"  - {n}")
    return 0
