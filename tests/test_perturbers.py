"""Unseen perturbers (lensdelay/forecast/perturbers.py): population, field, the fit's response."""

from __future__ import annotations

import subprocess
import sys
import warnings
from dataclasses import replace

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from scipy import integrate, stats

from lensdelay.errors import InputError, LensdelayWarning
from lensdelay.forecast.perturbers import (
    PerturberDraws,
    PerturberPopulation,
    delays_for,
    draw_perturbers,
    einstein_radius2_per_mass,
    perturber_response,
)
from lensdelay.lensing.distances import LensDistances
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY

QUAD = "scenarios/vellmar_quad.toml"


def test_mean_mass_is_the_power_laws_first_moment():
    """⟨M⟩ of dN/dM ∝ M^-α on [M1, M2] against numerical integration (common practice)."""
    pop = PerturberPopulation(slope=1.9, mass_range=(1e7, 1e10))
    pdf = lambda m: m**-1.9  # noqa: E731
    lo, hi = np.log(1e7), np.log(1e10)
    # integrate in ln M: dM = M dlnM
    first = integrate.quad(lambda s: np.exp(s) * pdf(np.exp(s)) * np.exp(s), lo, hi)[0]
    zeroth = integrate.quad(lambda s: pdf(np.exp(s)) * np.exp(s), lo, hi)[0]
    assert pop.mean_mass() == pytest.approx(first / zeroth, rel=1e-8)


def test_masses_follow_the_truncated_power_law():
    """Drawn masses against the distribution function of the truncated power law (KS test)."""
    pop = PerturberPopulation(slope=1.9, mass_range=(1e7, 1e10))
    m = pop.draw_masses(20_000, np.random.default_rng(3))
    a = 1.9

    def cdf(x):
        lo, hi = pop.mass_range
        return (lo ** (1 - a) - x ** (1 - a)) / (lo ** (1 - a) - hi ** (1 - a))

    assert stats.kstest(m, cdf).pvalue > 1e-3
    assert m.min() >= 1e7 and m.max() <= 1e10


def test_counts_radii_and_number_match_the_population():
    """Poisson counts with mean N̄, radii uniform in the annulus (κ_sub ∝ 1/r: flat in r)."""
    pop = PerturberPopulation()
    theta2 = 4.5e-12
    draws = draw_perturbers(pop, 4000, 1.0, (0.1, -0.2), theta2, np.random.default_rng(5))
    counts = np.bincount(draws.owner, minlength=4000)
    mean = pop.expected_number(1.0, theta2)
    assert counts.mean() == pytest.approx(mean, rel=0.01)
    r = np.hypot(draws.x - 0.1, draws.y + 0.2)
    assert stats.kstest(r, stats.uniform(0.5, 2.5).cdf).pvalue > 1e-3
    # N̄ = f θE (r2 - r1) / <θp²>, and the mass it carries is f κ(r) over the annulus:
    # Σ π θp² = ∫ f θE/(2r) 2π r dr = π f θE (r2 - r1)
    carried = np.pi * np.sum(draws.theta2) / 4000
    assert carried == pytest.approx(np.pi * 0.01 * 1.0 * 2.5, rel=0.1)


def test_point_mass_einstein_radius_matches_its_formula():
    """θp² = 4GM/c² D_ls/(D_l D_s) (Schneider, Ehlers & Falco 1992, eq. 2.6a), via astropy."""
    dist = LensDistances(DEFAULT_COSMOLOGY, 0.5, 2.0)
    d_l = DEFAULT_COSMOLOGY.angular_diameter_distance(0.5)
    d_s = DEFAULT_COSMOLOGY.angular_diameter_distance(2.0)
    d_ls = DEFAULT_COSMOLOGY.angular_diameter_distance(0.5, 2.0)
    theta = np.sqrt(4 * const.G * 1e11 * const.M_sun / const.c**2 * d_ls / (d_l * d_s))
    expected = (theta.decompose().value * u.rad).to_value(u.arcsec) ** 2 / 1e11
    assert einstein_radius2_per_mass(dist) == pytest.approx(expected, rel=1e-10)


