"""A lens: the sum of its mass components, seen by a family at one source redshift.

All mass parameters are defined at the reference source redshift. A family whose
source sits elsewhere sees deflection, potential and Hessian multiplied by its
``scale`` = (D_ls/D_s)(z_s) / (D_ls/D_s)(z_ref) (see
:meth:`lensdelay.cosmology.LensDistances.deflection_scale`).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .profiles import MassProfile

PARITIES = ("minimum", "saddle", "maximum")


@dataclass(frozen=True)
class Lens:
    """A composite lens: the sum of its components.

    Parameters
    ----------
    components : tuple of MassProfile
        Each with its own centre; shear and sheet are about the origin.
    """

    components: tuple[MassProfile, ...]

    def __post_init__(self) -> None:
        object.__setattr__(self, "components", tuple(self.components))

    # -- sums over components -----------------------------------------------------
    def convergence(self, x, y, scale=1.0) -> np.ndarray:
        """κ at (x, y) for a family with deflection ``scale``."""
        return scale * sum(c.convergence(x, y) for c in self.components)

    def deflection(self, x, y, scale=1.0) -> tuple[np.ndarray, np.ndarray]:
        """(α_x, α_y) in arcsec."""
        ax = ay = 0.0
        for c in self.components:
            dx, dy = c.deflection(x, y)
            ax = ax + dx
            ay = ay + dy
        return scale * ax, scale * ay

    def deflection_and_potential(self, x, y, scale=1.0):
        """(α_x, α_y, ψ) in one pass over the components."""
        ax = ay = pot = None
        for c in self.components:
            dx, dy, p = c.deflection_and_potential(x, y)
            if ax is None:
                ax, ay, pot = dx, dy, p
            else:
                ax, ay, pot = ax + dx, ay + dy, pot + p
        if np.ndim(scale) == 0 and scale == 1.0:
            return ax, ay, pot
        return scale * ax, scale * ay, scale * pot

    def potential(self, x, y, scale=1.0) -> np.ndarray:
        """ψ in arcsec²."""
        return scale * sum(c.potential(x, y) for c in self.components)

    def hessian(self, x, y, scale=1.0):
        """(ψ_xx, ψ_xy, ψ_yy)."""
        hxx = hxy = hyy = 0.0
        for c in self.components:
            a, b, d = c.hessian(x, y)
            hxx, hxy, hyy = hxx + a, hxy + b, hyy + d
        return scale * hxx, scale * hxy, scale * hyy

    # -- derived quantities -------------------------------------------------------
    def source_position(self, x, y, scale=1.0):
        """β = θ − α(θ): the lens equation."""
        ax, ay = self.deflection(x, y, scale)
        return np.asarray(x) - ax, np.asarray(y) - ay

    def fermat_potential(self, x, y, beta_x, beta_y, scale=1.0) -> np.ndarray:
        """τ(θ) = |θ − β|²/2 − ψ(θ), arcsec²."""
        return (0.5 * ((np.asarray(x) - beta_x) ** 2 + (np.asarray(y) - beta_y) ** 2)
                - self.potential(x, y, scale))

    def jacobian(self, x, y, scale=1.0):
        """Entries (a11, a12, a22) of A = I − ∂α/∂θ."""
        hxx, hxy, hyy = self.hessian(x, y, scale)
        return 1.0 - hxx, -hxy, 1.0 - hyy

    def jacobian_determinant(self, x, y, scale=1.0) -> np.ndarray:
        """det A; zero on the critical curves."""
        a11, a12, a22 = self.jacobian(x, y, scale)
        return a11 * a22 - a12 * a12

    def magnification(self, x, y, scale=1.0) -> np.ndarray:
        """Signed magnification 1/det A (negative for saddle points)."""
        return 1.0 / self.jacobian_determinant(x, y, scale)

    def parity(self, x, y, scale=1.0) -> np.ndarray:
        """'minimum', 'saddle' or 'maximum' of the Fermat potential at each point."""
        return np.asarray(PARITIES)[self.parity_code(x, y, scale)]

    def parity_code(self, x, y, scale=1.0) -> np.ndarray:
        """0 = minimum, 1 = saddle, 2 = maximum (det A and trace A of the Hessian of τ)."""
        a11, a12, a22 = self.jacobian(x, y, scale)
        det = a11 * a22 - a12 * a12
        return np.where(det < 0, 1, np.where(a11 + a22 > 0, 0, 2))

    def centres(self, singular: bool | None = None) -> list[tuple[float, float]]:
        """Centres of the centred components (optionally only (non-)singular ones)."""
        out = []
        for c in self.components:
            if not c.centred:
                continue
            if singular is None or bool(c.singular_centre) == singular:
                out.append((float(np.mean(c.x)), float(np.mean(c.y))))
        return out
