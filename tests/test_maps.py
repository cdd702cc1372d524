"""``lensdelay maps``: FITS maps with a celestial WCS (issue 14)."""

import json

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS

from lensdelay.cli.main import main
from lensdelay.forecast.positions import sky_offsets, sky_position
from lensdelay.lensing.distances import DAYS_PER_MPC_ARCSEC2, LensDistances
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.maps import lens_maps
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.lensing.profiles import SingularIsothermalSphere as SIS
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.model.simulate import simulate_family, to_toml

THETA_E, PIXEL, SIZE = 1.0, 0.02, 6.0
#: the SIS sits on a pixel corner, so that no pixel centre falls on its singular centre
CENTRE = (0.5 * PIXEL, 0.5 * PIXEL)
BETA = 0.25


def _sis_scenario(tmp_path, sky=True):
    lens = Lens((SIS(einstein_radius=THETA_E, x=CENTRE[0], y=CENTRE[1]),))
    fam = simulate_family(
        lens,
        CENTRE[0] + BETA,
        CENTRE[1],
        label="q",
        redshift=2.0,
        sigma=1e-5,
        rng=np.random.default_rng(0),
    )
    doc = {
        "name": "Test maps SIS",
        "lens": {"redshift": 0.5},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [fam],
        "transient": {"family": "q", "seen_in": "A", "date": "2027-01-10"},
        "mass": [
            {
                "profile": "SIS",
                "einstein_radius": {"value": 0.9, "min": 0.1, "max": 3.0},
                "x": CENTRE[0],
                "y": CENTRE[1],
            }
        ],
    }
    if sky:
        doc["sky"] = {"ra": 150.0, "dec": 60.0}
    path = tmp_path / "sis.toml"
    path.write_text(to_toml(doc))
    return path, fam


@pytest.fixture(scope="module")
def sis_maps(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("maps")
    path, fam = _sis_scenario(tmp)
    out = tmp / "out"
    args = ["maps", str(path), "--out", str(out), "--size", str(SIZE), "--pixel", str(PIXEL)]
    assert main([*args, "--quiet"]) == 0
    return out, fam


@pytest.mark.integration
def test_every_map_is_written_and_reads_back(sis_maps):
    """Round trip with astropy.io.fits: seven maps, units in BUNIT, the model in the header."""
    out, _ = sis_maps
    doc = json.loads((out / "maps.json").read_text())
    names = sorted(doc["files"])
    assert names == sorted(
        f"{q}.fits"
        for q in (
            "convergence",
            "shear",
            "magnification",
            "potential",
            "deflection_x",
            "deflection_y",
            "arrival_time",
        )
    )
    units = {}
    for name in names:
        with fits.open(out / name) as hdul:
            h = hdul[0].header
            assert hdul[0].data.shape == (301, 301)
            assert h["MODEL"] and h["OBJECT"] == "Test maps SIS"
            assert h["HIERARCH PAR mass[0].einstein_radius"] == pytest.approx(THETA_E, rel=1e-4)
            units[name] = h["BUNIT"]
    assert units["potential.fits"] == "arcsec2" and units["deflection_x.fits"] == "arcsec"
    assert units["arrival_time.fits"] == "d" and units["convergence.fits"] == ""


@pytest.mark.integration
def test_wcs_puts_the_origin_at_the_centre_and_east_left(sis_maps):
    out, _ = sis_maps
    with fits.open(out / "convergence.fits") as hdul:
        wcs = WCS(hdul[0].header)
    origin = SkyCoord(150.0 * u.deg, 60.0 * u.deg)
    px, py = wcs.world_to_pixel(origin)
    assert (float(px), float(py)) == pytest.approx((150.0, 150.0), abs=1e-6)
    # 1 arcsec East is 1/PIXEL pixels to the left; 1 arcsec North, up
    px, py = wcs.world_to_pixel(sky_position(origin, 1.0, 0.0))
    assert (float(px) - 150.0, float(py) - 150.0) == pytest.approx((-1 / PIXEL, 0.0), abs=1e-3)
    px, py = wcs.world_to_pixel(sky_position(origin, 0.0, 1.0))
    assert (float(px) - 150.0, float(py) - 150.0) == pytest.approx((0.0, 1 / PIXEL), abs=1e-3)


@pytest.mark.integration
def test_convergence_at_pixels_is_the_profiles(sis_maps, rng):
    """κ read at random pixels, located on the sky through the WCS, equals the SIS's
    κ = θE / 2r (CONVENTIONS.md) there."""
    out, _ = sis_maps
    with fits.open(out / "convergence.fits") as hdul:
        data, wcs = hdul[0].data, WCS(hdul[0].header)
    origin = SkyCoord(150.0 * u.deg, 60.0 * u.deg)
    rows, cols = rng.integers(0, 301, 40), rng.integers(0, 301, 40)
    x, y = sky_offsets(origin, wcs.pixel_to_world(cols, rows))
    r = np.hypot(x - CENTRE[0], y - CENTRE[1])
    np.testing.assert_allclose(data[rows, cols], THETA_E / (2 * r), rtol=2e-5)


@pytest.mark.integration
def test_pixel_sum_of_convergence_is_the_enclosed_mass(sis_maps):
    """pixel area × Σκ inside a radius R = π θE R, an SIS's enclosed mass in units of
    Σcr·arcsec² (Schneider, Ehlers & Falco 1992, the SIS, Sect. 8.1.4)."""
    out, _ = sis_maps
    with fits.open(out / "convergence.fits") as hdul:
        data = hdul[0].data.astype(float)
    axis = (np.arange(301) - 150) * PIXEL
    gx, gy = np.meshgrid(-axis, axis)  # columns run East to West
    r = np.hypot(gx - CENTRE[0], gy - CENTRE[1])
    for radius in (1.0, 2.5):
        mass = PIXEL**2 * data[r <= radius].sum()
        assert mass == pytest.approx(np.pi * THETA_E * radius, rel=0.01)


@pytest.mark.integration
def test_arrival_time_map_gives_the_closed_form_delay(sis_maps):
    """At image B's pixel the arrival time after A is (D_Δt/c)·2θEβ (SEF92, Sect. 8.1.4)."""
    out, fam = sis_maps
    with fits.open(out / "arrival_time.fits") as hdul:
        data = hdul[0].data.astype(float)
    b = next(im for im in fam["image"] if im["label"] == "B")
    col = 150 - b["x"] / PIXEL
    row = 150 + b["y"] / PIXEL
    # bilinear interpolation between the four pixels around B
    c0, r0 = int(np.floor(col)), int(np.floor(row))
    fc, fr = col - c0, row - r0
    value = (
        data[r0, c0] * (1 - fc) * (1 - fr)
        + data[r0, c0 + 1] * fc * (1 - fr)
        + data[r0 + 1, c0] * (1 - fc) * fr
        + data[r0 + 1, c0 + 1] * fc * fr
    )
    d_dt = LensDistances(DEFAULT_COSMOLOGY, 0.5, 2.0).time_delay_distance(2.0).to_value(u.Mpc)
    expected = d_dt * DAYS_PER_MPC_ARCSEC2 * 2 * THETA_E * BETA
    assert value == pytest.approx(expected, rel=0.01)


@pytest.mark.parametrize(
    "lens",
    [
        Lens((SIS(einstein_radius=1.2),)),
        Lens(
            (
                IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.6, position_angle=30.0),
                ExternalShear(strength=0.07, position_angle=-20.0),
            )
        ),
    ],
)
def test_map_quantities_agree_with_the_lens(lens):
    """The maps' κ, μ and deflection are the lens's own (one definition, no second formula);
    γ² = (1 − κ)² − 1/μ."""
    x, y = np.array([0.3, -1.1, 0.7]), np.array([0.9, 0.2, -1.4])
    maps = lens_maps(lens, x, y)
    np.testing.assert_allclose(maps["convergence"], lens.convergence(x, y), rtol=1e-10)
    np.testing.assert_allclose(maps["magnification"], lens.magnification(x, y), rtol=1e-10)
    ax, ay = lens.deflection(x, y)
    np.testing.assert_allclose(maps["deflection_x"], ax, rtol=1e-12)
    np.testing.assert_allclose(maps["deflection_y"], ay, rtol=1e-12)
    np.testing.assert_allclose(
        maps["shear"] ** 2, (1 - maps["convergence"]) ** 2 - 1 / maps["magnification"], rtol=1e-9
    )


