"""Nightly observability against astropy's full AltAz transform at 1-minute steps."""

import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_sun
from astropy.time import Time

from lensdelay.forecast.observability import build_calendar, usable_time
from lensdelay.model.scenario import Site


def minute_by_minute_hours(site, target, start, n_days):
    """Usable hours per night (local noon to noon) from astropy AltAz every minute."""
    loc = EarthLocation(lat=site.latitude * u.deg, lon=site.longitude * u.deg,
                        height=site.height * u.m)
    noon = 0.5 - site.longitude / 360.0
    times = start + (noon + np.arange(n_days * 1440) / 1440.0) * u.day
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        frame = AltAz(obstime=times, location=loc, pressure=0)  # no refraction, as ours
        sun = get_sun(times).transform_to(frame).alt.deg
        tgt = target.transform_to(frame).alt.deg
    good = (sun < site.twilight) & (tgt > site.min_altitude)
    return good.reshape(n_days, 1440).sum(axis=1) / 60.0


@pytest.mark.parametrize(
    "ra, dec, first",
    [
        # the demo quad's site and sky, nights where the usable time grows through 1 h
        # (round 3 break test: 20-minute sampling counted 50-59 minutes as an hour)
        (187.3311, -12.4518, "2026-12-04"),
        # a northern target low from this site, in its season
        (150.0, 25.0, "2027-03-01"),
    ],
)
def test_usable_time_within_a_minute_of_astropy(ra, dec, first):
    site = Site("ground", -30.24, -70.74, 2700.0)
    target = SkyCoord(ra * u.deg, dec * u.deg)
    n = 12
    cal = build_calendar(site, target, Time(first, scale="utc"), n)
    truth = minute_by_minute_hours(site, target, cal.start, n)
    # astropy's reference is quantised at one minute; ours interpolates crossings
    assert np.max(np.abs(cal.hours - truth)) * 60 <= 1.5
    # the one-hour rule agrees wherever the truth is not within a minute of the limit
    clear = np.abs(truth - site.min_hours) * 60 > 1.0
    assert np.array_equal(cal.observable[clear], (truth >= site.min_hours)[clear])


def test_usable_time_counts_crossings_inside_a_step():
    # margin linear from -1 to +3 over one step: positive for 3/4 of it (common practice:
    # linear interpolation of a sampled function)
    per_day = 4
    margin = np.array([-1.0, 3.0, 3.0, 3.0, 3.0])
    assert usable_time(margin, per_day)[0] == pytest.approx((0.75 + 3) / 4)
