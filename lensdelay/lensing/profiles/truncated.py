"""Cored, truncated isothermal ellipsoid (galaxies in clusters and groups)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.errors import InputError
from lensdelay.lensing.profiles.base import EllipticalProfile, param
from lensdelay.lensing.profiles.sie import IsothermalEllipsoid

__all__ = ["TruncatedIsothermal"]


@dataclass(frozen=True, kw_only=True)
class TruncatedIsothermal(EllipticalProfile):
    """κ = (θE/2) [1/√(s² + R²) − 1/√(a² + R²)], R² = q x'² + y'²/q.

    The cored isothermal ellipsoid of core s minus the one of core a > s with the same θE
    (Kassiola & Kovner 1993, ApJ 417, 450; Elíasdóttir et al. 2007, arXiv:0710.5636 --
    identifiers from memory): κ falls as R⁻¹ between s and a and as R⁻³ beyond a, so
    the total mass is finite, π θE (a − s) in units of Σcr·arcsec² for any q. Deflection,
    potential and Hessian are the differences of the two cored ellipsoids'
    (:class:`lensdelay.lensing.profiles.sie.IsothermalEllipsoid`, Keeton 2001 eqs. 33-34).
    ``einstein_radius`` is a normalisation, not the radius of a critical curve.
    """

    kind = "truncated_isothermal"
    einstein_radius: float = param(rule="positive", doc="θE normalisation, arcsec")
    core: float = param(0.0, rule="nonnegative", doc="core radius s, arcsec")
    cut: float = param(rule="positive", doc="truncation radius a > s, arcsec")

    def __post_init__(self) -> None:
        super().__post_init__()
        if not np.all(np.asarray(self.cut) > np.asarray(self.core)):
            raise InputError(
                f"{self.kind}.cut must be greater than core, got cut = "
                f"{np.min(self.cut):g}, core = {np.max(self.core):g}"
            )
        # the two cored ellipsoids are built (and checked) once: building them at every
        # evaluation cost more than evaluating them, with hundreds of cluster members
        common = dict(einstein_radius=self.einstein_radius, axis_ratio=self.axis_ratio)
        object.__setattr__(
            self,
            "_ellipsoids",
            (
                IsothermalEllipsoid(core=self.core, **common),
                IsothermalEllipsoid(core=self.cut, **common),
            ),
        )

    @property
    def singular_centre(self) -> bool:
        """Whether the centre is singular (no core)."""
        return bool(np.all(np.asarray(self.core) == 0))

    def _pair(self):
        return self._ellipsoids

    def _local_convergence(self, x, y):
        inner, outer = self._pair()
        return inner._local_convergence(x, y) - outer._local_convergence(x, y)

    def _local_deflection(self, x, y):
        inner, outer = self._pair()
        ax1, ay1 = inner._local_deflection(x, y)
        ax2, ay2 = outer._local_deflection(x, y)
        return ax1 - ax2, ay1 - ay2

    def _local_potential(self, x, y):
        inner, outer = self._pair()
        return inner._local_potential(x, y) - outer._local_potential(x, y)

    def _local_deflection_potential(self, x, y):
        inner, outer = self._pair()
        ax1, ay1, p1 = inner._local_deflection_potential(x, y)
        ax2, ay2, p2 = outer._local_deflection_potential(x, y)
        return ax1 - ax2, ay1 - ay2, p1 - p2

    def _local_hessian(self, x, y):
        inner, outer = self._pair()
        h1 = inner._local_hessian(x, y)
        h2 = outer._local_hessian(x, y)
        return tuple(a - b for a, b in zip(h1, h2))
