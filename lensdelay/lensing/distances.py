"""Distances for lensing, built on :mod:`astropy.cosmology`.

Everything here is an angular-diameter distance from an astropy cosmology object; we
write no distance integral of our own. Two things are added on top:

* :class:`LensDistances` bundles the distances a lens needs -- ``D_l``, ``D_s``,
  ``D_ls``, the time-delay distance ``D_dt = (1 + z_l) D_l D_s / D_ls`` and the
  deflection scaling between source redshifts -- for one lens redshift.
* :class:`DelayDistanceTable`, a fast path for posterior samples of flat ΛCDM:
  without radiation every distance is exactly ``c/H0`` times a function of
  ``(Om0, z)``, so ``D_dt(H0, Om0) = (H_ref/H0) · D_dt(H_ref, Om0)``, and the ``Om0``
  dependence is interpolated from astropy values with a measured error bound.

References
----------
Hogg, D. W. 1999, "Distance measures in cosmology", astro-ph/9905116 (eqs. 16, 19).
Schneider, Ehlers & Falco 1992, *Gravitational Lenses*, Springer, eq. (5.45) for the
time-delay distance.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from astropy import constants as const
from astropy import units as u
from astropy.cosmology import FLRW, FlatLambdaCDM
from scipy.interpolate import CubicSpline

from lensdelay.errors import InputError

__all__ = [
    "DAYS_PER_MPC_ARCSEC2",
    "LensDistances",
    "DelayDistanceTable",
    "time_dilation",
]


#: Days of delay per (Mpc of D_dt) per (arcsec² of Fermat potential):
#: (1 Mpc / c) · (π / 648000)², from the definition t = D_dt τ / c.
DAYS_PER_MPC_ARCSEC2: float = float(
    (1.0 * u.Mpc / const.c * (1.0 * u.arcsec).to_value(u.rad) ** 2).to_value(u.day)
)


@dataclass(frozen=True)
class LensDistances:
    """The angular-diameter distances of one lens plane.

    Parameters
    ----------
    cosmology : astropy.cosmology.FLRW
        Any astropy cosmology.
    lens_redshift : float
        z_l.
    reference_source_redshift : float
        The source redshift at which mass-model parameters are normalised.
    """

    cosmology: FLRW
    lens_redshift: float
    reference_source_redshift: float
    _ref_ratio: float = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self._check_source(self.reference_source_redshift, "reference_source_redshift")
        if not self.lens_redshift > 0:
            raise InputError(f"lens redshift must be > 0, got {self.lens_redshift}")
        object.__setattr__(self, "_ref_ratio", self.distance_ratio(self.reference_source_redshift))

    def _check_source(self, z_s: float, name: str = "source redshift") -> None:
        if not (np.isfinite(z_s) and z_s > self.lens_redshift):
            raise InputError(
                f"{name} must be greater than the lens redshift {self.lens_redshift}, got {z_s}"
            )

    @property
    def lens_distance(self) -> u.Quantity:
        """D_l, the angular-diameter distance to the lens."""
        return self.cosmology.angular_diameter_distance(self.lens_redshift)

    def source_distance(self, z_s: float) -> u.Quantity:
        """D_s, the angular-diameter distance to a source at ``z_s``."""
        self._check_source(z_s)
        return self.cosmology.angular_diameter_distance(z_s)

    def lens_source_distance(self, z_s: float) -> u.Quantity:
        """D_ls, the angular-diameter distance from the lens to a source at ``z_s``."""
        self._check_source(z_s)
        return self.cosmology.angular_diameter_distance(self.lens_redshift, z_s)

    def distance_ratio(self, z_s: float) -> float:
        """D_ls / D_s at ``z_s`` (the lensing efficiency)."""
        return float(self.lens_source_distance(z_s) / self.source_distance(z_s))

    def deflection_scale(self, z_s: float) -> float:
        """Factor multiplying deflection and potential for a family at ``z_s``.

        ``(D_ls/D_s)(z_s) / (D_ls/D_s)(z_ref)``; 1 at the reference redshift.
        """
        return self.distance_ratio(z_s) / self._ref_ratio

    def time_delay_distance(self, z_s: float) -> u.Quantity:
        """D_dt = (1 + z_l) D_l D_s / D_ls for a source at ``z_s`` (SEF92 eq. 5.45)."""
        d_l = self.lens_distance
        return (
            (1.0 + self.lens_redshift)
            * d_l
            * self.source_distance(z_s)
            / self.lens_source_distance(z_s)
        ).to(u.Mpc)

    def days_per_arcsec2(self, z_s: float) -> float:
        """Days of delay per arcsec² of Fermat-potential difference at ``z_s``."""
        return float(self.time_delay_distance(z_s).to_value(u.Mpc)) * DAYS_PER_MPC_ARCSEC2

    def scalings(self, z_s) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`deflection_scale` and :meth:`days_per_arcsec2` for an array of redshifts.

        The same formulas in one vectorised astropy call each (for the splines over a
        free family redshift).
        """
        z_s = np.atleast_1d(np.asarray(z_s, dtype=float))
        if not np.all(np.isfinite(z_s) & (z_s > self.lens_redshift)):
            self._check_source(float(z_s[~(np.isfinite(z_s) & (z_s > self.lens_redshift))][0]))
        d_s = self.cosmology.angular_diameter_distance(z_s).to_value(u.Mpc)
        d_ls = self.cosmology.angular_diameter_distance(
            np.full_like(z_s, self.lens_redshift), z_s
        ).to_value(u.Mpc)
        d_l = self.lens_distance.to_value(u.Mpc)
        scale = (d_ls / d_s) / self._ref_ratio
        days = (1.0 + self.lens_redshift) * d_l * d_s / d_ls * DAYS_PER_MPC_ARCSEC2
        return scale, days


