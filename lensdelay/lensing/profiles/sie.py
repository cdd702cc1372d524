"""Singular or cored isothermal ellipsoid."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.lensing.profiles.base import RADIUS_FLOOR, EllipticalProfile, param

__all__ = ["IsothermalEllipsoid"]


#: Below this ellipticity e = sqrt(1 − q²), arctan(e z)/e and arctanh(e z)/e are
#: taken from their Taylor series, so the profile is exact and finite at q → 1.
_ROUND = 1e-4


def _atan_over(e, z):
    """arctan(e·z)/e, continuous at e → 0."""
    if np.ndim(e) == 0:  # one model: choose the branch once, not per point
        return z - (e * e) * (z * z * z) / 3.0 if e < _ROUND else np.arctan(e * z) / e
    small = e < _ROUND
    if not np.any(small):  # many models, none round: one branch (the costly one) only
        return np.arctan(e * z) / e
    es = np.where(small, 1.0, e)
    return np.where(small, z - (e * e) * (z * z * z) / 3.0, np.arctan(es * z) / es)


def _atanh_over(e, z):
    """arctanh(e·z)/e, continuous at e → 0."""
    if np.ndim(e) == 0:
        return z + (e * e) * (z * z * z) / 3.0 if e < _ROUND else np.arctanh(e * z) / e
    small = e < _ROUND
    if not np.any(small):
        return np.arctanh(e * z) / e
    es = np.where(small, 1.0, e)
    return np.where(small, z + (e * e) * (z * z * z) / 3.0, np.arctanh(es * z) / es)


@dataclass(frozen=True, kw_only=True)
class IsothermalEllipsoid(EllipticalProfile):
    """SIE with optional core: κ = θE / (2 sqrt(s² + R²)), R² = q x'² + y'²/q.

    Formulas from Keeton 2001, "A catalog of mass models for gravitational lensing"
    (astro-ph/0102341), Sect. 3.1, eqs. (33)-(34) (potential and deflection of the
    softened isothermal ellipsoid; Kormann, Schneider & Bartelmann 1994, A&A 284,
    285, for s = 0): with ψ_K = sqrt(q²(s_K² + x'²) + y'²) and e = sqrt(1 − q²),

        α_x' = (b/e) arctan(e x' / (ψ_K + s_K)),
        α_y' = (b/e) arctanh(e y' / (ψ_K + q² s_K)),

    for κ = b / (2 ψ_K). Our normalisation maps to b = θE √q and s_K = s/√q, which
    makes the mean convergence inside R = θE exactly 1 for s = 0 and reduces to the
    SIS at q = 1 (both checked in the tests). The prefactor is written for κ exactly
    as above (catalogues differ by a factor q in how b is defined). The Hessian is
    the analytic derivative of the deflection.
    """

    kind = "SIE"
    einstein_radius: float = param(rule="positive", doc="θE, arcsec (a normalisation if cored)")
    core: float = param(0.0, rule="nonnegative", doc="core radius s, arcsec")

    @property
    def singular_centre(self) -> bool:  # a cored SIE has a (faint) central image
        """Whether the centre is singular (no core)."""
        return bool(np.all(np.asarray(self.core) == 0))

    def _keeton(self, x, y):
        q = np.asarray(self.axis_ratio, dtype=float)
        b = self.einstein_radius * np.sqrt(q)
        s = self.core / np.sqrt(q)
        e = np.sqrt(np.maximum(1.0 - q * q, 0.0))
        if np.ndim(s) == 0 and s == 0:  # singular: fewer array passes on the hot path
            psi = np.maximum(np.sqrt((q * q) * (x * x) + y * y), RADIUS_FLOOR)
        else:
            psi = np.maximum(np.sqrt(q * q * (s * s + x * x) + y * y), RADIUS_FLOOR)
        return q, b, s, e, psi

    def _local_convergence(self, x, y):
        q, b, s, e, psi = self._keeton(x, y)
        return 0.5 * b / psi

    def _local_deflection(self, x, y):
        q, b, s, e, psi = self._keeton(x, y)
        ax = b * _atan_over(e, x / (psi + s))
        ay = b * _atanh_over(e, y / (psi + q * q * s))
        return ax, ay

    def _local_potential(self, x, y):
        return self._local_deflection_potential(x, y)[2]

    def _local_deflection_potential(self, x, y):
        q, b, s, e, psi = self._keeton(x, y)
        if np.ndim(s) == 0 and s == 0:
            ax = b * _atan_over(e, x / psi)
            ay = b * _atanh_over(e, y / psi)
            return ax, ay, x * ax + y * ay
        ax = b * _atan_over(e, x / (psi + s))
        ay = b * _atanh_over(e, y / (psi + q * q * s))
        pot = x * ax + y * ay
        # Core term of Keeton's eq. (33); it vanishes (as s ln s) when s -> 0.
        ss = np.where(s > 0, s, 1.0)
        core_term = (
            -b * ss * (0.5 * np.log((psi + ss) ** 2 + e * e * x * x) - np.log((1.0 + q) * ss))
        )
        return ax, ay, pot + np.where(s > 0, core_term, 0.0)

    def _local_hessian(self, x, y):
        q, b, s, e, psi = self._keeton(x, y)
        d1 = psi * ((psi + s) ** 2 + e * e * x * x)
        d2 = psi * ((psi + q * q * s) ** 2 - e * e * y * y)
        hxx = b * (psi * (psi + s) - q * q * x * x) / d1
        hyy = b * (psi * (psi + q * q * s) - y * y) / d2
        hxy = -b * x * y / d1
        return hxx, hxy, hyy
