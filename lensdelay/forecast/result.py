"""Typed forecast results: one :class:`Forecast` holding one :class:`ImageForecast` per image.

Summaries are five-quantile dicts (``median``, ``p16``, ``p84``, ``p2.5``, ``p97.5``)
ready for JSON; where a person reads a date the result offers astropy ``Time``
(:attr:`ImageForecast.date`, :meth:`ImageForecast.window`). Results are frozen: the
budget and the provenance are added with :func:`dataclasses.replace`, never by
changing a result in place.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from astropy import units as u
from astropy.coordinates import SkyCoord
from astropy.time import Time

from lensdelay.dates import allows_far_dates, day_of, iso_utc, median_day
from lensdelay.forecast.positions import PositionEllipse

__all__ = [
    "STATUS_MEANINGS",
    "TENSION_CAUSES",
    "ModelUpdate",
    "TimingRecord",
    "ImageSampleSet",
    "ImageForecast",
    "Forecast",
]


#: What each status means (docs/statistics.md: "Statuses"); printed under the table.
STATUS_MEANINGS = {
    "seen": "the event was observed in this image (the detection or a reported sighting)",
    "past": "its whole 95% window is over as of now: search archives",
    "uncertain": "fewer than 95% of samples agree whether it leads or trails the reference image",
    "now": "now lies inside its 95% window: observe",
    "future": "its whole 95% window lies ahead",
}
#: The usual causes of a measurement in tension with the forecast, printed with the warning.
TENSION_CAUSES = (
    "a mass model too simple for this lens, a nearby galaxy or group not in the model, "
    "microlensing distorting the light curve, or a wrong image identification"
)


@dataclass(frozen=True)
class ModelUpdate:
    """How one model's samples took in the timing data.

    ``route`` is ``none`` (no timing data), ``reweight`` (importance weights) or
    ``resample`` (the posterior sampled again with the measurements);
    ``importance_effective_samples`` is what re-weighting would have left (None when it
    was not tried); ``log_evidence`` the timing data's evidence (None when not finite).
    """

    label: str
    route: str
    effective_samples: float
    importance_effective_samples: float | None
    log_evidence: float | None

    def as_dict(self) -> dict:
        """JSON-ready."""
        return dict(vars(self))


@dataclass(frozen=True)
class TimingRecord:
    """The timing data a forecast used and what it did with them.

    Attributes
    ----------
    sightings : tuple of lensdelay.forecast.samples.Sighting
    delays : tuple of lensdelay.model.scenario.MeasuredDelay
    models : tuple of ModelUpdate
        One per model, in the forecast's model order.
    min_effective_samples : float
        Below this many effective samples re-weighting gives way to sampling again.
    tensions : tuple of lensdelay.inference.timing.Tension
        Every measurement against the forecast from the image positions alone.
    """

    sightings: tuple = ()
    delays: tuple = ()
    models: tuple[ModelUpdate, ...] = ()
    min_effective_samples: float = 0.0
    tensions: tuple = ()

    def as_dict(self) -> dict:
        """The ``timing`` record of ``forecast.json``."""
        return {
            "sightings": [
                {
                    "family": s.family,
                    "image": s.label,
                    "date": iso_utc(s.date),
                    "sigma_days": s.sigma_days,
                    "sigma_source": "given" if s.sigma_stated else "default",
                }
                for s in self.sightings
            ],
            "delays": [
                {
                    "family": d.family,
                    "image": d.image,
                    "relative_to": d.relative_to,
                    "days": d.days,
                    "sigma": d.sigma,
                }
                for d in self.delays
            ],
            "models": [m.as_dict() for m in self.models],
            "min_effective_samples": self.min_effective_samples,
            "tensions": [t.as_dict() for t in self.tensions],
        }


@dataclass(frozen=True)
class ImageSampleSet:
    """Per-sample values behind one image's summaries (all models pooled), with weights.

    ``offsets`` are dates as days after the detection date (t0 + Δt); ``lens_days`` the
    lens-model delays at the reference cosmology; ``model`` the index of each sample's model;
    ``x``, ``y`` the image's position (arcsec offsets; NaN where it does not exist).
    """

    offsets: np.ndarray
    weights: np.ndarray
    delay: np.ndarray
    lens_days: np.ndarray
    h0: np.ndarray
    kappa: np.ndarray
    t0: np.ndarray
    model: np.ndarray
    x: np.ndarray
    y: np.ndarray
    perturber_days: np.ndarray | None = None  # the unseen perturbers' part of lens_days


@dataclass(frozen=True)
class ImageForecast:
    """When, where and how bright the event appears in one image.

    ``date_offset_days`` and ``delay_days`` are summaries in days after the detection
    date and after the reference image; :attr:`date` gives the dates themselves.
    ``x``, ``y`` are the weighted-median position (arcsec offsets), ``position_error``
    its 68% and 95% error ellipses (:mod:`lensdelay.forecast.positions`), ``ra``, ``dec``
    the ICRS position in degrees (None when the scenario has no ``[sky]``); :attr:`coord`
    gives it as a ``SkyCoord``.
    """

    family: str
    label: str
    observed: bool
    x: float
    y: float
    parity: str
    parity_agreement: float
    arrival_rank: int
    rank_agreement: float
    order: str
    order_agreement: float
    status: str
    sighted: bool
    flags: tuple[str, ...]
    exists_fraction: float
    delay_days: dict
    magnification: dict
    magnitude: dict | None
    fainter_than_depth: bool | None
    date_offset_days: dict
    per_model: dict
    model_spread_days: float
    interval95_change: float | None
    archival_search: dict | None
    tension: object  # lensdelay.inference.timing.Tension of a sighting of this image, or None
    detection_date: Time
    samples: ImageSampleSet = field(repr=False)
    observability: dict | None = None
    position_error: tuple[PositionEllipse, ...] = ()
    ra: float | None = None
    dec: float | None = None

    @property
    def coord(self) -> SkyCoord | None:
        """The ICRS position (None without a ``[sky]`` origin)."""
        if self.ra is None:
            return None
        return SkyCoord(self.ra * u.deg, self.dec * u.deg, frame="icrs")

    def dates_at_h0(self, h0_values, h0_reference: float) -> dict:
        """Date-offset quantiles (days after the detection) had H0 been fixed at each value.

        Every sample's delay is its lens-model delay at the reference cosmology
        (``h0_reference``) times (H_ref/H0)(1 − κ_ext) — a delay scales as 1/H0 (D_Δt ∝
        1/H0) — plus its own detection-date offset, with the samples' weights. With
        measured delays or sightings the weights were set with H0 free, so the table is
        then an approximation of the posterior at fixed H0.
        """
        from lensdelay.inference.summaries import quantile_summary

        s = self.samples
        ok = np.isfinite(s.lens_days) & (s.weights > 0)
        out = {}
        for h0 in h0_values:
            offsets = s.t0[ok] + s.lens_days[ok] * (h0_reference / h0) * (1.0 - s.kappa[ok])
            out[float(h0)] = quantile_summary(offsets, s.weights[ok])
        return out

    def ellipse(self, level: int = 95) -> PositionEllipse:
        """The 68% or 95% position error ellipse."""
        for e in self.position_error:
            if e.level == level:
                return e
        raise KeyError(
            f"level must be one of {[e.level for e in self.position_error]}, got {level}"
        )

    @property
    def name(self) -> str:
        """``family/label``."""
        return f"{self.family}/{self.label}"

    @property
    @allows_far_dates
    def date(self) -> dict[str, Time]:
        """The date quantiles as astropy ``Time`` (UTC)."""
        return {k: self.detection_date + v * u.day for k, v in self.date_offset_days.items()}

    def window(self, level: int = 95) -> tuple[Time, Time]:
        """The central 68% or 95% date window."""
        lo, hi = _window_keys(level)
        dates = self.date
        return dates[lo], dates[hi]

    @allows_far_dates
    def instant(self, offset_days: float) -> Time:
        """The date ``offset_days`` after the detection date."""
        return self.detection_date + offset_days * u.day

    def dates_iso(self) -> dict[str, str]:
        """The date quantiles as ISO 8601 UTC strings (to the second, with a Z)."""
        return {k: iso_utc(self.instant(v)) for k, v in self.date_offset_days.items()}

    @allows_far_dates
    def dates_mjd(self) -> dict[str, float]:
        """The date quantiles as UTC MJD."""
        return {k: float(self.instant(v).utc.mjd) for k, v in self.date_offset_days.items()}

    def window_days(self, level: int = 95) -> tuple[str, str]:
        """The calendar days (UTC) that contain the 68% or 95% window's two ends."""
        lo, hi = _window_keys(level)
        iso = self.dates_iso()
        return day_of(iso[lo]), day_of(iso[hi])

    def median_day(self) -> str:
        """The calendar day nearest the median date (a point estimate: see the windows)."""
        return median_day(self.dates_iso()["median"])

    def archival_span(self) -> tuple[str, str] | None:
        """The span of archives to search (ISO UTC, from, to), None when there is none."""
        arch = self.archival_search
        if arch is None:
            return None
        return iso_utc(self.instant(arch["from_offset"])), iso_utc(self.instant(arch["to_offset"]))