def test_field_deflection_is_the_gradient_of_the_potential():
    """α = ∇ψ for the softened point masses (the lensing convention), by central differences."""
    draws = PerturberDraws(
        np.array([0, 0, 1]),
        np.array([0.3, -1.0, 0.5]),
        np.array([0.2, 0.4, -0.7]),
        np.array([0.01, 0.002, 0.03]),
    )
    x = np.array([[0.5, -0.2], [1.1, 0.0]])
    y = np.array([[0.1, 0.9], [-0.3, 0.4]])
    h = 1e-6
    _, ax, ay = draws.field(2, x, y)
    px = (draws.field(2, x + h, y)[0] - draws.field(2, x - h, y)[0]) / (2 * h)
    py = (draws.field(2, x, y + h)[0] - draws.field(2, x, y - h)[0]) / (2 * h)
    np.testing.assert_allclose(ax, px, rtol=1e-6, atol=1e-10)
    np.testing.assert_allclose(ay, py, rtol=1e-6, atol=1e-10)
    # each sample sees only its own perturbers: sample 1 has one
    psi = draws.field(2, x, y)[0]
    r2 = (x[1] - 0.5) ** 2 + (y[1] + 0.7) ** 2
    np.testing.assert_allclose(psi[1], 0.5 * 0.03 * np.log(r2 + 0.03))


@pytest.mark.parametrize("distance, theta2", [(20.0, 0.5), (10.0, 0.2)])
def test_a_distant_perturber_is_absorbed_by_the_fit(quad, distance, theta2):
    """Far away a perturber acts as a deflection plus a tidal field: the fit's source and
    shear absorb it (module docstring, item 2), leaving under 2% of its raw delay change."""
    like, values, tracks = quad
    resp = perturber_response(like, values, tracks, PerturberPopulation())
    tx = np.array([[t.x for t in tracks]])
    ty = np.array([[t.y for t in tracks]])
    days = np.atleast_1d(like.family_days(0, values[None, :]))
    one = PerturberDraws(np.array([0]), np.array([distance]), np.array([0.3]), np.array([theta2]))
    absorbed = delays_for(resp, one, tx, ty, 1, days)
    raw = delays_for(replace(resp, absorb=np.zeros_like(resp.absorb)), one, tx, ty, 1, days)
    assert np.max(np.abs(raw)) > 0.5  # days: a real change before the fit reacts
    assert np.max(np.abs(absorbed)) < 0.02 * np.max(np.abs(raw))


def test_no_perturber_changes_nothing_and_reference_is_zero(quad):
    """Zero perturbers: zero change; the reference image's change is zero by definition."""
    like, values, tracks = quad
    resp = perturber_response(like, values, tracks, PerturberPopulation())
    none = PerturberDraws(np.zeros(0, int), np.zeros(0), np.zeros(0), np.zeros(0))
    tx = np.array([[t.x for t in tracks]] * 3)
    ty = np.array([[t.y for t in tracks]] * 3)
    out = delays_for(resp, none, tx, ty, 1, np.ones(3))
    np.testing.assert_array_equal(out, 0.0)
    pop = PerturberPopulation()
    from lensdelay.forecast.perturbers import perturber_delays

    shifted = perturber_delays(resp, tx, ty, 1, 50.0, np.random.default_rng(0))
    np.testing.assert_array_equal(shifted[:, 1], 0.0)
    assert np.all(np.isfinite(shifted)) and pop.active


def test_switched_off_or_members_gives_no_response(quad):
    """f_sub = 0: no term; a model with [members] (a group or cluster): not applied."""
    like, values, tracks = quad
    assert perturber_response(like, values, tracks, PerturberPopulation(mass_fraction=0.0)) is None
    assert perturber_response(like, values, tracks, None) is None


@pytest.mark.parametrize(
    "kwargs",
    [
        {"mass_fraction": -0.1},
        {"mass_fraction": 0.9},
        {"mass_range": (1e9, 1e8)},
        {"radius_range": (2.0, 1.0)},
        {"slope": 3.5},
    ],
)
def test_bad_population_is_refused(kwargs):
    with pytest.raises(InputError, match="unseen"):
        PerturberPopulation(**kwargs)


