"""Conditional importance sampling of under-constrained models (issue 13)."""

import numpy as np
import pytest
from scipy import special

from lensdelay.inference.importance import (
    ImportanceDraws,
    conditional_importance,
    pinned_parameters,
)


class Sheet:
    """A thin curved sheet: datum y = a + b² with noise σ, and b ~ N(μ, τ) within [lo, hi].

    ``a`` plays a source position (pinned by the datum), ``b`` a slope (seen by its prior
    only). Exact posterior: b keeps its truncated prior and a | b ~ N(y − b², σ²)
    (Bayes' rule with a flat prior on a: common practice).
    """

    names = ["source[s].x", "mass[0].slope"]
    periods = [None, None]
    centre_prior = {}

    def __init__(self, y=1.0, sigma=0.001, mu=1.0, tau=0.3, lo=0.2, hi=2.0):
        self.y, self.sigma, self.mu, self.tau = y, sigma, mu, tau
        self.priors = {1: (mu, tau)}
        self.lower = np.array([-10.0, lo])
        self.upper = np.array([10.0, hi])

    def _res(self, rows):
        a, b = rows[:, 0], rows[:, 1]
        return np.column_stack([(a + b * b - self.y) / self.sigma, (b - self.mu) / self.tau])

    def evaluate(self, rows, columns=None):
        rows = np.atleast_2d(rows)
        res = self._res(rows)
        jac = np.zeros((len(rows), 2, 2))
        jac[:, 0, 0] = 1.0 / self.sigma
        jac[:, 0, 1] = 2.0 * rows[:, 1] / self.sigma
        jac[:, 1, 1] = 1.0 / self.tau
        inside = np.all((rows >= self.lower) & (rows <= self.upper), axis=1)
        return np.where(inside, -0.5 * np.sum(res * res, axis=1), -np.inf), res, jac

    def log_probability(self, rows):
        return self.evaluate(rows)[0]


def exact_draws(sheet, n, rng):
    """Draws of the exact posterior (inverse-CDF truncated normal for b)."""
    lo, hi = (sheet.lower[1] - sheet.mu) / sheet.tau, (sheet.upper[1] - sheet.mu) / sheet.tau
    b = sheet.mu + sheet.tau * special.ndtri(rng.uniform(special.ndtr(lo), special.ndtr(hi), n))
    return np.column_stack([sheet.y - b * b + sheet.sigma * rng.standard_normal(n), b])


def test_importance_draws_follow_the_exact_posterior_of_a_curved_sheet():
    """The sheet a = y − b² is 1 mas thick and bends by ~1 over b's prior: the weighted
    draws reproduce the exact posterior's quantiles of a (and b) to within Monte-Carlo
    error (two-sample comparison at 0.03 of a standard deviation; 20000 draws)."""
    sheet = Sheet()
    rng = np.random.default_rng(3)
    draws = conditional_importance(sheet, np.array([0.0, 1.0]), 20000, rng)
    assert draws.pinned == (0,)
    assert draws.effective_samples > 10000  # b is drawn from its own posterior here
    rows = draws.resample(20000, rng)
    exact = exact_draws(sheet, 200000, np.random.default_rng(4))
    for col in (0, 1):
        q = np.percentile(rows[:, col], [2.5, 16, 50, 84, 97.5])
        q_exact = np.percentile(exact[:, col], [2.5, 16, 50, 84, 97.5])
        np.testing.assert_allclose(q, q_exact, atol=0.03 * np.std(exact[:, col]))


def test_a_parameter_without_a_proper_prior_means_importance_sampling_does_not_apply():
    """A free parameter with neither a Gaussian prior, finite bounds nor a period cannot
    be drawn from its prior: None (the caller samples with the Markov chain)."""
    sheet = Sheet()
    sheet.priors = {}
    sheet.lower = np.array([-10.0, -np.inf])
    sheet.upper = np.array([10.0, np.inf])
    assert pinned_parameters(sheet) is None
    assert conditional_importance(sheet, np.zeros(2), 100, np.random.default_rng(0)) is None


def test_systematic_resampling_keeps_the_weights():
    """Rows come back in proportion to their weights (to within 1/n per row: Kitagawa 1996)."""
    rows = np.arange(4.0)[:, None]
    weights = np.array([0.1, 0.2, 0.3, 0.4])
    draws = ImportanceDraws(rows, np.log(weights), (0,), 4)
    picked = draws.resample(1000, np.random.default_rng(2))[:, 0]
    counts = np.bincount(picked.astype(int), minlength=4)
    np.testing.assert_allclose(counts / 1000, weights, atol=1e-3 + 1e-9)
    assert draws.effective_samples == pytest.approx(1 / np.sum(weights**2))


