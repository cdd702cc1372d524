"""What one lens brings to a joint H0: its measurements and its own lens-model posterior.

Each lens is fitted to its image positions alone (the delays enter the joint stage, not
the lens fit, so they are not counted twice), or its prepared lens's chain is reused.
From the posterior samples come, per sample: the lens-model delay of every measured pair
at the scenario's cosmology without any mass sheet (the Fermat-potential difference in
days), and the main galaxy's slope and Einstein radius for its velocity dispersion
(:mod:`lensdelay.lensing.kinematics`, tabulated once per lens).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from astropy import units as u

from lensdelay.errors import InputError
from lensdelay.hubble.analysis import pair_delays
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import DEFAULT_SAMPLER, int_seed
from lensdelay.inference.sequence import fit_and_sample
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.kinematics import (
    ARCSEC,
    SPEED_OF_LIGHT_KMS,
    Aperture,
    DispersionTable,
    dispersion_tables,
    LightProfile,
    power_law_mass_factor,
)
from lensdelay.model.scenario import Scenario

__all__ = [
    "DEFAULT_KAPPA_PRIOR",
    "MAIN_KINDS",
    "LensEvidence",
    "lens_evidence",
    "posterior_of_positions",
    "main_galaxy_parameters",
    "kinematics_apertures",
    "with_anisotropy",
]

#: The external-convergence prior of a lens whose scenario gives none ([line_of_sight]).
DEFAULT_KAPPA_PRIOR = (0.0, 0.05)
#: Mass components whose dispersion is predicted, as a spherical power law of their
#: slope (2 for the isothermal ones) and Einstein radius (CONVENTIONS.md).
MAIN_KINDS = ("power_law", "SIE", "SIS")


@dataclass(frozen=True)
class LensEvidence:
    """One lens's measurements and the per-sample quantities the joint stage needs.

    Attributes
    ----------
    name : str
    lens_redshift, kinematics_source_redshift : float
        z_l, and the source redshift at which the Einstein radius is defined.
    reference_h0, reference_om0 : float
        The cosmology the lens-model delays were computed in (the scenario's).
    delay_names : tuple of str
        ``family/image - relative_to`` of each measured delay.
    delay_source_redshifts : ndarray (m,)
    reference_ddt_mpc : ndarray (m,)
        The time-delay distance of each delay's source in the reference cosmology.
    measured_days : ndarray (m,)
    delay_covariance : ndarray (m, m)
    model_days : ndarray (n, m)
        Lens-model delays per posterior sample at the reference cosmology, no sheet.
    slope, einstein_radius : ndarray (n,)
        The main galaxy's slope γ and Einstein radius (arcsec) per sample.
    kinematics : lensdelay.model.kinematics.Kinematics or None
    dispersion_tables : tuple of DispersionTable
        One per aperture: the slit or circle, or each ring of resolved kinematics.
    kappa_prior : (float, float)
        Mean and sigma of this lens's κ_ext prior.
    """

    name: str
    lens_redshift: float
    kinematics_source_redshift: float
    reference_h0: float
    reference_om0: float
    delay_names: tuple[str, ...]
    delay_source_redshifts: np.ndarray
    reference_ddt_mpc: np.ndarray
    measured_days: np.ndarray
    delay_covariance: np.ndarray
    model_days: np.ndarray = field(repr=False)
    slope: np.ndarray = field(repr=False)
    einstein_radius: np.ndarray = field(repr=False)
    kinematics: object = None
    dispersion_tables: tuple[DispersionTable, ...] = field(default=(), repr=False)
    kappa_prior: tuple[float, float] = DEFAULT_KAPPA_PRIOR
    notes: tuple[str, ...] = ()

    @property
    def has_delays(self) -> bool:
        """Whether the lens has measured delays."""
        return len(self.measured_days) > 0

    @property
    def has_kinematics(self) -> bool:
        """Whether the lens has a measured velocity dispersion."""
        return self.kinematics is not None

    def dispersion_ratio(self, cosmology) -> float:
        """c² (D_s/D_ls) · 1 arcsec in (km/s)² for the kinematics' source, in ``cosmology``."""
        d_s = cosmology.angular_diameter_distance(self.kinematics_source_redshift)
        d_ls = cosmology.angular_diameter_distance(
            self.lens_redshift, self.kinematics_source_redshift
        )
        return SPEED_OF_LIGHT_KMS**2 * float((d_s / d_ls).to_value(u.one)) * ARCSEC

    def dispersion_base(self) -> np.ndarray:
        """θE^(γ−1) F(γ) per sample: σ² = ratio · base · J · λ_int (1 − κ_ext)."""
        return self.einstein_radius ** (self.slope - 1.0) * power_law_mass_factor(self.slope)


def with_anisotropy(lens: LensEvidence, anisotropy: str) -> LensEvidence:
    """``lens`` with its dispersion tabulated for another orbit model.

    A lens without kinematics is returned as it is.
    """
    kin = lens.kinematics
    if kin is None:
        return lens
    light = LightProfile.from_effective_radius(kin.light_profile, kin.effective_radius)
    tables = dispersion_tables(
        light, kinematics_apertures(kin), anisotropy, effective_radius=kin.effective_radius
    )
    return replace(lens, dispersion_tables=tables)


def kinematics_apertures(kin) -> list[Aperture]:
    """The apertures of measured kinematics: the slit or circle, or one per ring (annuli)."""
    if kin.resolved:
        return [
            Aperture("annulus", kin.seeing_fwhm, radius=outer, inner=inner)
            for inner, outer in kin.rings()
        ]
    return [
        Aperture(
            kin.aperture,
            kin.seeing_fwhm,
            width=kin.aperture_width,
            length=kin.aperture_length,
            radius=kin.aperture_radius,
        )
    ]


def main_galaxy_parameters(scenario: Scenario, names, samples) -> tuple[np.ndarray, np.ndarray]:
    """(slope, Einstein radius) per sample of the first power-law, SIE or SIS component."""
    for comp in scenario.model.components:
        if comp.kind not in MAIN_KINDS:
            continue

        def value(key, default):
            p = comp.parameters.get(key)
            if p is None:
                return np.full(len(samples), default)
            if p.vary:
                return samples[:, names.index(p.name)]
            return np.full(len(samples), p.value)

        return value("slope", 2.0), value("einstein_radius", np.nan)
    raise InputError(
        f"kinematics needs a main lens galaxy modelled as one of {', '.join(MAIN_KINDS)} "
        f"(its slope and Einstein radius predict the dispersion), got components "
        f"{', '.join(c.kind for c in scenario.model.components)}",
        scenario.source,
    )


def posterior_of_positions(scenario: Scenario, sampler=DEFAULT_SAMPLER, seed: int = 1):
    """(likelihood, chain) of the lens model fitted to the image positions alone."""
    fit_seq, sample_seq = np.random.SeedSequence(seed).spawn(2)
    positions_only = replace(scenario, delays=(), delay_covariance=None)
    like = ImageLikelihood(positions_only, positions_only.model, prior=sampler.prior)
    _, chain = fit_and_sample(
        like,
        walkers=sampler.walkers,
        steps=sampler.steps,
        fit_seed=int_seed(fit_seq),
        sample_seed=int_seed(sample_seq),
    )
    return like, chain


def _measured(scenario: Scenario):
    """Names, source redshifts, values and covariance of the scenario's measured delays."""
    delays = scenario.delays
    for i, d in enumerate(delays):
        if scenario.family(d.family).redshift_free:
            raise InputError(
                f"delay[{i}].family {d.family!r} must have a measured redshift for H0 (its "
                "redshift is a free parameter), got a free redshift",
                scenario.source,
            )
    names = tuple(f"{d.family}/{d.image} - {d.relative_to}" for d in delays)
    redshifts = np.array([scenario.family(d.family).redshift for d in delays], dtype=float)
    values = np.array([d.days for d in delays], dtype=float)
    if scenario.delay_covariance is not None:
        cov = np.asarray(scenario.delay_covariance, dtype=float)
    else:
        cov = np.diag([d.sigma**2 for d in delays])
    return names, redshifts, values, cov


def _model_days(like, samples, delays) -> np.ndarray:
    """Lens-model delays (days, scenario cosmology) of each measured pair, per sample."""
    pairs = pair_delays(like, samples)
    columns = []
    for d in delays:
        if (d.family, d.image, d.relative_to) in pairs:
            columns.append(pairs[(d.family, d.image, d.relative_to)])
        else:
            columns.append(-pairs[(d.family, d.relative_to, d.image)])
    return np.column_stack(columns) if columns else np.empty((len(samples), 0))


def lens_evidence(
    name: str,
    scenario: Scenario,
    like,
    chain_samples: np.ndarray,
    *,
    anisotropy: str,
    n_samples: int = 2000,
    rng: np.random.Generator,
    kappa_prior=None,
) -> LensEvidence:
    """The lens's part of a joint H0 from its positions-only posterior samples.

    ``kappa_prior`` applies when the scenario has no ``[line_of_sight]`` (default
    :data:`DEFAULT_KAPPA_PRIOR`). Refuses a lens with neither delays nor kinematics.
    """
    if not scenario.delays and scenario.kinematics is None:
        raise InputError(
            "a lens of a joint H0 needs measured delays ([[delay]]) or [kinematics], got neither",
            scenario.source,
        )
    rows = chain_samples[rng.integers(0, len(chain_samples), n_samples)]
    names, redshifts, values, cov = _measured(scenario)
    kin = scenario.kinematics
    slope = einstein = np.full(n_samples, np.nan)
    tables = ()
    if kin is not None:
        slope, einstein = main_galaxy_parameters(scenario, list(like.names), rows)
        light = LightProfile.from_effective_radius(kin.light_profile, kin.effective_radius)
        tables = dispersion_tables(
            light, kinematics_apertures(kin), anisotropy, effective_radius=kin.effective_radius
        )
    notes = []
    if kin is not None:
        table = tables[0]
        outside = float(np.mean((slope < table.gammas[0]) | (slope > table.gammas[-1])))
        if outside > 0:
            share = f"{100 * outside:.0f}%" if outside >= 0.01 else "under 1%"
            notes.append(
                f"{share} of the samples have a slope outside [{table.gammas[0]:g}, "
                f"{table.gammas[-1]:g}]; their dispersion is taken at the edge"
            )
    return LensEvidence(
        name=name,
        lens_redshift=float(scenario.lens_redshift),
        kinematics_source_redshift=float(scenario.reference_source_redshift),
        reference_h0=float(scenario.cosmology.H0.to_value("km / (Mpc s)")),
        reference_om0=float(scenario.cosmology.Om0),
        delay_names=names,
        delay_source_redshifts=redshifts,
        reference_ddt_mpc=np.array(
            [
                LensDistances(scenario.cosmology, scenario.lens_redshift, z)
                .time_delay_distance(z)
                .to_value(u.Mpc)
                for z in redshifts
            ]
        ),
        measured_days=values,
        delay_covariance=cov,
        model_days=_model_days(like, rows, scenario.delays),
        slope=np.asarray(slope, dtype=float),
        einstein_radius=np.asarray(einstein, dtype=float),
        kinematics=kin,
        dispersion_tables=tables,
        kappa_prior=tuple(scenario.kappa_ext_prior or kappa_prior or DEFAULT_KAPPA_PRIOR),
        notes=tuple(notes),
    )