@pytest.mark.integration
def test_posterior_median_and_spread_extensions(tmp_path):
    """--samples adds MEDIAN and SPREAD extensions; the spread is ≥ 0 and the median near
    the best fit."""
    path, _ = _sis_scenario(tmp_path)
    out = tmp_path / "out"
    args = ["maps", str(path), "--out", str(out), "--size", "4", "--pixel", "0.1"]
    assert main([*args, "--samples", "50", "--steps", "200", "--walkers", "8", "--quiet"]) == 0
    with fits.open(out / "convergence.fits") as hdul:
        assert [h.name for h in hdul] == ["PRIMARY", "MEDIAN", "SPREAD"]
        assert hdul["MEDIAN"].header["NSAMPLES"] == 50
        assert np.all(hdul["SPREAD"].data >= 0)
        np.testing.assert_allclose(hdul["MEDIAN"].data, hdul[0].data, rtol=1e-3)


@pytest.mark.integration
def test_maps_without_sky_refused_in_one_line(tmp_path, capsys):
    path, _ = _sis_scenario(tmp_path, sky=False)
    out = tmp_path / "out"
    assert main(["maps", str(path), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "sis.toml" in err[0] and "sky" in err[0]
    assert not out.exists()


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--pixel", "0"], "pixel must be a positive number"),
        (["--size", "-3"], "size must be a positive number"),
        (["--size", "100", "--pixel", "0.001"], "size / pixel must be <= 4001"),
        (["--samples", "-2"], "samples must be an integer >= 0"),
    ],
)
def test_bad_map_settings_refused_before_fitting(tmp_path, capsys, extra, message):
    path, _ = _sis_scenario(tmp_path)
    out = tmp_path / "out"
    assert main(["maps", str(path), "--out", str(out), "--quiet", *extra]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0]
    assert not out.exists()
