"""Walkers' starting points drawn by randomised maximum likelihood.

A lens model with about as many parameters as constraints (a double fitted with a
power law, shear and multipoles) has a posterior shaped like a thin, curved sheet: the
image positions pin a few combinations of the parameters to milliarcseconds, the priors
alone spread the rest. A sampler whose walkers all start in a small ball at the best fit
needs thousands of steps to spread over such a sheet, and until it has, the delay
windows are too narrow (measured on the misspecified population of
``benchmarks/bench_misspecified.py``: walkers that had hardly left the best fit).

Randomised maximum likelihood (Oliver, He & Reynolds 1996, Proc. 5th European Conf.
on the Mathematics of Oil Recovery; Bardsley et al. 2014, SIAM J. Sci. Comput. 36,
A1895, "randomize-then-optimize") gives each walker its own draw instead: every
Gaussian constraint -- image positions, Gaussian priors, the lens-light centre,
timing data -- is perturbed by its own noise, and the posterior mode of the perturbed
problem is found,

    u_k = argmin_u ‖r(u) − z_k‖²,   z_k ~ N(0, I),

where r are the normalised residuals. For a linear model with Gaussian errors and
priors the u_k are exact posterior draws; for a lens model they are a close, somewhat
over-dispersed approximation, which the sampler's Metropolis–Hastings steps then
correct. A flat prior has no residual to perturb; where the data leave a direction to
such a prior (more parameters than constraints), each walker's fit is instead anchored
weakly -- a residual (u − a)/w with a drawn uniformly over the prior's range and w its
standard deviation -- so that the walkers spread over that range rather than all
landing on the point of the valley nearest the best fit. All walkers are fitted
together: a Levenberg–Marquardt iteration (Press et al. 2007, Numerical Recipes 3rd
ed., §15.5.2) on the stacked rows, one vectorised evaluation of residuals and Jacobian
per iteration.
"""

from __future__ import annotations

import emcee
import numpy as np

from lensdelay.errors import FitError
from lensdelay.inference.priors import truncated_standard_normal

__all__ = [
    "ITERATIONS",
    "AnchoredTarget",
    "flat_anchors",
    "randomised_fits",
    "TRUNCATION_REACH",
    "flat_prior_anchors",
    "truncate_prior_noise",
    "starting_ball",
]


#: Levenberg–Marquardt iterations of the randomised fits.
ITERATIONS = 40


class AnchoredTarget:
    """``target`` with one extra residual (u_i − a_i)/w_i per anchored coordinate i.

    Parameters
    ----------
    target : object
        Has ``evaluate(rows)`` as in :func:`randomised_fits`.
    index : array of int
        The anchored coordinates.
    anchors : ndarray, shape (P, k)
        Each row's anchor values (one row per walker).
    widths : ndarray, shape (k,)
        The anchors' widths w.
    """

    def __init__(self, target, index, anchors, widths):
        self.target = target
        self.index = np.asarray(index, dtype=int)
        self.anchors = np.asarray(anchors, dtype=float)
        self.widths = np.asarray(widths, dtype=float)

    def evaluate(self, rows):
        """The target's log_prob, its residuals with the anchors' appended, and the Jacobian."""
        logp, res, jac = self.target.evaluate(rows)
        extra = (rows[:, self.index] - self.anchors) / self.widths
        extra_jac = np.zeros((len(rows), len(self.index), rows.shape[1]))
        extra_jac[:, np.arange(len(self.index)), self.index] = 1.0 / self.widths
        return logp, np.hstack([res, extra]), np.concatenate([jac, extra_jac], axis=1)


