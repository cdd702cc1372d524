"""Maps of a lens on a grid: convergence, shear, magnification, potential, deflection.

Every quantity follows from the lens's deflection, potential and Hessian of ψ
(Schneider, Ehlers & Falco 1992, "Gravitational Lenses", §5.1): κ = (ψ_xx + ψ_yy)/2,
γ = sqrt(((ψ_xx − ψ_yy)/2)² + ψ_xy²), μ = 1/[(1 − κ)² − γ²], all for a family whose
deflection is ``scale`` times the reference one (CONVENTIONS.md, "Source redshifts").
"""

from __future__ import annotations

import numpy as np

__all__ = ["LENS_QUANTITIES", "lens_maps"]


#: The maps a lens gives, with their units (FITS BUNIT strings) and meanings.
LENS_QUANTITIES = {
    "convergence": ("", "convergence kappa (Sigma / Sigma_cr)"),
    "shear": ("", "shear magnitude gamma"),
    "magnification": ("", "signed magnification 1/det A"),
    "potential": ("arcsec2", "lensing potential psi"),
    "deflection_x": ("arcsec", "deflection alpha_x (toward East)"),
    "deflection_y": ("arcsec", "deflection alpha_y (toward North)"),
}


def lens_maps(lens, x, y, scale=1.0) -> dict[str, np.ndarray]:
    """Every quantity of :data:`LENS_QUANTITIES` at points (x, y) (arcsec).

    Parameters
    ----------
    lens : Lens
        Its parameters may be arrays that broadcast against ``x``, ``y`` (many models).
    x, y : ndarray
        Positions, arcsec (x East, y North).
    scale : float
        Deflection scale of the source redshift relative to the reference one.

    Returns
    -------
    dict
        Arrays of the broadcast shape, keyed by quantity.
    """
    with np.errstate(all="ignore"):
        ax, ay, pot = lens.deflection_and_potential(x, y, scale)
        hxx, hxy, hyy = lens.hessian(x, y, scale)
        kappa = 0.5 * (hxx + hyy)
        gamma = np.hypot(0.5 * (hxx - hyy), hxy)
        det = (1.0 - kappa) ** 2 - gamma**2
        return {
            "convergence": kappa,
            "shear": gamma,
            "magnification": 1.0 / det,
            "potential": pot,
            "deflection_x": ax,
            "deflection_y": ay,
        }
