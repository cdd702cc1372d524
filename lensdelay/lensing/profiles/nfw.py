"""Spherical Navarro-Frenk-White halo."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.lensing.profiles.base import AxisymmetricProfile, param

__all__ = ["NFWHalo"]


# Below |u − 1| < _NEAR_ONE the closed forms lose digits to cancellation; use the
# Taylor series about u = 1 instead (coefficients derived symbolically).
_NEAR_ONE = 1e-4


def _nfw_f(u):
    """F(u): arccosh(1/u)/√(1−u²) for u < 1, arccos(1/u)/√(u²−1) for u > 1, F(1) = 1."""
    u = np.asarray(u, dtype=float)
    lo = np.minimum(u, 1.0 - 0.5 * _NEAR_ONE)
    hi = np.maximum(u, 1.0 + 0.5 * _NEAR_ONE)
    below = np.arccosh(1.0 / lo) / np.sqrt(1.0 - lo * lo)
    above = np.arccos(1.0 / hi) / np.sqrt(hi * hi - 1.0)
    t = u - 1.0
    series = 1.0 - 2.0 * t / 3.0 + 7.0 * t * t / 15.0 - 12.0 * t**3 / 35.0
    return np.where(np.abs(t) < _NEAR_ONE, series, np.where(u < 1.0, below, above))


@dataclass(frozen=True, kw_only=True)
class NFWHalo(AxisymmetricProfile):
    """Spherical NFW: κ(u) = 2κs (1 − F(u)) / (u² − 1), u = r / rs.

    κs = ρs rs / Σcr. Wright & Brainerd 2000, ApJ 534, 34, eq. (11) for κ;
    Bartelmann 1996, A&A 313, 697, eqs. (3)-(4) and Golse & Kneib 2002, A&A 390,
    821, eqs. (7)-(9) (spherical limit) for the deflection
    α(r) = 4κs rs h(u)/u with h(u) = ln(u/2) + F(u), and the potential
    ψ = 2κs rs² [ln²(u/2) − arccosh²(1/u)] (u < 1), [ln²(u/2) + arccos²(1/u)] (u > 1).
    """

    kind = "NFW"
    kappa_s: float = param(rule="positive", doc="κs = ρs rs / Σcr")
    scale_radius: float = param(rule="positive", doc="rs, arcsec")

    def _kappa_r(self, r):
        u = r / self.scale_radius
        t = u - 1.0
        safe = np.where(np.abs(t) < _NEAR_ONE, 2.0, u)
        closed = (1.0 - _nfw_f(safe)) / (safe * safe - 1.0)
        series = 1.0 / 3.0 - 0.4 * t + 13.0 * t * t / 35.0
        return 2.0 * self.kappa_s * np.where(np.abs(t) < _NEAR_ONE, series, closed)

    def _alpha_r(self, r):
        u = r / self.scale_radius
        return 4.0 * self.kappa_s * self.scale_radius * (np.log(0.5 * u) + _nfw_f(u)) / u

    def _psi_r(self, r):
        u = r / self.scale_radius
        lo = np.minimum(u, 1.0)
        hi = np.maximum(u, 1.0)
        angle2 = np.where(u < 1.0, -(np.arccosh(1.0 / lo) ** 2), np.arccos(1.0 / hi) ** 2)
        return 2.0 * self.kappa_s * self.scale_radius**2 * (np.log(0.5 * u) ** 2 + angle2)
