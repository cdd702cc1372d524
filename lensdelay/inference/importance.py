"""Posterior draws of under-constrained lens models by conditional importance sampling.

A double fitted with the default recipe has more parameters (14) than constraints (13,
priors included): the two images and the lens light pin the Einstein radius, the centre
and the source to milliarcseconds, while the slope, the axis ratio, the angles, the shear
and the multipoles are left to their priors but for one combination (the images'
misalignment with the centre). The posterior is a thin, curved sheet, on which a
Markov chain barely moves (issue 13: acceptance of a few per cent, R̂ of 2–8, and
windows of doubles that held 54% / 88% of the true delays of lenses drawn from the
recipe's own priors instead of 68% / 95%).

Here the sheet is sampled directly. Split the parameters into the *pinned* ones (source
positions, Einstein radii, and centres held by the lens light) and the *drawn* ones,
each with a proper prior of its own (Gaussian within its bounds, flat within finite
bounds, or an angle over its period). For each draw of the drawn parameters from their
prior, the pinned ones are fitted (Levenberg–Marquardt, all draws at once) and drawn
from a Student-t (ν = 5) Laplace approximation q of their conditional posterior at that
fit. With target density π (:meth:`ImageLikelihood.log_probability`: likelihood times
priors) and proposal p(drawn) q(pinned | drawn), the importance weight is

    w = π(θ) / [p(drawn) q(pinned | drawn)]

(self-normalised importance sampling; e.g. Robert & Casella 2004, Monte Carlo
Statistical Methods, 2nd ed., sec. 3.3; the conditional Laplace proposal as in
Rue, Martino & Chopin 2009, JRSS B 71, 319, sec. 3.2, here with heavier tails). The
draws are exact in the limit of many draws whatever q is, provided q covers the
posterior; the effective sample size (Σw)²/Σw² (Kong 1992; common practice) says how
many independent draws they are worth. When it is too small (the data pin more than the
pinned parameters, as in a quad) the caller falls back to the Markov chain.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from lensdelay.inference.priors import truncated_standard_normal

__all__ = [
    "STUDENT_DF",
    "ITERATIONS",
    "CONVERGED_CHI2",
    "HOPELESS_AFTER",
    "HOPELESS_CHI2",
    "ImportanceDraws",
    "pinned_parameters",
    "conditional_importance",
]


#: Degrees of freedom of the Student-t proposal of the pinned parameters: heavier tails
#: than the Laplace approximation, so that the proposal covers the conditional posterior.
STUDENT_DF = 5.0
#: Levenberg–Marquardt iterations of the conditional fits (most converge in under ten).
ITERATIONS = 30
#: A conditional fit has converged when its χ² changes by less than this (the weights
#: correct for a fit that is not exact; the proposal only needs to be close).
CONVERGED_CHI2 = 1e-2
#: After this many iterations, fits whose χ² exceeds the best one's by HOPELESS_CHI2 stop.
HOPELESS_AFTER = 5
HOPELESS_CHI2 = 200.0


@dataclass(frozen=True)
class ImportanceDraws:
    """Weighted posterior draws in the model's own parameters.

    Attributes
    ----------
    rows : ndarray, shape (N, n)
        The draws (those with zero weight removed).
    log_weights : ndarray, shape (N,)
        Unnormalised log importance weights.
    pinned : tuple of int
        Parameters fitted and drawn from the conditional Laplace proposal; the rest came
        from their priors.
    n_draws : int
        Draws made (before removing zero weights).
    """

    rows: np.ndarray
    log_weights: np.ndarray
    pinned: tuple[int, ...]
    n_draws: int

    @property
    def weights(self) -> np.ndarray:
        """Normalised weights (sum 1)."""
        w = np.exp(self.log_weights - np.max(self.log_weights))
        return w / np.sum(w)

    @property
    def effective_samples(self) -> float:
        """(Σw)²/Σw²: the number of independent draws the weighted set is worth."""
        if len(self.log_weights) == 0:
            return 0.0
        w = self.weights
        return float(1.0 / np.sum(w * w))

    def resample(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """``n`` equally weighted rows by systematic resampling (Kitagawa 1996, JCGS 5, 1)."""
        cumulative = np.cumsum(self.weights)
        cumulative[-1] = 1.0
        positions = (rng.uniform() + np.arange(n)) / n
        picked = np.searchsorted(cumulative, positions)
        return self.rows[rng.permutation(picked)]


def pinned_parameters(like) -> list[int] | None:
    """The parameters image positions pin; None when another one has no proper prior.

    Pinned: source positions, Einstein radii, and the centre coordinates the lens light
    constrains. Every other parameter must have a prior that can be drawn from: a
    Gaussian (``like.priors``), finite bounds, or a period.
    """
    centre = set(getattr(like, "centre_prior", {}))
    pinned = []
    for i, name in enumerate(like.names):
        if name.startswith("source[") or name.endswith(".einstein_radius") or i in centre:
            pinned.append(i)
            continue
        proper = (
            i in like.priors
            or like.periods[i]
            or (np.isfinite(like.lower[i]) and np.isfinite(like.upper[i]))
        )
        if not proper:
            return None
    return pinned


def _draw_from_priors(like, drawn, rows, rng):
    """Fill columns ``drawn`` of ``rows`` from their priors; return log p(drawn) per row."""
    n = len(rows)
    log_p = np.zeros(n)
    for i in drawn:
        if i in like.priors:
            mean, sigma = like.priors[i]
            low, high = (like.lower[i] - mean) / sigma, (like.upper[i] - mean) / sigma
            z = truncated_standard_normal(low, high, n, rng)
            rows[:, i] = mean + sigma * z
            log_p += -0.5 * z * z  # the truncation's normalisation is a constant
        elif like.periods[i]:
            rows[:, i] = rng.uniform(0.0, like.periods[i], n)
        else:
            rows[:, i] = rng.uniform(like.lower[i], like.upper[i], n)
    return log_p


def _conditional_fits(like, rows, pinned):
    """Fit the ``pinned`` columns of every row with the others held; rows change in place.

    Returns the residual Jacobian with respect to the pinned columns at the fits and
    their χ² (inf where the fit failed).
    """
    logp, res, jac = like.evaluate(rows, columns=pinned)
    cost = np.where(np.isfinite(logp), np.sum(res * res, axis=1), np.inf)
    damping = np.full(len(rows), 1e-3)
    active = np.isfinite(cost)
    k = len(pinned)
    eye = np.eye(k)
    for iteration in range(ITERATIONS):
        if iteration >= HOPELESS_AFTER:
            # a fit still this far above the best has a weight below e^-100: not worth
            # more iterations
            active &= cost < np.min(cost) + HOPELESS_CHI2
        idx = np.flatnonzero(active)
        if len(idx) == 0:
            break
        jp = jac[idx][:, :, pinned]
        normal = np.einsum("pmi,pmj->pij", jp, jp)
        gradient = np.einsum("pmi,pm->pi", jp, res[idx])
        diagonal = np.einsum("pii->pi", normal)
        system = (
            normal
            + damping[idx, None, None] * np.where(diagonal > 0, diagonal, 1.0)[:, :, None] * eye
        )
        with np.errstate(all="ignore"):
            step = -np.einsum("pij,pj->pi", np.linalg.pinv(system), gradient)
        trial = rows[idx].copy()
        trial[:, pinned] += np.where(np.isfinite(step), step, 0.0)
        t_logp, t_res, t_jac = like.evaluate(trial, columns=pinned)
        t_cost = np.where(np.isfinite(t_logp), np.sum(t_res * t_res, axis=1), np.inf)
        better = t_cost < cost[idx]
        gain = np.where(better, cost[idx] - t_cost, 0.0)
        sel = idx[better]
        rows[sel], res[sel], jac[sel], cost[sel] = (
            trial[better],
            t_res[better],
            t_jac[better],
            t_cost[better],
        )
        damping[idx] = np.where(
            better, np.maximum(damping[idx] / 3.0, 1e-9), np.minimum(damping[idx] * 5.0, 1e9)
        )
        # done: a step that gained almost nothing, or a trust region that cannot shrink more
        done = (better & (gain < CONVERGED_CHI2)) | (damping[idx] >= 1e9)
        active[idx[done]] = False
    return jac[:, :, pinned], cost


def conditional_importance(like, best: np.ndarray, n_draws: int, rng: np.random.Generator):
    """Weighted posterior draws of ``like`` (module docstring), or None when not applicable.

    Parameters
    ----------
    like : ImageLikelihood
        Needs ``evaluate``, ``log_probability``, ``names``, ``priors``, ``lower``,
        ``upper``, ``periods`` (and ``centre_prior``).
    best : ndarray
        Best-fit parameters: the pinned parameters' starting values.
    n_draws : int
    rng : numpy.random.Generator

    Returns
    -------
    ImportanceDraws or None
        None when a parameter that is not pinned has no proper prior.
    """
    pinned = pinned_parameters(like)
    if pinned is None or not pinned:
        return None
    drawn = [i for i in range(len(like.names)) if i not in pinned]
    rows = np.repeat(np.asarray(best, dtype=float)[None, :], n_draws, axis=0)
    log_prior_drawn = _draw_from_priors(like, drawn, rows, rng)
    jac, cost = _conditional_fits(like, rows, pinned)
    # Laplace approximation of the pinned parameters at each conditional fit:
    # covariance (JᵀJ)⁻¹ = V Λ⁻¹ Vᵀ; a row whose information is singular is dropped
    lam, vec = np.linalg.eigh(np.einsum("pmi,pmj->pij", jac, jac))
    good = np.isfinite(cost) & (lam[:, 0] > 1e-12 * np.abs(lam[:, -1])) & (lam[:, 0] > 0)
    lam = np.where(good[:, None], lam, 1.0)
    k = len(pinned)
    t = (
        rng.standard_normal((n_draws, k))
        / np.sqrt(rng.chisquare(STUDENT_DF, n_draws) / STUDENT_DF)[:, None]
    )
    rows[:, pinned] += np.einsum("pij,pj->pi", vec * (1.0 / np.sqrt(lam))[:, None, :], t)
    # log density of the Student-t draw in the pinned coordinates (Kotz & Nadarajah 2004,
    # Multivariate t Distributions, eq. 1.1), with the Jacobian of the scaling √det(JᵀJ)
    log_q = (
        special.gammaln((STUDENT_DF + k) / 2)
        - special.gammaln(STUDENT_DF / 2)
        - 0.5 * k * np.log(STUDENT_DF * np.pi)
        - 0.5 * (STUDENT_DF + k) * np.log1p(np.sum(t * t, axis=1) / STUDENT_DF)
        + 0.5 * np.sum(np.log(lam), axis=1)
    )
    log_w = np.full(n_draws, -np.inf)
    ok = good & np.all(np.isfinite(rows), axis=1)
    if np.any(ok):
        log_w[ok] = like.log_probability(rows[ok]) - log_prior_drawn[ok] - log_q[ok]
    keep = np.isfinite(log_w)
    return ImportanceDraws(rows[keep], log_w[keep], tuple(pinned), n_draws)
