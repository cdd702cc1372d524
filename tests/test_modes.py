"""Fit modes: distinct optima kept by the fit, sampled each and mixed by their posterior mass,
and reported by the forecast (issue 28)."""

from __future__ import annotations

import warnings

from types import SimpleNamespace

import numpy as np
import pytest

from lensdelay.errors import LensdelayWarning
from lensdelay.inference.modes import MODE_DCHI2, log_mode_mass, mix_modes, modes_to_sample
from lensdelay.inference.sampling import Chain, sample
from lensdelay.inference.sequence import _sample_other_modes


def test_distinct_modes_compare_angles_modulo_their_period(quad):
    """Optima apart by > 3 error bars are modes; an angle 179.9° from another is not."""
    from lensdelay.inference.modes import distinct_modes

    like, values, _ = quad
    errors = np.full(len(values), 0.01)
    angle = like.names.index("mass[0].position_angle")
    period = like.periods[angle]
    turned = values.copy()
    turned[angle] += period - 0.001  # the same angle
    moved = values.copy()
    moved[0] += 0.1  # ten error bars in θE
    found = distinct_modes(like, [(1.0, values), (2.0, turned), (3.0, moved)], values, errors)
    assert [c for c, _ in found] == [3.0]


def test_a_close_mode_with_other_delays_is_reported(quad):
    """Another mode within Δχ² 9.2 whose delays differ gets a note; a worse one does not."""
    from dataclasses import replace as dc_replace

    from lensdelay.forecast.samples import mode_notes
    from lensdelay.inference.fit import fit as fit_again

    like, values, tracks = quad
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        result = fit_again(like)
    other = values.copy()
    other[like.names.index("mass[1].strength")] *= 1.6  # more shear: other delays
    close = dc_replace(result, alternatives=[(result.chi2 + 2.0, other)])
    far = dc_replace(result, alternatives=[(result.chi2 + 20.0, other)])
    notes = mode_notes(like, close, tracks, "B")
    assert len(notes) == 1 and "another fit mode" in notes[0]
    assert mode_notes(like, far, tracks, "B") == []
    assert "follow the best fit's mode only" in notes[0]
    mixed_in = [SimpleNamespace(chi2=result.chi2 + 2.0, weight=0.3, walkers=10)]
    assert "mix both modes" in mode_notes(like, close, tracks, "B", mixed_in)[0]


#: Two round Gaussian valleys in two parameters: centres, widths and peak heights. The
#: second is lower at its peak (Δχ² = 2) but twice as wide, so it holds more mass: in d = 2
#: a Gaussian valley's mass is h · 2π σ² (a Gaussian integral), here in the ratio
#: e^(−1) · 4 ≈ 1.47, a weight of 0.595 for the second valley.
CENTRES = np.array([[0.0, 0.0], [5.0, 1.0]])
WIDTHS = np.array([0.1, 0.2])
LOG_HEIGHTS = np.array([0.0, -1.0])
SECOND_WEIGHT = 4 * np.exp(-1.0) / (1 + 4 * np.exp(-1.0))


class TwoValleys:
    """A target of two Gaussian valleys, each seen through its own residuals.

    ln p = max_k [ln h_k − ½ |(u − μ_k)/σ_k|²]: for valleys 25 widths apart the larger
    term differs from the mixture's sum by far less than rounding.
    """

    names = ["a", "b"]
    periods = [None, None]
    lower = np.array([-10.0, -10.0])
    upper = np.array([10.0, 10.0])

    def evaluate(self, rows):
        rows = np.atleast_2d(rows)
        r = (rows[:, None, :] - CENTRES[None]) / WIDTHS[None, :, None]
        terms = LOG_HEIGHTS[None] - 0.5 * np.sum(r * r, axis=2)
        k = np.argmax(terms, axis=1)
        jac = np.zeros((len(rows), 2, 2))
        jac[:, 0, 0] = jac[:, 1, 1] = 1.0 / WIDTHS[k]
        inside = np.all((rows >= self.lower) & (rows <= self.upper), axis=1)
        logp = np.where(inside, terms[np.arange(len(rows)), k], -np.inf)
        return logp, r[np.arange(len(rows)), k], jac

    def log_probability(self, rows):
        return self.evaluate(rows)[0]


