"""Alerts to watched lenses (issue 31): the footprint search and the image hypotheses."""

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord

from lensdelay.forecast.watchlist import P_NONE, WatchedImage, WatchedLens, WatchIndex, assign


def _lens(name, ra, dec):
    images = (
        WatchedImage("sn", "A", 1.0, 0.0, 0.005, True),
        WatchedImage("sn", "B", -1.0, 0.1, 0.005, True),
        WatchedImage("sn", "X1", 0.0, -0.9, 0.15, False),
    )
    return WatchedLens(name, ra, dec, images, 2.0)


def _at(lens, x, y):
    """The ICRS position (degrees) of offsets x East, y North (arcsec) from a lens."""
    origin = SkyCoord(lens.ra * u.deg, lens.dec * u.deg)
    where = origin.spherical_offsets_by(x * u.arcsec, y * u.arcsec)
    return float(where.ra.deg), float(where.dec.deg)


def test_an_alert_at_an_image_is_that_image():
    """At an image, that image wins; far from all (inside the footprint), "none" does."""
    lens = _lens("l1", 150.0, 60.0)
    hit = assign(lens, *_at(lens, 0.02, -0.88), alert_sigma=0.05)
    assert hit.image == "sn/X1" and hit.probability > 0.9
    assert sum(hit.probabilities.values()) == pytest.approx(1.0)
    assert hit.offset == pytest.approx((0.02, -0.88), abs=1e-6)
    stray = assign(lens, *_at(lens, 0.0, 1.8), alert_sigma=0.05)
    assert stray.image is None and stray.probabilities["none"] > 0.99
    # halfway between two images of equal error the two share the probability
    between = assign(lens, *_at(lens, 0.0, 0.05), alert_sigma=1.0)
    assert between.probabilities["sn/A"] == pytest.approx(between.probabilities["sn/B"], rel=0.1)
    assert P_NONE > 0


def test_an_error_ellipse_weighs_along_its_long_axis():
    """An image with an elongated error ellipse (0.3" along x, 0.02" along y) claims an
    alert 0.25" off along x but not one 0.25" off along y; the Gaussian's value is the
    closed form of a bivariate normal (common practice)."""
    ellipse = WatchedImage("sn", "X1", 0.0, 0.0, 0.3, False, (0.09, 0.0, 0.0004))
    lens = WatchedLens("e", 80.0, -20.0, (ellipse,), 2.0)
    along = assign(lens, *_at(lens, 0.25, 0.0), alert_sigma=0.01)
    across = assign(lens, *_at(lens, 0.0, 0.25), alert_sigma=0.01)
    assert along.image == "sn/X1" and across.image is None
    # the density at the alert, against the hand-written bivariate normal
    var_x, var_y = 0.09 + 1e-4, 0.0004 + 1e-4
    density = np.exp(-0.5 * 0.25**2 / var_x) / (2 * np.pi * np.sqrt(var_x * var_y))
    none = P_NONE / (np.pi * 2.0**2)
    expected = (1 - P_NONE) * density / ((1 - P_NONE) * density + none)
    assert along.probability == pytest.approx(expected, rel=1e-4)
    # no covariance given: the per-axis sigma, circular
    assert np.allclose(WatchedImage("sn", "A", 0, 0, 0.2, True).error_matrix(), np.eye(2) * 0.04)


def test_footprint_search_finds_inside_and_only_inside():
    """Alerts inside a footprint (radius 2") are found, at any RA (across 0/360) and near a
    pole; an alert 2.1" away is not."""
    lenses = [_lens("a", 0.0001, 10.0), _lens("b", 359.9999, -30.0), _lens("c", 45.0, 89.99)]
    index = WatchIndex(lenses)
    ra, dec = zip(
        _at(lenses[0], -1.9, 0.0),  # inside a
        _at(lenses[1], 1.0, 1.0),  # inside b (across RA = 0)
        _at(lenses[2], 0.5, -1.2),  # inside c, near the pole
        _at(lenses[0], 2.1, 0.0),  # outside
    )
    i_alert, i_lens, sep = index.candidates(ra, dec)
    assert sorted(zip(i_alert.tolist(), i_lens.tolist())) == [(0, 0), (1, 1), (2, 2)]
    assert np.all(sep <= 2.0)


@pytest.mark.filterwarnings("ignore::lensdelay.errors.LensdelayWarning")
def test_predicted_images_are_named_as_the_forecast_names_them(tmp_path):
    """A quad with its faintest image withheld: the watch list's predicted image carries
    the forecast's own name (X1) and lies where the forecast puts it."""
    import shutil
    from pathlib import Path

    from lensdelay.api import forecast_prepared, load_scenario
    from lensdelay.forecast.prepared import fit_lens_ahead
    from lensdelay.forecast.watchlist import watched_lens
    from lensdelay.lensing.lens import Lens
    from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
    from lensdelay.model.simulate import simulate_family, to_toml

    lens = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),
            ExternalShear(strength=0.05, position_angle=-40.0),
        )
    )
    fam = simulate_family(
        lens, 0.03, 0.02, label="sn", redshift=1.6, sigma=0.003, rng=np.random.default_rng(4)
    )
    faintest = max(range(len(fam["image"])), key=lambda k: fam["image"][k]["magnitude"])
    fam["image"].pop(faintest)
    doc = {
        "name": "Quillane",
        "lens": {"redshift": 0.4},
        "sky": {"ra": 187.3311, "dec": -12.4518},
        "family": [fam],
        "lens_light": {"x": 0, "y": 0, "sigma": 0.01},
        "transient": {"family": "sn", "seen_in": "A", "date": "2026-11-20"},
        "model": "models/sie_shear.toml",
    }
    (tmp_path / "models").mkdir()
    models = Path(__file__).parent.parent / "models"
    shutil.copy(models / "sie_shear.toml", tmp_path / "models" / "sie_shear.toml")
    (tmp_path / "q.toml").write_text(to_toml(doc))
    prepared = fit_lens_ahead(load_scenario(tmp_path / "q.toml"), walkers=16, steps=150)
    watched = {f"{im.family}/{im.label}": im for im in watched_lens("q", prepared).images}
    res = forecast_prepared(prepared, n_samples=500, budget=False)
    predicted = [im for im in res.images if not im.observed]
    assert predicted and all(not watched[im.name].observed for im in predicted)
    for im in predicted:
        w = watched[im.name]
        assert np.hypot(w.x - im.x, w.y - im.y) < 0.1  # best fit vs the posterior's median
        # its error ellipse comes from the chain: the same size as the forecast's own
        # 68% ellipse (both from the posterior's images; the forecast's about its median)
        assert w.covariance is not None
        major = np.sqrt(np.max(np.linalg.eigvalsh(w.error_matrix())))
        # √2.30: the 68% ellipse of a 2-D Gaussian in σ (χ² with 2 dof; common practice)
        ratio = major * np.sqrt(2.30) / im.ellipse(68).semi_major  # measured 1.4
        assert 0.5 < ratio < 2.0
