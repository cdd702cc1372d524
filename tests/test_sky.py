"""Where: sky positions, error ellipses, the finder chart and the region file (issue 14)."""

import json

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from astropy.table import Table

from lensdelay.cli.main import main
from lensdelay.forecast.positions import (
    PositionEllipse,
    position_ellipses,
    sky_offsets,
    sky_position,
)
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.model.simulate import simulate_family, to_toml
from lensdelay.report.finder import offset_axes_wcs, offset_wcs


def test_one_arcsec_east_at_dec_60_is_two_arcsec_of_right_ascension():
    """ΔRA = x / cos δ: at δ = 60° a point 1″ East lies 2″ of RA away (issue 14's check;
    astropy's spherical offsets as the reference)."""
    origin = SkyCoord(150.0 * u.deg, 60.0 * u.deg)
    where = sky_position(origin, 1.0, 0.0)
    assert (where.ra - origin.ra).to_value(u.arcsec) == pytest.approx(2.0, rel=1e-6)
    # a great circle leaves the parallel by tan δ · x²/2 (4 μas here)
    assert (where.dec - origin.dec).to_value(u.arcsec) == pytest.approx(0.0, abs=1e-5)
    # and the separation on the sky is the offset itself
    assert where.separation(origin).to_value(u.arcsec) == pytest.approx(1.0, rel=1e-9)


@pytest.mark.parametrize("dec", [-75.0, -12.0, 0.0, 33.0, 89.0])
def test_offsets_round_trip(dec):
    origin = SkyCoord(10.0 * u.deg, dec * u.deg)
    x, y = np.array([-3.2, 0.4, 12.0]), np.array([1.0, -7.5, 0.2])
    back_x, back_y = sky_offsets(origin, sky_position(origin, x, y))
    np.testing.assert_allclose(back_x, x, atol=1e-9)
    np.testing.assert_allclose(back_y, y, atol=1e-9)


@pytest.mark.parametrize("pa", [0.0, 30.0, 90.0, 145.0])
def test_ellipses_of_a_gaussian_cloud(pa, rng):
    """For a 2-D Gaussian the p ellipse has semi-axes σ·sqrt(−2 ln(1 − p)) (the χ² law with
    2 degrees of freedom: common practice); the major axis lies along the position angle."""
    major, minor = 0.08, 0.03
    t = np.deg2rad(pa)
    # unit vectors along the major axis (East of North) and across it
    along = np.array([np.sin(t), np.cos(t)])
    across = np.array([np.cos(t), -np.sin(t)])
    n = 200_000
    pts = rng.normal(0, major, n)[:, None] * along + rng.normal(0, minor, n)[:, None] * across
    x, y = 0.5 + pts[:, 0], -1.0 + pts[:, 1]
    cx, cy, ellipses = position_ellipses(x, y, np.ones(n))
    assert (cx, cy) == pytest.approx((0.5, -1.0), abs=2e-3)
    for e in ellipses:
        k = np.sqrt(-2 * np.log(1 - e.level / 100))
        assert e.semi_major == pytest.approx(k * major, rel=0.02)
        assert e.semi_minor == pytest.approx(k * minor, rel=0.02)
        # angles modulo 180°
        assert abs((e.position_angle - pa + 90) % 180 - 90) < 1.0
        assert np.mean(e.contains(cx, cy, x, y)) == pytest.approx(e.level / 100, abs=0.01)


def test_ellipses_follow_the_weights(rng):
    """Weighted samples: half the weight in a far clump moves the median and widens the
    ellipse; zero weights are ignored."""
    x = np.concatenate([rng.normal(0, 0.01, 5000), rng.normal(1.0, 0.01, 5000)])
    y = rng.normal(0, 0.01, 10000)
    w = np.concatenate([np.ones(5000), np.zeros(5000)])
    cx, _, ellipses = position_ellipses(x, y, w)
    assert abs(cx) < 0.002 and ellipses[-1].semi_major < 0.05
    x[:10] = np.nan  # a sample without the image
    w = np.ones(10000)
    _, _, ellipses = position_ellipses(x, y, w)
    assert ellipses[-1].semi_major > 0.4


def test_ellipse_contains_by_orientation():
    """A North-South ellipse (PA 0) holds a point 0.9 North, not one 0.9 East."""
    e = PositionEllipse(95, 1.0, 0.1, 0.0)
    assert e.contains(0, 0, 0.0, 0.9) and not e.contains(0, 0, 0.9, 0.0)
    e = PositionEllipse(95, 1.0, 0.1, 90.0)
    assert e.contains(0, 0, 0.9, 0.0) and not e.contains(0, 0, 0.0, 0.9)


def test_chart_wcs_puts_the_origin_at_pixel_zero_and_east_left():
    """The finder chart's WCS: the [sky] origin at pixel (0, 0), 1″ East at pixel x = −1
    (to the left), 1″ North at pixel y = +1."""
    origin = SkyCoord(187.3311 * u.deg, -12.4518 * u.deg)
    wcs = offset_wcs(origin)
    px, py = wcs.world_to_pixel(origin)
    assert (float(px), float(py)) == pytest.approx((0.0, 0.0), abs=1e-9)
    px, py = wcs.world_to_pixel(sky_position(origin, 1.0, 0.0))
    assert (float(px), float(py)) == pytest.approx((-1.0, 0.0), abs=1e-6)
    px, py = wcs.world_to_pixel(sky_position(origin, 0.0, 1.0))
    assert (float(px), float(py)) == pytest.approx((0.0, 1.0), abs=1e-6)


