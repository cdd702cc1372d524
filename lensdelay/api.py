"""The Python interface: every job of the command line, callable with objects or paths.

Each function accepts a :class:`~lensdelay.model.scenario.Scenario` (and
:class:`~lensdelay.model.recipe.MassModel` objects) or file paths, is silent unless
asked (``progress=True``), and returns the same results the command line prints and
writes. Files are read here and nowhere below; the layers underneath take objects.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

import numpy as np

from typing import TYPE_CHECKING

from lensdelay.lensing.delays import fermat_difference_to_days
from lensdelay.dates import allows_far_dates
from lensdelay.errors import InputError, LensdelayWarning, is_real, path_of
from lensdelay.forecast.budget import delay_budget
from lensdelay.forecast.pipeline import run_forecast
from lensdelay.forecast.result import Forecast
from lensdelay.hubble.pipeline import HubbleResult, run_hubble
from lensdelay.inference.fit import check_constraints, delay_errors
from lensdelay.inference.scenario_fit import ScenarioFit
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import DEFAULT_SAMPLER, check_sampler_settings
from lensdelay.inference.sequence import fit_and_sample
from lensdelay.io import reading
from lensdelay.io.provenance import provenance
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.images import as_arcsec, find_images
from lensdelay.lensing.lens import PARITIES
from lensdelay.model.cosmology import cosmology_from_spec, describe_cosmology
from lensdelay.model.recipe import MassModel
from lensdelay.model.scenario import Scenario
from lensdelay.version import __version__

PathLike = str | os.PathLike

if TYPE_CHECKING:  # annotations only: these modules load on first use of their job
    from lensdelay.inference.maps import LensMaps
    from lensdelay.lightcurves.measure import MeasuredDelays

__all__ = [
    "PathLike",
    "load_scenario",
    "load_model",
    "images_of_source",
    "RING_MAGNIFICATION",
    "einstein_ring",
    "check_scenario",
    "fit_scenario",
    "CURVE_SUFFIXES",
    "measure_delays",
    "CURVE_DETECTION_GAP",
    "MAX_MAP_PIXELS",
    "map_scenario",
    "forecast_scenario",
    "infer_h0",
    "prepare_lens",
    "forecast_prepared",
    "infer_joint_h0",
]


def load_scenario(path: PathLike, model: PathLike | None = None) -> Scenario:
    """Read and validate a scenario file; ``model`` (a model file) replaces its mass model."""
    return reading.load_scenario(path, [model] if model is not None else None)[0]


def load_model(path: PathLike) -> MassModel:
    """Read a model recipe (``[[mass]]`` entries) from a TOML file."""
    return reading.load_model(path)[0]


def _scenario(scenario, model=None) -> tuple[Scenario, list]:
    """The scenario (read from a path if need be) with ``model`` in place, and its input files."""
    if isinstance(scenario, Scenario):
        used = [scenario.source] if Path(scenario.source).is_file() else []
        if isinstance(model, MassModel):
            return replace(scenario, model=model), used
        if model is not None:
            return replace(scenario, model=load_model(model)), used + [model]
        return scenario, used
    if isinstance(model, MassModel):
        sc, used = reading.load_scenario(scenario)
        return replace(sc, model=model), used
    return reading.load_scenario(scenario, [model] if model is not None else None)


def _redshifts(doc: dict, source: str, lens_redshift, source_redshift):
    lens_tab = doc.get("lens", {})
    if not isinstance(lens_tab, dict):
        raise InputError(f"lens must be a table, got {lens_tab!r}", source)
    z_l = lens_redshift if lens_redshift is not None else lens_tab.get("redshift")
    if z_l is None:
        raise InputError(
            "lens.redshift is needed for delays in days "
            "(give [lens] redshift or --lens-redshift), got nothing",
            source,
        )
    z_ref = lens_tab.get("reference_source_redshift")
    z_s = source_redshift if source_redshift is not None else z_ref
    if z_s is None:
        raise InputError(
            "a source redshift is needed (give --source-redshift or "
            "[lens] reference_source_redshift), got nothing",
            source,
        )
    z_ref = z_s if z_ref is None else z_ref
    for name, z in (
        ("lens.redshift", z_l),
        ("source redshift", z_s),
        ("lens.reference_source_redshift", z_ref),
    ):
        if isinstance(z, bool) or not isinstance(z, (int, float)) or not np.isfinite(z) or z <= 0:
            raise InputError(f"{name} must be a positive finite number, got {z!r}", source)
    return float(z_l), float(z_s), float(z_ref)


def images_of_source(
    model_path, source_x, source_y, *, source_redshift=None, lens_redshift=None
) -> dict:
    """All images of one point source behind the model in a model file.

    Parameters
    ----------
    model_path : str or path
        A model TOML (``[[mass]]`` entries, and ``[lens]`` redshifts for delays in days).
    source_x, source_y : float or astropy Quantity
        Source position; plain numbers are arcsec.
    source_redshift, lens_redshift : float, optional
        Override the file's redshifts.
    """
    beta_x, beta_y = float(as_arcsec(source_x, "source_x")), float(as_arcsec(source_y, "source_y"))
    model, doc = reading.load_model(model_path)
    z_l, z_s, z_ref = _redshifts(doc, model_path, lens_redshift, source_redshift)
    try:
        cosmo = cosmology_from_spec(doc.get("cosmology"))
        distances = LensDistances(cosmo, z_l, z_ref)
        scale = distances.deflection_scale(z_s)
        days = distances.days_per_arcsec2(z_s)
    except InputError as err:
        raise err.with_source(model_path) from err
    lens = model.lens()
    table = find_images(lens, [beta_x], [beta_y], scale)
    ring = einstein_ring(lens, table, beta_x, beta_y, scale)
    # the first arrival is over every image, the ring included
    first = fermat_difference_to_days(table.fermat, days).min() if len(table) else 0.0
    if ring is not None:
        on_ring = np.abs(table.magnification) >= RING_MAGNIFICATION
        ring["delay_days"] = float(
            fermat_difference_to_days(table.fermat[on_ring][0], days) - first
        )
        table = table.select(~on_ring)
    t = fermat_difference_to_days(table.fermat, days)
    labels = [chr(ord("A") + i) if i < 26 else f"I{i + 1}" for i in range(len(table))]
    images = [
        {
            "label": lab,
            "x": float(x),
            "y": float(y),
            # null where images merge on a critical curve (infinite for a point source)
            "magnification": float(mu) if np.isfinite(mu) else None,
            "parity": PARITIES[int(p)],
            "delay_days": float(dt - first),
        }
        for lab, x, y, mu, p, dt in zip(
            labels, table.x, table.y, table.magnification, table.parity, t
        )
    ]
    return {
        "tool": "lensdelay",
        "version": __version__,
        "input_sha256": reading.file_hash(model_path),
        "model": model_path,
        "cosmology": describe_cosmology(cosmo),
        "lens_redshift": z_l,
        "source_redshift": z_s,
        "reference_source_redshift": z_ref,
        "source": {"x": beta_x, "y": beta_y},
        "time_delay_distance_Mpc": float(distances.time_delay_distance(z_s).value),
        "delay_reference": "first arrival",
        "images": images,
        "einstein_ring": ring,
    }


#: abs(μ) above which a root sits on a caustic (a point source's magnification diverges there).
RING_MAGNIFICATION = 1e6


def einstein_ring(lens, table, beta_x, beta_y, scale) -> dict | None:
    """The Einstein ring a source on a point caustic makes, or None.

    A root with abs(μ) above :data:`RING_MAGNIFICATION` is tested: if every point of the
    circle through it, about the nearest lens centre, maps back onto the source (to
    1e-6 arcsec), the image is that whole circle -- a ring of radius r -- not a list of
    points.
    """
    on_caustic = np.abs(table.magnification) >= RING_MAGNIFICATION
    if not np.any(on_caustic):
        return None
    x0, y0 = table.x[on_caustic][0], table.y[on_caustic][0]
    centres = list(lens.centres()) or [(0.0, 0.0)]
    cx, cy = min(centres, key=lambda c: np.hypot(x0 - c[0], y0 - c[1]))
    radius = float(np.hypot(x0 - cx, y0 - cy))
    phi = np.linspace(0.0, 2 * np.pi, 181)
    bx, by = lens.source_position(cx + radius * np.sin(phi), cy + radius * np.cos(phi), scale)
    if np.max(np.hypot(np.asarray(bx) - beta_x, np.asarray(by) - beta_y)) > 1e-6:
        return None
    return {"radius_arcsec": radius, "x": float(cx), "y": float(cy)}


def check_scenario(scenario, model=None) -> dict:
    """Validate a scenario (and its model) without fitting anything.

    Returns the scenario, its likelihood (constraints and free parameters) and the input files.
    """
    sc, used = _scenario(scenario, model)
    like = ImageLikelihood(sc, sc.model)
    try:
        check_constraints(like)
    except InputError as err:
        raise err.with_source(sc.source) from err
    return {"scenario": sc, "likelihood": like, "inputs": used}


@allows_far_dates
def fit_scenario(
    scenario,
    model=None,
    *,
    use_delays=False,
    use_fluxes=False,
    flux_floor=0.2,
    sample=False,
    walkers=DEFAULT_SAMPLER.walkers,
    steps=DEFAULT_SAMPLER.steps,
    seed=1,
    resume=False,
    checkpoint_dir=None,
    progress=False,
    prior=DEFAULT_SAMPLER.prior,
    stop=None,
) -> ScenarioFit:
    """Fit (and optionally sample) a scenario's mass model.

    Parameters
    ----------
    scenario : Scenario or path
    model : MassModel or path, optional
        Replaces the scenario's own model.
    use_delays, use_fluxes : bool
        Fit the measured delays (H0 free) and flux ratios (``flux_floor`` mag floor) too.
    sample : bool
        Also sample the posterior (``walkers`` × ``steps``), checkpointed to
        ``checkpoint_dir`` and resumable with ``resume``; a model with fewer constraints
        than parameters by importance sampling instead
        (:func:`lensdelay.inference.sequence.sample_posterior`).
    progress, stop
        Progress display and stop request of :func:`lensdelay.inference.sampling.sample`.
    """
    if sample:
        check_sampler_settings(walkers, steps, seed)
    elif isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed must be an integer >= 0, got {seed!r}")
    sc, used = _scenario(scenario, model)
    if not (is_real(flux_floor) and flux_floor > 0):
        raise InputError(f"flux_floor must be a number > 0 mag, got {flux_floor!r}")
    like = ImageLikelihood(
        sc,
        sc.model,
        use_delays=use_delays,
        use_fluxes=use_fluxes,
        flux_floor_mag=flux_floor,
        prior=prior,
    )
    with warnings.catch_warnings():
        # the report states these (dof, a model error, short chains); a warning would say
        # it twice. The sequence every job runs: fit, judge (a poor fit gets a model error
        # on the positions), then sample
        warnings.simplefilter("ignore", LensdelayWarning)
        result, chain = fit_and_sample(
            like,
            walkers=walkers,
            steps=steps,
            fit_seed=seed,
            sample_seed=seed,
            progress=progress,
            stop=stop,
            checkpoint_dir=checkpoint_dir,
            resume=resume,
            sample=sample,
        )
    linear_delays = []
    for k, fam in enumerate(like.families):
        days, errs = delay_errors(like, result, family=k)
        for lab, d, e in zip(fam.labels[1:], days[1:], errs[1:]):
            linear_delays.append(
                {
                    "family": fam.label,
                    "image": lab,
                    "relative_to": fam.labels[0],
                    "days": float(d),
                    # None where the linearisation means nothing (no degrees of freedom)
                    "linearised_sigma_days": float(e) if np.isfinite(e) else None,
                }
            )
    return ScenarioFit(
        sc, like, result, chain, tuple(linear_delays), provenance(used, sc.cosmology, seed)
    )


#: Suffixes of light-curve files (a scenario is TOML).
CURVE_SUFFIXES = (".ecsv", ".csv")


@allows_far_dates
def measure_delays(
    scenario=None,
    curves=None,
    *,
    reference: str | None = None,
    kind: str = "auto",
    order: int = 2,
    max_delay: float | None = None,
    walkers: int = 32,
    steps: int = 1500,
    simulations: int = 10,
    seed: int = 1,
    delay_ranges: dict | None = None,
    delay_prior=None,
) -> "MeasuredDelays":
    """Delays of every image after the reference, measured from light curves.

    Parameters
    ----------
    scenario : Scenario, LightCurves or path, optional
        Names the curves (``[transient] light_curves``), the family and the reference
        image (``seen_in``); its image labels are the ones the curves may use. A
        light-curve file (``.ecsv``, ``.csv``) or ``LightCurves`` here is taken as
        ``curves``, with no scenario.
    curves : LightCurves or path, optional
        The curves themselves (instead of, or overriding, the scenario's).
    reference : str, optional
        The image whose delay is 0 (default: the scenario's ``seen_in``, else the curves'
        first image).
    kind, order, max_delay, walkers, steps, simulations, seed, delay_ranges
        As for :func:`lensdelay.lightcurves.measure.measure_delays`.
    delay_prior : path, optional
        A forecast.json of the same system: each image's predicted delay (its 95%
        interval, widened by its own width on both sides) bounds the search, a prior
        from the mass model (quasars; default: none, the curves' overlap alone).

    Returns
    -------
    MeasuredDelays
        With ``provenance``; ``.as_dict()`` is delays.json.
    """
    from lensdelay.io.lightcurve_files import read_light_curves
    from lensdelay.lightcurves.curves import LightCurves
    from lensdelay.lightcurves.measure import measure_delays as _measure

    if curves is None and (
        isinstance(scenario, LightCurves)
        or (
            isinstance(scenario, (str, os.PathLike))
            and Path(scenario).suffix.lower() in CURVE_SUFFIXES
        )
    ):
        scenario, curves = None, scenario  # a curves file where curves are expected
    sc, used = (None, []) if scenario is None else _scenario(scenario)
    labels = family = None
    if sc is not None:
        tr = sc.transient
        family = tr.family if tr is not None else sc.families[0].label
        labels = sc.family(family).labels
        if curves is None:
            if tr is None or tr.light_curves is None:
                raise InputError(
                    "transient.light_curves must name a light-curve file (or give the curves "
                    "directly), got none",
                    sc.source,
                )
            curves = Path(sc.source).parent / tr.light_curves
        reference = reference or (tr.seen_in if tr is not None else labels[0])
    if curves is None:
        raise InputError("curves must be given (a file or LightCurves) when there is no scenario")
    if not isinstance(curves, LightCurves):
        used = used + [path_of(curves, "light curves")]
        curves = read_light_curves(curves, labels)
    reference = reference or curves.labels[0]
    if delay_prior is not None:
        from lensdelay.io.lightcurve_files import delay_ranges_from_forecast

        used = used + [Path(delay_prior)]
        from_forecast = delay_ranges_from_forecast(delay_prior, reference, family)
        delay_ranges = {**from_forecast, **(delay_ranges or {})}
        delay_ranges = {k: v for k, v in delay_ranges.items() if k in curves.labels}
    result = _measure(
        curves,
        reference,
        family=family or "",
        kind=kind,
        order=order,
        max_delay=max_delay,
        walkers=walkers,
        steps=steps,
        simulations=simulations,
        seed=seed,
        images=labels,
        delay_ranges=delay_ranges,
    )
    cosmo = sc.cosmology if sc is not None else None
    if cosmo is not None:
        prov = provenance(used, cosmo, seed)
    else:
        prov = {
            "tool": "lensdelay",
            "version": __version__,
            "inputs": [str(p) for p in used],
            "input_sha256": reading.file_hash(*used),
            "seed": int(seed),
        }
    return replace(result, provenance=prov)


def _with_light_curve_delays(sc, used, delays):
    """The scenario with delays measured from light curves added (and the files used).

    ``delays`` is a delays.json path or a MeasuredDelays; None measures the curves the
    scenario names, if any. The new delays keep their covariance; the scenario's own
    entries stay independent of them.
    """
    from lensdelay.io.lightcurve_files import read_delays_json
    from lensdelay.model.scenario import MeasuredDelay

    tr = sc.transient
    notes = []
    if delays is None:
        if tr is None or tr.light_curves is None:
            return sc, used, notes
        delays = measure_delays(sc)
        used = used + [Path(sc.source).parent / tr.light_curves]
        _check_curves_cover_detection(sc, delays)
    if isinstance(delays, (str, os.PathLike)):
        new, cov = read_delays_json(delays, sc)
        used = used + [Path(delays)]
    elif not hasattr(delays, "covariance_labels"):
        raise InputError(
            f"delays must be a delays.json path or measure_delays' result, got {delays!r}"
        )
    else:
        keep = [im for im in delays.images if im.measurable]
        if not keep:
            why = "; ".join(f"{im.label}: {im.statement}" for im in delays.images)
            notes.append(
                "the light curves gave no measurable delay yet, so the forecast uses the image "
                f"positions alone ({why})"
            )
            return sc, used, notes
        labels = list(delays.covariance_labels)
        idx = [labels.index(im.label) for im in keep]
        cov = np.asarray(delays.covariance_days2)[np.ix_(idx, idx)]
        new = [
            MeasuredDelay(
                delays.family or tr.family,
                im.label,
                delays.reference,
                im.delay_days["median"],
                float(np.sqrt(cov[k, k])),
            )
            for k, im in enumerate(keep)
        ]
    old = list(sc.delays)
    pairs = {frozenset((d.family + "/" + d.image, d.family + "/" + d.relative_to)): d for d in old}
    for d in new:
        twin = pairs.get(frozenset((d.family + "/" + d.image, d.family + "/" + d.relative_to)))
        if twin is not None:
            raise InputError(
                f"delay {d.family}/{d.image} - {d.relative_to} must be given once, got it both "
                "in the scenario's [[delay]] entries and in the delays measured from light "
                "curves (the same measurement counted twice would halve its error); remove one",
                sc.source,
            )
    old_cov = (
        np.diag([d.sigma**2 for d in old])
        if sc.delay_covariance is None
        else np.asarray(sc.delay_covariance)
    )
    n_old, n_new = len(old), len(new)
    full = np.zeros((n_old + n_new, n_old + n_new))
    full[:n_old, :n_old] = old_cov
    full[n_old:, n_old:] = cov
    return replace(sc, delays=tuple(old + list(new)), delay_covariance=full), used, notes


#: A supernova's light curve of the detection image must reach to within this many days
#: of the detection date (it shows the event that was detected).
CURVE_DETECTION_GAP = 30.0


def _check_curves_cover_detection(sc, delays) -> None:
    """Refuse supernova curves that do not show the event the scenario detected.

    A supernova's curves hold one event; when the detection image's curve ends well
    before or starts well after the detection date, the curves and the detection are
    of different events (or one date is wrong), and the measured delays would place
    the images of one event at the dates of the other. A quasar's delays belong to the
    lens and may come from earlier monitoring.
    """
    curves = delays.curves
    if delays.kind != "supernova" or curves is None:
        return
    from astropy.time import Time

    tr = sc.transient
    t = curves.time[curves.image == delays.reference]
    if not t.size:
        return
    mjd = tr.date.mjd
    if mjd < t.min() - CURVE_DETECTION_GAP or mjd > t.max() + CURVE_DETECTION_GAP:
        first = Time(t.min(), format="mjd", scale="utc").isot[:10]
        last = Time(t.max(), format="mjd", scale="utc").isot[:10]
        raise InputError(
            f"transient.date must lie within the {delays.reference} light curve "
            f"({first}..{last}) or within {CURVE_DETECTION_GAP:g} days of it, got "
            f"{tr.date.isot[:10]}: the curves show another event than the one detected "
            "(or a date is wrong)",
            sc.source,
        )


#: Most pixels along a map's side (a 4001² grid of seven maps is ~450 MB as float32).
MAX_MAP_PIXELS = 4001


@allows_far_dates
def map_scenario(
    scenario,
    model=None,
    *,
    size: float | None = None,
    pixel: float | None = None,
    samples: int = 0,
    walkers: int = DEFAULT_SAMPLER.walkers,
    steps: int = DEFAULT_SAMPLER.steps,
    seed: int = 1,
    progress: bool = False,
    prior: str = DEFAULT_SAMPLER.prior,
) -> "LensMaps":
    """Maps of the fitted lens on a square grid (``lensdelay maps``).

    Parameters
    ----------
    scenario : Scenario or path
        Needs ``[sky]`` (the maps' celestial WCS is centred there).
    model : MassModel or path, optional
    size, pixel : float, optional
        Side of the field and pixel size, arcsec (default: a field 2.5 times the farthest
        image's distance from the origin, 201 pixels across).
    samples : int
        With > 0, the posterior is sampled and that many draws give the median and spread
        maps.
    walkers, steps, seed, progress, prior
        As for :func:`fit_scenario`.

    Returns
    -------
    LensMaps
        Best-fit maps (and posterior summaries), with the provenance.
    """
    from lensdelay.inference.maps import fitted_maps

    sc, used = _scenario(scenario, model)
    if sc.sky is None:
        raise InputError(
            "sky must give ra and dec (ICRS degrees) for maps with a celestial WCS, got none",
            sc.source,
        )
    if isinstance(samples, bool) or not isinstance(samples, (int, np.integer)) or samples < 0:
        raise InputError(f"samples must be an integer >= 0, got {samples!r}")
    if size is None:
        reach = max(np.hypot(im.x, im.y) for fam in sc.families for im in fam.images)
        size = 2.5 * reach + 0.5
    if not (is_real(size) and np.isfinite(size) and size > 0):
        raise InputError(f"size must be a positive number of arcsec, got {size!r}")
    if pixel is None:
        # a round pixel (1, 2 or 5 × a power of ten) giving about 200 across
        raw = size / 200.0
        power = 10.0 ** np.floor(np.log10(raw))
        pixel = float(power * min(m for m in (1, 2, 5, 10) if m * power >= raw))
    for name, value in (("size", size), ("pixel", pixel)):
        if not (is_real(value) and np.isfinite(value) and value > 0):
            raise InputError(f"{name} must be a positive number of arcsec, got {value!r}")
    if size / pixel > MAX_MAP_PIXELS:
        raise InputError(
            f"size / pixel must be <= {MAX_MAP_PIXELS} pixels across, got {size / pixel:.0f} "
            f"({size:g} / {pixel:g}); choose a larger pixel or a smaller size"
        )
    fitted = fit_scenario(
        sc,
        sample=samples > 0,
        walkers=walkers,
        steps=steps,
        seed=seed,
        progress=progress,
        prior=prior,
    )
    rows = None
    if samples > 0:
        flat = fitted.chain.samples()
        rows = flat[np.random.default_rng(seed).integers(0, len(flat), samples)]
    tr = sc.transient
    family = tr.family if tr is not None else sc.families[0].label
    reference = tr.seen_in if tr is not None else sc.families[0].images[0].label
    maps = fitted_maps(
        fitted.likelihood,
        fitted.fit.values,
        size=size,
        pixel=pixel,
        family=family,
        reference=reference,
        rows=rows,
    )
    return replace(maps, provenance=provenance(used, sc.cosmology, seed))


@allows_far_dates
def forecast_scenario(
    scenario, models=None, *, budget: bool = True, delays=None, **options
) -> Forecast:
    """When, where and how bright the transient appears in every image (the main job).

    Parameters
    ----------
    scenario : Scenario or path
    models : sequence of MassModel or paths, optional
        Mass models to fit and combine (default: the scenario's own).
    budget : bool
        Also compute the uncertainty budget.
    delays : path or MeasuredDelays, optional
        Delays measured from light curves (a delays.json file or :func:`measure_delays`'s
        result), used with their covariance beside the scenario's own ``[[delay]]``
        entries; without it a scenario whose transient names ``light_curves`` has them
        measured first.
    **options
        Those of :func:`lensdelay.forecast.pipeline.run_forecast` (``n_samples``,
        ``seed``, ``h0``, ``kappa_ext``, ``seen``, ``now``, ``site``, ...).

    Returns
    -------
    Forecast
        The images (:class:`~lensdelay.forecast.result.ImageForecast`: date, delay and
        magnitude summaries, statuses), the timing update, models and weights, the
        budget and the provenance; ``.report()`` gives the text the command line prints.
    """
    pairs = [_scenario(scenario, m) for m in (models or [None])]
    triples = [_with_light_curve_delays(sc, used, delays) for sc, used in pairs]
    inputs = []
    for _, used, _ in triples:
        inputs += [p for p in used if p not in inputs]
    res = run_forecast([sc for sc, _, _ in triples], **options)
    res = replace(
        res,
        provenance=provenance(inputs, res.cosmology, res.settings.seed),
        notes=tuple(res.notes) + tuple(triples[0][2]),
    )
    return replace(res, budget=delay_budget(res)) if budget else res


@allows_far_dates
def infer_h0(scenario, model=None, *, delays=None, **options) -> HubbleResult:
    """Delays against H0 and, with measured delays, the H0 posterior (``lensdelay hubble``).

    ``delays`` as for :func:`forecast_scenario`; ``options`` are those of
    :func:`lensdelay.hubble.pipeline.run_hubble`.
    """
    sc, used, notes = _with_light_curve_delays(*_scenario(scenario, model), delays)
    res = run_hubble(sc, **options)
    return replace(
        res,
        provenance=provenance(used, res.scenario.cosmology, options.get("seed", 1)),
        notes=tuple(notes) + tuple(res.notes),
    )


def prepare_lens(
    scenario: PathLike,
    model: PathLike | None = None,
    *,
    walkers: int = DEFAULT_SAMPLER.walkers,
    steps: int = DEFAULT_SAMPLER.steps,
    seed: int = 1,
    prior: str = DEFAULT_SAMPLER.prior,
    out: PathLike | None = None,
    progress=False,
    stop=None,
):
    """Fit and sample a lens once, ahead of any alert (``lensdelay prepare``).

    Parameters
    ----------
    scenario : path
        The scenario file (its ``[transient]``, if any, is kept but not needed).
    model : path, optional
        A model file replacing the scenario's mass model.
    out : path, optional
        Folder to store the prepared lens in (:mod:`lensdelay.io.prepared_files`).

    Returns
    -------
    PreparedLens
        Forecast from it with :func:`forecast_prepared`; the fit and sampling seeds are
        those a from-scratch forecast with the same ``seed`` uses.
    """
    from lensdelay.forecast.prepared import fit_lens_ahead
    from lensdelay.io.prepared_files import write_prepared

    sc, _ = _scenario(scenario, model)
    prepared = fit_lens_ahead(
        sc, walkers=walkers, steps=steps, seed=seed, prior=prior, progress=progress, stop=stop
    )
    if out is not None:
        write_prepared(out, prepared, scenario, model)
    return prepared


@allows_far_dates
def forecast_prepared(
    prepared, transient: str | None = None, *, budget: bool = True, **options
) -> Forecast:
    """The forecast of an alert from a prepared lens, without fitting again.

    Parameters
    ----------
    prepared : PreparedLens or path
        From :func:`prepare_lens`, or the folder it was stored in.
    transient : str, optional
        ``FAMILY/LABEL=DATE±SIGMA``: the event seen in that image on that date (SIGMA in
        days); default the prepared scenario's own ``[transient]``.
    **options
        Those of :func:`forecast_scenario` (``n_samples``, ``seed``, ``h0``, ``now``, ...);
        with the prepared lens's seed the result equals the from-scratch forecast.
    """
    from lensdelay.forecast.prepared import parse_transient, with_transient
    from lensdelay.io.prepared_files import read_prepared

    inputs = []
    if not hasattr(prepared, "chain"):
        folder = path_of(prepared, "prepared")
        prepared = read_prepared(folder)
        # the scenario first: it names the system (lensdelay.io.provenance.system_hash)
        inputs = [folder / "scenario.toml", folder / "lens.json", folder / "chain.npz"]
    if transient is not None:
        prepared = with_transient(prepared, parse_transient(transient, prepared.scenario))
    for key in ("walkers", "steps", "prior"):
        options.setdefault(key, getattr(prepared.sampler, key))
    res = run_forecast([prepared.scenario], prepared=[prepared], **options)
    res = replace(res, provenance=provenance(inputs, res.cosmology, res.settings.seed))
    return replace(res, budget=delay_budget(res)) if budget else res


def infer_joint_h0(
    catalogue,
    *,
    anisotropy: str = "osipkov_merritt",
    lambda_int: bool = True,
    om0=0.3,
    cosmology: str = "FlatLambdaCDM",
    cosmology_parameters: dict | None = None,
    kappa_ext=(0.0, 0.05),
    draws_per_lens: int = 600,
    walkers: int = DEFAULT_SAMPLER.walkers,
    steps: int = DEFAULT_SAMPLER.steps,
    joint_steps: int = 3000,
    seed: int = 1,
    blinding_key: bytes | None = None,
    orbits_side_by_side: bool = False,
    progress=False,
):
    """H0 from many lenses at once, with kinematics and the mass sheet (``lensdelay cosmography``).

    Parameters
    ----------
    catalogue : path or sequence
        A folder of scenario files and/or prepared lenses (as ``batch`` reads it), or a
        sequence of (name, scenario path or prepared-lens folder) pairs.
    anisotropy : str
        The orbits: ``isotropic``, ``constant`` or ``osipkov_merritt``.
    lambda_int : bool
        Infer the internal mass sheet's population (True) or fix λ_int = 1.
    om0 : float or (mean, sigma)
        Ωm fixed, or free with a Gaussian prior.
    cosmology : str
        The astropy cosmology H0 is inferred in (``FlatLambdaCDM``, ``LambdaCDM``,
        ``FlatwCDM``, ``wCDM``, ``Flatw0waCDM``, ``w0waCDM``).
    cosmology_parameters : dict, optional
        Its other parameters (``Ode0``, ``w0``, ``wa``): a value (fixed) or (mean, sigma)
        (inferred, Gaussian prior); those not given take ΛCDM's values (0.7, −1, 0).
    kappa_ext : (mean, sigma)
        The κ_ext prior of lenses whose scenario has no ``[line_of_sight]``.
    draws_per_lens : int
        Posterior samples of each lens used in the joint stage's Monte Carlo.
    walkers, steps : int
        The sampler of each lens's positions-only posterior (a prepared lens keeps its own).
    joint_steps : int
        Steps of the joint stage's sampler (a third are burn-in).
    seed : int
        Every lens's seed derives from it and the lens's name; the joint stage's too.
    blinding_key : bytes, optional
        Blind every H0 and distance with the factor this key gives
        (:class:`lensdelay.hubble.cosmography.Blinding`); None: unblinded.
    orbits_side_by_side : bool
        Also run the joint stage under each other orbit model (isotropic, constant β,
        Osipkov–Merritt), all else the same: the result's ``orbit_alternatives``.

    Returns
    -------
    lensdelay.hubble.cosmography.JointH0Result
        With ``provenance`` of every input file; ``.report()`` gives the text.
    """
    from lensdelay.hubble.cosmography import Blinding, joint_h0, orbit_models_side_by_side
    from lensdelay.hubble.joint import Population
    from lensdelay.hubble.lens_evidence import lens_evidence, posterior_of_positions
    from lensdelay.inference.priors import kappa_prior_of
    from lensdelay.inference.sampling import SamplerSettings
    from lensdelay.io.catalogue import list_systems, system_seed
    from lensdelay.io.prepared_files import is_prepared, read_prepared

    check_sampler_settings(walkers, steps, seed)
    check_sampler_settings(walkers, joint_steps, seed)
    kappa_ext = kappa_prior_of(kappa_ext)
    if not isinstance(draws_per_lens, int) or draws_per_lens < 50:
        raise InputError(f"draws_per_lens must be an integer >= 50, got {draws_per_lens!r}")
    population = Population(
        anisotropy, lambda_int, om0, cosmology, dict(cosmology_parameters or {})
    )
    if isinstance(catalogue, (str, os.PathLike)):
        systems = list_systems(catalogue)
    elif isinstance(catalogue, Sequence):
        systems = catalogue
    else:
        raise InputError(
            "catalogue must be a path (a string or os.PathLike) or a sequence of (name, path) "
            f"pairs, got {catalogue!r}"
        )
    # every lens read and checked before any is fitted: a bad one stops the run at once
    loaded, inputs = [], []
    for name, path in systems:
        if is_prepared(path):
            prepared = read_prepared(path)
            loaded.append((name, prepared.scenario, prepared))
            inputs += [Path(path) / "scenario.toml", Path(path) / "lens.json"]
        else:
            sc, used = _scenario(path)
            loaded.append((name, sc, None))
            inputs += used
        sc = loaded[-1][1]
        if not sc.delays and sc.kinematics is None:
            raise InputError(
                "a lens of a joint H0 needs measured delays ([[delay]]) or [kinematics], "
                "got neither",
                sc.source,
            )
    sampler = SamplerSettings(walkers=walkers, steps=steps)
    evidence = []
    for name, sc, prepared in loaded:
        lens_seed = system_seed(name, seed)
        if prepared is not None:
            like, chain = prepared.likelihood(), prepared.chain
        else:
            like, chain = posterior_of_positions(sc, sampler, lens_seed)
        if progress:
            import sys

            print(f"cosmography: {name}: lens posterior ready", file=sys.stderr)
        evidence.append(
            lens_evidence(
                name,
                sc,
                like,
                chain.samples(),
                anisotropy=anisotropy,
                n_samples=draws_per_lens,
                rng=np.random.default_rng(lens_seed),
                kappa_prior=kappa_ext,
            )
        )
    blinding = None if blinding_key is None else Blinding(blinding_key)
    joint = {"walkers": walkers, "steps": joint_steps, "seed": seed, "blinding": blinding}
    res = joint_h0(evidence, population, **joint)
    if orbits_side_by_side:
        res = orbit_models_side_by_side(res, evidence, **joint)
    prov = provenance(inputs, loaded[0][1].cosmology, seed)
    prov["cosmology"] = population.describe_cosmology()
    return replace(res, provenance=prov)
