"""External shear."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.lensing.profiles.base import MassProfile, param

__all__ = ["ExternalShear"]


@dataclass(frozen=True, kw_only=True)
class ExternalShear(MassProfile):
    """External shear: ψ = −(γ/2) r² cos 2(φ − φγ), φ = atan2(x, y).

    With c = cos 2φγ and s = sin 2φγ this is ψ = −(γ/2)[(y² − x²)c + 2xy s], so
    ψ_xx − ψ_yy = 2γc and ψ_xy = −γs (CONVENTIONS.md). φγ points toward the
    perturbing mass: the tidal field of a mass along φγ (Kovner 1987, ApJ 312, 22;
    Keeton, Kochanek & Seljak 1997, ApJ 482, 604, eq. 2 in their own angle
    convention). Centred at the origin.
    """

    kind = "shear"
    centred = False
    strength: float = param(0.0, rule="shear", doc="γext")
    position_angle: float = param(0.0, doc="φγ, degrees East of North, toward the perturber")

    def _cs(self):
        phi = np.deg2rad(2.0 * np.asarray(self.position_angle, dtype=float))
        return self.strength * np.cos(phi), self.strength * np.sin(phi)

    def _local_convergence(self, x, y):
        return np.zeros_like(x * self.strength)

    def _local_deflection(self, x, y):
        gc, gs = self._cs()
        return gc * x - gs * y, -gs * x - gc * y

    def _local_potential(self, x, y):
        gc, gs = self._cs()
        return -0.5 * ((y * y - x * x) * gc + 2.0 * x * y * gs)

    def _local_deflection_potential(self, x, y):
        gc, gs = self._cs()
        ax = gc * x - gs * y
        ay = -gs * x - gc * y
        return ax, ay, 0.5 * (x * ax + y * ay)  # ψ is quadratic: ψ = θ·α/2

    def _local_hessian(self, x, y):
        gc, gs = self._cs()
        one = np.ones_like(x)
        return gc * one, -gs * one, -gc * one
