"""Isothermal multipole: angular structure of order m (boxy/disky isophotes, m = 3 lopsidedness)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.lensing.profiles.base import RADIUS_FLOOR, MassProfile, param

__all__ = ["IsothermalMultipole"]


@dataclass(frozen=True, kw_only=True)
class IsothermalMultipole(MassProfile):
    """κ = F(φ) / 2r with F(φ) = c cos mφ + s sin mφ; φ East of North about (x, y).

    A potential homogeneous of degree one in r, ψ = r G(φ), has ∇²ψ = (G + G'')/r
    (Laplacian in polar coordinates), so κ = F/2r is produced by

        ψ = r F(φ) / (1 − m²),

    the isothermal multipole used for the angular structure of lens galaxies (Evans &
    Witt 2003, MNRAS 345, 1351, "ψ = r F(θ)" lenses; Kochanek & Dalal 2004, ApJ 610,
    69 -- both from memory). Its gradient is α = (G x + G' y, G y − G' x)/r with
    G = F/(1 − m²) (∂φ/∂x = y/r², ∂φ/∂y = −x/r² for φ = atan2(x, y)), and since ψ is
    of degree one the Hessian is 2κ t tᵀ along the tangential direction t = (y, −x)/r
    (Euler's relation). Added to a lens of Einstein radius θE, c/θE and s/θE are the
    usual relative multipole amplitudes (a few 0.01 for real galaxies); the amplitude
    is √(c² + s²) and the orientation of the first maximum of κ is atan2(s, c)/m
    East of North.
    """

    kind = "multipole"
    order: float = param(4.0, rule="order", doc="m, an integer 2..10")
    cosine: float = param(0.0, doc="c, arcsec: κ ∝ c cos mφ")
    sine: float = param(0.0, doc="s, arcsec: κ ∝ s sin mφ")

    def _angles(self, x, y):
        r = np.maximum(np.hypot(x, y), RADIUS_FLOOR)
        phi = np.arctan2(x, y)
        m = np.asarray(self.order, dtype=float)
        f = self.cosine * np.cos(m * phi) + self.sine * np.sin(m * phi)
        df = m * (self.sine * np.cos(m * phi) - self.cosine * np.sin(m * phi))
        return r, m, f, df

    def _local_convergence(self, x, y):
        r, m, f, df = self._angles(x, y)
        return 0.5 * f / r

    def _local_deflection(self, x, y):
        r, m, f, df = self._angles(x, y)
        g, dg = f / (1.0 - m * m), df / (1.0 - m * m)
        return (g * x + dg * y) / r, (g * y - dg * x) / r

    def _local_potential(self, x, y):
        r, m, f, df = self._angles(x, y)
        return r * f / (1.0 - m * m)

    def _local_hessian(self, x, y):
        r, m, f, df = self._angles(x, y)
        two_kappa = f / r
        r2 = r * r
        return two_kappa * y * y / r2, -two_kappa * x * y / r2, two_kappa * x * x / r2
