"""Dates far ahead (or far back) in UTC, handled deliberately.

UTC needs the leap seconds, which are announced only months ahead; for a date beyond the
table astropy (through ERFA) assumes none are added and warns of a "dubious year". A
forecast of a cluster-lensed supernova's image due in 10-20 years lies there by nature, so
the package computes such dates knowingly and keeps that warning from the user. Their
precision: a UTC date years ahead may be off by the leap seconds announced later (a few
seconds per decade at most), far below any delay's uncertainty.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import functools
import warnings

__all__ = ["far_dates_allowed", "allows_far_dates", "iso_utc", "day_of", "median_day"]


@contextlib.contextmanager
def far_dates_allowed():
    """A context in which ERFA's "dubious year" warning is not raised.

    That warning marks UTC beyond the leap-second table; every other warning still is.
    """
    from erfa import ErfaWarning

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", category=ErfaWarning, message=".*dubious year.*")
        yield


def allows_far_dates(function):
    """Decorator: run ``function`` inside :func:`far_dates_allowed`."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with far_dates_allowed():
            return function(*args, **kwargs)

    return wrapper


@allows_far_dates
def iso_utc(t) -> str:
    """An astropy ``Time`` as ISO 8601 UTC to the second, with a Z."""
    return t.utc.isot[:19] + "Z"


def day_of(iso: str) -> str:
    """The calendar day (UTC) that contains an instant.

    Window ends are shown as the days that contain them, so a shown window always
    contains the computed one (rounded outward): a 68% window starting
    2027-02-10T16:24 starts on 02-10.
    """
    return iso[:10]


def median_day(iso: str) -> str:
    """The calendar day nearest to an instant (a point estimate, not a window end)."""
    t = _dt.datetime.fromisoformat(iso.rstrip("Z")) + _dt.timedelta(hours=12)
    return t.date().isoformat()