def _direct_chain(rng, mode, walkers=32, steps=1000):
    """A chain of independent draws from one valley (as if sampled perfectly)."""
    values = CENTRES[mode] + WIDTHS[mode] * rng.standard_normal((steps, walkers, 2))
    logp = TwoValleys().log_probability(values.reshape(-1, 2)).reshape(steps, walkers)
    return Chain(
        ["a", "b"],
        values,
        logp,
        np.full(walkers, 0.5),
        np.array([1.0, 1.0]),
        0,
        1,
        mode,
        [],
        "langevin",
        np.array([1.0, 1.0]),
    )


def _best_fit():
    return SimpleNamespace(
        values=CENTRES[0].copy(),
        errors=np.full(2, WIDTHS[0]),
        chi2=0.0,
        alternatives=[(2.0, CENTRES[1].copy()), (MODE_DCHI2 + 1, np.array([-5.0, 0.0]))],
    )


def test_laplace_mass_of_a_gaussian_valley_is_exact(rng):
    """ln Z = ln h + ln(2π σ²) for a round Gaussian in two dimensions (Gaussian integral);
    the estimate's own noise is ~ 1/√(walkers × steps)."""
    like = TwoValleys()
    for mode in (0, 1):
        got = log_mode_mass(like, _direct_chain(rng, mode))
        # the estimator drops the (2π)^(d/2) shared by every valley
        expected = LOG_HEIGHTS[mode] + np.log(WIDTHS[mode] ** 2)
        assert got == pytest.approx(expected, abs=0.03)


def test_the_wider_lower_valley_gets_the_larger_share(rng):
    like, best = TwoValleys(), _best_fit()
    chains = [_direct_chain(rng, 0), _direct_chain(rng, 1)]
    mixed, shares, notes = mix_modes(like, best, chains, [0.0, 2.0])
    assert [s.chi2 for s in shares] == [0.0, 2.0]
    assert shares[1].weight == pytest.approx(SECOND_WEIGHT, abs=0.01)
    # the larger valley keeps every walker, the other its share of them
    assert shares[1].walkers == 32
    assert shares[0].walkers == round(32 * (1 - SECOND_WEIGHT) / SECOND_WEIGHT)
    in_second = np.mean(mixed.samples()[:, 0] > 2.5)
    assert in_second == pytest.approx(32 / (32 + shares[0].walkers))
    assert mixed.chain.shape[1] == mixed.log_prob.shape[1] == len(mixed.acceptance)
    assert any("mix them by posterior mass" in n for n in notes)


def test_a_chain_that_joined_the_other_valley_is_used_once(rng):
    like, best = TwoValleys(), _best_fit()
    chains = [_direct_chain(rng, 0), _direct_chain(rng, 0)]
    mixed, shares, notes = mix_modes(like, best, chains, [0.0, 2.0])
    assert mixed is chains[0] and shares == []
    assert "joined another mode's valley" in notes[0]


def test_only_modes_near_the_best_are_sampled():
    best = _best_fit()
    assert [c for c, _ in modes_to_sample(best)] == [2.0]


def test_the_sampler_mixes_a_second_valley_by_its_mass():
    """The best valley's chain and one started in the other fit mode, mixed: the share of
    samples in the second valley follows its mass (0.595), not its lower peak."""
    like, best = TwoValleys(), _best_fit()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        first = sample(like, CENTRES[0], walkers=16, steps=600, seed=3, scales=best.errors)
        mixed = _sample_other_modes(
            like, best, first, modes_to_sample(best), 600, 16, 3, False, None, None, False
        )
    assert len(mixed.modes) == 2
    assert mixed.modes[1].weight == pytest.approx(SECOND_WEIGHT, abs=0.05)
    in_second = np.mean(mixed.samples()[:, 0] > 2.5)
    expected = mixed.modes[1].walkers / (mixed.modes[0].walkers + mixed.modes[1].walkers)
    assert in_second == pytest.approx(expected, abs=0.02)
    assert 0.5 < in_second < 0.7
