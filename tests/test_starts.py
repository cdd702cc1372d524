"""Walkers' starting points and the sampler's step: randomised maximum likelihood, anchors
for flat priors, which pairs stay polar, and the choice of the Langevin step (issue 13)."""

import numpy as np
import pytest

from lensdelay.inference.coordinates import polar_pairs
from lensdelay.inference.moves import TUNING_HALVINGS, FisherLangevinMove, default_step
from lensdelay.inference.starts import AnchoredTarget, flat_anchors, randomised_fits


class LinearGaussian:
    """r(u) = L (A u − b): data y = A u + noise, covariance C = (LᵀL)⁻¹, one Gaussian prior row.

    The posterior is N(m, S) with S = (AᵀWA)⁻¹ and m = S AᵀW b, W = LᵀL (the normal
    equations of weighted least squares: common practice).
    """

    def __init__(self):
        self.A = np.array([[1.0, 0.5], [0.2, 1.0], [1.0, 0.0]])  # 2 data rows + 1 prior row
        self.b = np.array([1.0, -0.5, 0.3])
        self.sigma = np.array([0.1, 0.2, 1.0])
        self.lower = np.full(2, -np.inf)
        self.upper = np.full(2, np.inf)

    def evaluate(self, rows):
        rows = np.atleast_2d(rows)
        r = (rows @ self.A.T - self.b) / self.sigma
        jac = np.broadcast_to(self.A / self.sigma[:, None], (len(rows), 3, 2)).copy()
        return -0.5 * np.sum(r * r, axis=1), r, jac

    def posterior(self):
        w = np.diag(1.0 / self.sigma**2)
        cov = np.linalg.inv(self.A.T @ w @ self.A)
        return cov @ self.A.T @ w @ self.b, cov


def test_randomised_fits_draw_the_exact_posterior_of_a_linear_gaussian_model():
    """For a linear model with Gaussian errors and priors the perturbed optima are exact
    posterior draws (Bardsley et al. 2014, SIAM J. Sci. Comput. 36, A1895, sec. 2):
    mean within 4 standard errors, covariance within 10% (4000 draws: ~2.2% standard
    error on a variance)."""
    target = LinearGaussian()
    rng = np.random.default_rng(5)
    n = 4000
    draws = randomised_fits(target, np.zeros((n, 2)), rng.standard_normal((n, 3)))
    mean, cov = target.posterior()
    se = np.sqrt(np.diag(cov) / n)
    assert np.all(np.abs(draws.mean(axis=0) - mean) < 4 * se)
    np.testing.assert_allclose(
        np.cov(draws.T), cov, rtol=0.1, atol=0.1 * np.sqrt(np.prod(np.diag(cov)))
    )


def test_randomised_fits_without_noise_return_the_best_fit():
    """Zero perturbation: every row converges to the weighted least-squares solution."""
    target = LinearGaussian()
    rows = randomised_fits(target, np.random.default_rng(1).normal(size=(5, 2)), np.zeros((5, 3)))
    np.testing.assert_allclose(
        rows, np.repeat(target.posterior()[0][None, :], 5, axis=0), atol=1e-8
    )


def test_flat_anchors_are_uniform_over_ranges_periods_and_discs():
    """Bounded coordinates: anchors inside the bounds with spread range/√12 (the standard
    deviation of a uniform distribution: common practice); angles over their period;
    a disc of radius R: components within R, each with standard deviation R/2."""
    lower = np.array([0.0, -np.inf, -np.inf, -np.inf, -np.inf, 1.0])
    upper = np.array([2.0, np.inf, np.inf, np.inf, np.inf, 3.0])
    periods = [None, 180.0, None, None, None, None]
    index, anchors, widths = flat_anchors(
        lower, upper, periods, {5}, np.random.default_rng(2), 20000, discs=[(2, 3, 0.3)]
    )
    assert list(index) == [0, 1, 2, 3]  # 4 unbounded, 5 has a Gaussian prior (skipped)
    assert np.all((anchors[:, 0] >= 0) & (anchors[:, 0] <= 2))
    assert np.all((anchors[:, 1] >= 0) & (anchors[:, 1] <= 180))
    assert np.all(np.hypot(anchors[:, 2], anchors[:, 3]) <= 0.3)
    np.testing.assert_allclose(widths, [2 / np.sqrt(12), 180 / np.sqrt(12), 0.15, 0.15])
    np.testing.assert_allclose(anchors.std(axis=0), widths, rtol=0.03)


