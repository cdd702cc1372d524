"""The forecast job: scenario objects → fits → posteriors → timing update → per-image dates.

Takes :class:`~lensdelay.model.scenario.Scenario` objects (reading files is for
:mod:`lensdelay.io`), returns a result that :mod:`lensdelay.io.forecast_files` and
:mod:`lensdelay.report` turn into files and text. The probability model is in
:mod:`lensdelay.inference.timing`; the per-sample physics in :mod:`lensdelay.forecast.samples`.
"""

from __future__ import annotations

import math
import re
import sys
from dataclasses import replace

import numpy as np
from astropy import units as u
from astropy.time import Time

from lensdelay.model.cosmology import cosmology_from_spec, describe_cosmology
from lensdelay.errors import FitError, InputError, choices_text
from lensdelay.forecast.result import Forecast, ImageForecast, ImageSampleSet
from lensdelay.forecast.samples import (
    check_sample_count,
    AGREEMENT,
    ForecastSettings,
    ImageTrack,
    ModelSamples,
    Sighting,
    TimingUpdate,
    draw_scale_priors,
    image_tracks,
    importance_update,
    majority,
    match_tracks,
    mode_notes,
    WEIGHTINGS,
    model_weights,
    parity_name,
    solve_samples,
    track_columns,
)
from lensdelay.inference.fit import ScenarioFit
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.priors import check_kappa_prior
from lensdelay.inference.sampling import check_sampler_settings, fit_and_sample, int_seed
from lensdelay.model.scenario import MAX_DATE_SIGMA_DAYS, Scenario, Site, parse_date
from lensdelay.forecast.observability import build_calendar
from lensdelay.forecast.perturbers import (
    PerturberPopulation,
    perturber_notes,
    perturber_response,
)
from lensdelay.forecast.positions import position_ellipses, sky_position
from lensdelay.inference.summaries import quantile_summary, weighted_quantiles
from lensdelay.inference.timing import SightingRow, TimingData, tensions_from_draws

__all__ = [
    "STATUS_MEANINGS",
    "TENSION_CAUSES",
    "MAX_OFFSET_DAYS",
    "DEFAULT_SIGHTING_SIGMA_DAYS",
    "default_sighting_sigma",
    "parse_sightings",
    "run_forecast",
    "CALENDAR_YEARS",
    "perturber_covariance",
    "draw_conditional_perturbations",
    "condition_on_timing",
    "REFERENCE_SHIFT_SIGMA",
]


#: What each status means (docs/statistics.md: "Statuses"); printed under the table.
STATUS_MEANINGS = {
    "seen": "the event was observed in this image (the detection or a reported sighting)",
    "past": "its whole 95% window is over as of now: search archives",
    "uncertain": "fewer than 95% of samples agree whether it leads or trails the reference image",
    "now": "now lies inside its 95% window: observe",
    "future": "its whole 95% window lies ahead",
}

TENSION_CAUSES = (
    "a mass model too simple for this lens, a nearby galaxy or group not in the model, "
    "microlensing distorting the light curve, or a wrong image identification"
)


#: Dates further than this from the detection (days, ~10,000 years) are refused: no lens
#: gives such delays, and calendars and the time library cannot place them.
MAX_OFFSET_DAYS = 10_000 * 365.25
#: A sighting's 1-σ date error when none is given and the detection has none either, days.
DEFAULT_SIGHTING_SIGMA_DAYS = 1.0
_SIGHTING = re.compile(
    r"^(?:(?P<family>[^/=]+)/)?(?P<label>[^/=]+)=(?P<date>[^±]+?)"
    r"(?:(?:±|\+-|\+/-)(?P<sigma>[^±]+))?$"
)


def default_sighting_sigma(transient) -> float:
    """A sighting's default date error, in days.

    The detection's own (the same light-curve feature, measured the same way), or 1 day
    when the detection has none.
    """
    return (
        transient.date_sigma_days if transient.date_sigma_days > 0 else DEFAULT_SIGHTING_SIGMA_DAYS
    )