class DelayDistanceTable:
    """Fast D_dt for arrays of (H0, Om0) in flat ΛCDM without radiation.

    The 1/H0 dependence is exact (no radiation, so E(z) does not depend on H0);
    the Om0 dependence at fixed H_ref is a cubic spline through astropy values.
    :attr:`max_relative_error` is measured against astropy at the midpoints between
    nodes (where a spline's error peaks) when the table is built.

    Parameters
    ----------
    lens_redshift, source_redshift : float
    om0_range : (float, float)
        Range of Om0 covered; values outside raise :class:`InputError`.
    nodes : int
        Number of spline nodes.
    """

    H_REF = 70.0

    def __init__(
        self,
        lens_redshift: float,
        source_redshift: float,
        om0_range: tuple[float, float] = (0.05, 0.95),
        nodes: int = 121,
    ):
        if not source_redshift > lens_redshift:
            raise InputError(
                f"source redshift must be greater than the lens redshift {lens_redshift}, "
                f"got {source_redshift}"
            )
        self.lens_redshift = float(lens_redshift)
        self.source_redshift = float(source_redshift)
        self.om0_range = (float(om0_range[0]), float(om0_range[1]))
        grid = np.linspace(*self.om0_range, nodes)
        self._spline = CubicSpline(grid, self._astropy_ddt(self.H_REF, grid))
        mid = 0.5 * (grid[1:] + grid[:-1])
        exact = self._astropy_ddt(self.H_REF, mid)
        self.max_relative_error = float(np.max(np.abs(self._spline(mid) / exact - 1.0)))

    def _astropy_ddt(self, h0: float, om0s: np.ndarray) -> np.ndarray:
        out = np.empty(len(om0s))
        for i, om in enumerate(om0s):
            lens = LensDistances(
                FlatLambdaCDM(H0=h0, Om0=om, Tcmb0=0.0), self.lens_redshift, self.source_redshift
            )
            out[i] = lens.time_delay_distance(self.source_redshift).to_value(u.Mpc)
        return out

    def __call__(self, h0, om0) -> np.ndarray:
        """D_dt in Mpc for arrays (broadcast) of H0 [km/s/Mpc] and Om0."""
        h0 = np.asarray(h0, dtype=float)
        om0 = np.asarray(om0, dtype=float)
        lo, hi = self.om0_range
        if np.any((om0 < lo) | (om0 > hi)):
            raise InputError(
                f"Om0 must lie in [{lo}, {hi}] for the fast D_dt table, "
                f"got values from {om0.min()} to {om0.max()}"
            )
        return self._spline(om0) * (self.H_REF / h0)


def time_dilation(velocity_kms) -> np.ndarray:
    """Special-relativistic γ − 1 for a speed in km/s (a clock's fractional slowing)."""
    beta = np.asarray(velocity_kms, dtype=float) / const.c.to_value(u.km / u.s)
    return 1.0 / np.sqrt(1.0 - beta * beta) - 1.0
