"""Elliptical power-law mass distribution."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.errors import InputError
from lensdelay.lensing.profiles.base import RADIUS_FLOOR, EllipticalProfile, param

__all__ = ["MIN_AXIS_RATIO", "EllipticalPowerLaw"]


#: Smallest axis ratio of the power law (see the check in ``__post_init__``).
MIN_AXIS_RATIO = 0.01


@dataclass(frozen=True, kw_only=True)
class EllipticalPowerLaw(EllipticalProfile):
    """κ = (3 − γ)/2 · (θE / R)^(γ − 1), R² = q x'² + y'²/q.

    Tessore & Metcalf 2015, A&A 580, A79, "The elliptical power law profile lens":
    with t = γ − 1, R_TM = sqrt(q² x'² + y'²), b = θE √q and elliptical angle φ
    (q x' = R_TM cos φ, y' = R_TM sin φ) the complex deflection is their eq. (13),

        α = 2b/(1+q) (b/R_TM)^(t−1) e^{iφ} ₂F₁(1, t/2; 2 − t/2; −f e^{2iφ}),

    f = (1 − q)/(1 + q), summed with their recurrence (eqs. 26-27:
    Ω₀ = e^{iφ}, Ω_n = −f (2n − 2 + t)/(2n + 2 − t) e^{2iφ} Ω_{n−1}); the potential
    is ψ = (x'α_x + y'α_y)/(2 − t) (their eq. 15). ψ is homogeneous of degree 2 − t,
    so the Hessian follows exactly from κ and α via Euler's relation
    x ψ_xx + y ψ_xy = (1 − t) α_x, x ψ_xy + y ψ_yy = (1 − t) α_y, ψ_xx + ψ_yy = 2κ.
    (Equation numbers from memory.) γ = 2 gives the SIE, q = 1 the power-law sphere.
    """

    kind = "power_law"
    einstein_radius: float = param(rule="positive", doc="θE, arcsec")
    slope: float = param(2.0, rule="slope", doc="3-D density slope γ (2 = isothermal)")

    def __post_init__(self) -> None:
        super().__post_init__()
        # the series converges as f^n with f = (1 − q)/(1 + q): ~1,800 terms at q = 0.01,
        # millions at q = 1e-6; flatter than 1:100 is no galaxy anyway
        if not np.all(np.asarray(self.axis_ratio) >= MIN_AXIS_RATIO):
            raise InputError(
                f"{self.kind}.axis_ratio must be in [{MIN_AXIS_RATIO:g}, 1] (the deflection "
                f"series converges too slowly below), got {np.min(self.axis_ratio):g}"
            )

    @property
    def singular_centre(self) -> bool:  # α diverges or jumps at the centre for γ >= 2
        """Whether α diverges or jumps at the centre (γ ≥ 2)."""
        return bool(np.all(np.asarray(self.slope) >= 2.0))

    def _setup(self, x, y):
        q = np.asarray(self.axis_ratio, dtype=float)
        t = np.asarray(self.slope, dtype=float) - 1.0
        b = self.einstein_radius * np.sqrt(q)
        radius = np.maximum(np.sqrt(q * q * x * x + y * y), RADIUS_FLOOR)
        return q, t, b, radius

    def _local_convergence(self, x, y):
        q, t, b, radius = self._setup(x, y)
        return 0.5 * (2.0 - t) * (b / radius) ** t

    def _local_deflection(self, x, y):
        q, t, b, radius = self._setup(x, y)
        f = (1.0 - q) / (1.0 + q)
        phase = (q * x + 1j * y) / radius  # e^{iφ}
        rot2 = phase * phase  # e^{2iφ}
        term = phase
        total = phase
        # Terms shrink at least as f^n; stop when the largest f reaches 1e-16.
        n_terms = int(np.ceil(np.log(1e-16) / np.log(max(float(np.max(f)), 1e-16)))) + 1
        for n in range(1, max(n_terms, 1) + 1):
            term = -f * (2 * n - 2 + t) / (2 * n + 2 - t) * rot2 * term
            total = total + term
        alpha = 2.0 * b / (1.0 + q) * (b / radius) ** (t - 1.0) * total
        return alpha.real, alpha.imag

    def _local_potential(self, x, y):
        q, t, b, radius = self._setup(x, y)
        ax, ay = self._local_deflection(x, y)
        return (x * ax + y * ay) / (2.0 - t)

    def _local_hessian(self, x, y):
        q, t, b, radius = self._setup(x, y)
        ax, ay = self._local_deflection(x, y)
        two_kappa = (2.0 - t) * (b / radius) ** t
        p, qq = (1.0 - t) * ax, (1.0 - t) * ay
        r2 = np.maximum(x * x + y * y, RADIUS_FLOOR**2)
        hxx = (p * x - qq * y + y * y * two_kappa) / r2
        hxy = (qq * x + p * y - x * y * two_kappa) / r2
        hyy = (x * x * two_kappa + qq * y - p * x) / r2
        return hxx, hxy, hyy