def parse_sightings(items, scenario) -> list[Sighting]:
    """``[FAMILY/]LABEL=DATE[±SIGMA]`` items (SIGMA in days; ``+-`` also accepted).

    The label may name a predicted image (``X1``); it is checked once the images are
    known. The family must be the transient's.
    """
    tr = scenario.transient
    out = []
    for item in items or []:
        m = _SIGHTING.match(item.strip())
        if not m:
            raise InputError(
                f"seen must be [FAMILY/]LABEL=DATE[±SIGMA] (e.g. sn/C=2027-03-04±1.5), got {item!r}"
            )
        family = (m["family"] or tr.family).strip()
        label = m["label"].strip()
        if family != tr.family:
            raise InputError(
                f"seen family must be the transient's family {tr.family!r}, got {family!r}"
            )
        if label == tr.seen_in:
            raise InputError(
                f"seen image must differ from the image the transient was detected in "
                f"({tr.family}/{tr.seen_in}), got {label!r}"
            )
        if any(s.label == label for s in out):
            raise InputError(f"seen image must be given once, got {family}/{label} twice")
        date = parse_date(m["date"].strip(), f"seen {family}/{label}")
        if m["sigma"] is not None:
            try:
                sigma = float(m["sigma"])
            except ValueError as err:
                raise InputError(
                    f"seen {family}/{label} sigma must be a number of days, got {m['sigma']!r}"
                ) from err
            if not (math.isfinite(sigma) and 0 < sigma <= MAX_DATE_SIGMA_DAYS):
                raise InputError(
                    f"seen {family}/{label} sigma must be > 0 and at most "
                    f"{MAX_DATE_SIGMA_DAYS:g} days, got {m['sigma']!r}"
                )
            out.append(Sighting(family, label, date, sigma, True))
        else:
            out.append(Sighting(family, label, date, default_sighting_sigma(tr), False))
    return out


def _resolve_sightings(
    sightings, tracks: list[ImageTrack], first_tracks: list[ImageTrack], match_radius: float = 0.15
) -> dict:
    """Map each sighting to a label of this model's tracks.

    Observed images keep their labels; a predicted image is named by the first model
    and found in the others by position (None where a model lacks it).
    """
    out = {}
    for s in sightings:
        named = [t for t in first_tracks if t.label == s.label]
        if not named:
            choices = ", ".join(f"{t.family}/{t.label}" for t in first_tracks)
            raise InputError(
                f"seen image must be one of the forecast's images ({choices}), "
                f"got {s.family}/{s.label}"
            )
        ref = named[0]
        if ref.observed:
            out[s.label] = s.label
            continue
        best, dist = None, match_radius
        for t in tracks:
            d = math.hypot(t.x - ref.x, t.y - ref.y)
            if not t.observed and d < dist:
                best, dist = t, d
        out[s.label] = best.label if best is not None else None
    return out


def _timing_for(scenario, tracks, sightings, label_map) -> tuple[TimingData | None, list[str]]:
    """The timing data of the transient's family under one model's labels."""
    tr = scenario.transient
    notes = []
    delays, kept = [], []
    for k, d in enumerate(scenario.delays):
        if d.family != tr.family:
            notes.append(
                f"the measured delay {d.family}/{d.image} - {d.relative_to} is of another "
                "family than the transient's; the forecast does not use it"
            )
            continue
        delays.append(d)
        kept.append(k)
    rows = []
    for s in sightings:
        label = label_map.get(s.label)
        if label is None:
            return None, [f"this model has no image matching {s.family}/{s.label}"]
        rows.append(
            SightingRow(s.family, label, float((s.date - tr.date).to_value(u.day)), s.sigma_days)
        )
    if not delays and not rows:
        return None, notes
    columns = [(t.family, t.label) for t in tracks]
    cov = scenario.delay_covariance
    cov = None if cov is None else np.asarray(cov)[np.ix_(kept, kept)]
    return (
        TimingData(columns, delays, rows, tr.date_sigma_days, (tr.family, tr.seen_in), cov),
        notes,
    )


