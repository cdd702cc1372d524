"""Uniform mass sheet."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.lensing.profiles.base import MassProfile, param

__all__ = ["MassSheet"]


@dataclass(frozen=True, kw_only=True)
class MassSheet(MassProfile):
    """Constant convergence: ψ = κext r²/2, α = κext θ.

    The mass-sheet transformation of Falco, Gorenstein & Shapiro 1985 (ApJ 289, L1).
    Centred at the origin: a shifted sheet only adds a constant deflection, which
    the source position absorbs.
    """

    kind = "sheet"
    centred = False
    toml_aliases = {"convergence": "convergence_value"}
    convergence_value: float = param(0.0, rule="sheet", doc="κext")

    def _local_convergence(self, x, y):
        return self.convergence_value * np.ones_like(x)

    def _local_deflection(self, x, y):
        return self.convergence_value * x, self.convergence_value * y

    def _local_potential(self, x, y):
        return 0.5 * self.convergence_value * (x * x + y * y)

    def _local_hessian(self, x, y):
        k = self.convergence_value * np.ones_like(x)
        return k, np.zeros_like(k), k
