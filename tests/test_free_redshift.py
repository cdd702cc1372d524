"""Families of unknown redshift (issue 16): a free parameter the lensing follows row by row."""

import numpy as np
import pytest

from lensdelay.errors import InputError
from lensdelay.inference.fit import fit
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.lensing.distances import LensDistances
from lensdelay.model.recipe import parse_mass_entries
from lensdelay.model.scenario import parse_scenario
from lensdelay.model.simulate import simulate_family

Z_LENS, Z_REF, Z_ARC = 0.5, 1.5, 2.8
MASS = [
    {
        "profile": "SIE",
        "einstein_radius": {"value": 1.2, "min": 0.5, "max": 2.0},
        "axis_ratio": {"value": 0.75, "min": 0.3, "max": 1.0},
        "position_angle": {"value": 20.0},
        "x": 0.0,
        "y": 0.0,
    },
    {"profile": "shear", "strength": 0.05, "position_angle": 70.0},
]
TRUE = {"einstein_radius": 1.2, "axis_ratio": 0.75, "position_angle": 20.0}


def _document(noise=0.0, z_arc=None, seed=1):
    """Two families of an invented lens: a quad at the reference redshift, an arc behind it."""
    model = parse_mass_entries(MASS)
    lens = model.lens([TRUE["einstein_radius"], TRUE["axis_ratio"], TRUE["position_angle"]])
    dist = LensDistances(parse_scenario(_minimal(), "x").cosmology, Z_LENS, Z_REF)
    rng = np.random.default_rng(seed)
    sigma = max(noise, 1e-4)
    quad = simulate_family(lens, 0.05, 0.03, label="q", redshift=Z_REF, sigma=sigma, rng=rng)
    arc = simulate_family(
        lens,
        -0.08,
        0.06,
        label="arc",
        redshift=Z_ARC,
        scale=dist.deflection_scale(Z_ARC),
        sigma=sigma,
        rng=rng,
    )
    if noise == 0.0:  # exact positions: simulate_family's noise at 1e-4 undone below
        for fam, (bx, by, s) in ((quad, (0.05, 0.03, 1.0)), (arc, (-0.08, 0.06, None))):
            from lensdelay.lensing.images import find_images

            scale = s if s is not None else dist.deflection_scale(Z_ARC)
            table = find_images(lens, [bx], [by], scale)
            keep = np.abs(table.magnification) >= 0.05
            for im, x, y in zip(fam["image"], table.x[keep], table.y[keep]):
                im["x"], im["y"] = float(x), float(y)
    arc["redshift"] = z_arc if z_arc is not None else {"value": 2.0, "min": 1.0, "max": 5.0}
    return {
        "name": "Free redshift test",
        "lens": {"redshift": Z_LENS},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [quad, arc],
        "mass": MASS,
    }


def _minimal():
    return {
        "lens": {"redshift": Z_LENS},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [
            {
                "label": "a",
                "redshift": Z_REF,
                "image": [{"label": "A", "x": 1, "y": 0, "sigma": 0.01}],
            }
        ],
        "mass": MASS,
    }


def _likelihood(doc):
    sc = parse_scenario(doc, "free.toml")
    return ImageLikelihood(sc, sc.model)


def _truth_row(like, bx=(0.05, 0.03), arc=(-0.08, 0.06), z=Z_ARC):
    values = [TRUE["einstein_radius"], TRUE["axis_ratio"], TRUE["position_angle"], *bx, *arc, z]
    return np.array(values)[None, :]


def test_a_redshift_table_is_a_free_parameter_and_the_reference_is_the_first_measured():
    sc = parse_scenario(_document(), "free.toml")
    arc = sc.family("arc")
    assert arc.redshift_free and arc.redshift_parameter.min == 1.0
    assert not sc.family("q").redshift_free
    assert sc.reference_source_redshift == Z_REF  # the first family with a measured z
    like = ImageLikelihood(sc, sc.model)
    assert like.names[-1] == "redshift[arc]"
    assert (like.lower[-1], like.upper[-1]) == (1.0, 5.0)


def test_every_redshift_free_needs_a_reference_redshift():
    doc = _document()
    doc["family"] = doc["family"][1:]
    with pytest.raises(InputError, match="lens.reference_source_redshift is needed"):
        parse_scenario(doc, "free.toml")
    doc["lens"]["reference_source_redshift"] = 2.0
    assert parse_scenario(doc, "free.toml").reference_source_redshift == 2.0


def test_a_redshift_prior_enters_as_a_constraint():
    doc = _document()
    doc["family"][1]["redshift"] = {"value": 2.5, "min": 1.0, "max": 5.0, "prior": [2.7, 0.2]}
    like = _likelihood(doc)
    assert like.priors[like.n_parameters - 1] == (2.7, 0.2)


