"""Singular isothermal sphere."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.lensing.profiles.base import AxisymmetricProfile, param

__all__ = ["SingularIsothermalSphere"]


@dataclass(frozen=True, kw_only=True)
class SingularIsothermalSphere(AxisymmetricProfile):
    """SIS: ψ = θE r, κ = θE / 2r, deflection of length θE.

    Schneider, Ehlers & Falco 1992, *Gravitational Lenses*, eqs. (8.35)-(8.36).
    """

    kind = "SIS"
    singular_centre = True
    einstein_radius: float = param(rule="positive", doc="θE, arcsec")

    def _kappa_r(self, r):
        return 0.5 * self.einstein_radius / r

    def _alpha_r(self, r):
        return self.einstein_radius * np.ones_like(r)

    def _psi_r(self, r):
        return self.einstein_radius * r
