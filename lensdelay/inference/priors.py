"""Priors on the external convergence κ_ext: checked, then drawn below 1; truncated draws.

A mass sheet κ_ext scales every delay by (1 − κ_ext); at κ_ext ≥ 1 delays would change
sign, which is unphysical for a sheet that leaves the images where they are. A
Gaussian prior is therefore refused when it puts material probability there, and the
draws are truncated to κ_ext < 1.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from lensdelay.errors import InputError, pair_of_numbers

__all__ = [
    "MAX_PROBABILITY_ABOVE_ONE",
    "MIN_KAPPA_MEAN",
    "check_kappa_prior",
    "kappa_prior_of",
    "draw_kappa",
    "truncated_standard_normal",
]


#: Largest prior probability allowed at κ_ext ≥ 1 (about the 3.1σ tail).
MAX_PROBABILITY_ABOVE_ONE = 1e-3
#: Lowest allowed prior mean: an under-dense line of sight, not a negative universe.
MIN_KAPPA_MEAN = -0.5


def check_kappa_prior(mean: float, sigma: float) -> tuple[float, float]:
    """Validate a Gaussian κ_ext prior ``(mean, sigma)``; returns it as floats.

    Raises
    ------
    InputError
        sigma < 0, mean outside [MIN_KAPPA_MEAN, 1), or P(κ_ext ≥ 1) above
        :data:`MAX_PROBABILITY_ABOVE_ONE`.
    """
    mean, sigma = float(mean), float(sigma)
    if not np.isfinite(sigma) or sigma < 0:
        raise InputError(f"kappa_ext sigma must be >= 0, got {sigma:g}")
    if not (np.isfinite(mean) and MIN_KAPPA_MEAN <= mean < 1):
        raise InputError(f"kappa_ext mean must be in [{MIN_KAPPA_MEAN:g}, 1), got {mean:g}")
    # P(κ > 1) = 1 − Φ((1 − mean)/σ) = Φ((mean − 1)/σ) (the normal CDF of scipy.special,
    # which loads far faster than scipy.stats)
    above = special.ndtr((mean - 1.0) / sigma) if sigma > 0 else 0.0
    if above > MAX_PROBABILITY_ABOVE_ONE:
        raise InputError(
            f"kappa_ext prior must put at most {MAX_PROBABILITY_ABOVE_ONE:g} of its probability at "
            f"kappa_ext >= 1 (delays would change sign), got {above:.3g} for N({mean:g}, {sigma:g})"
        )
    return mean, sigma


def kappa_prior_of(value) -> tuple[float, float]:
    """A κ_ext prior given as one ``(mean, sigma)`` pair (the Python interfaces' form), checked.

    Raises
    ------
    InputError
        ``value`` is not two numbers, or :func:`check_kappa_prior` refuses them.
    """
    return check_kappa_prior(*pair_of_numbers(value, "kappa_ext"))


def draw_kappa(mean: float, sigma: float, n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` draws of κ_ext from N(mean, sigma²) truncated to κ_ext < 1 (redrawn until below)."""
    if sigma == 0:
        return np.full(n, mean)
    draws = rng.normal(mean, sigma, n)
    while np.any(bad := draws >= 1.0):
        draws[bad] = rng.normal(mean, sigma, int(bad.sum()))
    return draws


def truncated_standard_normal(
    low: float, high: float, size: int, rng: np.random.Generator
) -> np.ndarray:
    """``size`` draws of N(0, 1) truncated to [low, high], by the inverse CDF (common practice).

    A Gaussian prior N(μ, σ²) within bounds [a, b] is drawn as μ + σz with low = (a − μ)/σ,
    high = (b − μ)/σ.
    """
    u = rng.uniform(special.ndtr(low), special.ndtr(high), size=size)
    return np.clip(special.ndtri(u), low, high)
