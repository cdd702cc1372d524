"""When can a telescope look? Nightly observability of a target from a site.

A ground site can observe on a night when, for at least ``min_hours``, the Sun is
below ``twilight`` degrees altitude and the target above ``min_altitude``. A space
observatory can observe on a day when the target's solar elongation lies within its
allowed range. Sun and target positions come from :mod:`astropy.coordinates`.

Positions of the images of one lens differ by arcseconds, so one calendar serves all
images of a system. Beyond the span of the bundled Earth-orientation tables astropy
falls back to mean polar motion, which is harmless at the minute level needed here;
that warning is silenced on purpose.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from astropy import units as u
from astropy.coordinates import SkyCoord, get_sun
from astropy.time import Time
from astropy.utils.exceptions import AstropyWarning

from lensdelay.model.scenario import Site

__all__ = [
    "Calendar",
    "solar_elongation",
    "build_calendar",
    "usable_time",
    "altitudes",
]


@dataclass(frozen=True)
class Calendar:
    """Observability per day.

    Attributes
    ----------
    start : Time
        UTC start of day 0 (a midnight).
    observable : ndarray of bool
        One entry per day.
    hours : ndarray
        Usable hours per night (ground) or 24/0 (space).
    """

    start: Time
    observable: np.ndarray
    hours: np.ndarray

    def day_index(self, offsets_days_from_start) -> np.ndarray:
        """Day numbers (0 = :attr:`start`) of times given in days after it."""
        return np.floor(np.asarray(offsets_days_from_start)).astype(int)

    def is_observable(self, offsets_days_from_start) -> np.ndarray:
        """Observable flags for times given as days after :attr:`start` (False outside)."""
        idx = self.day_index(offsets_days_from_start)
        inside = (idx >= 0) & (idx < len(self.observable))
        out = np.zeros(idx.shape, dtype=bool)
        out[inside] = self.observable[idx[inside]]
        return out

    def windows(self, first_day: int, last_day: int) -> list[tuple[int, int]]:
        """Runs of observable days within [first_day, last_day] (day indices, inclusive)."""
        lo, hi = max(first_day, 0), min(last_day, len(self.observable) - 1)
        runs, start = [], None
        for d in range(lo, hi + 1):
            if self.observable[d] and start is None:
                start = d
            if not self.observable[d] and start is not None:
                runs.append((start, d - 1))
                start = None
        if start is not None:
            runs.append((start, hi))
        return runs


def solar_elongation(target: SkyCoord, times: Time) -> np.ndarray:
    """Angle between the Sun and the target (degrees) at each time."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AstropyWarning)
        sun = get_sun(times)
        return sun.separation(SkyCoord(target.ra, target.dec, frame="icrs")).to_value(u.deg)


def build_calendar(
    site: Site, target: SkyCoord, first: Time, n_days: int, step_minutes: float = 2.0
) -> Calendar:
    """Observability for ``n_days`` days starting at the UTC midnight on/before ``first``.

    Ground sites: altitudes every ``step_minutes``, the usable time of each night from
    the crossings of twilight and of the lowest altitude interpolated within each step
    (:func:`usable_time`); within a minute of astropy's full AltAz transform at
    1-minute steps (tests).
    """
    start = Time(np.floor(first.mjd), format="mjd", scale="utc")
    n_days = int(max(n_days, 1))
    if site.kind == "space":
        times = start + (np.arange(n_days) + 0.5) * u.day
        elong = solar_elongation(target, times)
        ok = (elong >= site.solar_elongation[0]) & (elong <= site.solar_elongation[1])
        return Calendar(start, ok, np.where(ok, 24.0, 0.0))
    # a "night" runs from local noon to local noon, so that it is never cut in two
    noon = 0.5 - site.longitude / 360.0
    per_day = int(round(24 * 60 / step_minutes))
    grid = noon + np.arange(n_days * per_day + 1) / per_day
    sun_alt, tgt_alt = altitudes(site, target, start, grid, n_days)
    hours = (
        usable_time(np.minimum(site.twilight - sun_alt, tgt_alt - site.min_altitude), per_day)
        * 24.0
    )
    return Calendar(start, hours >= site.min_hours, hours)


def usable_time(margin: np.ndarray, per_day: int) -> np.ndarray:
    """Days per night on which ``margin`` > 0, from its samples at the grid's steps.

    ``margin`` (n_days · per_day + 1 samples, evenly spaced) is the smaller of the
    Sun's depth below the twilight altitude and the target's height above the lowest
    altitude: observable where positive. Within each step it is interpolated linearly,
    so the time between a sample and a crossing (twilight, the target's rise or set)
    counts exactly to first order instead of by whole steps: a night with 55 usable
    minutes is not counted as one hour.
    """
    a, b = margin[:-1], margin[1:]
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(
            (a > 0) & (b > 0),
            1.0,
            np.where(
                (a <= 0) & (b <= 0),
                0.0,
                np.maximum(a, b) / (np.abs(a) + np.abs(b)),
            ),
        )
    return share.reshape(-1, per_day).sum(axis=1) / per_day


