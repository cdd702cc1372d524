"""A scenario's measured stellar kinematics and its line-of-sight prior.

``[kinematics]`` as CONVENTIONS.md, "Stellar kinematics of the lens galaxy", defines it
(one dispersion in a slit or circle), plus spatially resolved kinematics: ``aperture =
"annuli"`` with ``bin_edges`` (the radii of concentric rings, arcsec, B + 1 increasing
numbers, the first may be 0) and one ``velocity_dispersion`` and
``velocity_dispersion_sigma`` per ring (lists of B numbers), as integral-field
spectroscopy binned in radius gives them; ``[line_of_sight]`` (this lens's κ_ext prior).
Pure data and validation; the physics is in :mod:`lensdelay.lensing.kinematics`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.errors import InputError, choices_text

__all__ = [
    "KINEMATICS_KEYS",
    "LINE_OF_SIGHT_KEYS",
    "APERTURES",
    "MAX_BINS",
    "Kinematics",
    "parse_kinematics",
    "parse_line_of_sight",
]

KINEMATICS_KEYS = (
    "velocity_dispersion",
    "velocity_dispersion_sigma",
    "aperture",
    "aperture_width",
    "aperture_length",
    "aperture_radius",
    "seeing_fwhm",
    "effective_radius",
    "light_profile",
    "bin_edges",
)
LINE_OF_SIGHT_KEYS = ("kappa_ext",)
#: Aperture kinds and the keys each needs.
APERTURES = {
    "slit": ("aperture_width", "aperture_length"),
    "circle": ("aperture_radius",),
    "annuli": ("bin_edges",),
}
#: Most rings of resolved kinematics.
MAX_BINS = 20
_LIGHT = ("hernquist", "jaffe")


@dataclass(frozen=True)
class Kinematics:
    """The luminosity-weighted line-of-sight velocity dispersion of the main lens galaxy.

    Dispersions in km/s, lengths in arcsec; ``aperture`` is ``slit`` (``width`` ×
    ``length``, centred), ``circle`` (``radius``) or ``annuli`` (rings between
    consecutive ``bin_edges``, one dispersion and error each: tuples); ``light_profile``
    is ``hernquist`` or ``jaffe`` with the given effective (projected half-light) radius.
    """

    velocity_dispersion: float | tuple[float, ...]
    velocity_dispersion_sigma: float | tuple[float, ...]
    aperture: str
    seeing_fwhm: float
    effective_radius: float
    light_profile: str = "hernquist"
    aperture_width: float = 0.0
    aperture_length: float = 0.0
    aperture_radius: float = 0.0
    bin_edges: tuple[float, ...] = ()

    @property
    def resolved(self) -> bool:
        """Whether the dispersion is measured in several rings (``annuli``)."""
        return self.aperture == "annuli"

    def dispersions(self) -> np.ndarray:
        """The measured dispersions (km/s), one per aperture or ring: (B,)."""
        return np.atleast_1d(np.asarray(self.velocity_dispersion, dtype=float))

    def errors(self) -> np.ndarray:
        """Their 1-σ errors (km/s): (B,)."""
        return np.atleast_1d(np.asarray(self.velocity_dispersion_sigma, dtype=float))

    def rings(self) -> list[tuple[float, float]]:
        """(inner, outer) radius of each ring (arcsec); empty unless ``annuli``."""
        return list(zip(self.bin_edges[:-1], self.bin_edges[1:]))


def parse_kinematics(table) -> Kinematics:
    """``[kinematics]`` from the scenario reader's validating table (unknown keys refused)."""
    if "velocity_dispersion" in table.data and "velocity_dispersion_sigma" not in table.data:
        raise InputError(
            "kinematics.velocity_dispersion_sigma is required with a velocity_dispersion "
            "(its 1-sigma error, km/s), got nothing"
        )
    aperture = table.text("aperture")
    if aperture == "annuli":
        return _parse_rings(table)
    if aperture not in APERTURES:
        raise InputError(
            f"kinematics.aperture must be one of {choices_text(APERTURES)}, got {aperture!r}"
        )
    other = [k for kind, keys in APERTURES.items() if kind != aperture for k in keys]
    for key in other:
        if key in table.data:
            raise InputError(
                f"kinematics.{key} does not belong to a {aperture} aperture "
                f"(it takes {', '.join(APERTURES[aperture])}), got {table.data[key]!r}"
            )
    dispersion = table.number("velocity_dispersion", lo=0.0, lo_open=True, hi=1000.0)
    sigma = table.number("velocity_dispersion_sigma", lo=0.0, lo_open=True, hi=1000.0)
    sizes = {key: table.number(key, lo=0.0, lo_open=True, hi=60.0) for key in APERTURES[aperture]}
    return Kinematics(
        velocity_dispersion=dispersion,
        velocity_dispersion_sigma=sigma,
        aperture=aperture,
        **_seeing_and_light(table),
        **sizes,
    )


def _seeing_and_light(table) -> dict:
    """The seeing, the effective radius and the light profile: every aperture's."""
    light = table.text("light_profile", "hernquist")
    if light not in _LIGHT:
        raise InputError(
            f"kinematics.light_profile must be one of {choices_text(_LIGHT)}, got {light!r}"
        )
    return {
        "seeing_fwhm": table.number("seeing_fwhm", lo=0.0, lo_open=True, hi=10.0),
        "effective_radius": table.number("effective_radius", lo=0.0, lo_open=True, hi=60.0),
        "light_profile": light,
    }


def _parse_rings(table) -> Kinematics:
    """``aperture = "annuli"``: lists of dispersions and errors, one per ring of bin_edges."""
    for key in ("aperture_width", "aperture_length", "aperture_radius"):
        if key in table.data:
            raise InputError(
                f"kinematics.{key} does not belong to an annuli aperture (it takes "
                f"bin_edges), got {table.data[key]!r}"
            )
    edges = table.numbers("bin_edges", lo=0.0, hi=60.0)
    if len(edges) < 2 or any(b <= a for a, b in zip(edges[:-1], edges[1:])):
        raise InputError(
            "kinematics.bin_edges must be at least two increasing radii (arcsec), "
            f"got {list(edges)!r}"
        )
    if len(edges) - 1 > MAX_BINS:
        raise InputError(
            f"kinematics.bin_edges must make at most {MAX_BINS} rings, got {len(edges) - 1}"
        )
    dispersion = table.numbers("velocity_dispersion", lo=0.0, lo_open=True, hi=1000.0)
    sigma = table.numbers("velocity_dispersion_sigma", lo=0.0, lo_open=True, hi=1000.0)
    for key, values in (("velocity_dispersion", dispersion), ("velocity_dispersion_sigma", sigma)):
        if len(values) != len(edges) - 1:
            raise InputError(
                f"kinematics.{key} must hold one number per ring of bin_edges "
                f"({len(edges) - 1}), got {len(values)}"
            )
    return Kinematics(
        velocity_dispersion=dispersion,
        velocity_dispersion_sigma=sigma,
        aperture="annuli",
        **_seeing_and_light(table),
        bin_edges=edges,
    )


def parse_line_of_sight(table) -> tuple[float, float]:
    """``[line_of_sight] kappa_ext = [mean, sigma]``: this lens's external-convergence prior."""
    raw = table.data.get("kappa_ext")
    mean, sigma = table.pair("kappa_ext", "[mean, sigma]")
    if not (-0.5 < mean < 0.5 and 0.0 <= sigma <= 0.5):
        raise InputError(
            "line_of_sight.kappa_ext must have -0.5 < mean < 0.5 and 0 <= sigma <= 0.5, "
            f"got {raw!r}"
        )
    return mean, sigma
