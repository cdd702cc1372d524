"""Relative arrival times from Fermat potentials and the time-delay distance.

t(θ) = (D_dt / c) · τ(θ) · (π/648000)², τ = (θ − β)²/2 − ψ(θ) (Schneider, Ehlers &
Falco 1992, eq. 5.45; CONVENTIONS.md). A delay Δt_i = t_i − t_ref is positive when
image i shows an event *later* than the reference image. An external convergence
κext outside the model multiplies every delay by (1 − κext) (Falco, Gorenstein &
Shapiro 1985).
"""

from __future__ import annotations

import numpy as np

from lensdelay.lensing.distances import DAYS_PER_MPC_ARCSEC2

__all__ = [
    "fermat_to_days",
    "delays_relative_to",
    "delay_scale",
    "fermat_difference_to_days",
]


def fermat_to_days(fermat_arcsec2, time_delay_distance_mpc, kappa_ext=0.0):
    """Arrival time in days for Fermat potential(s) in arcsec² and D_dt in Mpc."""
    return (
        np.asarray(fermat_arcsec2)
        * np.asarray(time_delay_distance_mpc)
        * DAYS_PER_MPC_ARCSEC2
        * (1.0 - np.asarray(kappa_ext))
    )


def delays_relative_to(arrival_days, reference_index: int, axis: int = -1):
    """Δt_i = t_i − t_ref along ``axis``."""
    arrival_days = np.asarray(arrival_days)
    ref = np.take(arrival_days, [reference_index], axis=axis)
    return arrival_days - ref


def delay_scale(h0, h0_ref: float, kappa_ext=0.0):
    """(H_ref/H0)(1 − κ_ext): what multiplies a delay computed at the reference cosmology.

    D_dt ∝ 1/H0 exactly for a cosmology without radiation (and to ~1e-4 with it); an
    external convergence outside the model multiplies every delay by (1 − κ_ext)
    (Falco, Gorenstein & Shapiro 1985). This is the one place the rescaling is written.
    """
    return (h0_ref / np.asarray(h0, dtype=float)) * (1.0 - np.asarray(kappa_ext, dtype=float))


def fermat_difference_to_days(fermat_arcsec2, days_per_arcsec2: float, scale=1.0):
    """Days of delay for Fermat-potential differences (arcsec²).

    ``days_per_arcsec2`` is D_dt/c in days per arcsec² at the reference cosmology
    (:meth:`lensdelay.lensing.distances.LensDistances.days_per_arcsec2`); ``scale`` is
    :func:`delay_scale` (1 at the reference cosmology with no external convergence).
    """
    return np.asarray(fermat_arcsec2) * days_per_arcsec2 * np.asarray(scale)
