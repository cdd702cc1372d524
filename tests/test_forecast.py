"""Forecast: dates, past images, observability, outputs (issue 4)."""

import json
import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_sun
from astropy.time import Time

from lensdelay.cli.main import main
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.lensing.distances import DAYS_PER_MPC_ARCSEC2, LensDistances
from lensdelay.errors import LensdelayWarning
from lensdelay.api import forecast_scenario as run_forecast
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.model.scenario import Site, parse_date
from lensdelay.forecast.observability import altitudes, build_calendar
from lensdelay.model.simulate import simulate_family, to_toml

pytestmark = pytest.mark.integration

FAST = dict(walkers=20, steps=300, n_samples=4000, progress=False)
QUAD_TRUTH = Lens(
    (
        IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),
        ExternalShear(strength=0.05, position_angle=-40.0),
    )
)


def test_j2000_epoch():
    """JD 2451545.0 (TT) is J2000.0 = 2000-01-01T12:00:00 TT = 11:58:55.816 UTC
    (IAU 1976/1994 definition; Astronomical Almanac, TT − UTC = 64.184 s in 2000)."""
    t = parse_date("2000-01-01T11:58:55.816Z", "test")
    assert t.tt.jd == pytest.approx(2451545.0, abs=1e-8)
    later = t + 365.25 * u.day
    assert later.tt.jd == pytest.approx(2451545.0 + 365.25, abs=1e-8)


@pytest.mark.parametrize(
    "iso, dec",
    [
        ("2000-03-20T07:35:00", 0.0),  # March equinox 2000 (from memory): δ_sun ≈ 0
        ("2027-06-21T08:11:00", 23.44),  # June solstice 2027 (from memory): δ_sun ≈ +ε
        ("2027-12-22T03:42:00", -23.44),  # December solstice 2027 (from memory): δ_sun ≈ −ε
    ],
)
def test_sun_declination_at_equinox_and_solstices(iso, dec):
    """The Sun's declination at equinox/solstice instants (obliquity ε = 23.44°, Astronomical
    Almanac)."""
    sun = get_sun(Time(iso, scale="utc"))
    assert sun.dec.deg == pytest.approx(dec, abs=0.05)


@pytest.mark.parametrize("epoch", ["1900-03-10", "2027-02-10", "2100-09-01", "2300-06-01"])
def test_fast_altitudes_match_full_altaz_transform(epoch):
    """Our hour-angle altitudes agree with astropy's full AltAz transform within 0.1° from
    1900 to 2300 (refraction off in both): apparent places of date, so precession -- 0.4°
    by 2027, 4° by 2300 for ICRS coordinates -- is included."""
    site = Site("ground", latitude=-30.24, longitude=-70.74, height=2700.0)
    target = SkyCoord(187.33 * u.deg, -12.45 * u.deg)
    grid = np.linspace(0, 3, 37)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # ERFA calls years beyond the leap-second table dubious
        start = Time(epoch, scale="utc")
        sun_alt, tgt_alt = altitudes(site, target, start, grid, 4)
        loc = EarthLocation.from_geodetic(
            site.longitude * u.deg, site.latitude * u.deg, site.height * u.m
        )
        frame = AltAz(obstime=start + grid * u.day, location=loc)
        ref_sun = get_sun(start + grid * u.day).transform_to(frame).alt.deg
        ref_tgt = target.transform_to(frame).alt.deg
    assert np.max(np.abs(sun_alt - ref_sun)) < 0.1
    assert np.max(np.abs(tgt_alt - ref_tgt)) < 0.1


@pytest.mark.parametrize(
    "site",
    [
        Site("ground", latitude=19.8, longitude=-155.5, height=4200.0),
        Site("ground", latitude=-30.2, longitude=-70.7, height=2700.0),
        Site("space", solar_elongation=(45.0, 135.0)),
    ],
)
def test_target_next_to_the_sun_is_never_observable(site):
    """A target 2° from the Sun cannot be observed at night or within an elongation limit
    (common practice)."""
    when = Time("2027-07-01T00:00:00", scale="utc")
    sun = get_sun(when)
    target = SkyCoord(sun.ra + 2 * u.deg, sun.dec)
    cal = build_calendar(site, target, when - 2 * u.day, 5)
    assert not np.any(cal.observable)