def _apparent_sidereal_time(times: Time, longitude_deg: float) -> np.ndarray:
    """Local apparent sidereal time (rad) with UT1 taken as UTC.

    Greenwich apparent sidereal time from ERFA's IAU 2006/2000A model (erfa.gst06a, the
    function astropy's own ``sidereal_time("apparent")`` calls; Capitaine et al. 2003,
    A&A 412, 567) plus the site's longitude. astropy would first read the IERS tables for
    UT1 − UTC, which took 1.4 s of a 6 s alert; |UT1 − UTC| < 0.9 s by the definition of
    UTC, i.e. < 0.004° of hour angle, far below the 0.1° these altitudes promise.
    """
    import erfa

    utc = times.utc
    tt = times.tt
    gst = erfa.gst06a(utc.jd1, utc.jd2, tt.jd1, tt.jd2)
    return np.asarray(gst) + np.deg2rad(longitude_deg)


def _rotated(rotation, ra, dec):
    """(ra, dec) in rad of unit vectors (ra, dec) rotated by the matrices ``rotation``."""
    v = np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)], axis=-1)
    w = np.einsum("nij,nj->ni", rotation, v)
    return np.arctan2(w[:, 1], w[:, 0]), np.arcsin(np.clip(w[:, 2], -1.0, 1.0))


def altitudes(site: Site, target: SkyCoord, start: Time, grid_days: np.ndarray, n_days: int):
    """Altitudes (deg) of the Sun and the target at ``start + grid_days``.

    Apparent sidereal time comes from ERFA (UT1 taken as UTC) for every instant; the Sun's
    and the target's apparent places (true equator and equinox of date, as astropy's TETE
    frame, so precession and nutation are included) once a day, interpolated (the Sun moves about
    1° a day). Altitude then follows from the hour angle,
    sin a = sin φ sin δ + cos φ cos δ cos H (Meeus 1998, *Astronomical Algorithms*,
    eq. 13.6), without refraction. This is within 0.1° of a full AltAz transform from
    1900 to 2300 (checked in the tests) at a small fraction of its cost, which matters
    for windows years long.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AstropyWarning)
        # apparent sidereal time from astropy every 6 hours, unwrapped and interpolated:
        # it runs at a near-constant rate (nutation changes it over days), so a fine grid
        # costs no more astropy calls than a coarse one
        knots = np.arange(np.floor(grid_days.min()) - 1, np.ceil(grid_days.max()) + 1.25, 0.25)
        knot_lst = _apparent_sidereal_time(start + knots * u.day, site.longitude)
        lst = np.interp(grid_days, knots, np.unwrap(knot_lst))
        daily = start + np.arange(-1, n_days + 2) * u.day
        # apparent places (true equator and equinox of date) to go with the apparent
        # sidereal time: ICRS coordinates would ignore precession (0.4° by 2027, degrees
        # over centuries). ERFA's IAU 2006/2000A bias-precession-nutation matrix
        # (erfa.pnm06a; the rotation inside astropy's TETE frame) turns the Sun's
        # geocentric place and the target's ICRS direction into them; the target's annual
        # aberration (≤ 20.5″) is left out, and astropy's frame machinery, which reads the
        # IERS tables for polar motion it does not need here (1.3 s), is not called.
        import erfa

        tt = daily.tt
        rotation = erfa.pnm06a(tt.jd1, tt.jd2)  # (days, 3, 3)
        sun = get_sun(daily)
        sun_place = _rotated(rotation, sun.ra.to_value(u.rad), sun.dec.to_value(u.rad))
        target_place = _rotated(
            rotation,
            np.full(len(daily), target.icrs.ra.to_value(u.rad)),
            np.full(len(daily), target.icrs.dec.to_value(u.rad)),
        )
    day_index = np.arange(-1, n_days + 2)

    def daily_to_grid(place):
        ra = np.interp(grid_days, day_index, np.unwrap(place[0]))
        return ra, np.interp(grid_days, day_index, place[1])

    ra_s, dec_s = daily_to_grid(sun_place)
    ra_t, dec_t = daily_to_grid(target_place)
    phi = np.deg2rad(site.latitude)

    def alt(ra, dec):
        h = lst - ra
        return np.rad2deg(
            np.arcsin(np.sin(phi) * np.sin(dec) + np.cos(phi) * np.cos(dec) * np.cos(h))
        )

    return alt(ra_s, dec_s), alt(ra_t, dec_t)
