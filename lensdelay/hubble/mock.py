"""Mock lens populations for calibrating the joint H0 (tests and benchmarks).

The truths lie outside what each lens's posterior knows: the slopes scatter about the
population, every lens has its own κ_ext (drawn from its prior) and its own internal
mass sheet λ_int ~ N(λ̄, s_λ), which no lens fit contains. Each lens's positions-only
posterior is mimicked without fitting: the slope is known to ``slope_precision`` (as
imaging of arcs gives it), centred on a noisy estimate of the truth, and its lens-model
delays follow the slope as a power law's do, Δt ∝ (γ − 1) at fixed image positions
(Wucknitz 2002, MNRAS 332, 951; Kochanek 2002, ApJ 578, 25: from memory). Measured delays
and dispersions carry Gaussian errors of the stated fractions.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from astropy import units as u
from astropy.cosmology import FlatLambdaCDM

from lensdelay.hubble.lens_evidence import LensEvidence
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.kinematics import (
    Aperture,
    DispersionTable,
    dispersion_tables,
    LightProfile,
    power_law_mass_factor,
)
from lensdelay.model.kinematics import Kinematics

__all__ = ["MockSettings", "mock_population"]


@dataclass(frozen=True)
class MockSettings:
    """A mock population's truths and errors (defaults: issue 30's calibration)."""

    n_lenses: int = 40
    n_kinematics_only: int = 0  # lenses with kinematics but no delays
    h0: float = 70.0
    om0: float = 0.3
    lambda_mean: float = 1.0
    lambda_scatter: float = 0.05
    kappa_sigma: float = 0.05
    slope_mean: float = 2.0
    slope_scatter: float = 0.1
    slope_precision: float = 0.03
    delay_error: float = 0.05
    dispersion_error: tuple[float, float] = (0.05, 0.10)
    #: the orbits' population: mean r_a/R_eff (None: drawn once per population from the
    #: joint stage's own prior, uniform in [0.5, 5]) and the scatter of ln r_a
    r_ani_mean: float | None = 1.5
    r_ani_scatter: float = 0.2
    n_samples: int = 1000
    anisotropy: str = "osipkov_merritt"
    #: resolved kinematics: the rings' radii (arcsec; R_eff = 1"), each ring its own
    #: dispersion with the lens's fractional error, seen at ``ring_seeing`` (an
    #: integral-field spectrograph with adaptive optics or from space); None: one
    #: 1" × 1" slit in 0.7" seeing
    rings: tuple[float, ...] | None = None
    ring_seeing: float = 0.1
    #: simulation-based calibration: the population parameters the data leave to their
    #: priors — s_λ, the orbits' mean r_a/R_eff and scatter — drawn once per population
    #: from the joint stage's own priors, and H0 and λ̄, which the data pin, uniform in
    #: 50-90 and 0.8-1.2 (inside their flat priors), instead of the values above
    hyper_from_prior: bool = False


_TABLES: dict = {}


def _apertures(st: MockSettings) -> list[Aperture]:
    if st.rings is None:
        return [Aperture("slit", 0.7, width=1.0, length=1.0)]
    edges = st.rings
    return [
        Aperture("annulus", st.ring_seeing, radius=outer, inner=inner)
        for inner, outer in zip(edges[:-1], edges[1:])
    ]


def _tables(st: MockSettings) -> tuple[DispersionTable, ...]:
    """One set of apertures and one light profile for every mock lens: built once."""
    key = (st.anisotropy, st.rings, st.ring_seeing)
    if key not in _TABLES:
        light = LightProfile.from_effective_radius("hernquist", 1.0)
        _TABLES[key] = dispersion_tables(light, _apertures(st), st.anisotropy, 1.0)
    return _TABLES[key]


def _kinematics(st: MockSettings, sigma_obs, error) -> Kinematics:
    if st.rings is None:
        return Kinematics(
            velocity_dispersion=float(sigma_obs[0]),
            velocity_dispersion_sigma=float(error[0]),
            aperture="slit",
            seeing_fwhm=0.7,
            effective_radius=1.0,
            aperture_width=1.0,
            aperture_length=1.0,
        )
    return Kinematics(
        velocity_dispersion=tuple(map(float, sigma_obs)),
        velocity_dispersion_sigma=tuple(map(float, error)),
        aperture="annuli",
        seeing_fwhm=st.ring_seeing,
        effective_radius=1.0,
        bin_edges=tuple(st.rings),
    )


def _one_lens(k: int, st: MockSettings, rng: np.random.Generator, with_delays: bool, r_ani):
    """One mock lens and its truths."""
    z_l, z_s = rng.uniform(0.3, 0.7), rng.uniform(1.5, 3.0)
    slope = rng.normal(st.slope_mean, st.slope_scatter)
    theta_e = rng.uniform(0.8, 1.6)
    lam = rng.normal(st.lambda_mean, st.lambda_scatter)
    while lam <= 0.05:  # no lens without a mass sheet to speak of (rare: see hyper_from_prior)
        lam = rng.normal(st.lambda_mean, st.lambda_scatter)
    kappa_prior = (0.0, st.kappa_sigma)
    kappa = rng.normal(*kappa_prior)
    if st.anisotropy == "osipkov_merritt":
        ani = r_ani * np.exp(st.r_ani_scatter * rng.standard_normal())
    elif st.anisotropy == "constant":
        ani = rng.normal(0.1, 0.1)
    else:
        ani = 0.0
    cosmo = FlatLambdaCDM(H0=st.h0, Om0=st.om0)
    reference = FlatLambdaCDM(H0=70.0, Om0=0.3)
    # the lens-model posterior from the positions: slope to slope_precision
    n = st.n_samples
    slope_hat = slope + st.slope_precision * rng.standard_normal()
    slopes = slope_hat + st.slope_precision * rng.standard_normal(n)
    thetas = theta_e * (1.0 + 0.005 * rng.standard_normal(n))
    m = 3 if with_delays and rng.uniform() < 0.5 else (1 if with_delays else 0)
    geometric = rng.uniform(5.0, 60.0, m)  # days per (γ − 1) at the reference cosmology
    model_days = geometric[None, :] * (slopes[:, None] - 1.0)
    model_days *= 1.0 + 0.01 * rng.standard_normal((n, m))
    true_ref = geometric * (slope - 1.0)
    ddt_true = LensDistances(cosmo, z_l, z_s).time_delay_distance(z_s).to_value(u.Mpc)
    ddt_ref = LensDistances(reference, z_l, z_s).time_delay_distance(z_s).to_value(u.Mpc)
    truth_days = true_ref * (ddt_true / ddt_ref) * lam * (1.0 - kappa)
    sigmas = st.delay_error * np.abs(truth_days)
    measured = truth_days + sigmas * rng.standard_normal(m)
    # the true dispersion: the truths' own power law, with σ² ∝ λ_int (1 − κ_ext)
    tables = _tables(st)
    evidence = LensEvidence(
        name=f"mock{k:03d}",
        lens_redshift=z_l,
        kinematics_source_redshift=z_s,
        reference_h0=70.0,
        reference_om0=0.3,
        delay_names=tuple(f"img/{j + 1} - 0" for j in range(m)),
        delay_source_redshifts=np.full(m, z_s),
        reference_ddt_mpc=np.full(m, ddt_ref),
        measured_days=measured,
        delay_covariance=np.diag(sigmas**2),
        model_days=model_days,
        slope=slopes,
        einstein_radius=thetas,
        kinematics=None,
        dispersion_tables=tables,
        kappa_prior=kappa_prior,
    )
    truth_base = theta_e ** (slope - 1.0) * float(power_law_mass_factor(slope))
    j = np.array([float(table(slope, ani)) for table in tables])
    sigma_true = np.sqrt(evidence.dispersion_ratio(cosmo) * truth_base * j * lam * (1.0 - kappa))
    error = rng.uniform(*st.dispersion_error) * sigma_true
    observed = sigma_true + error * rng.standard_normal(len(tables))
    evidence = replace(evidence, kinematics=_kinematics(st, observed, error))
    truth = {"lambda_int": lam, "kappa_ext": kappa, "slope": slope, "anisotropy": ani}
    return evidence, truth | {"r_ani_mean": r_ani}


def mock_population(settings: MockSettings, rng: np.random.Generator):
    """(list of LensEvidence, list of per-lens truths) of a mock population.

    Every lens's truths include the population's: ``h0``, ``lambda_mean``,
    ``lambda_scatter``, ``r_ani_mean``, ``r_ani_scatter``.
    """
    if settings.hyper_from_prior:
        # the joint stage's priors (lensdelay.hubble.joint.Population.parameters); H0
        # and λ̄ within their flat priors' middle (so a lens's λ_int is almost never
        # near zero, where the model would have no such lens)
        settings = replace(
            settings,
            h0=rng.uniform(50.0, 90.0),
            lambda_mean=rng.uniform(0.8, 1.2),
            lambda_scatter=rng.uniform(0.0, 0.3),
            r_ani_mean=rng.uniform(0.5, 5.0),
            r_ani_scatter=rng.uniform(0.0, 1.0),
        )
    lenses, truths = [], []
    r_ani = settings.r_ani_mean if settings.r_ani_mean is not None else rng.uniform(0.5, 5.0)
    for k in range(settings.n_lenses + settings.n_kinematics_only):
        lens, truth = _one_lens(k, settings, rng, k < settings.n_lenses, r_ani)
        lenses.append(lens)
        truths.append(
            truth
            | {
                "h0": settings.h0,
                "lambda_mean": settings.lambda_mean,
                "lambda_scatter": settings.lambda_scatter,
                "r_ani_scatter": settings.r_ani_scatter,
            }
        )
    return lenses, truths