def test_anchored_target_appends_one_residual_per_anchor():
    """(u − a)/w and its derivative 1/w, hand-computed from the definition."""
    target = LinearGaussian()
    anchored = AnchoredTarget(target, [1], np.array([[0.5], [1.5]]), np.array([2.0]))
    rows = np.array([[0.0, 1.0], [0.0, 1.0]])
    logp, res, jac = anchored.evaluate(rows)
    np.testing.assert_allclose(res[:, -1], [0.25, -0.25])
    np.testing.assert_allclose(jac[:, -1, :], [[0.0, 0.5], [0.0, 0.5]])
    np.testing.assert_allclose(logp, target.evaluate(rows)[0])  # the target's density


NAMES = [
    "mass[0].axis_ratio",
    "mass[0].position_angle",
    "mass[1].strength",
    "mass[1].position_angle",
]


@pytest.mark.parametrize(
    "start, errors, priors, polar",
    [
        # a Gaussian-prior shear at zero: its component density would have a 1/γ spike
        ([0.7, 10.0, 0.0, 5.0], [0.01, 1.0, 0.01, 1.0], {2: (0.0, 0.1)}, {2}),
        # the same shear well away from zero (0.1 ± 0.01): components
        ([0.7, 10.0, 0.1, 5.0], [0.01, 1.0, 0.01, 1.0], {2: (0.0, 0.1)}, set()),
        # unknown error (under-constrained fit): polar
        ([0.7, 10.0, 0.1, 5.0], [0.01, 1.0, np.nan, 1.0], {2: (0.0, 0.1)}, {2}),
        # a round lens within reach, with an axis-ratio prior: polar
        ([0.98, 10.0, 0.1, 5.0], [0.05, 1.0, 0.01, 1.0], {0: (0.75, 0.2)}, {0}),
        # flat priors are never made polar (their valleys are straight in components)
        ([0.7, 10.0, 0.0, 5.0], [0.01, 1.0, np.nan, 1.0], {}, set()),
    ],
)
def test_polar_pairs(start, errors, priors, polar):
    assert polar_pairs(NAMES, np.array(start), np.array(errors), priors) == polar


class Gaussian:
    """An isotropic 3-D standard normal, as residuals r = u."""

    def evaluate(self, rows):
        rows = np.atleast_2d(rows)
        jac = np.broadcast_to(np.eye(3), (len(rows), 3, 3)).copy()
        return -0.5 * np.sum(rows * rows, axis=1), rows.copy(), jac


def test_step_tuning_keeps_the_default_on_a_gaussian():
    """On a Gaussian the Langevin proposal with the exact metric is accepted often at the
    default step, which then has the largest expected jump."""
    rng = np.random.default_rng(4)
    move = FisherLangevinMove(Gaussian())
    u = rng.standard_normal((32, 3))
    assert move.tune(u, -0.5 * np.sum(u * u, axis=1), rng) == default_step(3)
    assert move.step == default_step(3)


def test_step_tuning_maximises_the_expected_squared_jump(monkeypatch):
    """With acceptance a(ε) = exp(−(ε/0.1)²) the expected squared jump ε² a(ε) peaks at
    ε = 0.1 (d/dε = 0: calculus); of the candidates ε₀/2^k the nearest in that sense wins."""
    move = FisherLangevinMove(Gaussian())
    monkeypatch.setattr(
        move,
        "_trial",
        lambda coords, logp, eps, random: np.full(len(coords), np.exp(-((eps / 0.1) ** 2))),
    )
    eps = move.tune(np.zeros((4, 3)), np.zeros(4), np.random.default_rng(0))
    candidates = default_step(3) / 2.0 ** np.arange(TUNING_HALVINGS + 1)
    jump = candidates**2 * np.exp(-((candidates / 0.1) ** 2))
    assert eps == candidates[np.argmax(jump)]
    assert 0.05 < eps < 0.2


def test_potential_scale_reduction_is_one_for_mixed_walkers_and_large_for_stuck_ones():
    """Gelman & Rubin (1992, Statistical Science 7, 457): walkers that are independent draws
    of one N(0, 1) give R̂ ≈ 1; walkers each stuck near its own start (means spread 1,
    spread within 0.1) give R̂ ≈ √(1 + 1/0.01) ≈ 10, far above the 1.1 of common practice."""
    from lensdelay.inference.sampling import MAX_RHAT, potential_scale_reduction

    rng = np.random.default_rng(9)
    mixed = rng.standard_normal((1000, 32, 2))
    assert np.all(potential_scale_reduction(mixed) < 1.01)
    stuck = rng.standard_normal((1, 32, 2)) + 0.1 * rng.standard_normal((1000, 32, 2))
    rhat = potential_scale_reduction(stuck)
    assert np.all(rhat > 5 * MAX_RHAT)
    np.testing.assert_allclose(
        rhat, np.sqrt(1 + np.var(stuck.mean(0), 0, ddof=1) / 0.01), rtol=0.05
    )