class ScaledSheet(Sheet):
    """Datum y = a·b with noise σ: the sheet's thickness in a is σ/b, so the posterior of b
    is its prior times 1/b (integrating a out of N(y; a b, σ²) with a flat prior:
    common practice) -- the volume factor that randomised fits and a stuck chain miss."""

    def _res(self, rows):
        a, b = rows[:, 0], rows[:, 1]
        return np.column_stack([(a * b - self.y) / self.sigma, (b - self.mu) / self.tau])

    def evaluate(self, rows, columns=None):
        rows = np.atleast_2d(rows)
        res = self._res(rows)
        jac = np.zeros((len(rows), 2, 2))
        jac[:, 0, 0] = rows[:, 1] / self.sigma
        jac[:, 0, 1] = rows[:, 0] / self.sigma
        jac[:, 1, 1] = 1.0 / self.tau
        inside = np.all((rows >= self.lower) & (rows <= self.upper), axis=1)
        return np.where(inside, -0.5 * np.sum(res * res, axis=1), -np.inf), res, jac


def test_importance_draws_carry_the_sheets_volume_factor():
    """Posterior of b ∝ N(b; 1, 0.3)/b on [0.2, 2] (numerical CDF on a fine grid): the
    weighted draws' quantiles of b agree to 0.03 of its standard deviation. Without the
    Laplace proposal's √det term in the weights the median is off by ~0.1."""
    sheet = ScaledSheet()
    rng = np.random.default_rng(7)
    draws = conditional_importance(sheet, np.array([1.0, 1.0]), 40000, rng)
    rows = draws.resample(40000, rng)
    grid = np.linspace(0.2, 2.0, 200001)
    density = np.exp(-0.5 * ((grid - 1.0) / 0.3) ** 2) / grid
    cdf = np.cumsum(density)
    cdf /= cdf[-1]
    probs = np.array([0.025, 0.16, 0.5, 0.84, 0.975])
    exact = np.interp(probs, cdf, grid)
    sd = np.sqrt(
        np.sum(density * grid**2) / np.sum(density)
        - (np.sum(density * grid) / np.sum(density)) ** 2
    )
    np.testing.assert_allclose(np.percentile(rows[:, 1], 100 * probs), exact, atol=0.03 * sd)


def test_jacobian_of_chosen_columns_equals_those_of_the_full_jacobian():
    """information_jacobian(columns=...) differences only the chosen parameters: those
    columns equal the full Jacobian's, the others are 0 (same central differences)."""
    from lensdelay.inference.likelihood import ImageLikelihood
    from lensdelay.lensing.lens import Lens
    from lensdelay.lensing.profiles import EllipticalPowerLaw, ExternalShear
    from lensdelay.model.scenario import parse_scenario
    from lensdelay.model.simulate import simulate_family

    lens = Lens(
        (
            EllipticalPowerLaw(einstein_radius=1.0, slope=2.1, axis_ratio=0.7, position_angle=20),
            ExternalShear(strength=0.05, position_angle=-30),
        )
    )
    fam = simulate_family(lens, 0.05, -0.03, label="s", redshift=2.0, sigma=0.005)
    sc = parse_scenario(
        {"lens": {"redshift": 0.5}, "family": [fam], "lens_light": {"x": 0, "y": 0, "sigma": 0.01}},
        "quad.toml",
    )
    like = ImageLikelihood(sc, sc.model)
    names = like.names
    row = np.array(
        [
            [
                {"einstein_radius": 1.0, "slope": 2.1, "axis_ratio": 0.7, "position_angle": 20}.get(
                    n.split(".")[-1], 0.0
                )
                if n.startswith("mass[0]")
                else 0.0
                for n in names
            ]
        ]
    )
    row[0, names.index("mass[1].strength")] = 0.05
    row[0, names.index("mass[1].position_angle")] = -30.0
    row[0, names.index("source[s].x")], row[0, names.index("source[s].y")] = 0.05, -0.03
    cols = [names.index("mass[0].einstein_radius"), names.index("source[s].y")]
    full = like.information_jacobian(row)
    part = like.information_jacobian(row, columns=cols)
    np.testing.assert_allclose(part[:, :, cols], full[:, :, cols], rtol=1e-12, atol=1e-12)
    others = [i for i in range(len(names)) if i not in cols]
    assert np.all(part[:, :, others] == 0.0)
    assert np.any(full[:, :, others] != 0.0)