def _sis_like_scenario(tmp_path, seen_in="A", date_sigma=0.0, sigma=1e-5, theta_e=1.0):
    lens = Lens((IsothermalEllipsoid(einstein_radius=theta_e, axis_ratio=1.0),))
    fam = simulate_family(
        lens,
        0.25 * theta_e,
        0.0,
        label="q",
        redshift=2.0,
        sigma=sigma * theta_e,
        rng=np.random.default_rng(0),
    )
    # RA 115° is near opposition in January: observable from the site every night
    doc = {
        "name": "Test SIS",
        "lens": {"redshift": 0.5},
        "sky": {"ra": 115.0, "dec": -20.0},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [fam],
        "transient": {
            "family": "q",
            "seen_in": seen_in,
            "date": "2027-01-10",
            "date_sigma_days": date_sigma,
            "magnitude": 21.0,
        },
        "site": {"latitude": -30.0, "longitude": -70.0, "height": 2000.0},
        "mass": [{"profile": "SIS", "einstein_radius": theta_e}],
    }
    path = tmp_path / "sis.toml"
    path.write_text(to_toml(doc))
    return path


def test_sis_end_to_end_date_is_detection_plus_closed_form_delay(tmp_path):
    """SIS: forecast date = detection date + (D_dt/c)·2θEβ (SEF92, Sect. 8.1.4)."""
    path = _sis_like_scenario(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        # the closed form is the smooth lens's: no unseen perturbers
        res = run_forecast(
            str(path),
            h0=(70.0, 1e-9),
            kappa_ext=(0.0, 0.0),
            microlensing=0.0,
            unseen=(0.0, 0.0),
            **FAST,
        )
    d_dt = LensDistances(DEFAULT_COSMOLOGY, 0.5, 2.0).time_delay_distance(2.0).to_value(u.Mpc)
    expected = d_dt * DAYS_PER_MPC_ARCSEC2 * 2 * 1.0 * 0.25
    b = next(im for im in res.images if im.label == "B")
    assert b.delay_days["median"] == pytest.approx(expected, rel=1e-4)
    from lensdelay.io.forecast_files import forecast_json

    written = next(im for im in forecast_json(res)["images"] if im["label"] == "B")["date"][
        "median"
    ]
    true_date = Time("2027-01-10", scale="utc") + expected * u.day  # astropy Time arithmetic
    assert abs((Time(written.rstrip("Z"), scale="utc") - true_date).to_value(u.s)) < 60.0
    assert b.status == "future" and b.parity == "saddle" and b.arrival_rank == 2


def test_past_image_is_reported_as_past(tmp_path):
    """Seen in the later (saddle) image, the earlier image's event lies before the discovery."""
    path = _sis_like_scenario(tmp_path, seen_in="B", date_sigma=1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = run_forecast(str(path), now=Time("2027-02-10", scale="utc"), **FAST)
    a = next(im for im in res.images if im.label == "A")
    assert a.status == "past"
    assert a.date_offset_days["p97.5"] < 0
    assert a.order == "leads" and a.order_agreement == 1.0
    assert a.archival_search is not None


def test_quad_true_dates_inside_95_windows(tmp_path):
    """Injection-recovery: the true dates of a simulated quad fall in the 95% windows (issue 4)."""
    path = _quad_path(tmp_path)
    t = find_images(QUAD_TRUTH, [0.03], [0.02])
    days = t.fermat * LensDistances(DEFAULT_COSMOLOGY, 0.4, 1.6).days_per_arcsec2(1.6)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = run_forecast(
            str(path),
            h0=(70.0, 3.0),
            kappa_ext=(0.0, 0.02),
            walkers=24,
            steps=800,
            n_samples=6000,
            progress=False,
        )
    for im in res.images:
        if not im.observed:
            continue
        k = np.argmin(np.hypot(t.x - im.x, t.y - im.y))
        true_delay = days[k] - days[0]
        q = im.date_offset_days
        assert q["p2.5"] - 1e-6 <= true_delay <= q["p97.5"] + 1e-6, (im.label, true_delay, q)


def test_forecast_outputs_and_calendar_parse(tmp_path, capsys):
    """forecast.json keys of CONVENTIONS.md; forecast.ics parses with a general iCalendar
    library."""
    import icalendar

    path = _sis_like_scenario(tmp_path, date_sigma=1.0, sigma=0.003)
    out = tmp_path / "out"
    code = main(
        [
            "forecast",
            str(path),
            "--out",
            str(out),
            "--samples",
            "2000",
            "--steps",
            "300",
            "--walkers",
            "20",
            "--quiet",
            "--now",
            "2027-01-01",
        ]
    )
    assert code == 0
    doc = json.loads((out / "forecast.json").read_text())
    for key in ("reference_image", "reference_family", "cosmology", "seed", "images"):
        assert key in doc
    for im in doc["images"]:
        for key in (
            "family",
            "label",
            "observed",
            "x",
            "y",
            "parity",
            "arrival_rank",
            "delay_days",
            "magnification",
            "magnitude",
            "date",
        ):
            assert key in im
        assert set(im["date"]) == {"median", "p16", "p84", "p2.5", "p97.5"}
    cal = icalendar.Calendar.from_ical((out / "forecast.ics").read_bytes())
    events = [c for c in cal.walk() if c.name == "VEVENT"]
    assert len(events) == 1 and "image q/B" in str(events[0]["SUMMARY"])
    for name in ("forecast.ecsv", "timeline.png", "timeline.pdf"):
        assert (out / name).stat().st_size > 0
    assert "Caution" in capsys.readouterr().out
    budget = doc["budget"]["images"][0]
    # the sampled terms are covariances with the date: they add up to its variance
    total = sum(v["percent"] for v in budget["date"].values() if v["in_windows"])
    assert total == pytest.approx(100.0, abs=1e-6)
    # without measurements t0 is independent of the delay: its term is the detection's own σ
    assert budget["date"]["detection date"]["sigma_days"] == pytest.approx(1.0, rel=0.05)


def _quad_path(tmp_path):
    """A noisy quad simulated from QUAD_TRUTH, seen in its first image on 2027-03-01."""
    fam = simulate_family(
        QUAD_TRUTH, 0.03, 0.02, label="sn", redshift=1.6, sigma=0.003, rng=np.random.default_rng(4)
    )
    doc = {
        "lens": {"redshift": 0.4},
        "family": [fam],
        "lens_light": {"x": 0, "y": 0, "sigma": 0.01},
        "transient": {
            "family": "sn",
            "seen_in": "A",
            "date": "2027-03-01",
            "date_sigma_days": 1.0,
            "magnitude": 22.0,
        },
        "model": "models/sie_shear.toml",
    }
    path = tmp_path / "quad.toml"
    path.write_text(to_toml(doc))
    return path


def test_updating_on_a_further_image_shrinks_the_others(tmp_path):
    """A measured date of image C conditions D: its 95% window shrinks (issue 4, updating)."""
    path = _quad_path(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        base = run_forecast(str(path), **FAST)
        c = next(im for im in base.images if im.label == "C")
        seen_date = (Time("2027-03-01", scale="utc") + c.date_offset_days["median"] * u.day).isot[
            :19
        ]
        # judged as of a day after the sighting (a sighting after now is refused)
        after = Time(seen_date, scale="utc") + 1 * u.day
        upd = run_forecast(str(path), seen=[f"C={seen_date}Z±0.5"], now=after, **FAST)
    d = next(im for im in upd.images if im.label == "D")
    assert d.interval95_change is not None and d.interval95_change < 1.0
    c = next(im for im in upd.images if im.label == "C")
    assert c.status == "seen" and c.sighted


def test_several_models_are_combined_with_weights(tmp_path):
    """Two recipes: per-model forecasts, BIC weights that sum to 1, and the spread between them."""
    path = _quad_path(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = run_forecast(
            str(path), models=["models/sie_shear.toml", "models/power_law_shear.toml"], **FAST
        )
    assert res.model_labels == ("sie_shear", "power_law_shear")
    assert res.model_weights.sum() == pytest.approx(1.0)
    d = next(im for im in res.images if im.label == "D")
    assert set(d.per_model) == {"sie_shear", "power_law_shear"}
    assert d.model_spread_days >= 0.0


@pytest.mark.parametrize(
    "change, message",
    [
        (("2027-01-10", "10/01/2027"), "transient.date must be an ISO 8601 date"),
        (('seen_in = "A"', 'seen_in = "Z"'), "transient.seen_in must be an image of family"),
        (("latitude = -30.0", "latitude = -95.0"), "site.latitude must be >= -90"),
    ],
)
def test_bad_forecast_input_exit_2_nothing_written(tmp_path, capsys, change, message):
    path = _sis_like_scenario(tmp_path)
    path.write_text(path.read_text().replace(*change))
    out = tmp_path / "out"
    assert main(["forecast", str(path), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
    assert not out.exists()


def test_bad_elongation_range(tmp_path, capsys):
    path = _sis_like_scenario(tmp_path)
    text = path.read_text().split("[site]")[0] + "[site]\nsolar_elongation = [30.0, 200.0]\n"
    text += '\n[[mass]]\nprofile = "SIS"\neinstein_radius = 1.0\n'
    path.write_text(text)
    assert main(["check", str(path)]) == 2
    assert "site.solar_elongation must satisfy 0 <= min < max <= 180" in capsys.readouterr().err


@pytest.mark.parametrize(
    "text, utc",
    [
        ("2027-02-14T10:00:00-05:00", "2027-02-14T15:00:00"),  # west of Greenwich: later in UTC
        ("2027-02-14T10:00:00+05:30", "2027-02-14T04:30:00"),
        ("2027-02-14T10:00:00Z", "2027-02-14T10:00:00"),
        ("2027-02-14", "2027-02-14T00:00:00"),
    ],
)
def test_dates_with_utc_offsets_are_converted_whatever_the_sign(text, utc):
    """ISO 8601 offsets: local time = UTC + offset (ISO 8601-1:2019, 4.3.13), so UTC = local −
    offset."""
    assert parse_date(text, "transient.date").isot[:19] == utc


def test_ecsv_masks_missing_values_instead_of_nan(tmp_path, quick_forecast_args):
    """No site and no transient magnitude: those cells are masked (empty in ECSV, the
    astropy.table convention), never 'nan'; the table reads back with astropy."""
    from astropy.table import Table

    path = _sis_like_scenario(tmp_path)
    text = path.read_text()
    text = text.replace("magnitude = 21.0\n", "").split("[site]")[0]
    text += '\n[[mass]]\nprofile = "SIS"\neinstein_radius = 1.0\n' if "[[mass]]" not in text else ""
    path.write_text(text)
    out = tmp_path / "out"
    assert main(["forecast", str(path), *quick_forecast_args(out)]) == 0
    ecsv = (out / "forecast.ecsv").read_text()
    assert "nan" not in ecsv.lower()
    table = Table.read(out / "forecast.ecsv", format="ascii.ecsv")
    assert table["p_observable"].mask.all() and table["magnitude_median"].mask.all()


def test_dates_beyond_ten_thousand_years_are_refused_in_one_line(
    tmp_path, capsys, quick_forecast_args
):
    """A 700-arcsec SIS puts the second image ~10^4.5 years after the first (delay ∝ θE²,
    SEF92 Sect. 8.1.4): beyond what the time library can date (years up to 9999, ERFA), so
    one line, exit 2, nothing written -- not a traceback after the run."""
    path = _sis_like_scenario(tmp_path, theta_e=700.0)
    out = tmp_path / "out"
    code = main(["forecast", str(path), *quick_forecast_args(out)])
    err = capsys.readouterr().err
    assert code == 2, err
    lines = [line for line in err.splitlines() if not line.startswith("warning:")]
    assert len(lines) == 1 and "Traceback" not in err
    assert "lie more than 10000 years from the detection" in lines[0]
    assert not out.exists() or not any(p.is_file() for p in out.rglob("*"))
