"""The models combined: tensions, summaries per image, statuses, observability, result rows."""

from __future__ import annotations

from dataclasses import dataclass
from dataclasses import fields as dataclass_fields
from dataclasses import replace

import numpy as np
from astropy import units as u
from astropy.time import Time

from lensdelay.errors import InputError
from lensdelay.forecast.result import ImageForecast, ImageSampleSet
from lensdelay.forecast.samples import (
    AGREEMENT,
    majority,
    match_tracks,
    parity_name,
)
from lensdelay.forecast.positions import position_ellipses, sky_position
from lensdelay.inference.summaries import quantile_summary, weighted_quantiles
from lensdelay.inference.timing import Tension, tensions_from_draws

__all__ = [
    "SAMPLE_COLUMNS",
    "MAX_OFFSET_DAYS",
    "CALENDAR_YEARS",
    "REFERENCE_SHIFT_SIGMA",
    "check_calendar_range",
    "measurement_tensions",
    "image_status",
    "summarise",
    "flag_strained_update",
    "image_observability",
]


#: Dates further than this from the detection (days, ~10,000 years) are refused: no lens
#: gives such delays, and calendars and the time library cannot place them.
MAX_OFFSET_DAYS = 10_000 * 365.25


#: ISO 8601 dates (and the outputs' calendars) are written with four-digit years.
CALENDAR_YEARS = (1, 9999)

#: The per-sample columns of an image the result keeps (ImageSampleSet's own fields).
SAMPLE_COLUMNS = tuple(
    f.name for f in dataclass_fields(ImageSampleSet) if f.name not in ("offsets", "weights")
)


def check_calendar_range(images: list[ImageForecast], tr, source: str | None = None) -> None:
    """Refuse a forecast whose samples' dates fall outside the years 1–9999.

    Every sample that carries weight is checked (the files write quantiles, the
    calendar and the figures span the tails too), not only the 95% windows.
    """
    lows, highs = [], []
    for im in images:
        s = im.samples
        off = s.offsets[np.isfinite(s.offsets) & (s.weights > 0)]
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


def measurement_tensions(timings, prior_models, w_prior, rng) -> list[Tension]:
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
    return tensions_from_draws(parts[0][0], sims, weights)


def image_status(is_seen, q, now_offset, order_agreement) -> str:
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


def _gather(g, models, updates, w_model, prior_models, w_prior, tr, settings, rng):
    """One image's samples from every model that has it, with their mixture weights.

    Returns the columns (concatenated over models), the positions-only offsets and
    weights per model, and each model's weight and median delay.
    """
    # the per-sample columns an ImageSampleSet keeps, and those summarised here only
    cols = {k: [] for k in (*SAMPLE_COLUMNS, "offsets", "weights", "mu", "parity", "rank", "mag")}
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
        prior_w.append(w_prior[m_index] * (ps.exists[:, col] & ps.valid) / max(ps.valid.sum(), 1))
        wsum = w.sum()
        per_model[samples.model_label] = {
            "weight": float(w_model[m_index]),
            "delay_median": float(weighted_quantiles(delay, w, [50])[0]) if wsum > 0 else None,
        }
    arr = {k: np.concatenate(v) for k, v in cols.items() if v}
    return arr, prior_off, prior_w, per_model


@dataclass(frozen=True)
class _Context:
    """What every image's summary needs besides its own samples."""

    transient: object
    settings: object
    now_offset: float  # days from the detection date to now
    sighted: frozenset
    tension_by_image: dict  # image label -> the Tension of its sighting
    has_timing: bool  # whether any model was updated by timing data
    sky: object  # the scenario's [sky] origin, or None