def flat_anchors(lower, upper, periods, skip, rng, walkers: int, discs=()):
    """Anchors for coordinates with a flat prior over a finite range (or an angle's period).

    Parameters
    ----------
    lower, upper : ndarray
        Bounds of the sampled coordinates (infinite where there are none).
    periods : list
        Period of each coordinate, or None.
    skip : collection of int
        Coordinates not to anchor (those with a Gaussian prior of their own).
    discs : sequence of (int, int, float)
        Pairs of component coordinates (an ellipticity or a shear sampled as two
        components) with a flat prior on their radius up to the given maximum:
        anchored uniformly over that disc.
    rng : numpy.random.Generator
    walkers : int

    Returns
    -------
    (index, anchors, widths)
        Anchored coordinates, uniform draws (walkers, k) over their ranges, and the
        ranges' standard deviations (range/√12; R/2 for a disc's components).
    """
    index, low, span = [], [], []
    for i in range(len(lower)):
        if i in skip:
            continue
        if periods[i]:
            index.append(i)
            low.append(0.0)
            span.append(float(periods[i]))
        elif np.isfinite(lower[i]) and np.isfinite(upper[i]):
            index.append(i)
            low.append(float(lower[i]))
            span.append(float(upper[i] - lower[i]))
    low, span = np.array(low), np.array(span)
    anchors = low + span * rng.uniform(size=(walkers, len(index)))
    widths = span / np.sqrt(12.0)
    for i, j, radius in discs:
        # uniform over the disc: r = R √U, any direction; each component's std is R/2
        r = radius * np.sqrt(rng.uniform(size=walkers))
        angle = rng.uniform(0.0, 2.0 * np.pi, size=walkers)
        index += [i, j]
        anchors = np.hstack([anchors, np.column_stack([r * np.cos(angle), r * np.sin(angle)])])
        widths = np.append(widths, [radius / 2.0, radius / 2.0])
    return np.array(index, dtype=int), anchors, widths


def randomised_fits(target, starts: np.ndarray, noise: np.ndarray, iterations: int = ITERATIONS):
    """Minimise ‖r(u) − z‖² for every row, all rows at once.

    Parameters
    ----------
    target : object
        Has ``evaluate(rows) -> (log_prob, residuals, jacobian)`` (residuals (P, m),
        Jacobian (P, m, n)); rows outside the bounds have log_prob −inf. Its ``lower``
        and ``upper`` bounds, when it has them, cut steps that would cross them.
    starts : ndarray, shape (P, n)
        Starting rows (the best fit, slightly jittered).
    noise : ndarray, shape (P, m)
        The perturbations z, one row per start.

    Returns
    -------
    ndarray, shape (P, n)
        The perturbed problems' optima (a row that never improved keeps its start).
    """
    rows = np.array(starts, dtype=float)
    n = rows.shape[1]
    inner = getattr(target, "target", target)  # an AnchoredTarget's bounds are its target's
    lower = getattr(inner, "lower", np.full(n, -np.inf))
    upper = getattr(inner, "upper", np.full(n, np.inf))
    damping = np.full(len(rows), 1e-3)

    def cost_and_geometry(u):
        logp, res, jac = target.evaluate(u)
        shifted = res - noise
        cost = np.where(np.isfinite(logp), np.sum(shifted * shifted, axis=1), np.inf)
        return cost, shifted, jac

    cost, shifted, jac = cost_and_geometry(rows)
    for _ in range(iterations):
        normal = np.einsum("pmi,pmj->pij", jac, jac)
        gradient = np.einsum("pmi,pm->pi", jac, shifted)
        diagonal = np.einsum("pii->pi", normal)
        system = normal.copy()
        diag = np.arange(n)
        system[:, diag, diag] += damping[:, None] * np.where(diagonal > 0, diagonal, 1.0)
        with np.errstate(all="ignore"):
            try:
                step = -np.linalg.solve(system, gradient[..., None])[..., 0]
            except np.linalg.LinAlgError:
                step = -np.einsum("pij,pj->pi", np.linalg.pinv(system), gradient)
        step = np.where(np.isfinite(step), step, 0.0)
        # a step across a bound (a shear strength below zero) is cut at the bound, so the
        # other parameters still improve (projected Levenberg–Marquardt)
        trial = np.clip(rows + step, lower, upper)
        trial_cost, trial_shifted, trial_jac = cost_and_geometry(trial)
        better = trial_cost < cost
        rows[better], cost[better] = trial[better], trial_cost[better]
        shifted[better], jac[better] = trial_shifted[better], trial_jac[better]
        # a successful step trusts the quadratic model more, a failed one less
        damping = np.where(better, np.maximum(damping / 3.0, 1e-9), np.minimum(damping * 5.0, 1e9))
        if np.all(damping >= 1e9):
            break
    return rows


def flat_prior_anchors(like, coords, target, rng, walkers):
    """Anchors of the randomised fits for coordinates that only a flat prior bounds.

    Coordinates with a Gaussian prior (or the lens-light centre) are perturbed through
    their residuals instead; a pair sampled as components is anchored over the disc of
    its radius's range when that radius has no Gaussian prior.
    """
    priors = getattr(like, "priors", {})
    pairs = coords.ellipse_pairs + coords.shear_pairs
    skip = set(priors) | set(getattr(like, "centre_prior", {}))
    skip |= {i for pair in pairs for i in pair}
    component_widths = coords.prior_scales(like.lower, like.upper)
    # prior_scales gives R/√3 per component of a disc of radius R
    discs = [
        (i, j, component_widths[i] * np.sqrt(3.0))
        for i, j in pairs
        if i not in priors and component_widths[i] > 0
    ]
    return flat_anchors(target.lower, target.upper, like.periods, skip, rng, walkers, discs)


