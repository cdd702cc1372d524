"""Cosmology specifications: what a scenario or a user names, turned into astropy objects.

A ``[cosmology]`` table with ``H0`` and ``Om0`` means ``FlatLambdaCDM(H0, Om0, Tcmb0=0)``;
``name = "Planck18"`` (etc.) means that astropy realisation; any astropy FLRW class can
be asked for by name. Distances themselves are in :mod:`lensdelay.lensing.distances`.
"""

from __future__ import annotations

import numpy as np
from astropy import units as u
from astropy.cosmology import FLRW, FlatLambdaCDM

from lensdelay.errors import InputError, choices_text

__all__ = [
    "DEFAULT_COSMOLOGY",
    "NAMED_REALISATIONS",
    "cosmology_from_spec",
    "COSMOLOGY_CLASSES",
    "cosmology_from_class",
    "describe_cosmology",
]


#: The cosmology used when a scenario names none: flat ΛCDM with H0 = 70 km/s/Mpc,
#: Om0 = 0.3 and no radiation (a round "concordance" choice, common practice).
DEFAULT_COSMOLOGY = FlatLambdaCDM(H0=70.0, Om0=0.3, Tcmb0=0.0, name="flat-LCDM-70-0.3")

NAMED_REALISATIONS = ("Planck18", "Planck15", "Planck13", "WMAP9", "WMAP7", "WMAP5")


def cosmology_from_spec(spec: dict | None) -> FLRW:
    """Build an astropy cosmology from a scenario's ``[cosmology]`` table.

    Parameters
    ----------
    spec : dict or None
        ``{"H0": ..., "Om0": ...}`` for ``FlatLambdaCDM(H0, Om0, Tcmb0=0)``, or
        ``{"name": "Planck18"}`` for an astropy realisation; ``None`` gives
        :data:`DEFAULT_COSMOLOGY`.

    Returns
    -------
    astropy.cosmology.FLRW
    """
    if not spec:
        return DEFAULT_COSMOLOGY
    if "name" in spec:
        name = spec["name"]
        if name not in NAMED_REALISATIONS:
            raise InputError(
                f"cosmology.name must be one of {choices_text(NAMED_REALISATIONS)}, got {name!r}"
            )
        from astropy import cosmology as _cosmo

        return getattr(_cosmo, name)
    try:
        h0 = float(spec["H0"])
        om0 = float(spec["Om0"])
    except KeyError as err:
        raise InputError(
            f"cosmology needs both 'H0' and 'Om0' (or 'name'), missing {err.args[0]!r}"
        ) from err
    if not (np.isfinite(h0) and 10.0 <= h0 <= 200.0):
        raise InputError(f"cosmology.H0 must be between 10 and 200 km/s/Mpc, got {h0}")
    if not (np.isfinite(om0) and 0.0 < om0 <= 1.5):
        raise InputError(f"cosmology.Om0 must be in (0, 1.5], got {om0}")
    return FlatLambdaCDM(H0=h0, Om0=om0, Tcmb0=0.0)


COSMOLOGY_CLASSES = ("FlatLambdaCDM", "LambdaCDM", "FlatwCDM", "wCDM", "Flatw0waCDM", "w0waCDM")


def cosmology_from_class(name: str, params: dict, base: FLRW) -> FLRW:
    """An astropy cosmology of class ``name``; H0 and Om0 default to ``base``'s.

    ``params`` are the class's own keyword arguments (e.g. ``w0``, ``wa``, ``Ode0``);
    radiation is off (``Tcmb0 = 0``) unless given, so delays stay exactly ∝ 1/H0.
    """
    if name not in COSMOLOGY_CLASSES:
        raise InputError(
            f"cosmology_class must be one of {choices_text(COSMOLOGY_CLASSES)}, got {name!r}"
        )
    from astropy import cosmology as _cosmo

    cls = getattr(_cosmo, name)
    kwargs = {"H0": float(base.H0.value), "Om0": float(base.Om0), "Tcmb0": 0.0}
    if "Ode0" in cls.__init__.__code__.co_varnames and "Ode0" not in params:
        kwargs["Ode0"] = float(getattr(base, "Ode0", 1.0 - base.Om0))
    kwargs.update(params)
    try:
        return cls(**kwargs)
    except (TypeError, ValueError) as err:
        raise InputError(
            f"class_params for {name} must be keyword arguments of that class, got {params!r} "
            f"({err})"
        ) from err


def describe_cosmology(cosmo: FLRW) -> dict:
    """A JSON-ready description of a cosmology (class, name, H0, Om0, ...)."""
    out = {
        "class": type(cosmo).__name__,
        "name": cosmo.name,
        "H0": float(cosmo.H0.to_value(u.km / u.s / u.Mpc)),
        "Om0": float(cosmo.Om0),
    }
    for attr in ("Ode0", "w0", "wa"):
        if hasattr(cosmo, attr):
            out[attr] = float(getattr(cosmo, attr))
    out["Tcmb0_K"] = float(cosmo.Tcmb0.to_value(u.K))
    return out