def _image_forecast(g, arr, per_model, prior_off, prior_w, ctx: _Context) -> ImageForecast | None:
    """The summary of one image from its gathered samples; None when no sample has it."""
    tr = ctx.transient
    weights = arr["weights"]
    total = weights.sum()
    weights = weights / total if total > 0 else weights
    # over all models: a model that lacks this image counts as "no image" with its weight
    exists_share = float(min(total, 1.0))
    valid = np.isfinite(arr["delay"]) & (weights > 0)
    if not np.any(valid):
        # no sample of any model has this image (e.g. a source on a caustic at the
        # best fit only): nothing to forecast, and the notes say so
        return None
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
    seen = is_ref or g["label"] in ctx.sighted
    flags = []
    if min(par_share, rk_share) < AGREEMENT:
        flags.append(f"parity or arrival order differs between samples (< {AGREEMENT:.0%} agree)")
    if exists_share < AGREEMENT and not is_ref:
        flags.append(
            f"the image exists in only {100 * exists_share:.0f}% of the forecast's samples "
            "(models and posterior together); its dates assume it exists"
        )
    outlook = _outlook(g["label"], off_q, arr, weights, per_model, prior_off, prior_w, ctx, seen)
    tension = outlook["tension"]
    if tension is not None and tension.in_tension:
        flags.append(
            f"the sighting is {abs(tension.sigma):.1f} sigma from the "
            "prediction made from the image positions"
        )
    ra = dec = None
    if ctx.sky is not None:
        where = sky_position(ctx.sky, centre_x, centre_y)
        ra, dec = float(where.ra.deg), float(where.dec.deg)
    return ImageForecast(
        family=g["family"],
        label=g["label"],
        observed=bool(g["observed"]),
        x=centre_x,
        y=centre_y,
        position_error=ellipses,
        parity=parity_name(par),
        parity_agreement=par_share,
        arrival_rank=int(rk),
        rank_agreement=rk_share,
        order=order,
        order_agreement=order_agreement,
        flags=tuple(flags),
        exists_fraction=exists_share,
        status=image_status(seen, off_q, ctx.now_offset, order_agreement),
        sighted=g["label"] in ctx.sighted,
        delay_days=quantile_summary(arr["delay"], weights),
        magnification=quantile_summary(arr["mu"], weights),
        date_offset_days=off_q,
        per_model=per_model,
        detection_date=tr.date,
        samples=ImageSampleSet(
            offsets=arr["offsets"], weights=weights, **{k: arr[k] for k in SAMPLE_COLUMNS}
        ),
        ra=ra,
        dec=dec,
        **outlook,
    )


def _outlook(label, off_q, arr, weights, per_model, prior_off, prior_w, ctx, seen) -> dict:
    """The models' spread, the window's narrowing, magnitude, archival advice, tension."""
    medians = [v["delay_median"] for v in per_model.values() if v["delay_median"] is not None]
    # how much the timing data narrowed the 95% window
    pq = weighted_quantiles(np.concatenate(prior_off), np.concatenate(prior_w), [2.5, 97.5])
    width_before = pq[1] - pq[0]
    magnitude = quantile_summary(arr["mag"], weights) if "mag" in arr else None
    archival = None
    # part of the 95% window before the detection: archives may hold the event
    # (only data already taken: up to now, which may be before the detection date)
    if not seen and off_q["p2.5"] < min(0.0, ctx.now_offset):
        archival = {
            "from_offset": off_q["p2.5"],
            "to_offset": min(off_q["p97.5"], ctx.now_offset),
        }
    return {
        "model_spread_days": float(np.ptp(medians)) if len(medians) > 1 else 0.0,
        "interval95_change": (
            float((off_q["p97.5"] - off_q["p2.5"]) / width_before)
            if ctx.has_timing and width_before > 0
            else None
        ),
        "magnitude": magnitude,
        "fainter_than_depth": (
            None if magnitude is None else bool(magnitude["median"] > ctx.settings.depth)
        ),
        "archival_search": archival,
        "tension": ctx.tension_by_image.get(label),
    }


