"""Prepared lenses: fit and sample a lens once, forecast any transient from it in seconds.

A watch-list lens is fitted and its posterior sampled before any alert
(:func:`fit_lens_ahead`); when an alert arrives, :func:`lensdelay.forecast.pipeline.run_forecast`
takes the prepared fit and chain (``prepared=``) instead of fitting again. The fit and
sampling seeds are the ones a from-scratch forecast with the same ``seed`` would use, so
the two forecasts are the same (``tests/test_prepared.py``).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from astropy.time import Time

from lensdelay.errors import InputError, choices_text
from lensdelay.inference.fit import FitResult
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import (
    DEFAULT_SAMPLER,
    Chain,
    SamplerSettings,
    check_sampler_settings,
    int_seed,
)
from lensdelay.inference.sequence import fit_and_sample
from lensdelay.model.scenario import MAX_DATE_SIGMA_DAYS, Scenario, Transient, parse_date

__all__ = [
    "PreparedLens",
    "stage_seeds",
    "fit_lens_ahead",
    "parse_transient",
    "with_transient",
]


@dataclass(frozen=True)
class PreparedLens:
    """One lens fitted and sampled ahead of any alert.

    Attributes
    ----------
    scenario : Scenario
        The observations and mass model as read (without any position model error).
    fit : FitResult
        The best fit (with its model error, when the first fit was poor).
    chain : Chain
        Posterior samples of the likelihood's parameters.
    watched : list of (ndarray, ndarray)
        Per family, the unobserved images the fitted likelihood follows.
    seed, walkers, steps : int
        The settings the chain was drawn with.
    prior : str
        The mass-model prior ("flat" or "jeffreys").
    """

    scenario: Scenario
    fit: FitResult
    chain: Chain
    watched: list
    seed: int
    walkers: int
    steps: int
    prior: str

    @property
    def sampler(self) -> SamplerSettings:
        """The sampler settings its chain was drawn with (a forecast from it keeps them)."""
        return SamplerSettings(self.walkers, self.steps, self.prior)

    def likelihood(self) -> ImageLikelihood:
        """The likelihood as it was when the chain was drawn (model error, watch list)."""
        like = ImageLikelihood(self.scenario, self.scenario.model, prior=self.prior)
        if self.fit.model_error is not None:
            like.set_position_floor(self.fit.model_error.floor_arcsec)
        like.watched = [(np.asarray(x, float), np.asarray(y, float)) for x, y in self.watched]
        return like


def stage_seeds(seed: int, n_models: int = 1) -> list:
    """The seeds of a forecast's stages: fit and sampling of each model come first."""
    return list(np.random.SeedSequence(seed).spawn(4 * n_models + 2))


def fit_lens_ahead(
    scenario: Scenario,
    *,
    walkers: int = DEFAULT_SAMPLER.walkers,
    steps: int = DEFAULT_SAMPLER.steps,
    seed: int = 1,
    prior: str = DEFAULT_SAMPLER.prior,
    progress=False,
    stop=None,
) -> PreparedLens:
    """Fit ``scenario``'s mass model and sample its posterior, as a forecast would.

    The fit and sampling seeds are those of :func:`lensdelay.forecast.pipeline.run_forecast`
    with the same ``seed`` (its first two stages), so a forecast from the prepared lens
    repeats the from-scratch forecast.
    """
    check_sampler_settings(walkers, steps, seed)
    seeds = stage_seeds(seed)
    like = ImageLikelihood(scenario, scenario.model, prior=prior)
    result, chain = fit_and_sample(
        like,
        walkers=walkers,
        steps=steps,
        fit_seed=int_seed(seeds[0]),
        sample_seed=int_seed(seeds[1]),
        progress=progress,
        stop=stop,
    )
    watched = [(np.array(x), np.array(y)) for x, y in like.watched]
    return PreparedLens(scenario, result, chain, watched, seed, walkers, steps, prior)


def parse_transient(text: str, scenario: Scenario) -> Transient:
    """``FAMILY/LABEL=DATE±SIGMA`` (or ``LABEL=DATE``): the alert, as a scenario transient.

    SIGMA is in days (default 1); ``+-`` is accepted for ``±``. The family defaults to the
    scenario's transient family, or its first family.
    """
    if "=" not in text:
        raise InputError(f"--transient must be [FAMILY/]LABEL=DATE[±SIGMA], got {text!r}")
    name, when = text.split("=", 1)
    default_family = scenario.transient.family if scenario.transient else scenario.families[0].label
    family, _, label = name.rpartition("/")
    family = family or default_family
    families = {f.label: f for f in scenario.families}
    if family not in families:
        raise InputError(
            f"--transient family must be one of {choices_text(families)}, got {family!r}"
        )
    if label not in families[family].labels:
        raise InputError(
            f"--transient image must be one of {choices_text(families[family].labels)} "
            f"(observed images of {family}), got {label!r}"
        )
    when = when.replace("+-", "±")
    date_text, _, sigma_text = when.partition("±")
    sigma = 1.0
    if sigma_text:
        try:
            sigma = float(sigma_text)
        except ValueError as err:
            raise InputError(
                f"--transient SIGMA must be a number of days, got {sigma_text!r}"
            ) from err
        if not (np.isfinite(sigma) and 0 <= sigma <= MAX_DATE_SIGMA_DAYS):
            raise InputError(
                f"--transient SIGMA must be between 0 and {MAX_DATE_SIGMA_DAYS:g} days, "
                f"got {sigma_text!r}"
            )
    date: Time = parse_date(date_text.strip(), "--transient DATE")
    magnitude = None
    if scenario.transient is not None and scenario.transient.family == family:
        magnitude = scenario.transient.magnitude
    return Transient(family, label, date, sigma, magnitude)


def with_transient(prepared: PreparedLens, transient: Transient) -> PreparedLens:
    """The prepared lens with the alert ``transient`` in place of the scenario's own."""
    return replace(prepared, scenario=replace(prepared.scenario, transient=transient))
