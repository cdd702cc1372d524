"""The forecast job: scenario objects → fits → posteriors → timing update → per-image dates.

Takes :class:`~lensdelay.model.scenario.Scenario` objects (reading files is for
:mod:`lensdelay.io`), returns a result that :mod:`lensdelay.io.forecast_files` and
:mod:`lensdelay.report` turn into files and text. The probability model is in
:mod:`lensdelay.inference.timing`; the per-sample physics in :mod:`lensdelay.forecast.samples`.
"""

from __future__ import annotations

import sys
from dataclasses import replace

import numpy as np
from astropy import units as u
from astropy.time import Time

from lensdelay.model.cosmology import cosmology_from_spec, describe_cosmology
from lensdelay.errors import FitError, InputError, choices_text
from lensdelay.forecast.result import Forecast
from lensdelay.forecast.samples import (
    check_sample_count,
    ForecastSettings,
    TimingUpdate,
    draw_scale_priors,
    image_tracks,
    mode_notes,
    WEIGHTINGS,
    model_weights,
    solve_samples,
)
from lensdelay.inference.fit import ScenarioFit
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.priors import check_kappa_prior
from lensdelay.inference.sampling import check_sampler_settings, fit_and_sample, int_seed
from lensdelay.model.scenario import Scenario, Site
from lensdelay.forecast.observability import build_calendar
from lensdelay.forecast.combine import (
    MAX_OFFSET_DAYS,
    check_calendar_range,
    image_forecast,
    image_observability,
    measurement_tensions,
    summarise,
)
from lensdelay.forecast.sightings import parse_sightings, resolve_sightings, timing_for
from lensdelay.forecast.update import condition_on_timing, draw_t0
from lensdelay.forecast.perturbers import (
    PerturberPopulation,
    perturber_notes,
    perturber_response,
)
from lensdelay.inference.summaries import weighted_quantiles

__all__ = [
    "run_forecast",
]


