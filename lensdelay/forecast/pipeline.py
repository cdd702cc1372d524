"""The forecast job: scenario objects → fits → posteriors → timing update → per-image dates.

Takes :class:`~lensdelay.model.scenario.Scenario` objects (reading files is for
:mod:`lensdelay.io`), returns a result that :mod:`lensdelay.io.forecast_files` and
:mod:`lensdelay.report` turn into files and text. The probability model is in
:mod:`lensdelay.inference.timing`; the per-sample physics in :mod:`lensdelay.forecast.samples`.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, replace

import numpy as np
from astropy import units as u
from astropy.time import Time

from lensdelay.model.cosmology import cosmology_from_spec, describe_cosmology
from lensdelay.errors import FitError, InputError
from lensdelay.forecast.request import ForecastRequest
from lensdelay.forecast.result import Forecast, ImageForecast, ModelUpdate, TimingRecord
from lensdelay.forecast.samples import (
    draw_scale_priors,
    image_tracks,
    mode_notes,
    model_weights,
    solve_samples,
)
from lensdelay.inference.scenario_fit import ScenarioFit
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import int_seed
from lensdelay.inference.sequence import fit_and_sample
from lensdelay.model.scenario import Scenario
from lensdelay.forecast.observability import build_calendar
from lensdelay.forecast.combine import (
    MAX_OFFSET_DAYS,
    check_calendar_range,
    image_observability,
    measurement_tensions,
    summarise,
)
from lensdelay.forecast.sightings import parse_sightings, resolve_sightings, timing_for
from lensdelay.forecast.update import TimingUpdate, condition_on_timing, draw_t0
from lensdelay.forecast.perturbers import (
    perturber_notes,
    perturber_response,
)
from lensdelay.inference.summaries import weighted_quantiles

__all__ = [
    "run_forecast",
]


def run_forecast(
    scenarios,
    request: ForecastRequest | None = None,
    *,
    progress=False,
    stop=None,
    prepared=None,
    **options,
) -> Forecast:
    """Run the whole forecast; see :mod:`lensdelay.inference.timing` for the probability model.

    Parameters
    ----------
    scenarios : Scenario or sequence of Scenario
        The observations, once per mass model to combine (the same scenario with each
        model: :func:`lensdelay.api.forecast_scenario` builds them from files).
    request : ForecastRequest, optional
        What is asked for (samples, seed, priors, sightings, now, site, sampler); built
        from ``options`` (:meth:`ForecastRequest.from_options`) when not given.
    progress : bool
        Show progress bars (off by default: the library is silent).
    stop : lensdelay.inference.sampling.StopRequest, optional
        Lets a caller (the command line's signal handler) stop sampling cleanly.
    prepared : sequence of lensdelay.forecast.prepared.PreparedLens, optional
        One per scenario: its fit and posterior are used instead of fitting and sampling
        (the stages' seeds are consumed all the same, so the rest repeats a forecast that
        fitted; the prepared lens's own seed should equal the request's for that).
    """
    if request is None:
        request = ForecastRequest.from_options(**options)
    elif options:
        raise InputError(f"options must be given in the request, got {sorted(options)[0]!r}")
    scenarios, sightings, settings, now, site = _checked_inputs(scenarios, request, prepared)
    sc0, tr = scenarios[0], scenarios[0].transient
    # one seed for the whole run: every stage draws from its own child of it
    root_seed = np.random.SeedSequence(request.seed)
    stage_seeds = iter(root_seed.spawn(4 * len(scenarios) + 2))
    perturber_seeds = iter(root_seed.spawn(len(scenarios)))  # children after the stages
    stages = _stage_display(progress, 2 * len(scenarios) + 1)
    run = _Run(request, settings, sightings, stage_seeds, perturber_seeds, stages, progress, stop)
    per_model = []
    for k, sc in enumerate(scenarios):
        first = per_model[0].tracks if per_model else None
        per_model.append(run.model(sc, None if prepared is None else prepared[k], first))
    updates = [m.update for m in per_model]
    fits = [m.fit for m in per_model]
    w_model, w_prior = _model_weights(per_model, settings, sc0.source)
    best = per_model[int(np.argmax(w_model))]
    view = _finder_view(best.scenario, best.likelihood, best.fit, tr, per_model[0].tracks)
    prior_models = [m.prior_model for m in per_model]
    tension_rows = measurement_tensions(
        [m.timing for m in per_model],
        prior_models,
        w_prior,
        np.random.default_rng(next(stage_seeds)),
    )
    images, missing = summarise(
        [m.model for m in per_model],
        updates,
        w_model,
        prior_models,
        w_prior,
        tr,
        settings,
        now,
        np.random.default_rng(next(stage_seeds)),
        tension_rows,
        sky=sc0.sky,
    )
    _check_dates_reachable(images, tr, sc0.source)
    stages("observability")
    calendar, images = _observability_calendar(images, site, sc0.sky, tr, now)
    stages(None)
    cosmology = scenarios[0].cosmology
    notes = _run_notes(missing, now, tr)
    chains = [c for m in per_model for c in m.chains]
    return Forecast(
        scenario=sc0,
        settings=settings,
        site=site,
        now=now,
        images=tuple(images),
        model_labels=tuple(f.model_label for f in fits),
        fits=tuple(fits),
        chains=tuple(chains),
        model_weights=w_model,
        model_weights_positions=w_prior,
        updates=tuple(updates),
        model_notes=tuple(tuple(m.notes) for m in per_model),
        timing=_timing_record(sightings, sc0.delays, per_model, settings, tension_rows),
        notes=tuple(notes),
        calendar=calendar,
        cosmology=cosmology,
        sky_view=view,
        h0_used=(settings.h0_prior if settings.h0_prior is not None else float(cosmology.H0.value)),
    )


def _run_notes(missing, now, tr) -> list[str]:
    """Notes of the whole run: images no sample has, a 'now' before the detection."""
    notes = [f"the best fit's image {name} exists in no sample; it is left out" for name in missing]
    if now < tr.date:
        notes.append(
            f"now ({now.isot[:10]}) is before the detection date ({tr.date.isot[:10]}); "
            "statuses are judged as of now"
        )
    return notes


def _checked_inputs(scenarios, request: ForecastRequest, prepared):
    """The scenarios (with a named cosmology), sightings, settings, now and site, checked."""
    scenarios = [scenarios] if isinstance(scenarios, Scenario) else list(scenarios)
    if not scenarios:
        raise InputError("scenarios must hold at least one scenario, got none")
    sc0 = scenarios[0]
    if sc0.transient is None:
        raise InputError(
            "transient is required for a forecast ([transient] with family, seen_in "
            "and date), got nothing",
            sc0.source,
        )
    if request.cosmology_name is not None:
        cosmo = cosmology_from_spec({"name": request.cosmology_name})
        scenarios = [replace(s, cosmology=cosmo) for s in scenarios]
    sightings = parse_sightings(request.seen, sc0)
    settings = request.settings(sightings)
    now = Time.now() if request.now is None else request.now
    for s in sightings:
        if s.date > now:
            raise InputError(
                f"seen {s.family}/{s.label} date must not be after now ({now.isot[:19]}Z: a "
                f"sighting has happened; set --now for another day), got {s.date.isot[:19]}Z"
            )
    site = request.site or sc0.site
    if prepared is not None and len(prepared) != len(scenarios):
        raise InputError(
            f"prepared must hold one prepared lens per scenario ({len(scenarios)}), "
            f"got {len(prepared)}"
        )
    return scenarios, sightings, settings, now, site


def _model_weights(per_model, settings, source):
    """The models' weights with the timing data and from the positions alone.

    Refuses a run whose timing data no model can produce.
    """
    updates = [m.update for m in per_model]
    fits = [m.fit for m in per_model]
    if not any(np.isfinite(u_.log_evidence) for u_ in updates):
        raise InputError(
            "the sightings and measured delays must be possible under at least one model "
            "(each names images the model has), got none",
            source,
        )
    acceptable = [not f.quality()["poor"] for f in fits]  # poor includes a model error
    bics = [f.bic for f in fits]
    w_model = model_weights(
        bics, [u_.log_evidence for u_ in updates], settings.weighting, acceptable
    )
    w_prior = model_weights(bics, np.zeros(len(fits)), settings.weighting, acceptable)
    return w_model, w_prior


@dataclass
class _ModelForecast:
    """One model's part of a forecast: its fit, samples before and after the timing data."""

    scenario: Scenario
    likelihood: ImageLikelihood
    fit: object
    chains: list
    tracks: list
    timing: object
    model: tuple  # (samples after the update, t0 offsets)
    prior_model: tuple  # (samples from the positions alone, t0 offsets)
    update: TimingUpdate
    notes: list


@dataclass
class _Run:
    """The state one forecast's models share: the request, the seeds, the display."""

    request: ForecastRequest
    settings: object
    sightings: list
    stage_seeds: object
    perturber_seeds: object
    stages: object
    progress: object
    stop: object

    def fitted(self, sc, prepared):
        """(likelihood, best fit, chain) of one model: fitted and sampled, or prepared.

        Two stage seeds are drawn either way, so a forecast from a prepared lens repeats
        the rest of one that fitted.
        """
        sampler = self.request.sampler
        fit_seed, sample_seed = next(self.stage_seeds), next(self.stage_seeds)
        if prepared is not None:
            self.stages(f"prepared {sc.model.label}")
            _check_prepared_cosmology(prepared, sc)
            # the scenario as given here (a --cosmology replaces the prepared one): the
            # chain holds lens parameters; distances come from the cosmology in use
            like = replace(prepared, scenario=sc).likelihood()
            return like, prepared.fit, prepared.chain
        self.stages(f"fitting {sc.model.label}")
        like = ImageLikelihood(sc, sc.model, prior=sampler.prior)
        result, chain = fit_and_sample(
            like,
            walkers=sampler.walkers,
            steps=sampler.steps,
            fit_seed=int_seed(fit_seed),
            sample_seed=int_seed(sample_seed),
            progress=self.progress,
            stop=self.stop,
        )
        return like, result, chain

    def model(self, sc, prepared, first_tracks) -> _ModelForecast:
        """Fit (or take from ``prepared``), sample, solve and update one model.

        The stage seeds are drawn in a fixed order (fit, sampling, draws, and the update's
        when there is one), so a run repeats exactly.
        """
        settings, tr = self.settings, sc.transient
        sampler = self.request.sampler
        n = settings.n_samples
        like, result, chain = self.fitted(sc, prepared)
        self.stages(f"images and timing update, {sc.model.label}")
        notes = list(result.notes) + list(chain.warnings)
        if result.dof <= 0:
            notes.insert(0, f"model {result.model_label!r} has {result.dof} degrees of freedom")
        tracks, track_notes = image_tracks(like, result.values, tr.family)
        notes += track_notes
        notes += mode_notes(like, result, tracks, tr.seen_in, chain.modes)
        label_map = resolve_sightings(self.sightings, tracks, first_tracks or tracks)
        timing, timing_notes = timing_for(sc, tracks, self.sightings, label_map)
        notes += timing_notes
        rng = np.random.default_rng(next(self.stage_seeds))
        draws = chain.samples()[rng.integers(0, len(chain.samples()), n)]
        h0_draws, kappa_draws = draw_scale_priors(settings, like.h0_ref, n, rng)
        response = perturber_response(like, result.values, tracks, settings.perturbers)
        notes += perturber_notes(response, settings.perturbers)
        perturber_rng = np.random.default_rng(next(self.perturber_seeds))
        prior_samples = solve_samples(
            like, draws, tracks, tr.seen_in, h0_draws, kappa_draws, response, perturber_rng
        )
        if not np.all(prior_samples.valid):
            notes.append(
                f"the reference image {tr.seen_in} is missing in "
                f"{100 * np.mean(~prior_samples.valid):.1f}% of samples; those samples are dropped"
            )
        chains = []
        if timing is None and self.sightings:
            # this model lacks an image that was seen: the data are impossible under it
            samples, update = prior_samples, TimingUpdate("none", np.zeros(n), 0.0, -np.inf)
        else:
            samples, update, chain2 = condition_on_timing(
                sc,
                like,
                chain,
                tracks,
                timing,
                prior_samples,
                settings,
                seed=next(self.stage_seeds),
                sampler=sampler,
                progress=self.progress,
                stop=self.stop,
                perturbers=(response, perturber_rng),
            )
            if chain2 is not None:
                chains.append(chain2)
        chains.append(chain)
        t0 = draw_t0(timing, samples, tr, rng)
        prior_t0 = tr.date_sigma_days * rng.standard_normal(n)
        return _ModelForecast(
            sc,
            like,
            result,
            chains,
            tracks,
            timing,
            (samples, t0),
            (prior_samples, prior_t0),
            update,
            notes + update.notes,
        )


def _check_dates_reachable(images: list[ImageForecast], tr, source) -> None:
    """Refuse dates the time library and the calendars cannot place, before any is built."""
    # the time library handles years -4712..+9999 at best
    far = [
        im.label
        for im in images
        if max(abs(im.date_offset_days["p2.5"]), abs(im.date_offset_days["p97.5"]))
        > MAX_OFFSET_DAYS
    ]
    if far:
        raise FitError(
            f"the dates of image(s) {', '.join(far)} lie more than {MAX_OFFSET_DAYS / 365.25:.0f} "
            "years from the detection; check the redshifts and the mass model"
        )
    check_calendar_range(images, tr, source)


def _observability_calendar(images: list[ImageForecast], site, sky, tr, now):
    """The site's calendar over every image's dates, and the images with their observability.

    No calendar (None) and the images unchanged without a site or a sky position.
    """
    if site is None or sky is None:
        return None, images
    # cover the tails too (0.1–99.9%), so the probability counts every sample
    wide = [
        weighted_quantiles(im.samples.offsets, im.samples.weights, [0.1, 99.9]) for im in images
    ]
    wide = [w for w in wide if np.all(np.isfinite(w))]
    lo = min(w[0] for w in wide)
    hi = max(w[1] for w in wide)
    first = tr.date + (np.floor(lo) - 1) * u.day
    n_days = int(np.ceil(hi - lo)) + 3
    # crossings are interpolated within a step (observability.usable_time): a few
    # minutes' step gives each night's usable time to within a minute
    step = 2.0 if n_days <= 1200 else 5.0
    calendar = build_calendar(site, sky, first, n_days, step_minutes=step)
    images = [
        replace(im, observability=image_observability(im, calendar, tr, now)) for im in images
    ]
    return calendar, images


def _timing_record(sightings, delays, per_model, settings, tensions) -> TimingRecord:
    """The timing data used and each model's update (``forecast.json``'s ``timing``)."""
    models = []
    for m in per_model:
        up = m.update
        models.append(
            ModelUpdate(
                label=m.fit.model_label,
                route=up.route,
                effective_samples=float(up.effective_samples),
                importance_effective_samples=(
                    None
                    if up.importance_effective_samples is None
                    else float(up.importance_effective_samples)
                ),
                log_evidence=float(up.log_evidence) if np.isfinite(up.log_evidence) else None,
            )
        )
    return TimingRecord(
        sightings=tuple(sightings),
        delays=tuple(delays),
        models=tuple(models),
        min_effective_samples=settings.min_ess_fraction * settings.n_samples,
        tensions=tuple(tensions),
    )


def _check_prepared_cosmology(prepared, sc) -> None:
    """Refuse another cosmology for a prepared lens whose fit depends on it.

    With one source redshift the chain holds lens parameters alone, and distances are
    applied afterwards; with families at several redshifts (or a free one) the fit used
    the ratios D_ls/D_s between them, which another cosmology changes.
    """
    if describe_cosmology(prepared.scenario.cosmology) == describe_cosmology(sc.cosmology):
        return
    redshifts = {f.redshift for f in sc.families}
    if len(redshifts) > 1 or any(f.redshift_free for f in sc.families):
        raise InputError(
            "cosmology must be the one the lens was prepared with when its families lie at "
            "several redshifts (the fit used their distance ratios): prepare the lens again "
            f"with this cosmology in its scenario, got {describe_cosmology(sc.cosmology)}",
            sc.source,
        )


def _finder_view(sc, like, result, tr, tracks) -> dict:
    """What a finder chart draws from the most probable model's best fit.

    The best fit's images, critical curves and caustics (:meth:`ScenarioFit.sky_view`)
    and the arrival-time surface of the transient's source in days after the reference
    image, over the same field; ``model_label`` names the model.
    """
    fitted = ScenarioFit(sc, like, result)
    view = fitted.sky_view(resolution=240)
    ref = next(t for t in tracks if t.label == tr.seen_in)
    view["arrival"] = fitted.arrival_surface(tr.family, (ref.x, ref.y), view["extent"])
    view["model_label"] = result.model_label
    centres = like.model.lens(result.values[: like.n_model]).centres()
    view["lens_centre"] = centres[0] if centres else None
    return view


def _stage_display(progress, total: int):
    """A bar over the forecast's stages on stderr when ``progress`` is True (tqdm).

    The returned function takes the next stage's name, or None when all are done.
    """
    if progress is not True:
        return lambda name: None
    from tqdm import tqdm

    bar = tqdm(total=total, desc="forecast", unit="stage", file=sys.stderr, leave=False)
    started = []

    def next_stage(name):
        if started:
            bar.update(1)
        started.append(name)
        if name is None:
            bar.close()
        else:
            bar.set_description(f"forecast: {name}")

    return next_stage
