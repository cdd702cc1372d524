"""Prepared lenses (issue 17): stored without pickle, forecast equal to the from-scratch one."""

import json
import pathlib

import numpy as np
import pytest
from astropy.time import Time

from lensdelay.api import forecast_prepared, forecast_scenario, prepare_lens
from lensdelay.cli.main import main
from lensdelay.io.prepared_files import read_prepared

pytestmark = pytest.mark.integration

ROOT = pathlib.Path(__file__).resolve().parent.parent
QUAD = ROOT / "scenarios" / "vellmar_quad.toml"
SETTINGS = {"walkers": 16, "steps": 150}


@pytest.fixture(scope="module")
def prepared_folder(tmp_path_factory):
    out = tmp_path_factory.mktemp("prepared") / "vellmar"
    prepare_lens(QUAD, seed=4, out=out, **SETTINGS)
    return out


def test_stored_lens_reads_back_exactly(prepared_folder):
    """chain.npz and lens.json give back the very arrays and fit that were prepared."""
    again = prepare_lens(QUAD, seed=4, **SETTINGS)  # the same seed: the same chain
    read = read_prepared(prepared_folder)
    assert np.array_equal(read.chain.chain, again.chain.chain)
    assert np.array_equal(read.fit.values, again.fit.values)
    assert read.fit.chi2 == again.fit.chi2 and read.chain.burn == again.chain.burn
    assert read.scenario.model.label == again.scenario.model.label == "sie_shear"
    for (x1, y1), (x2, y2) in zip(read.watched, again.watched):
        assert np.array_equal(x1, x2) and np.array_equal(y1, y2)
    # no pickle: every array loads with allow_pickle=False
    with np.load(prepared_folder / "chain.npz", allow_pickle=False) as data:
        assert data["chain"].dtype == np.float64


def test_fit_modes_read_back(prepared_folder, tmp_path):
    """The fit's other optima and the modes mixed in the chain survive the folder, so a
    forecast from the prepared lens says what one from scratch says about them."""
    from dataclasses import replace

    from lensdelay.inference.modes import ModeShare
    from lensdelay.io.prepared_files import write_prepared

    read = read_prepared(prepared_folder)
    other = read.fit.values + 0.01
    fit = replace(read.fit, alternatives=[(read.fit.chi2 + 2.0, other)])
    modes = (ModeShare(read.fit.chi2, 0.7, 16), ModeShare(read.fit.chi2 + 2.0, 0.3, 7))
    lens = replace(read, fit=fit, chain=replace(read.chain, modes=modes))
    write_prepared(tmp_path / "again", lens, QUAD)
    back = read_prepared(tmp_path / "again")
    assert back.chain.modes == modes
    ((chi2, values),) = back.fit.alternatives
    assert chi2 == read.fit.chi2 + 2.0 and np.array_equal(values, other)


def test_forecast_from_a_prepared_lens_equals_the_forecast_from_scratch(prepared_folder):
    options = {"n_samples": 500, "seed": 4, "now": Time("2026-12-01"), **SETTINGS}
    scratch = forecast_scenario(QUAD, budget=False, **options)
    quick = forecast_prepared(prepared_folder, budget=False, **options)
    assert [im.label for im in quick.images] == [im.label for im in scratch.images]
    for a, b in zip(quick.images, scratch.images):
        assert a.status == b.status
        for key in ("median", "p2.5", "p97.5"):
            assert a.delay_days[key] == pytest.approx(b.delay_days[key], rel=1e-12, abs=1e-12)
            assert a.date_offset_days[key] == pytest.approx(
                b.date_offset_days[key], rel=1e-12, abs=1e-12
            )


def test_now_as_an_iso_date_is_the_same_moment_as_a_time(prepared_folder):
    """The Python interface takes ``now`` as the command line's --now does (ISO 8601, UTC):
    a string gives what the same ``Time`` gives; anything else is one InputError."""
    import datetime

    from lensdelay.errors import InputError

    options = {"n_samples": 300, "seed": 4, "transient": "sn/B=2026-12-20±1", "budget": False}
    as_time = forecast_prepared(prepared_folder, now=Time("2026-12-21", scale="utc"), **options)
    for now in ("2026-12-21", "2026-12-21T00:00:00Z", datetime.date(2026, 12, 21)):
        as_text = forecast_prepared(prepared_folder, now=now, **options)
        assert as_text.now == as_time.now
        assert [im.status for im in as_text.images] == [im.status for im in as_time.images]
    with pytest.raises(InputError, match="now must be an ISO 8601 date.*got 5"):
        forecast_prepared(prepared_folder, now=5, **options)
    with pytest.raises(InputError, match="now must be one moment, got 2"):
        forecast_prepared(prepared_folder, now=Time(["2026-12-21", "2026-12-22"]), **options)