#: A prior whose bounds lie beyond this many σ of its mean is perturbed as untruncated.
TRUNCATION_REACH = 5.0


def truncate_prior_noise(noise, like, rng) -> None:
    """Draw the perturbation of each bounded Gaussian prior from the truncated normal.

    In a randomised fit a prior-dominated parameter lands at μ + σz; with z ~ N(0, 1) a
    half-normal shear prior would put half of the walkers exactly at zero shear, where
    the bound-projected fit stops (measured: posterior shear 0.016 ± 0.017 for a double
    whose prior median is 0.067). z drawn from N(0, 1) truncated to the bounds puts them
    at draws from the prior as the sampler sees it. Inverse-CDF draws (common practice).
    """
    ranges = getattr(like, "prior_residual_ranges", lambda: [])()
    for column, low, high in ranges:
        if low < -TRUNCATION_REACH and high > TRUNCATION_REACH:
            continue
        noise[:, column] = truncated_standard_normal(low, high, len(noise), rng)


def starting_ball(like, coords, target, start, scales, walkers, rng) -> emcee.State:
    """Walkers drawn by randomised maximum likelihood from the best fit.

    Each walker is the optimum of its own randomised fit (:func:`randomised_fits`),
    started at the best fit, so that the walkers begin spread like the posterior,
    directions seen only by the priors included. A target without ``evaluate`` (no
    residuals to perturb) gets a small Gaussian ball of the fit's errors instead.
    Starts far up a wall are replaced or pulled back toward the best fit.
    """
    ndim = len(start)
    scales = (
        np.where(np.isfinite(scales), scales, 1e-3) if scales is not None else np.full(ndim, 1e-3)
    )
    # errors of a singular fit can be enormous: never wider than a bounded prior's spread
    spread = coords.prior_scales(like.lower, like.upper, like.periods)
    scales = np.where(spread > 0, np.minimum(scales, spread), scales)
    ball = start + 0.5 * np.maximum(scales, 1e-6) * rng.standard_normal((walkers, ndim))
    ball = np.clip(ball, like.lower + 1e-9, like.upper - 1e-9)
    ball = coords.to_sampling(ball)
    centre = coords.to_sampling(start)[0]
    if hasattr(target, "evaluate"):
        fitted = target
        n_residuals = target.evaluate(centre[None, :])[1].shape[1]
        noise = rng.standard_normal((walkers, n_residuals))
        truncate_prior_noise(noise, like, rng)
        if getattr(like, "dof", 0) < 0:
            # directions only a flat prior bounds: spread the walkers over its range
            index, anchors, widths = flat_prior_anchors(like, coords, target, rng, walkers)
            if len(index):
                fitted = AnchoredTarget(target, index, anchors, widths)
                noise = np.hstack([noise, np.zeros((walkers, len(index)))])
        # each randomised fit starts at the best fit: the perturbed optimum is near it
        ball = randomised_fits(fitted, np.repeat(centre[None, :], walkers, axis=0), noise)
    lp = target.log_probability(ball)
    best = target.log_probability(centre[None, :])[0]
    if not np.isfinite(best) and not np.any(np.isfinite(lp)):
        raise FitError("no walker starts with a finite probability; check bounds and priors")
    # A randomised fit that did not converge (or a ball point far up a wall: missing
    # images, chi2 in the thousands) takes the place of a walker that did, drawn at
    # random (the chains then part at once); with none, such starts are pulled halfway
    # back to the best fit until they lie within the typical spread of the posterior.
    good = lp >= best - (ndim + 10.0)
    if np.isfinite(best) and np.any(good) and not np.all(good):
        ball[~good] = ball[rng.choice(np.flatnonzero(good), int(np.sum(~good)))]
        lp[~good] = target.log_probability(ball[~good])
    if np.isfinite(best):
        for _ in range(30):
            far = ~(lp >= best - (ndim + 10.0))
            if not np.any(far):
                break
            ball[far] = centre + 0.5 * (ball[far] - centre)
            lp[far] = target.log_probability(ball[far])
        ball[~np.isfinite(lp)] = centre  # move bad starts onto the best fit
    else:
        ball[~np.isfinite(lp)] = ball[np.isfinite(lp)][0]
    return emcee.State(ball, log_prob=target.log_probability(ball))
