"""The images command: output and bad-input handling (issue 2)."""

import json

import pytest

from lensdelay.cli.main import main

pytestmark = pytest.mark.integration

GOOD = """
[lens]
redshift = 0.5
reference_source_redshift = 2.0
[[mass]]
profile = "SIS"
einstein_radius = 1.0
"""


def run(capsys, *argv):
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


def test_images_json_sis(tmp_path, capsys):
    """SIS: two images at β ± θE, the saddle later by (D_dt/c)·2θEβ (SEF92)."""
    path = tmp_path / "m.toml"
    path.write_text(GOOD)
    code, out, err = run(capsys, "images", str(path), "--source", "0.2", "0", "--json")
    assert code == 0, err
    res = json.loads(out)
    xs = sorted(im["x"] for im in res["images"])
    assert xs == pytest.approx([-0.8, 1.2])
    from lensdelay.lensing.distances import DAYS_PER_MPC_ARCSEC2

    later = max(im["delay_days"] for im in res["images"])
    assert later == pytest.approx(
        res["time_delay_distance_Mpc"] * DAYS_PER_MPC_ARCSEC2 * 2 * 1.0 * 0.2, rel=1e-8
    )


BAD = [
    (
        GOOD.replace("einstein_radius = 1.0", "einstein_radius = -1.0"),
        [],
        "mass[0].einstein_radius must be > 0, got -1",
    ),
    (
        GOOD.replace("einstein_radius = 1.0", "einstein_radius = 0.0"),
        [],
        "mass[0].einstein_radius must be > 0, got 0",
    ),
    (
        GOOD.replace("einstein_radius = 1.0", "einstein_radius = nan"),
        [],
        "mass[0].einstein_radius must be finite",
    ),
    (
        GOOD.replace("einstein_radius = 1.0", "einstein_radius = inf"),
        [],
        "mass[0].einstein_radius must be finite",
    ),
    (
        GOOD.replace('"SIS"', '"SIE"').replace(
            "einstein_radius = 1.0", "einstein_radius = 1.0\naxis_ratio = 1.5"
        ),
        [],
        "mass[0].axis_ratio must be in (0, 1], got 1.5",
    ),
    (
        GOOD.replace('"SIS"', '"SIE"').replace(
            "einstein_radius = 1.0", "einstein_radius = 1.0\naxis_ratio = 0"
        ),
        [],
        "mass[0].axis_ratio must be in (0, 1], got 0",
    ),
    (GOOD.replace('"SIS"', '"powerlaw"'), [], "(did you mean 'power_law'?)"),
    (
        GOOD.replace("einstein_radius = 1.0", "einstien_radius = 1.0"),
        [],
        "(did you mean 'einstein_radius'?)",
    ),
    (
        GOOD,
        ["--source-redshift", "0.4"],
        "source redshift must be greater than the lens redshift 0.5, got 0.4",
    ),
    (
        GOOD,
        ["--source-redshift", "0.5"],
        "source redshift must be greater than the lens redshift 0.5, got 0.5",
    ),
    ("[[mass]\nprofile=", [], "is not valid TOML"),
    ("", [], "is empty"),
]


@pytest.mark.parametrize("text, extra, message", BAD)
def test_bad_model_one_line_exit_2(tmp_path, capsys, text, extra, message):
    """Bad input: one line naming file and field, exit 2, no traceback (brief)."""
    path = tmp_path / "m.toml"
    path.write_text(text)
    code, out, err = run(capsys, "images", str(path), "--source", "0.1", "0", *extra)
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1 and "Traceback" not in err
    assert str(path) in err
    assert message in err


def test_missing_file_and_directory(tmp_path, capsys):
    code, _, err = run(capsys, "images", str(tmp_path / "nope.toml"), "--source", "0", "0")
    assert code == 2 and "file does not exist" in err and err.count("\n") == 1
    code, _, err = run(capsys, "images", str(tmp_path), "--source", "0", "0")
    assert code == 2 and "is a directory" in err


def test_bad_argument_is_one_line(capsys):
    with pytest.raises(SystemExit) as ex:
        main(["images", "m.toml", "--source", "nan", "0"])
    assert ex.value.code == 2
    assert capsys.readouterr().err.count("\n") == 1


@pytest.mark.parametrize("profile", ["SIS", "point"])
def test_source_on_the_axis_of_a_round_lens_is_an_einstein_ring(tmp_path, capsys, profile):
    """β = 0 behind a round lens: the image is the circle of radius θE (SEF92 Sect. 8.1.4 for
    the SIS and the point mass), reported as a ring, not as thousands of points."""
    path = tmp_path / "m.toml"
    path.write_text(GOOD.replace('"SIS"', f'"{profile}"'))
    code, out, err = run(capsys, "images", str(path), "--source", "0", "0", "--json")
    assert code == 0, err
    res = json.loads(out)
    assert res["einstein_ring"]["radius_arcsec"] == pytest.approx(1.0, abs=1e-6)
    assert all(abs(im["magnification"]) < 1e6 for im in res["images"])
    assert res["einstein_ring"]["delay_days"] == pytest.approx(0.0, abs=1e-6)


def test_a_far_source_still_has_its_image(tmp_path, capsys):
    """Every source has at least one image (SEF92 Sect. 5.4): 1200 arcsec from an SIS it lies
    at β + θE with μ = 1 + θE/β."""
    path = tmp_path / "m.toml"
    path.write_text(GOOD)
    code, out, err = run(capsys, "images", str(path), "--source", "1200", "0", "--json")
    assert code == 0, err
    res = json.loads(out)
    assert len(res["images"]) == 1
    assert res["images"][0]["x"] == pytest.approx(1201.0, abs=1e-6)
    assert res["images"][0]["magnification"] == pytest.approx(1 + 1 / 1200, rel=1e-6)


def test_a_source_on_a_cusp_prints_one_critical_image(tmp_path, capsys):
    """A source on the SIE's major-axis cusp (located by brentq on det A along the axis):
    the merged image is listed once as 'critical' with null magnification in the JSON (valid
    JSON, no Infinity) and 'infinite' in the table, plus the counter-image (SEF92 Sect. 6.3)."""
    from scipy.optimize import brentq

    from lensdelay.api import load_model

    path = tmp_path / "m.toml"
    path.write_text(GOOD.replace('"SIS"', '"SIE"') + "axis_ratio = 0.7\nposition_angle = 0.0\n")
    lens = load_model(path).lens()
    y_crit = brentq(lambda y: float(lens.jacobian_determinant(0.0, y)), 0.3, 1.5, xtol=1e-15)
    beta = float(lens.source_position(0.0, y_crit)[1])
    code, out, err = run(capsys, "images", str(path), "--source", "0", repr(beta), "--json")
    assert code == 0, err
    res = json.loads(out)
    parities = sorted(im["parity"] for im in res["images"])
    assert parities == ["critical", "saddle"]
    assert [im["magnification"] for im in res["images"] if im["parity"] == "critical"] == [None]
    code, out, err = run(capsys, "images", str(path), "--source", "0", repr(beta))
    assert code == 0 and "infinite" in out and "merge" in out