def test_splines_equal_astropy_distances():
    """Scale and D_dt/c from the splines against LensDistances (astropy) at random z."""
    like = _likelihood(_document())
    k = 1
    z = np.random.default_rng(3).uniform(1.0, 5.0, 25)
    rows = np.repeat(_truth_row(like), len(z), axis=0)
    rows[:, -1] = z
    dist = LensDistances(like.scenario.cosmology, Z_LENS, Z_REF)
    scale = np.ravel(like.family_scale(k, rows))
    days = like.family_days(k, rows)
    assert scale == pytest.approx([dist.deflection_scale(v) for v in z], rel=1e-7)
    assert days == pytest.approx([dist.days_per_arcsec2(v) for v in z], rel=1e-7)


def test_the_true_redshift_reproduces_the_images_and_a_wrong_one_does_not():
    like = _likelihood(_document())
    at_truth = like.data_residuals(_truth_row(like))
    # residuals in σ = 1e-4 arcsec; the Newton tolerance (1e-11) is far below: 1e-3 σ
    assert np.max(np.abs(at_truth)) < 1e-3
    wrong = like.data_residuals(_truth_row(like, z=2.0))
    assert np.max(np.abs(wrong)) > 10.0


def test_rows_with_different_redshifts_equal_likelihoods_with_those_redshifts_fixed():
    """Row by row: the same predictions as scenarios whose redshift is that number."""
    like = _likelihood(_document())
    rows = np.vstack([_truth_row(like, z=2.2), _truth_row(like, z=3.6)])
    preds = like.predict(rows)
    for r, z in enumerate((2.2, 3.6)):
        fixed = _likelihood(_document(z_arc=z))
        one = fixed.predict(rows[r : r + 1, :-1])
        for a, b in zip(preds, one):
            assert a["x"][r] == pytest.approx(b["x"][0], abs=1e-7)  # arcsec
            assert a["fermat"][r] == pytest.approx(b["fermat"][0], rel=1e-6)
        days_free = like.family_days(1, rows)[r]
        assert days_free == pytest.approx(fixed.families[1].days_per_arcsec2, rel=1e-7)


def test_the_information_jacobian_sees_the_redshift(brute_jacobian):
    """∂(residuals)/∂z by the implicit-function theorem equals finite differences."""
    like = _likelihood(_document(noise=0.003))
    row = _truth_row(like)
    analytic = like.information_jacobian(row)[0][:, -1]
    numeric = brute_jacobian(lambda v: like.data_residuals(v[None, :]), row[0])[:, -1]
    assert analytic == pytest.approx(numeric, rel=1e-3, abs=1e-3)


@pytest.mark.integration
def test_a_fit_recovers_the_redshift_within_its_error():
    """Injection–recovery: noisy images (3 mas); the fitted z within 3σ of the truth."""
    like = _likelihood(_document(noise=0.003))
    result = fit(like, starts=4, polish=2, seed=0)
    i = like.names.index("redshift[arc]")
    z, err = result.values[i], result.errors[i]
    # within 3σ of the truth and χ² within 4σ of its mean dof (sd √(2 dof)): common practice
    assert np.isfinite(err) and 0 < err < 0.5
    assert abs(z - Z_ARC) < 3 * err
    assert result.chi2 < result.dof + 4 * np.sqrt(2 * result.dof)


def _scenario_file(tmp_path, doc):
    from lensdelay.model.simulate import to_toml

    path = tmp_path / "free.toml"
    path.write_text(to_toml(doc))
    return path


@pytest.mark.integration
def test_a_forecast_for_a_family_of_unknown_redshift(tmp_path, quick_forecast_args):
    """The transient in the free-redshift family: images solved at each sample's z."""
    import json

    from lensdelay.cli.main import main

    doc = _document(noise=0.003)
    doc["transient"] = {"family": "arc", "seen_in": "A", "date": "2026-11-20"}
    path = _scenario_file(tmp_path, doc)
    out = tmp_path / "out"
    assert main(["forecast", str(path), *quick_forecast_args(out)]) == 0
    result = json.loads((out / "forecast.json").read_text())
    arc = result["scenario"]["families"][1]
    assert arc["redshift"] is None and arc["redshift_bounds"] == [1.0, 5.0]
    post = arc["redshift_posterior"]
    assert 1.0 < post["p2.5"] < post["median"] < post["p97.5"] < 5.0
    assert all(im["delay_days"]["p2.5"] <= im["delay_days"]["p97.5"] for im in result["images"])


@pytest.mark.integration
def test_h0_from_delays_of_a_family_of_unknown_redshift_is_refused(tmp_path, capsys):
    from lensdelay.cli.main import main

    doc = _document(noise=0.003)
    doc["delay"] = [{"family": "arc", "image": "B", "relative_to": "A", "days": 10.0, "sigma": 1.0}]
    path = _scenario_file(tmp_path, doc)
    code = main(["hubble", str(path), "--out", str(tmp_path / "h"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1
    assert "delay[0].family 'arc' must have a measured redshift for H0" in err
    assert not (tmp_path / "h").exists()
