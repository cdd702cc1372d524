"""Is a best fit acceptable, and what to do when it is not.

A fit is judged by the χ² of its constraints (image positions, Gaussian priors, lens
light, timing rows) against the χ² distribution with dof = constraints − free
parameters: the p-value is P(χ²_dof ≥ χ²_min). When p < :data:`POOR_FIT_P` the
recipe cannot reproduce the images to within their stated errors: something it lacks
(a satellite, angular structure, a different radial profile) moves them. Sampling such a
fit with the stated errors would give windows as narrow as those of a perfect fit, so
the image positions are given a model error instead (the rule, stated in docs/statistics.md):

    every image's σ becomes sqrt(σ² + f²), with f the one value for which the
    positions' χ² at the best fit comes down to
    min(d · n_position / n_constraints, χ²_position · d / χ²),  d = max(dof, 1),

i.e. to their share of the degrees of freedom, or lower when the other terms (priors,
lens light) carry most of the misfit, so that the refit can relax them, and the model is
fitted again with these errors (while the refit is still poor, up to four rounds, each
adding in quadrature the floor the new best fit needs) and sampled (common practice: an astrometric
"model-error" floor, cf. the few-mas floors of time-delay lens modelling). A fit with
no degrees of freedom left is judged as if it had one (an exactly constrained model
should reproduce its data: χ² above the 99th percentile of χ²₁, 6.6, is poor).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

__all__ = [
    "POOR_FIT_P",
    "fit_p_value",
    "judged_p_value",
    "ModelError",
    "position_floor",
    "largest_residual",
]


#: p-value below which a fit is poor and its image positions get a model-error floor.
POOR_FIT_P = 0.01


def fit_p_value(chi2: float, dof: int) -> float | None:
    """P(χ²_dof ≥ chi2); None when there are no degrees of freedom to judge by."""
    if dof <= 0 or not np.isfinite(chi2):
        return None
    # the χ² survival function itself (scipy.stats' chi2.sf calls it): scipy.special
    # loads in a fraction of the time scipy.stats takes
    return float(special.chdtrc(dof, chi2))


def judged_p_value(chi2: float, dof: int) -> float:
    """The p-value a fit is judged by: that of :func:`fit_p_value` with at least one dof."""
    return float(special.chdtrc(max(dof, 1), chi2)) if np.isfinite(chi2) else 0.0


@dataclass(frozen=True)
class ModelError:
    """The floor given to a poor fit's image positions.

    Attributes
    ----------
    floor_arcsec : float
        f, added in quadrature to every image's σ.
    chi2, dof, p_value : float, int, float
        The fit before the floor.
    """

    floor_arcsec: float
    chi2: float
    dof: int
    p_value: float

    def note(self) -> str:
        """One line for reports and warnings."""
        return (
            f"poor fit (chi2 = {self.chi2:.1f} for {self.dof} dof, p = {self.p_value:.1e} < "
            f"{POOR_FIT_P:g}): the recipe misses structure that moves the images, so every "
            f"image position was given a model error of {1e3 * self.floor_arcsec:.1f} mas "
            "(in quadrature) and the model fitted and sampled again; the windows are wider "
            "for it"
        )


def _position_residuals(like, values: np.ndarray):
    """Squared offsets and σ² of the reproduced images, and the predictions (one solve)."""
    preds = like.predict(np.atleast_2d(values))
    r2, s2 = [], []
    for fam, image in zip(like.families, preds):
        ok = image["ok"][0]
        dx, dy = image["x"][0] - fam.x, image["y"][0] - fam.y
        r2.append((dx * dx + dy * dy)[ok])
        s2.append((fam.sigma * fam.sigma)[ok])
    return np.concatenate(r2), np.concatenate(s2), preds


def position_floor(like, values: np.ndarray) -> float:
    """The model error f (arcsec) of the rule in this module's docstring.

    σ is the likelihood's current error (with any floor already given), so a further
    floor adds to it in quadrature. Images the model does not reproduce at ``values``
    are left out of the sum (they are penalised separately). Returns 0 when the
    positions already meet their share.
    """
    r2, s2, preds = _position_residuals(like, values)
    if len(r2) == 0:
        return 0.0
    n_position = 2 * sum(len(f.x) for f in like.families)
    d = max(like.dof, 1)
    chi2_position = float(np.sum(r2 / s2))
    residuals = like.residuals(np.atleast_2d(values), preds)
    chi2_total = float(np.sum(residuals[0, : like.n_constraints] ** 2))
    target = d * n_position / like.n_constraints
    if chi2_total > 0:
        target = min(target, chi2_position * d / chi2_total)
    if target <= 0 or chi2_position <= target:
        return 0.0

    def excess(f):
        return float(np.sum(r2 / (s2 + f * f))) - target

    # never more than the largest residual seen: a model error beyond the misfit actually
    # measured would only throw the positions' information away
    hi = float(np.sqrt(np.max(r2)))
    if excess(hi) > 0:
        return hi
    return float(optimize.brentq(excess, 0.0, hi, xtol=1e-9))


def largest_residual(like, values: np.ndarray) -> float:
    """The largest offset (arcsec) of a reproduced image from its observed position."""
    r2 = _position_residuals(like, values)[0]
    return float(np.sqrt(np.max(r2))) if len(r2) else 0.0
