"""Posterior sampling: sampling coordinates, the Fisher information, the Langevin move.

These are the pieces that make the delay intervals of a near-exactly constrained quad
honest (issue 3's calibration); the calibration itself is the slow test in
test_calibration.py and the benchmark.
"""

import pathlib
import sys
import warnings

import numpy as np
import pytest

from lensdelay.inference.coordinates import SampledTarget, SamplingCoordinates
from lensdelay.errors import InputError, LensdelayWarning
from lensdelay.inference.fit import fit, observed_delays
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import sample
from lensdelay.model.scenario import parse_scenario

sys.path.insert(0, str(pathlib.Path(__file__).parent.parent / "benchmarks"))
import bench_fit  # noqa: E402  (the calibration systems, shared with the benchmark)

pytestmark = pytest.mark.integration

NAMES = [
    "mass[0].einstein_radius",
    "mass[0].axis_ratio",
    "mass[0].position_angle",
    "mass[1].strength",
    "mass[1].position_angle",
    "source[s].x",
]
UNBOUNDED = (
    np.array([0.2, 0.1, -np.inf, 0.0, -np.inf, -3.0]),
    np.array([3.0, 1.0, np.inf, 0.5, np.inf, 3.0]),
)


def _rows(rng, n=50):
    return np.column_stack(
        [
            rng.uniform(0.5, 2, n),
            rng.uniform(0.3, 0.95, n),
            rng.uniform(-89, 89, n),
            rng.uniform(0.01, 0.2, n),
            rng.uniform(-89, 89, n),
            rng.normal(0, 0.1, n),
        ]
    )


def test_sampling_coordinates_round_trip(rng):
    """p → (e₁, e₂, γ₁, γ₂) → p is the identity, angles modulo 180° (common practice)."""
    coords = SamplingCoordinates(NAMES, *UNBOUNDED)
    assert coords.ellipse_pairs == [(1, 2)] and coords.shear_pairs == [(3, 4)]
    p = _rows(rng)
    back = coords.to_model(coords.to_sampling(p))
    np.testing.assert_allclose(back, p, rtol=0, atol=1e-9)


def test_bounded_angle_is_left_alone():
    """An angle with bounds of its own is sampled as it is (its wrap would break them)."""
    lo, hi = UNBOUNDED[0].copy(), UNBOUNDED[1].copy()
    lo[2], hi[2] = 0.0, 60.0
    coords = SamplingCoordinates(NAMES, lo, hi)
    assert coords.ellipse_pairs == [] and coords.shear_pairs == [(3, 4)]