@pytest.mark.parametrize(
    "option, message",
    [
        ({"h0": 70}, "h0 must be two numbers .mean, sigma., got 70"),
        ({"h0": "70 5"}, "h0 must be two numbers .mean, sigma., got '70 5'"),
        ({"kappa_ext": (0.0, 0.05, 1.0)}, "kappa_ext must be two numbers"),
        ({"microlensing": "0.3"}, "microlensing must be a number, got '0.3'"),
        ({"depth": [25]}, "depth must be a number"),
        ({"site": (-30.0, -70.0, 2000.0)}, "site must be a Site or a dict of .site.'s keys"),
        ({"site": {"latitude": -130.0, "longitude": 0.0}}, "site.latitude must be >= -90"),
    ],
)
def test_python_options_of_the_wrong_kind_are_one_input_error(prepared_folder, option, message):
    """Each option checked as its command-line twin is (no TypeError from deep inside)."""
    from lensdelay.errors import InputError

    with pytest.raises(InputError, match=message):
        forecast_prepared(prepared_folder, transient="sn/B=2026-12-20±1", **option)


def test_python_options_take_the_command_line_forms(prepared_folder):
    """One sighting as a string, a site as a [site] table: the same as their full forms."""
    from lensdelay.model.scenario import Site

    options = {"n_samples": 300, "seed": 4, "budget": False, "now": "2026-12-21"}
    options["transient"] = "sn/B=2026-12-20±1"
    one = forecast_prepared(prepared_folder, seen="sn/C=2026-12-20", **options)
    listed = forecast_prepared(prepared_folder, seen=["sn/C=2026-12-20"], **options)
    assert [im.status for im in one.images] == [im.status for im in listed.images]
    assert [im.status for im in one.images][2] == "seen"
    table = {"latitude": -30.0, "longitude": -70.0, "height": 2000.0}
    by_table = forecast_prepared(prepared_folder, site=table, **options)
    by_site = forecast_prepared(
        prepared_folder, site=Site("ground", -30.0, -70.0, 2000.0), **options
    )
    assert by_table.site == by_site.site


def test_alert_on_the_command_line(prepared_folder, tmp_path, capsys):
    """--transient names the image and date of the alert; the rest of the forecast follows."""
    out = tmp_path / "alert"
    argv = ["forecast", str(prepared_folder), "--transient", "sn/B=2026-12-20+-2"]
    argv += ["--out", str(out), "--samples", "500", "--quiet", "--now", "2026-12-21"]
    assert main(argv) == 0
    doc = json.loads((out / "forecast.json").read_text())
    assert doc["reference_image"] == "B"
    seen = [im for im in doc["images"] if im["label"] == "B"][0]
    assert seen["status"] == "seen"
    assert "forecast.ics" in {p.name for p in out.iterdir()}


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--transient", "sn/Q=2026-12-20"], "--transient image must be one of"),
        (["--transient", "sn/B"], "--transient must be [FAMILY/]LABEL=DATE"),
        (["--transient", "sn/B=2026-13-45"], "--transient DATE must be an ISO 8601 date"),
        (["--transient", "sn/B=2026-12-20±x"], "--transient SIGMA must be a number"),
        (["--transient", "sn/B=2026-12-20", "--model", "models/sis_shear.toml"], "--model"),
    ],
)
def test_bad_alerts_are_one_line(prepared_folder, tmp_path, capsys, extra, message):
    out = tmp_path / "out"
    code = main(["forecast", str(prepared_folder), *extra, "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and message in err, err
    assert not out.exists()


def test_transient_needs_a_prepared_lens_and_a_changed_folder_is_refused(
    prepared_folder, tmp_path, capsys
):
    assert main(["forecast", str(QUAD), "--transient", "sn/A=2026-12-01", "--quiet"]) == 2
    assert "--transient needs a prepared lens" in capsys.readouterr().err
    import shutil

    copy = tmp_path / "copy"
    shutil.copytree(prepared_folder, copy)
    text = (copy / "scenario.toml").read_text().replace("Vellmar quad", "Vellmar quad (edited)")
    (copy / "scenario.toml").write_text(text)
    assert main(["forecast", str(copy), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "sha256 of scenario.toml must match" in err


def test_a_lens_with_member_galaxies_is_prepared_self_contained(tmp_path, capsys):
    """The catalogue travels with the prepared lens; the scenario needs no other file."""
    from test_members import write

    (tmp_path / "in").mkdir()
    scenario = write(tmp_path / "in")
    out = tmp_path / "prepared"
    assert main(["prepare", str(scenario), "--out", str(out), "--steps", "100", "--quiet"]) == 0
    assert (out / "members.ecsv").is_file()
    (tmp_path / "in" / "members.ecsv").unlink()  # the original is not needed any more
    code = main(["forecast", str(out), "--transient", "s/A=2027-01-01", "--samples", "300"])
    assert code == 0, capsys.readouterr().err


@pytest.mark.parametrize(
    "job, option, message",
    [
        ("fit_scenario", {"flux_floor": "0.2", "use_fluxes": True}, "flux_floor must be a number"),
        ("map_scenario", {"size": "5"}, "size must be a positive number of arcsec, got '5'"),
        ("map_scenario", {"pixel": "0.1"}, "pixel must be a positive number of arcsec"),
        ("forecast_scenario", {"delays": 5}, "delays must be a delays.json path or measure_del"),
    ],
)
def test_python_jobs_refuse_options_of_the_wrong_kind(job, option, message):
    """One InputError naming the option, before any fit (were TypeError/AttributeError)."""
    import lensdelay.api as api
    from lensdelay.errors import InputError

    with pytest.raises(InputError, match=message):
        getattr(api, job)(QUAD, **option)
