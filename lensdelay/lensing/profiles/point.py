"""Point mass."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.lensing.profiles.base import AxisymmetricProfile, param

__all__ = ["PointMass"]


@dataclass(frozen=True, kw_only=True)
class PointMass(AxisymmetricProfile):
    """Point mass: ψ = θE² ln r.

    Schneider, Ehlers & Falco 1992, *Gravitational Lenses*, eqs. (8.32)-(8.34):
    α = θE²/r, κ = 0 away from the centre (all mass at r = 0).
    """

    kind = "point"
    singular_centre = True
    einstein_radius: float = param(rule="positive", doc="θE, arcsec")

    def _kappa_r(self, r):
        return np.zeros_like(r * self.einstein_radius)

    def _alpha_r(self, r):
        return self.einstein_radius**2 / r

    def _psi_r(self, r):
        return self.einstein_radius**2 * np.log(r)
