"""Is a best fit acceptable, and what to do when it is not.

A fit is judged by the χ² of its constraints (image positions, Gaussian priors, lens
light, timing rows) against the χ² distribution with dof = constraints − free
parameters: the p-value is P(χ²_dof ≥ χ²_min). When p < :data:`POOR_FIT_P` the
recipe cannot reproduce the images to within their stated errors: something it lacks
(a satellite, angular structure, a different radial profile) moves them. Sampling such a
fit with the stated errors would give windows as narrow as those of a perfect fit, so
the image positions are given a model error instead (the rule, stated in the README):

    every image's σ becomes sqrt(σ² + f²), with f the one value for which the
    positions' χ² at the best fit equals their share of the degrees of freedom,
    Σ_images (Δx² + Δy²) / (σ² + f²) = dof · n_position / n_constraints,

and the model is fitted and sampled again with these errors (common practice: an
astrometric "model-error" floor, cf. the 5 mas floors of time-delay lens modelling).
A fit with no degrees of freedom cannot be judged; one whose positions are already
reproduced is left alone.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

#: p-value below which a fit is poor and its image positions get a model-error floor.
POOR_FIT_P = 0.01


def fit_p_value(chi2: float, dof: int) -> float | None:
    """P(χ²_dof ≥ chi2); None when there are no degrees of freedom to judge by."""
    if dof <= 0 or not np.isfinite(chi2):
        return None
    return float(stats.chi2.sf(chi2, dof))


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


def position_floor(like, values: np.ndarray) -> float:
    """The model error f (arcsec) of the rule in this module's docstring.

    Images the model does not reproduce at ``values`` are left out of the sum (they are
    penalised separately). Returns 0 when the positions already meet their share.
    """
    preds = like.predict(np.atleast_2d(values))
    r2, s2 = [], []
    for fam, image in zip(like.scenario.families, preds):
        sigma = np.array([im.sigma for im in fam.images])
        ok = image["ok"][0]
        dx = image["x"][0] - np.array([im.x for im in fam.images])
        dy = image["y"][0] - np.array([im.y for im in fam.images])
        r2.append((dx * dx + dy * dy)[ok])
        s2.append((sigma * sigma)[ok])
    r2, s2 = np.concatenate(r2), np.concatenate(s2)
    n_position = 2 * sum(len(f.images) for f in like.scenario.families)
    target = like.dof * n_position / like.n_constraints
    if target <= 0 or len(r2) == 0 or np.sum(r2 / s2) <= target:
        return 0.0

    def excess(f):
        return float(np.sum(r2 / (s2 + f * f))) - target

    hi = float(np.sqrt(np.max(r2))) + 1e-6
    while excess(hi) > 0:  # cannot happen for target < n_images, but be sure
        hi *= 2.0
    return float(optimize.brentq(excess, 0.0, hi, xtol=1e-9))