def test_sampling_coordinates_jacobian_and_volume(rng):
    """∂p/∂u matches central differences, and log_volume = log |det ∂p/∂u| (change of variables)."""
    coords = SamplingCoordinates(NAMES, *UNBOUNDED)
    u = coords.to_sampling(_rows(rng, 20))
    jac = coords.model_jacobian(u)
    for k in range(u.shape[1]):
        h = 1e-7
        up, down = u.copy(), u.copy()
        up[:, k] += h
        down[:, k] -= h
        num = (coords.to_model(up) - coords.to_model(down)) / (2 * h)
        np.testing.assert_allclose(jac[:, :, k], num, rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(coords.log_volume(u), np.log(np.abs(np.linalg.det(jac))), rtol=1e-10)


def _delay_scenario():
    """The calibration quad with one measured delay, so H0 is a parameter too."""
    fam = bench_fit.simulate_family(
        bench_fit.TRUTH,
        *bench_fit.SOURCE,
        label="s",
        redshift=1.5,
        sigma=0.003,
        rng=np.random.default_rng(4),
    )
    doc = {
        "lens": {"redshift": 0.4},
        "family": [fam],
        "mass": bench_fit.MASS,
        "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.01},
        "delay": [{"family": "s", "image": "C", "relative_to": "A", "days": 9.0, "sigma": 1.0}],
    }
    return parse_scenario(doc, "with-delay.toml")


CASES = {
    "quad": dict(make=lambda: bench_fit.system(np.random.default_rng(5)).scenario),
    "quad+fluxes": dict(
        make=lambda: bench_fit.system(np.random.default_rng(5)).scenario, use_fluxes=True
    ),
    "two-families": dict(
        make=lambda: bench_fit.two_family_system(np.random.default_rng(5)).scenario
    ),
    "quad+delay+H0": dict(make=_delay_scenario, use_delays=True),
}


@pytest.mark.parametrize("case", CASES)
def test_information_jacobian_matches_finite_differences(case, brute_jacobian):
    """The implicit-function Jacobian of the residuals equals brute-force central differences
    that solve the lens equation again (Schneider, Ehlers & Falco 1992, eq. 5.20)."""
    opts = dict(CASES[case])
    sc = opts.pop("make")()
    like = ImageLikelihood(sc, sc.model, **opts)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        values = fit(like).values
    jac = like.information_jacobian(values)[0]
    assert jac.shape == (like.n_constraints, like.n_parameters)
    num = brute_jacobian(like.residuals, values)
    np.testing.assert_allclose(jac, num, rtol=1e-4, atol=1e-6 * np.max(np.abs(num)))


@pytest.mark.parametrize("case", ["quad", "two-families"])
def test_forward_jacobian_skips_only_what_leaves_the_lens_alone(case, monkeypatch):
    """The forward scheme evaluates no lens for a step in a source position (the lens and
    its deflection do not change): the same Jacobian, bit for bit, as evaluating them all.
    Reference: the full evaluation, itself checked against brute-force differences above
    (equality to the bit for a shortcut that drops no arithmetic: common practice)."""
    from lensdelay.inference import information

    sc = CASES[case]["make"]()
    like = ImageLikelihood(sc, sc.model)
    rng = np.random.default_rng(3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        best = fit(like).values
    rows = best + 1e-4 * rng.standard_normal((6, like.n_parameters))
    rows = np.clip(rows, like.lower, like.upper)
    seen = []
    original = like.lens_for
    monkeypatch.setattr(like, "lens_for", lambda r: seen.append(len(r)) or original(r))
    fast = like.information_jacobian(rows, scheme="forward")
    n_lens_columns = like.n_model + 1  # the model's parameters and the unshifted rows
    assert seen[-1] == len(rows) * n_lens_columns
    monkeypatch.setattr(
        information,
        "_lens_blocks",
        lambda like, cols, high, low, scheme, need: (
            slice(None),
            np.concatenate([high, low]).reshape(-1, high.shape[-1]),
        ),
    )
    every = like.information_jacobian(rows, scheme="forward")
    assert seen[-1] == len(rows) * (like.n_parameters + 1)
    np.testing.assert_array_equal(fast, every)


def test_jeffreys_prior_does_not_depend_on_the_parametrisation(rng):
    """½ log det F in (e₁, e₂, γ₁, γ₂) equals ½ log det F in (q, φ, γ, φγ) plus log |det ∂p/∂u|:
    Jeffreys' prior is invariant (Jeffreys 1946, Proc. R. Soc. A 186, 453)."""
    sc = bench_fit.system(np.random.default_rng(6)).scenario
    like = ImageLikelihood(sc, sc.model, prior="jeffreys")
    coords = SamplingCoordinates(like.names, like.lower, like.upper)
    target = SampledTarget(like, coords)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        values = fit(like).values
    p = values + 0.3 * np.array(
        [0.01, 0.05, 5, 0.005, 0.005, 0.01, 5, 0.002, 0.002]
    ) * rng.standard_normal((5, 9))
    u = coords.to_sampling(p)
    _, _, jac_u = target.evaluate(u)
    logdet_u = 0.5 * np.linalg.slogdet(np.einsum("pmi,pmj->pij", jac_u, jac_u))[1]
    np.testing.assert_allclose(logdet_u, like.log_prior(p) + coords.log_volume(u), rtol=1e-8)


class Banana:
    """A target with a curved valley and a known answer: r = (u₀, (u₁ − u₀²)/0.2).

    Integrating u₁ out leaves u₀ ~ N(0, 1); E[u₁] = E[u₀²] = 1 (Gaussian integrals).
    """

    names = ["a", "b"]
    periods = [None, None]
    lower = np.array([-10.0, -10.0])
    upper = np.array([10.0, 30.0])

    def evaluate(self, rows):
        rows = np.atleast_2d(rows)
        r = np.column_stack([rows[:, 0], (rows[:, 1] - rows[:, 0] ** 2) / 0.2])
        jac = np.zeros((len(rows), 2, 2))
        jac[:, 0, 0] = 1.0
        jac[:, 1, 0] = -2 * rows[:, 0] / 0.2
        jac[:, 1, 1] = 1 / 0.2
        inside = np.all((rows >= self.lower) & (rows <= self.upper), axis=1)
        return np.where(inside, -0.5 * np.sum(r * r, axis=1), -np.inf), r, jac

    def log_probability(self, rows):
        return self.evaluate(rows)[0]


def test_langevin_move_samples_the_exact_posterior_of_a_banana():
    """The Metropolis–Hastings correction makes the chain target the posterior exactly, also
    where the metric changes along a curved valley (Girolami & Calderhead 2011)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        ch = sample(
            Banana(),
            np.array([0.0, 0.0]),
            walkers=32,
            steps=3000,
            seed=3,
            progress=False,
            scales=np.array([0.1, 0.1]),
        )
    s = ch.samples()
    # tolerances of 4 standard errors from the chain's own effective sample size
    # (walkers × kept steps / τ; about 800 here): 1/√ESS on the mean of u₀, 1/√(2 ESS)
    # on its standard deviation, √2/√ESS on E[u₁] = E[u₀²] (var u₀² = 2 for N(0, 1))
    ess = s.shape[0] * ch.thin / np.max(ch.autocorr)
    assert abs(np.mean(s[:, 0])) < 4 / np.sqrt(ess)
    assert abs(np.std(s[:, 0]) - 1.0) < 4 / np.sqrt(2 * ess)
    assert abs(np.mean(s[:, 1]) - 1.0) < 4 * np.sqrt(2 / ess)
    assert 0.2 < ch.acceptance.mean() < 0.95


def test_unknown_move_is_refused():
    with pytest.raises(InputError, match="move must be one of"):
        sample(Banana(), np.array([0.0, 0.0]), steps=60, progress=False, move="leapfrog")


def test_chains_started_at_both_ends_of_the_valley_agree():
    """Walkers started where the delay is 2.6 d and where it is 5.5 d (both within Δχ² ≈ 1.3 of
    the best fit, 3.9 d) end with the same delay posterior (measured: medians 4.39 and 4.24 d).
    emcee's stretch move alone does not: in the same coordinates and steps its medians were
    3.77 and 4.67 d (measured), so this check fails without the Langevin move."""
    sc = bench_fit.system(np.random.default_rng(1000)).scenario
    like = ImageLikelihood(sc, sc.model, prior="flat")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        best = fit(like)
        medians = []
        for seed, d in enumerate((2.6, 5.5)):
            start = bench_fit.valley_end(like, best, d)
            # different seeds: two chains fed the same random numbers could couple exactly
            ch = sample(
                like,
                start,
                walkers=32,
                steps=600,
                seed=seed + 1,
                progress=False,
                scales=0.05 * best.errors,
            )
            days = observed_delays(like, ch.chain[300:].reshape(-1, ch.chain.shape[-1]))[:, 1]
            medians.append(np.median(days))
    assert abs(medians[0] - medians[1]) < 0.35, medians


def test_angle_prior_is_periodic():
    """A Gaussian prior on a position angle measures the distance to the nearest equivalent
    mean (angles are defined modulo 180°, CONVENTIONS.md): −88° ≡ 92° is 7° from a mean of 85°."""
    mass = [
        dict(bench_fit.MASS[0], position_angle={"value": 80.0, "prior": [85.0, 10.0]}),
        bench_fit.MASS[1],
    ]
    fam = bench_fit.simulate_family(
        bench_fit.TRUTH,
        *bench_fit.SOURCE,
        label="s",
        redshift=1.5,
        sigma=0.003,
        rng=np.random.default_rng(2),
    )
    sc = parse_scenario(
        {"lens": {"redshift": 0.4}, "family": [fam], "mass": mass}, "angle-prior.toml"
    )
    like = ImageLikelihood(sc, sc.model)
    row = np.array([1.1, 0.7, 0.0, 0.0, 0.0, 0.05, -40.0, 0.03, 0.02])
    i = like.names.index("mass[0].position_angle")
    prior_col = like.n_constraints - 1  # the only prior row is the last constraint
    values = []
    for angle in (-88.0, 92.0, 82.0):
        row[i] = angle
        values.append(like.data_residuals(row)[0, prior_col])
    np.testing.assert_allclose(values, [0.7, 0.7, -0.3], atol=1e-12)


def test_rows_that_already_fit_exactly_keep_the_batch_shape():
    """A batch of identical rows whose images match the observed ones exactly (Newton has
    nothing to do) still gives one residual row per parameter row (regression: the joint
    H0 fit of an exactly constrained double failed on this)."""
    from lensdelay.lensing.images import find_images
    from lensdelay.lensing.lens import Lens
    from lensdelay.lensing.profiles import ExternalShear, SingularIsothermalSphere

    truth = Lens(
        (
            SingularIsothermalSphere(einstein_radius=1.0),
            ExternalShear(strength=0.05, position_angle=30.0),
        )
    )
    t = find_images(truth, [0.05], [0.02])
    images = [
        {"label": lab, "x": float(x), "y": float(y), "sigma": 0.003}
        for lab, x, y in zip("AB", t.x, t.y)
    ]
    mass = [
        {"profile": "SIS", "einstein_radius": {"value": 1.0, "min": 0.2, "max": 3.0}},
        {
            "profile": "shear",
            "strength": {"value": 0.05, "min": 0, "max": 0.3, "prior": [0.05, 0.02]},
            "position_angle": {"value": 30.0},
        },
    ]
    sc = parse_scenario(
        {
            "lens": {"redshift": 0.4},
            "family": [{"label": "q", "redshift": 2.0, "image": images}],
            "mass": mass,
        },
        "exact.toml",
    )
    like = ImageLikelihood(sc, sc.model)
    rows = np.repeat(np.array([[1.0, 0.05, 30.0, 0.05, 0.02]]), 5, axis=0)
    assert like.predict(rows)[0]["x"].shape == (5, 2)
    assert like.residuals(rows).shape == (5, like.n_constraints)
    assert np.all(np.isfinite(like.log_probability(rows)))


def test_jacobian_at_the_bounds_stays_inside_them():
    """A best fit on q = 1 or γ = 0: finite differences step inward only, never a false
    input error from a profile asked for γ < 0 or q > 1 (issue 12, item 9)."""
    like = bench_fit.system(np.random.default_rng(5))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        values = fit(like).values.copy()
    for name in ("mass[0].axis_ratio", "mass[1].strength"):
        i = like.names.index(name)
        values[i] = like.upper[i] if name.endswith("axis_ratio") else like.lower[i]
    jac = like.information_jacobian(values)[0]
    assert np.all(np.isfinite(jac))
    logp, _, _ = like.evaluate(values[None, :])
    assert np.isfinite(logp[0])


class Spike(Banana):
    """A target that is finite at one point only: no walker can ever move."""

    def evaluate(self, rows):
        rows = np.atleast_2d(rows)
        at = np.all(np.abs(rows) < 1e-12, axis=1)
        n = len(rows)
        return np.where(at, 0.0, -np.inf), np.zeros((n, 2)), np.zeros((n, 2, 2))


def test_walkers_that_never_move_are_reported_not_a_crash():
    """No autocorrelation time exists for a flat chain: the sampler says so (issue 12,
    the fold_on case ended in a traceback)."""
    with pytest.warns(LensdelayWarning, match="walkers did not move"):
        ch = sample(
            Spike(),
            np.array([0.0, 0.0]),
            walkers=8,
            steps=60,
            move="stretch",
            scales=np.array([1.0, 1.0]),
        )
    assert any("did not move" in n for n in ch.warnings)
    assert ch.burn >= 1 and ch.thin >= 1