def _window_keys(level: int) -> tuple[str, str]:
    """The quantile keys of a central window."""
    keys = {68: ("p16", "p84"), 95: ("p2.5", "p97.5")}
    if level not in keys:
        raise ValueError(f"level must be one of {sorted(keys)}, got {level!r}")
    return keys[level]


@dataclass(frozen=True)
class Forecast:
    """A whole forecast: the images, the models and their weights, the timing update.

    Attributes
    ----------
    images : tuple of ImageForecast
        Sorted by median date.
    timing : TimingRecord
        The sightings and delays used, each model's update route and effective
        samples, and every measurement's tension.
    budget, provenance : dict or None
        Added by :func:`lensdelay.api.forecast_scenario`.
    sky_view : dict or None
        What a finder chart draws: the most probable model's best-fit images, critical
        curves, caustics and arrival-time surface (``forecast.pipeline._finder_view``).
    """

    scenario: object
    settings: object
    site: object
    now: Time
    images: tuple[ImageForecast, ...]
    model_labels: tuple[str, ...]
    fits: tuple
    chains: tuple = field(repr=False)
    model_weights: np.ndarray = field(repr=False)
    model_weights_positions: np.ndarray = field(repr=False)
    updates: tuple = field(repr=False)
    model_notes: tuple = ()
    timing: TimingRecord = field(default_factory=TimingRecord)
    notes: tuple[str, ...] = ()
    cosmology: object = None
    h0_used: object = None
    calendar: object = field(default=None, repr=False)
    provenance: dict | None = None
    budget: dict | None = None
    sky_view: dict | None = field(default=None, repr=False)

    def __repr__(self) -> str:
        labels = ", ".join(f"{im.label}: {im.status}" for im in self.images)
        return (
            f"<Forecast of {self.scenario.name!r} as of {self.now.isot[:16]}Z: "
            f"{len(self.images)} images ({labels}); models {', '.join(self.model_labels)}>"
        )

    def image(self, label: str, family: str | None = None) -> ImageForecast:
        """The image called ``label`` (of ``family``, default the transient's)."""
        family = family or self.scenario.transient.family
        for im in self.images:
            if im.label == label and im.family == family:
                return im
        raise KeyError(f"{family}/{label}")

    def report(self) -> str:
        """The text the command line prints (with the budget when there is one)."""
        from lensdelay.report.text import budget_text, forecast_text

        text = forecast_text(self)
        return text + ("\n\n" + budget_text(self.budget) if self.budget else "")