def summarise(
    models, updates, w_model, prior_models, w_prior, tr, settings, now, rng, tensions, sky=None
):
    """One :class:`ImageForecast` per image (matched across models), with mixture weights.

    Returns the images sorted by median date and the names of images no sample has.
    """
    groups = match_tracks([m for m, _ in models])
    ctx = _Context(
        transient=tr,
        settings=settings,
        now_offset=float((now - tr.date).to_value(u.day)),
        sighted=frozenset(s.label for s in settings.sightings),
        tension_by_image={
            t.name.split("/", 1)[1]: t for t in tensions if t.name.startswith("sighting ")
        },
        has_timing=any(up.route != "none" for up in updates),
        sky=sky,
    )
    images, missing = [], []
    for g in groups:
        arr, prior_off, prior_w, per_model = _gather(
            g, models, updates, w_model, prior_models, w_prior, tr, settings, rng
        )
        image = _image_forecast(g, arr, per_model, prior_off, prior_w, ctx)
        if image is None:
            missing.append(f"{g['family']}/{g['label']}")
        else:
            images.append(image)
    images = flag_strained_update(images, tensions, tr)
    images.sort(key=lambda im: (im.date_offset_days["median"], im.label))
    return images, missing


#: A detection image whose date median moves more than this many detection-date sigmas
#: (or a day, when the detection date is exact) has been pulled by the measurements.
REFERENCE_SHIFT_SIGMA = 3.0


def flag_strained_update(images: list[ImageForecast], tensions, tr) -> list[ImageForecast]:
    """The images, flagged where a measurement contradicts the model the update relies on.

    An update combines the measurements with the model's prediction as if both were
    right. A measurement in tension with the prediction (beyond TENSION_SIGMA) means
    one of them is wrong, and then every window of the update is suspect, not only the
    image measured; a detection image whose date the update moves far from the
    detection date is the symptom that shows it most.
    """
    strained = [t for t in tensions if t.in_tension]
    common = ()
    if strained:
        worst = max(strained, key=lambda t: abs(t.sigma))
        common = (
            f"the update combines {len(strained)} measurement(s) in tension with the model "
            f"({worst.name} at {abs(worst.sigma):.1f} sigma): these windows hold "
            "only if both are right; check the measurement and the mass model",
        )
    tolerance = REFERENCE_SHIFT_SIGMA * tr.date_sigma_days if tr.date_sigma_days > 0 else 1.0
    out = []
    for im in images:
        extra = common
        if im.observed and im.label == tr.seen_in:
            shift = im.date_offset_days["median"]
            if abs(shift) > tolerance:
                extra = extra + (
                    f"the measurements move the detection image's own date by {shift:+.1f} d "
                    f"from the detection date (allowed by its error: ±{tolerance:.1f} d)",
                )
        out.append(replace(im, flags=im.flags + extra) if extra else im)
    return out


def image_observability(im: ImageForecast, calendar, tr, now) -> dict:
    """Observable days in the 95% window and the chance the event falls on one.

    Also the observable runs of the window still ahead of ``now`` (for the calendar):
    the record :attr:`ImageForecast.observability` holds.
    """
    start_offset = (tr.date - calendar.start).to_value("day")
    offs = im.samples.offsets + start_offset
    ok = np.isfinite(offs) & (im.samples.weights > 0)
    observable = calendar.is_observable(offs[ok])
    w = im.samples.weights[ok]
    prob = float(np.sum(w[observable]) / max(np.sum(w), 1e-300))
    q = im.date_offset_days
    d0, d1 = int(np.floor(q["p2.5"] + start_offset)), int(np.floor(q["p97.5"] + start_offset))
    runs = calendar.windows(d0, d1)
    n_obs = int(sum(b - a + 1 for a, b in runs))
    today = int(np.floor((now - calendar.start).to_value("day")))
    ahead = [(max(a, today), b) for a, b in runs if b >= today]
    day = lambda i: (calendar.start + i * u.day).iso[:10]  # noqa: E731
    return {
        "probability_observable": prob,
        "observable_days_in_95": n_obs,
        "days_in_95": int(d1 - d0 + 1),
        "windows": [[day(a), day(b)] for a, b in runs],
        "windows_ahead": [[day(a), day(b)] for a, b in ahead],
    }