def run_forecast(
    scenarios,
    *,
    n_samples=20000,
    seed=1,
    h0=None,
    cosmology_name=None,
    kappa_ext=None,
    microlensing=None,
    depth=None,
    unseen=None,
    weighting="bic",
    seen=None,
    site: Site | None = None,
    walkers=32,
    steps=2000,
    now: Time | None = None,
    progress=False,
    prior="flat",
    stop=None,
    prepared=None,
) -> dict:
    """Run the whole forecast; see :mod:`lensdelay.inference.timing` for the probability model.

    Parameters
    ----------
    scenarios : Scenario or sequence of Scenario
        The observations, once per mass model to combine (the same scenario with each
        model: :func:`lensdelay.api.forecast` builds them from files).
    seen : sequence of str, optional
        Sightings ``[FAMILY/]LABEL=DATE[±SIGMA]`` (:func:`parse_sightings`).
    unseen : (float, float) or PerturberPopulation, optional
        The unseen perturbers marginalised (:mod:`lensdelay.forecast.perturbers`): their
        share of the convergence f_sub and the detection limit in solar masses (f_sub 0
        turns the term off), or a whole population; default f_sub 0.01 up to 10¹⁰ M☉.
    progress : bool
        Show progress bars (off by default: the library is silent).
    stop : lensdelay.inference.sampling.StopRequest, optional
        Lets a caller (the command line's signal handler) stop sampling cleanly.
    prepared : sequence of lensdelay.forecast.prepared.PreparedLens, optional
        One per scenario: its fit and posterior are used instead of fitting and sampling
        (the stages' seeds are consumed all the same, so the rest repeats a forecast that
        fitted; the prepared lens's own seed should equal ``seed`` for that).
    Other parameters are those of ``lensdelay forecast`` (docs/commands.md).
    """
    scenarios = [scenarios] if isinstance(scenarios, Scenario) else list(scenarios)
    check_sampler_settings(walkers, steps, seed)
    if not scenarios:
        raise InputError("scenarios must hold at least one scenario, got none")
    sc0 = scenarios[0]
    if sc0.transient is None:
        raise InputError(
            "transient is required for a forecast ([transient] with family, seen_in "
            "and date), got nothing",
            sc0.source,
        )
    settings = ForecastSettings()
    if cosmology_name is not None:
        cosmo = cosmology_from_spec({"name": cosmology_name})
        scenarios = [replace(s, cosmology=cosmo) for s in scenarios]
        settings = replace(settings, h0_prior=None)  # a named cosmology means its own H0
    if h0 is not None:
        if not h0[1] > 0:
            raise InputError(f"h0 sigma must be > 0, got {h0[1]:g}")
        if not 10 <= h0[0] <= 200:
            raise InputError(f"h0 mean must be between 10 and 200 km/s/Mpc, got {h0[0]:g}")
        settings = replace(settings, h0_prior=(float(h0[0]), float(h0[1])))
    if kappa_ext is not None:
        settings = replace(settings, kappa_ext=check_kappa_prior(*kappa_ext))
    if microlensing is not None:
        if microlensing < 0:
            raise InputError(f"microlensing must be >= 0 mag, got {microlensing:g}")
        settings = replace(settings, microlensing_mag=float(microlensing))
    if depth is not None:
        settings = replace(settings, depth=float(depth))
    if unseen is not None:
        settings = replace(settings, perturbers=_population(unseen))
    check_sample_count(n_samples)
    if weighting not in WEIGHTINGS:
        raise InputError(f"weighting must be one of {choices_text(WEIGHTINGS)}, got {weighting!r}")
    tr = sc0.transient
    sightings = parse_sightings(seen, sc0)
    settings = replace(
        settings,
        n_samples=int(n_samples),
        seed=int(seed),
        weighting=weighting,
        model_prior=prior,
        sightings=tuple(sightings),
    )
    now = Time.now() if now is None else now
    for s in sightings:
        if s.date > now:
            raise InputError(
                f"seen {s.family}/{s.label} date must not be after now ({now.isot[:19]}Z: a "
                f"sighting has happened; set --now for another day), got {s.date.isot[:19]}Z"
            )
    site = site or sc0.site
    # one seed for the whole run: every stage draws from its own child of it
    root_seed = np.random.SeedSequence(seed)
    stage_seeds = iter(root_seed.spawn(4 * len(scenarios) + 2))
    perturber_seeds = iter(root_seed.spawn(len(scenarios)))  # children after the stages
    n = settings.n_samples
    likes = []
    models, prior_models, updates, fits, chains, notes_per_model, timings = (
        [],
        [],
        [],
        [],
        [],
        [],
        [],
    )
    first_tracks = None
    stages = _stage_display(progress, 2 * len(scenarios) + 1)
    if prepared is not None and len(prepared) != len(scenarios):
        raise InputError(
            f"prepared must hold one prepared lens per scenario ({len(scenarios)}), "
            f"got {len(prepared)}"
        )
    for k, sc in enumerate(scenarios):
        fit_seed, sample_seed = next(stage_seeds), next(stage_seeds)
        if prepared is not None:
            stages(f"prepared {sc.model.label}")
            _check_prepared_cosmology(prepared[k], sc)
            # the scenario as given here (a --cosmology replaces the prepared one): the
            # chain holds lens parameters; distances come from the cosmology in use
            like = replace(prepared[k], scenario=sc).likelihood()
            result, chain = prepared[k].fit, prepared[k].chain
        else:
            stages(f"fitting {sc.model.label}")
            like = ImageLikelihood(sc, sc.model, prior=prior)
            result, chain = fit_and_sample(
                like,
                walkers=walkers,
                steps=steps,
                fit_seed=int_seed(fit_seed),
                sample_seed=int_seed(sample_seed),
                progress=progress,
                stop=stop,
            )
        stages(f"images and timing update, {sc.model.label}")
        notes = list(result.notes) + list(chain.warnings)
        if result.dof <= 0:
            notes.insert(0, f"model {result.model_label!r} has {result.dof} degrees of freedom")
        tracks, track_notes = image_tracks(like, result.values, tr.family)
        notes += track_notes
        notes += mode_notes(like, result, tracks, tr.seen_in, chain.modes)
        first_tracks = first_tracks or tracks
        label_map = resolve_sightings(sightings, tracks, first_tracks)
        timing, timing_notes = timing_for(sc, tracks, sightings, label_map)
        notes += timing_notes
        rng = np.random.default_rng(next(stage_seeds))
        draws = chain.samples()[rng.integers(0, len(chain.samples()), n)]
        h0_draws, kappa_draws = draw_scale_priors(settings, like.h0_ref, n, rng)
        response = perturber_response(like, result.values, tracks, settings.perturbers)
        notes += perturber_notes(response, settings.perturbers)
        perturber_rng = np.random.default_rng(next(perturber_seeds))
        prior_samples = solve_samples(
            like, draws, tracks, tr.seen_in, h0_draws, kappa_draws, response, perturber_rng
        )
        if not np.all(prior_samples.valid):
            notes.append(
                f"the reference image {tr.seen_in} is missing in "
                f"{100 * np.mean(~prior_samples.valid):.1f}% of samples; those samples are dropped"
            )
        if timing is None and sightings:
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
                walkers=walkers,
                steps=steps,
                seed=next(stage_seeds),
                progress=progress,
                prior=prior,
                stop=stop,
                perturbers=(response, perturber_rng),
            )
            if chain2 is not None:
                chains.append(chain2)
        t0 = draw_t0(timing, samples, tr, rng)
        models.append((samples, t0))
        prior_t0 = tr.date_sigma_days * rng.standard_normal(n)
        prior_models.append((prior_samples, prior_t0))
        updates.append(update)
        fits.append(result)
        likes.append((sc, like))
        chains.append(chain)
        notes_per_model.append(notes + update.notes)
        timings.append(timing)
    if not any(np.isfinite(u_.log_evidence) for u_ in updates):
        raise InputError(
            "the sightings and measured delays must be possible under at least one model "
            "(each names images the model has), got none",
            sc0.source,
        )
    acceptable = [not f.quality()["poor"] for f in fits]  # poor includes a model error
    w_model = model_weights(
        [f.bic for f in fits],
        [u_.log_evidence for u_ in updates],
        settings.weighting,
        acceptable,
    )
    w_prior = model_weights(
        [f.bic for f in fits], np.zeros(len(fits)), settings.weighting, acceptable
    )
    best = int(np.argmax(w_model))
    view = _finder_view(*likes[best], fits[best], tr, first_tracks)
    tension_rows = measurement_tensions(
        timings, prior_models, w_prior, np.random.default_rng(next(stage_seeds))
    )
    images, missing = summarise(
        models,
        updates,
        w_model,
        prior_models,
        w_prior,
        tr,
        settings,
        now,
        np.random.default_rng(next(stage_seeds)),
        tension_rows,
    )
    # before any date is built: the time library handles years -4712..+9999 at best
    far = [
        im["label"]
        for im in images
        if max(abs(im["date_offset_days"]["p2.5"]), abs(im["date_offset_days"]["p97.5"]))
        > MAX_OFFSET_DAYS
    ]
    if far:
        raise FitError(
            f"the dates of image(s) {', '.join(far)} lie more than {MAX_OFFSET_DAYS / 365.25:.0f} "
            "years from the detection; check the redshifts and the mass model"
        )
    check_calendar_range(images, tr, sc0.source)
    stages("observability")
    calendar = None
    if site is not None and sc0.sky is not None:
        # cover the tails too (0.1–99.9%), so the probability counts every sample
        wide = [weighted_quantiles(im["offsets"], im["weights"], [0.1, 99.9]) for im in images]
        wide = [w for w in wide if np.all(np.isfinite(w))]
        lo = min(w[0] for w in wide)
        hi = max(w[1] for w in wide)
        first = tr.date + (np.floor(lo) - 1) * u.day
        n_days = int(np.ceil(hi - lo)) + 3
        # crossings are interpolated within a step (observability.usable_time): a few
        # minutes' step gives each night's usable time to within a minute
        step = 2.0 if n_days <= 1200 else 5.0
        calendar = build_calendar(site, sc0.sky, first, n_days, step_minutes=step)
        for im in images:
            image_observability(im, calendar, tr, now)
    stages(None)
    cosmology = scenarios[0].cosmology
    notes = [f"the best fit's image {name} exists in no sample; it is left out" for name in missing]
    if now < tr.date:
        notes.append(
            f"now ({now.isot[:10]}) is before the detection date ({tr.date.isot[:10]}); "
            "statuses are judged as of now"
        )
    timing_doc = {
        "sightings": [
            {
                "family": s.family,
                "image": s.label,
                "date": s.date.isot[:19] + "Z",
                "sigma_days": s.sigma_days,
                "sigma_source": "given" if s.sigma_stated else "default",
            }
            for s in sightings
        ],
        "delays": [
            {
                "family": d.family,
                "image": d.image,
                "relative_to": d.relative_to,
                "days": d.days,
                "sigma": d.sigma,
            }
            for d in sc0.delays
        ],
        "models": [
            {
                "label": f.model_label,
                "route": up.route,
                "effective_samples": float(up.effective_samples),
                "importance_effective_samples": (
                    None
                    if up.importance_effective_samples is None
                    else float(up.importance_effective_samples)
                ),
                "log_evidence": float(up.log_evidence) if np.isfinite(up.log_evidence) else None,
            }
            for f, up in zip(fits, updates)
        ],
        "min_effective_samples": settings.min_ess_fraction * n,
        "tensions": tension_rows,
    }
    return Forecast(
        scenario=sc0,
        settings=settings,
        site=site,
        now=now,
        images=tuple(image_forecast(e, tr.date, sc0.sky) for e in images),
        model_labels=tuple(f.model_label for f in fits),
        fits=tuple(fits),
        chains=tuple(chains),
        model_weights=w_model,
        model_weights_positions=w_prior,
        updates=tuple(updates),
        model_notes=tuple(tuple(n) for n in notes_per_model),
        timing=timing_doc,
        notes=tuple(notes),
        calendar=calendar,
        cosmology=cosmology,
        sky_view=view,
        h0_used=(settings.h0_prior if settings.h0_prior is not None else float(cosmology.H0.value)),
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


def _population(unseen) -> PerturberPopulation:
    """The unseen perturbers from (f_sub, detection mass) or a population as given."""
    if isinstance(unseen, PerturberPopulation):
        return unseen
    try:
        fraction, limit = (float(v) for v in unseen)
    except (TypeError, ValueError) as err:
        raise InputError(
            f"unseen must be two numbers (mass fraction, detection mass in Msun), got {unseen!r}"
        ) from err
    if fraction == 0.0:
        return PerturberPopulation(mass_fraction=0.0)
    low = PerturberPopulation().mass_range[0]
    if not limit > low:
        raise InputError(
            f"unseen detection mass must be above the smallest perturber mass {low:.0e} Msun, "
            f"got {limit:g}"
        )
    return PerturberPopulation(mass_fraction=fraction, mass_range=(low, limit))
