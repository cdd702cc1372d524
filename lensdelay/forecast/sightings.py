"""Sightings of further images: parsed, matched to the model's images, made timing data."""

from __future__ import annotations

import math
import re

import numpy as np
from astropy import units as u

from lensdelay.errors import InputError
from lensdelay.forecast.samples import (
    ImageTrack,
    Sighting,
)
from lensdelay.model.scenario import MAX_DATE_SIGMA_DAYS, parse_date
from lensdelay.inference.timing import SightingRow, TimingData

__all__ = [
    "DEFAULT_SIGHTING_SIGMA_DAYS",
    "default_sighting_sigma",
    "parse_sightings",
    "resolve_sightings",
    "timing_for",
]


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


def resolve_sightings(
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


def timing_for(scenario, tracks, sightings, label_map) -> tuple[TimingData | None, list[str]]:
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