def test_forecast_budget_has_the_perturbers_line_and_off_switch():
    """The term widens the windows and is its own budget line; unseen=(0, 0) removes it."""
    from lensdelay.api import forecast_scenario

    fast = dict(n_samples=4000, walkers=20, steps=300, budget=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        on = forecast_scenario(QUAD, **fast)
        off = forecast_scenario(QUAD, unseen=(0.0, 0.0), **fast)
    row_on = next(r for r in on.budget["images"] if r["label"] == "D")
    row_off = next(r for r in off.budget["images"] if r["label"] == "D")
    assert row_on["date"]["unseen perturbers"]["sigma_days"] > 0.1
    assert row_off["date"]["unseen perturbers"]["sigma_days"] == 0.0
    assert row_on["date_sigma_days"] > row_off["date_sigma_days"]
    assert on.budget["assumptions"]["unseen_perturbers"]["mass_fraction"] == 0.01
    assert off.budget["assumptions"]["unseen_perturbers"] is None
    assert any("unseen perturbers marginalised" in n for n in on.model_notes[0])


def test_cli_refuses_a_bad_fraction_in_one_line(tmp_path):
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "lensdelay",
            "forecast",
            QUAD,
            "--unseen",
            "0.9",
            "1e10",
            "--out",
            str(tmp_path / "o"),
        ],
        capture_output=True,
        text=True,
    )
    assert out.returncode == 2
    assert out.stderr.count("\n") == 1 and "--unseen" in out.stderr
    assert "Traceback" not in out.stderr
    assert not (tmp_path / "o").exists()


def test_conditional_perturbation_follows_gaussian_conditioning():
    """P | y for P ~ N(0, Σ), y = A(T + P) + ε (Rasmussen & Williams 2006, eq. A.6):
    with one delay C − A measured, P_C is pulled to the residual by Σ_CC/(Σ_CC + σ²), the
    correlated P_D by Σ_DC/(Σ_CC + σ²), and the reference's stays 0."""
    from lensdelay.forecast.update import draw_conditional_perturbations
    from lensdelay.forecast.samples import ImageTrack, ModelSamples
    from lensdelay.inference.timing import TimingData
    from lensdelay.model.scenario import MeasuredDelay

    n = 200_000
    tracks = [ImageTrack("sn", lab, True, 0.0, 0.0) for lab in "ACD"]
    lens_days = np.tile([0.0, 5.0, 12.0], (n, 1))
    ones = np.ones(n)
    samples = ModelSamples(
        "m",
        tracks,
        0,
        np.zeros((n, 3)),
        np.zeros((n, 3)),
        np.ones((n, 3), bool),
        lens_days,
        np.ones((n, 3)),
        np.zeros((n, 3), int),
        np.tile([1, 2, 3], (n, 1)),
        70 * ones,
        0 * ones,
        ones,
    )
    sigma = 0.5
    timing = TimingData(
        [("sn", "A"), ("sn", "C"), ("sn", "D")], [MeasuredDelay("sn", "C", "A", 6.0, sigma)]
    )
    cov = np.array([[0.0, 0.0, 0.0], [0.0, 1.0, 0.6], [0.0, 0.6, 2.0]])
    out = draw_conditional_perturbations(samples, timing, cov, np.random.default_rng(2))
    p = out.perturber_days
    residual = 6.0 - 5.0
    gain_c, gain_d = 1.0 / (1.0 + sigma**2), 0.6 / (1.0 + sigma**2)
    assert np.mean(p[:, 1]) == pytest.approx(gain_c * residual, abs=0.01)
    assert np.mean(p[:, 2]) == pytest.approx(gain_d * residual, abs=0.01)
    assert np.var(p[:, 1]) == pytest.approx(1.0 - gain_c * 1.0, rel=0.02)
    assert np.var(p[:, 2]) == pytest.approx(2.0 - gain_d * 0.6, rel=0.02)
    np.testing.assert_array_equal(p[:, 0], 0.0)
    np.testing.assert_allclose(out.lens_days - lens_days, p)


def test_compiled_field_matches_numpy():
    """The compiled sum over perturbers equals the numpy reference to 1e-12 (NaN kept)."""
    from lensdelay.lensing import compiled

    rng = np.random.default_rng(4)
    draws = draw_perturbers(PerturberPopulation(), 50, 1.0, (0.0, 0.0), 4.5e-12, rng)
    x = rng.normal(0, 1, (50, 4))
    y = rng.normal(0, 1, (50, 4))
    x[3, 2] = np.nan
    fast = draws.field(50, x, y)
    with compiled.disabled():
        slow = draws.field(50, x, y)
    for a, b in zip(fast, slow):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-15)
        assert np.isnan(a[3, 2])