@pytest.mark.parametrize("dec", [-12.4518, 60.0, 85.0])
def test_chart_offset_axes_match_spherical_offsets(dec):
    """The chart's East/North offset axes (a linear WCS of its pixels) give each pixel's
    offset from the origin as astropy's offset frame does, to 50 μas within ±120″ (the
    tangent plane departs from the sphere by about θ³/3, 39 μas at the corner, 170″
    out: common practice) — far below the ticks' last digit."""
    origin = SkyCoord(187.3311 * u.deg, dec * u.deg)
    px = np.array([0.0, 3.0, -2.5, 60.0, -120.0, 85.0])
    py = np.array([0.0, -1.0, 2.0, -40.0, 120.0, 85.0])
    east, north = offset_axes_wcs().pixel_to_world_values(px, py)
    where = offset_wcs(origin).pixel_to_world(px, py).transform_to(origin.skyoffset_frame())
    assert east == pytest.approx(where.lon.to_value(u.arcsec), abs=5e-5)
    assert north == pytest.approx(where.lat.to_value(u.arcsec), abs=5e-5)


TRUTH = Lens(
    (
        IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),
        ExternalShear(strength=0.05, position_angle=-40.0),
    )
)


def _withheld_quad(tmp_path, sky=True):
    """A quad with its last image withheld (to be predicted), at δ = −12°."""
    fam = simulate_family(
        TRUTH, 0.03, 0.02, label="sn", redshift=1.6, sigma=0.003, rng=np.random.default_rng(4)
    )
    withheld = fam["image"].pop()
    doc = {
        "name": "Tessick withheld",
        "lens": {"redshift": 0.4},
        "family": [fam],
        "lens_light": {"x": 0, "y": 0, "sigma": 0.01},
        "transient": {"family": "sn", "seen_in": "A", "date": "2027-03-01"},
        "model": "models/sie_shear.toml",
    }
    if sky:
        doc["sky"] = {"ra": 187.3311, "dec": -12.4518}
    path = tmp_path / "withheld.toml"
    path.write_text(to_toml(doc))
    (tmp_path / "models").mkdir()
    (tmp_path / "models" / "sie_shear.toml").write_text(
        (
            __import__("pathlib").Path(__file__).parent.parent / "models" / "sie_shear.toml"
        ).read_text()
    )
    return path, withheld


@pytest.mark.integration
def test_forecast_writes_positions_chart_and_regions(tmp_path, quick_forecast_args):
    """RA/Dec and ellipses in the JSON, the ECSV and the region file agree with the offsets;
    the chart is written as PNG and PDF."""
    from regions import EllipseSkyRegion, Regions

    path, withheld = _withheld_quad(tmp_path)
    out = tmp_path / "out"
    assert main(["forecast", str(path), *quick_forecast_args(out)]) == 0
    doc = json.loads((out / "forecast.json").read_text())
    origin = SkyCoord(doc["sky_origin"]["ra_deg"] * u.deg, doc["sky_origin"]["dec_deg"] * u.deg)
    predicted = [im for im in doc["images"] if not im["observed"]]
    assert len(predicted) == 1
    for im in doc["images"]:
        where = sky_position(origin, im["x"], im["y"])
        assert im["ra_deg"] == pytest.approx(where.ra.deg, abs=1e-9)
        assert im["dec_deg"] == pytest.approx(where.dec.deg, abs=1e-9)
        assert [e["level"] for e in im["position_error"]] == [68, 95]
        # dates at fixed H0 beside the marginalised ones (issue 16)
        assert set(im["date_by_H0"]) == {"67", "70", "73"}
    p95 = predicted[0]["position_error"][1]
    assert 0 < p95["semi_minor_arcsec"] <= p95["semi_major_arcsec"] < 1.0
    table = Table.read(out / "forecast.ecsv", format="ascii.ecsv")
    assert table["ra"].unit == u.deg and table["ellipse95_semi_major"].unit == u.arcsec
    regions = Regions.parse((out / "sky.reg").read_text(), format="ds9")
    ellipses = [r for r in regions if isinstance(r, EllipseSkyRegion)]
    assert len(ellipses) == 1
    assert ellipses[0].width.to_value(u.arcsec) == pytest.approx(
        2 * p95["semi_major_arcsec"], rel=1e-6
    )
    # on the chart's pixel grid (North up, East left) the ellipse's major axis lies along
    # the position angle: pixel angle = 90° + PA
    pix = ellipses[0].to_pixel(offset_wcs(origin))
    assert abs((pix.angle.to_value(u.deg) - 90.0 - p95["position_angle_deg"] + 90) % 180 - 90) < 0.5
    for ext in ("png", "pdf"):
        assert (out / f"sky.{ext}").stat().st_size > 10_000


@pytest.mark.integration
def test_chart_without_sky_origin_uses_offsets(tmp_path, quick_forecast_args):
    """No [sky]: no RA/Dec (null), no region file, the chart in offsets."""
    path, _ = _withheld_quad(tmp_path, sky=False)
    out = tmp_path / "out"
    assert main(["forecast", str(path), *quick_forecast_args(out)]) == 0
    doc = json.loads((out / "forecast.json").read_text())
    assert doc["sky_origin"] is None and all(im["ra_deg"] is None for im in doc["images"])
    assert not (out / "sky.reg").exists() and (out / "sky.png").exists()