def _chain_effective_samples(chain) -> float:
    """Walkers × kept steps / τ_max of an emcee run."""
    kept = chain.chain.shape[0] - chain.burn
    tau = float(np.nanmax(chain.autocorr)) if np.all(np.isfinite(chain.autocorr)) else float("inf")
    return chain.chain.shape[1] * kept / max(tau, 1.0)


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
        label_map = _resolve_sightings(sightings, tracks, first_tracks)
        timing, timing_notes = _timing_for(sc, tracks, sightings, label_map)
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
        t0 = _draw_t0(timing, samples, tr, rng)
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
    tension_rows = _tensions(
        timings, prior_models, w_prior, np.random.default_rng(next(stage_seeds))
    )
    images, missing = _summarise(
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
    _check_calendar_range(images, tr, sc0.source)
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
            _observability(im, calendar, tr, now)
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
        images=tuple(_image_forecast(e, tr.date, sc0.sky) for e in images),
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


#: ISO 8601 dates (and the outputs' calendars) are written with four-digit years.
CALENDAR_YEARS = (1, 9999)


def _check_calendar_range(images: list[dict], tr, source: str | None = None) -> None:
    """Refuse a forecast whose samples' dates fall outside the years 1–9999.

    Every sample that carries weight is checked (the files write quantiles, the
    calendar and the figures span the tails too), not only the 95% windows.
    """
    lows, highs = [], []
    for im in images:
        off = im["offsets"][np.isfinite(im["offsets"]) & (im["weights"] > 0)]
        if off.size:
            lows.append(off.min())
            highs.append(off.max())
    if not lows:
        return
    first = Time(f"{CALENDAR_YEARS[0]:04d}-01-02", scale="utc")
    last = Time(f"{CALENDAR_YEARS[1]:04d}-12-30", scale="utc")
    lo = tr.date + (min(lows) - 1.0) * u.day
    hi = tr.date + (max(highs) + 1.0) * u.day
    if lo < first or hi > last:
        ymd = tr.date.ymdhms
        raise InputError(
            f"transient.date must leave every image's dates within the years "
            f"{CALENDAR_YEARS[0]}-{CALENDAR_YEARS[1]} (ISO 8601 dates), got "
            f"{int(ymd.year):04d}-{int(ymd.month):02d}-{int(ymd.day):02d}, whose images span "
            f"{min(lows):+.0f} to {max(highs):+.0f} days",
            source,
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


def _image_forecast(entry: dict, detection_date, sky) -> ImageForecast:
    """The summary entry of one image as a frozen result (ICRS position when ``sky`` is set)."""
    fields = {k: v for k, v in entry.items() if k not in ("samples", "offsets", "weights", "flag")}
    samples = ImageSampleSet(offsets=entry["offsets"], weights=entry["weights"], **entry["samples"])
    ra = dec = None
    if sky is not None:
        where = sky_position(sky, entry["x"], entry["y"])
        ra, dec = float(where.ra.deg), float(where.dec.deg)
    return ImageForecast(
        **fields,
        flags=tuple(entry["flag"]),
        samples=samples,
        detection_date=detection_date,
        ra=ra,
        dec=dec,
    )


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


def perturber_covariance(samples: ModelSamples) -> np.ndarray:
    """Covariance (days², delay units) of the perturbers' delay changes over the tracks."""
    shifts = samples.perturber_days * samples.scale[:, None]
    shifts = shifts[np.all(np.isfinite(shifts), axis=1)]
    if len(shifts) < 2:
        return np.zeros((shifts.shape[1],) * 2)
    return np.atleast_2d(np.cov(shifts, rowvar=False))


def draw_conditional_perturbations(
    samples: ModelSamples, timing: TimingData, covariance: np.ndarray, rng
) -> ModelSamples:
    """Each sample's perturber delay change P drawn given the measurements (Gaussian).

    With P ~ N(0, Σ) over the tracks, the rows y = A (T + P) + b t0 + ε with
    Cov(b t0 + ε) = C, P given y − A T is Gaussian with mean K (y − A T) and covariance
    Σ − K A Σ, K = Σ Aᵀ (A Σ Aᵀ + C)⁻¹ (conditioning of a joint Gaussian; Rasmussen &
    Williams 2006, Gaussian Processes for Machine Learning, eq. A.6). The samples' smooth
    delays T are their own; P is added to ``lens_days`` (divided by each sample's scale).
    """
    design = np.zeros((len(timing), len(samples.tracks)))
    for j, col in enumerate(track_columns(samples.tracks, timing.columns)):
        design[:, col] += timing.design[:, j]
    arrival = np.where(samples.exists, samples.delay, np.nan)
    residual = timing.values[None, :] - np.nan_to_num(arrival) @ design.T  # (n, m)
    gain = covariance @ design.T @ np.linalg.inv(design @ covariance @ design.T + timing.covariance)
    mean = residual @ gain.T
    posterior = covariance - gain @ design @ covariance
    vals, vecs = np.linalg.eigh(0.5 * (posterior + posterior.T))
    root = vecs * np.sqrt(np.clip(vals, 0.0, None))[None, :]
    shift = mean + rng.standard_normal(mean.shape) @ root.T
    shift = shift - shift[:, samples.reference : samples.reference + 1]  # delays after it
    per_lens = np.where(samples.exists, shift / samples.scale[:, None], np.nan)
    return replace(
        samples,
        lens_days=samples.lens_days + np.nan_to_num(per_lens),
        perturber_days=per_lens,
    )


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


def _draw_t0(timing, samples, tr, rng) -> np.ndarray:
    """t0 − detection date per sample: from its exact conditional given the delays."""
    n = len(samples.scale)
    if timing is None:
        return tr.date_sigma_days * rng.standard_normal(n)
    t0 = timing.draw_t0(samples.columns(timing), rng)
    return np.where(np.isfinite(t0), t0, np.nan)


def condition_on_timing(
    sc,
    like,
    chain,
    tracks,
    timing,
    prior_samples,
    settings,
    *,
    walkers,
    steps,
    seed,
    progress=False,
    prior="flat",
    stop=None,
    perturbers=(None, None),
):
    """Condition one model's forecast samples on the timing data.

    Importance weights when they leave at least ``settings.min_ess_fraction`` of the
    samples effective; otherwise the joint posterior (positions and timing, H0 and
    κ_ext free with their priors) is sampled again. Returns the samples, the update
    and the new chain (None when re-weighting sufficed). ``perturbers``: the unseen
    perturbers' response and generator (:func:`solve_samples`), drawn anew for a new
    sample.
    """
    update, good = importance_update(prior_samples, timing, settings.min_ess_fraction)
    if good:
        return prior_samples, update, None
    response, perturber_rng = perturbers
    # a new sample: the perturbers enter as Gaussian scatter of the arrival times with the
    # covariance of their drawn delay changes (drawn anew given the measurements below)
    scatter = perturber_covariance(prior_samples) if response is not None else None
    fit_seed, sample_seed, draw_seed = (
        np.random.SeedSequence(seed).spawn(3) if isinstance(seed, int) else seed.spawn(3)
    )
    return _resample(
        sc,
        like,
        chain,
        tracks,
        timing,
        update,
        settings,
        walkers,
        steps,
        (int_seed(fit_seed), int_seed(sample_seed), np.random.default_rng(draw_seed)),
        progress,
        prior,
        stop,
        (scatter, perturber_rng),
    )


def _resample(
    sc,
    like,
    chain,
    tracks,
    timing,
    update,
    settings,
    walkers,
    steps,
    seeds,
    progress,
    prior,
    stop,
    scatter=(None, None),
):
    """Sample the joint posterior of lens, H0, κ_ext given positions and timing data.

    ``scatter``: the unseen perturbers' delay covariance over the tracks (days², or None)
    and a generator. The timing likelihood then carries it as extra scatter of the
    arrival times, and each sample's perturbation is drawn from its Gaussian
    conditional given the measurements (:func:`draw_conditional_perturbations`).
    """
    st = settings
    covariance, perturber_rng = scatter
    if covariance is not None:
        cols = track_columns(tracks, timing.columns)
        smooth_timing = timing
        timing = timing.with_arrival_covariance(covariance[np.ix_(cols, cols)])
    tracked = {
        tracks[0].family: {
            t.label: (t.x, t.y)
            for t in tracks
            if not t.observed and (t.family, t.label) in timing.columns
        }
    }
    joint = ImageLikelihood(
        like.scenario,  # with the positions' model error, if the fit needed one
        sc.model,
        prior=prior,
        timing=timing,
        h0_prior=st.h0_prior if st.h0_prior is not None else "fixed",
        kappa_prior=st.kappa_ext,
        tracked=tracked,
    )
    fit_seed, sample_seed, rng = seeds
    # enough steps that the kept chain holds min_ess_fraction·n independent samples,
    # judged by the autocorrelation time of the positions-only chain
    tau = float(np.nanmax(chain.autocorr)) if np.all(np.isfinite(chain.autocorr)) else 50.0
    want = st.min_ess_fraction * st.n_samples
    needed = int(np.ceil(1.5 * want * tau / max(walkers, 2 * joint.n_parameters))) + int(2 * tau)
    n_steps = int(min(max(steps, needed), 50_000))
    jres, jchain = fit_and_sample(
        joint,
        walkers=walkers,
        steps=n_steps,
        fit_seed=fit_seed,
        sample_seed=sample_seed,
        progress=progress,
        stop=stop,
    )
    flat = jchain.samples()
    n = st.n_samples
    draws = flat[rng.integers(0, len(flat), n)]
    h0 = draws[:, joint.h0_index] if joint.h0_index is not None else np.full(n, like.h0_ref)
    kappa = (
        draws[:, joint.kappa_index]
        if joint.kappa_index is not None
        else np.full(n, joint.kappa_fixed)
    )
    samples = solve_samples(joint, draws, tracks, sc.transient.seen_in, h0, kappa)
    if covariance is not None:
        samples = draw_conditional_perturbations(samples, smooth_timing, covariance, perturber_rng)
    ess = min(float(n), _chain_effective_samples(jchain))
    notes = list(update.notes) + [
        f"the measurements left {update.importance_effective_samples:.0f} effective samples of "
        f"{n} after "
        f"re-weighting; the posterior was sampled again with them ({n_steps} steps, "
        f"about {ess:.0f} independent samples)"
    ]
    notes += list(jchain.warnings)
    if ess < want:
        notes.append(
            f"only about {ess:.0f} independent samples (goal {want:.0f}); raise --steps (this "
            f"run took {n_steps}) or --walkers"
        )
    # re-solved images may lack one the timing data name: such a sample cannot produce
    # the measurement, likelihood zero as in the re-weighting (TimingData.log_likelihood)
    possible = samples.valid & np.isfinite(timing.log_likelihood(samples.columns(timing)))
    if not np.any(possible):  # impossible under this model (no sample has those images)
        return samples, TimingUpdate("resample", np.zeros(n), 0.0, -np.inf, 0.0, notes), jchain
    weights = possible.astype(float)
    return (
        samples,
        TimingUpdate(
            "resample",
            weights / weights.sum(),
            ess,
            update.log_evidence,
            update.importance_effective_samples,
            notes,
        ),
        jchain,
    )


def _tensions(timings, prior_models, w_prior, rng) -> list[dict]:
    """Each measurement against the forecast from the image positions alone (all models).

    Every model's timing data has its own columns (labels) but the same rows, so the
    simulated measurements of the models are pooled with the models' weights.
    """
    parts = [
        (t, s, w) for t, (s, _), w in zip(timings, prior_models, w_prior) if t is not None and w > 0
    ]
    if not parts:
        return []
    sims = np.vstack([t.predictive_draws(s.columns(t), rng) for t, s, _ in parts])
    weights = np.concatenate([w * s.valid / max(s.valid.sum(), 1) for _, s, w in parts])
    return [
        {
            "measurement": t.name,
            "measured": t.measured,
            "measurement_sigma": t.measurement_sigma,
            "predicted": t.predicted,
            "sigma": t.sigma,
            "p_value": t.p_value,
            "in_tension": t.in_tension,
        }
        for t in tensions_from_draws(parts[0][0], sims, weights)
    ]


def _status(is_seen, q, now_offset, order_agreement) -> str:
    """seen, past, uncertain, now or future (docs/statistics.md: "Statuses")."""
    if is_seen:
        return "seen"
    if q["p97.5"] < now_offset:
        return "past"
    if order_agreement < AGREEMENT:
        return "uncertain"
    if q["p2.5"] <= now_offset:
        return "now"
    return "future"


def _summarise(
    models, updates, w_model, prior_models, w_prior, tr, settings, now, rng, tension_rows
):
    """One entry per image (matched across models), with mixture weights."""
    now_offset = float((now - tr.date).to_value(u.day))
    groups = match_tracks([m for m, _ in models])
    sighted = {s.label for s in settings.sightings}
    tension_by_image = {}
    for row in tension_rows:
        if row["measurement"].startswith("sighting "):
            tension_by_image[row["measurement"].split("/", 1)[1]] = row
    images, missing = [], []
    for g in groups:
        cols = {
            k: []
            for k in (
                "delay",
                "offsets",
                "mu",
                "parity",
                "rank",
                "weights",
                "lens_days",
                "perturber_days",
                "h0",
                "kappa",
                "t0",
                "model",
                "x",
                "y",
                "mag",
            )
        }
        prior_off, prior_w = [], []
        per_model = {}
        for m_index, col in g["members"]:
            samples, t0 = models[m_index]
            w = w_model[m_index] * np.where(samples.exists[:, col], updates[m_index].weights, 0.0)
            delay = np.where(samples.exists[:, col], samples.delay[:, col], np.nan)
            cols["delay"].append(delay)
            cols["offsets"].append(t0 + delay)
            cols["mu"].append(samples.magnification[:, col])
            cols["parity"].append(samples.parity[:, col])
            cols["rank"].append(samples.rank[:, col])
            cols["weights"].append(w)
            cols["lens_days"].append(samples.lens_days[:, col])
            cols["perturber_days"].append(samples.perturber_days[:, col])
            cols["h0"].append(samples.h0)
            cols["kappa"].append(samples.kappa)
            cols["t0"].append(t0)
            cols["model"].append(np.full(len(t0), m_index))
            cols["x"].append(samples.x[:, col])
            cols["y"].append(samples.y[:, col])
            if tr.magnitude is not None:
                ratio = np.abs(samples.magnification[:, col]) / np.abs(
                    samples.magnification[:, samples.reference]
                )
                scatter = (
                    rng.normal(0, settings.microlensing_mag, len(ratio))
                    if settings.microlensing_mag > 0 and col != samples.reference
                    else 0.0
                )
                cols["mag"].append(tr.magnitude - 2.5 * np.log10(ratio) + scatter)
            ps, pt0 = prior_models[m_index]
            prior_off.append(pt0 + np.where(ps.exists[:, col], ps.delay[:, col], np.nan))
            prior_w.append(
                w_prior[m_index] * (ps.exists[:, col] & ps.valid) / max(ps.valid.sum(), 1)
            )
            wsum = w.sum()
            per_model[samples.model_label] = {
                "weight": float(w_model[m_index]),
                "delay_median": float(weighted_quantiles(delay, w, [50])[0]) if wsum > 0 else None,
            }
        arr = {k: np.concatenate(v) for k, v in cols.items() if v}
        weights = arr["weights"]
        total = weights.sum()
        weights = weights / total if total > 0 else weights
        # over all models: a model that lacks this image counts as "no image" with its weight
        exists_share = float(min(total, 1.0))
        valid = np.isfinite(arr["delay"]) & (weights > 0)
        if not np.any(valid):
            # no sample of any model has this image (e.g. a source on a caustic at the
            # best fit only): nothing to forecast, and the notes say so
            missing.append(f"{g['family']}/{g['label']}")
            continue
        par, par_share = majority(arr["parity"][valid], weights[valid])
        rk, rk_share = majority(arr["rank"][valid], weights[valid])
        is_ref = g["observed"] and g["label"] == tr.seen_in
        trails = float(np.sum(weights[valid & (arr["delay"] > 0)]))
        leads = float(np.sum(weights[valid & (arr["delay"] < 0)]))
        order = "reference" if is_ref else ("trails" if trails >= leads else "leads")
        order_agreement = 1.0 if is_ref else max(trails, leads) / max(trails + leads, 1e-300)
        off_q = quantile_summary(arr["offsets"], weights)
        centre_x, centre_y, ellipses = position_ellipses(
            arr["x"][valid], arr["y"][valid], weights[valid]
        )
        seen = is_ref or g["label"] in sighted
        entry = {
            "family": g["family"],
            "label": g["label"],
            "observed": bool(g["observed"]),
            "x": centre_x,
            "y": centre_y,
            "position_error": ellipses,
            "parity": parity_name(par),
            "parity_agreement": par_share,
            "arrival_rank": int(rk),
            "rank_agreement": rk_share,
            "order": order,
            "order_agreement": order_agreement,
            "flag": [],
            "exists_fraction": exists_share,
            "status": _status(seen, off_q, now_offset, order_agreement),
            "sighted": g["label"] in sighted,
            "delay_days": quantile_summary(arr["delay"], weights),
            "magnification": quantile_summary(arr["mu"], weights),
            "date_offset_days": off_q,
            "per_model": per_model,
            "offsets": arr["offsets"],
            "weights": weights,
            "samples": {
                k: arr[k]
                for k in (
                    "lens_days",
                    "perturber_days",
                    "h0",
                    "kappa",
                    "t0",
                    "model",
                    "delay",
                    "x",
                    "y",
                )
            },
        }
        if min(par_share, rk_share) < AGREEMENT:
            entry["flag"].append(
                f"parity or arrival order differs between samples (< {AGREEMENT:.0%} agree)"
            )
        if exists_share < AGREEMENT and not is_ref:
            entry["flag"].append(
                f"the image exists in only {100 * exists_share:.0f}% of the forecast's samples "
                "(models and posterior together); its dates assume it exists"
            )
        medians = [v["delay_median"] for v in per_model.values() if v["delay_median"] is not None]
        entry["model_spread_days"] = float(np.ptp(medians)) if len(medians) > 1 else 0.0
        # how much the timing data narrowed the 95% window
        pw = np.concatenate(prior_w)
        pq = weighted_quantiles(np.concatenate(prior_off), pw, [2.5, 97.5])
        width_before = pq[1] - pq[0]
        has_timing = any(up.route != "none" for up in updates)
        entry["interval95_change"] = (
            float((off_q["p97.5"] - off_q["p2.5"]) / width_before)
            if has_timing and width_before > 0
            else None
        )
        if "mag" in arr:
            entry["magnitude"] = quantile_summary(arr["mag"], weights)
            entry["fainter_than_depth"] = bool(entry["magnitude"]["median"] > settings.depth)
        else:
            entry["magnitude"] = None
            entry["fainter_than_depth"] = None
        # part of the 95% window before the detection: archives may hold the event
        # (only data already taken: up to now, which may be before the detection date)
        if not seen and off_q["p2.5"] < min(0.0, now_offset):
            entry["archival_search"] = {
                "from_offset": off_q["p2.5"],
                "to_offset": min(off_q["p97.5"], now_offset),
            }
        else:
            entry["archival_search"] = None
        entry["tension"] = tension_by_image.get(g["label"])
        if entry["tension"] is not None and entry["tension"]["in_tension"]:
            entry["flag"].append(
                f"the sighting is {abs(entry['tension']['sigma']):.1f} sigma from the "
                "prediction made from the image positions"
            )
        images.append(entry)
    _flag_strained_update(images, tension_rows, tr)
    images.sort(key=lambda e: (e["date_offset_days"]["median"], e["label"]))
    return images, missing


#: A detection image whose date median moves more than this many detection-date sigmas
#: (or a day, when the detection date is exact) has been pulled by the measurements.
REFERENCE_SHIFT_SIGMA = 3.0


def _flag_strained_update(images: list[dict], tension_rows: list[dict], tr) -> None:
    """Flag every image when a measurement contradicts the model the update relies on.

    An update combines the measurements with the model's prediction as if both were
    right. A measurement in tension with the prediction (beyond TENSION_SIGMA) means
    one of them is wrong, and then every window of the update is suspect, not only the
    image measured; a detection image whose date the update moves far from the
    detection date is the symptom that shows it most.
    """
    strained = [r for r in tension_rows if r["in_tension"]]
    if strained:
        worst = max(strained, key=lambda r: abs(r["sigma"]))
        text = (
            f"the update combines {len(strained)} measurement(s) in tension with the model "
            f"({worst['measurement']} at {abs(worst['sigma']):.1f} sigma): these windows hold "
            "only if both are right; check the measurement and the mass model"
        )
        for entry in images:
            entry["flag"].append(text)
    tolerance = REFERENCE_SHIFT_SIGMA * tr.date_sigma_days if tr.date_sigma_days > 0 else 1.0
    for entry in images:
        if entry["observed"] and entry["label"] == tr.seen_in:
            shift = entry["date_offset_days"]["median"]
            if abs(shift) > tolerance:
                entry["flag"].append(
                    f"the measurements move the detection image's own date by {shift:+.1f} d "
                    f"from the detection date (allowed by its error: ±{tolerance:.1f} d)"
                )


def _observability(im, calendar, tr, now):
    """Observable days in the 95% window and the chance the event falls on one.

    Also the observable runs of the window still ahead of ``now`` (for the calendar).
    """
    start_offset = (tr.date - calendar.start).to_value("day")
    offs = im["offsets"] + start_offset
    ok = np.isfinite(offs) & (im["weights"] > 0)
    observable = calendar.is_observable(offs[ok])
    w = im["weights"][ok]
    prob = float(np.sum(w[observable]) / max(np.sum(w), 1e-300))
    q = im["date_offset_days"]
    d0, d1 = int(np.floor(q["p2.5"] + start_offset)), int(np.floor(q["p97.5"] + start_offset))
    runs = calendar.windows(d0, d1)
    n_obs = int(sum(b - a + 1 for a, b in runs))
    today = int(np.floor((now - calendar.start).to_value("day")))
    ahead = [(max(a, today), b) for a, b in runs if b >= today]
    day = lambda i: (calendar.start + i * u.day).iso[:10]  # noqa: E731
    im["observability"] = {
        "probability_observable": prob,
        "observable_days_in_95": n_obs,
        "days_in_95": int(d1 - d0 + 1),
        "windows": [[day(a), day(b)] for a, b in runs],
        "windows_ahead": [[day(a), day(b)] for a, b in ahead],
    }
