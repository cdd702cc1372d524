"""Break test, round 3 (issue 25): each class of failure, at its root.

The cases follow ``../shared/repro/round3/REPRO.md`` (its ids in the test names), with
inputs made here: sightings of images some samples lack, stale or mixed outputs
(prepared lenses, batch reruns, reports), units and bounds, delays that are not
measurements, observability, hangs and memory, edges. Every refusal is one line that
names the file, field or flag.
"""

from __future__ import annotations

import json
import shutil
import socket
import threading
import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.table import Table
from astropy.time import Time

from lensdelay.api import forecast_prepared, prepare_lens
from lensdelay.cli.main import main
from lensdelay.errors import InputError, LensdelayWarning
from lensdelay.inference.timing import SightingRow, TimingData
from lensdelay.io.lightcurve_files import read_delays_json, read_light_curves
from lensdelay.io.reading import load_scenario
from lensdelay.lightcurves.measure import chain_verdicts
from lensdelay.model.scenario import MeasuredDelay

import pathlib

ROOT = pathlib.Path(__file__).resolve().parent.parent
QUAD = ROOT / "scenarios" / "vellmar_quad.toml"
FAST = {"walkers": 16, "steps": 150}


def one_line_exit_2(capsys, argv) -> str:
    """Run the command line; it must refuse in one line with status 2 and no traceback."""
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    return err


# -- sightings: the timing likelihood where a sample lacks an image (S1) -----------------
def test_timing_likelihood_of_a_sample_without_the_image_is_zero():
    """A sample with no arrival time for the sighted image cannot produce the sighting."""
    timing = TimingData(
        [("sn", "A"), ("sn", "B"), ("sn", "X1")],
        delays=[MeasuredDelay("sn", "B", "A", 5.0, 0.5)],
        sightings=[SightingRow("sn", "X1", 12.0, 1.0)],
        detection_sigma_days=1.0,
        reference=("sn", "A"),
    )
    arrival = np.array([[0.0, 5.0, 12.0], [0.0, 5.2, np.nan], [0.0, 4.0, 11.0]])
    logl = timing.log_likelihood(arrival)
    assert np.isfinite(logl[0]) and np.isfinite(logl[2])
    assert logl[1] == -np.inf
    assert logl[0] > logl[2]


@pytest.fixture(scope="module")
def prepared(tmp_path_factory):
    out = tmp_path_factory.mktemp("round3") / "vq"
    prepare_lens(QUAD, seed=3, out=out, **FAST)
    return out


def test_sighting_after_now_is_refused(prepared, capsys):
    """S3: a sighting is something that happened: not after --now."""
    err = one_line_exit_2(
        capsys,
        [
            "forecast", str(prepared), "--transient", "sn/B=2026-12-20±1", "--now",
            "2026-12-25", "--seen", "sn/D=2027-01-05", "--quiet",
        ],
    )
    assert "--seen sn/D date must not be after now" in err


@pytest.mark.integration
def test_a_far_sighting_flags_every_image_and_the_moved_detection(prepared):
    """S2: a sighting hundreds of sigma off: every image is flagged, so is the detection."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = forecast_prepared(
            prepared, "sn/B=2026-12-20±1", n_samples=1000, budget=False,
            now=Time("2027-01-10"), seen=["sn/A=2024-12-20"],
        )
    for im in res.images:
        assert any("in tension with the model" in f for f in im.flags), im.label
    b = next(im for im in res.images if im.label == "B")
    assert any("detection image's own date" in f for f in b.flags)


# -- prepared lenses: every file hashed, damage in one line (P1-P3, P9) -------------------
@pytest.mark.parametrize(
    "damage, expected",
    [
        ("chain_swapped", "sha256 of chain.npz must match"),
        ("chain_truncated", "chain.npz: must be the prepared lens's arrays"),
        ("chain_missing", "chain.npz: must be the prepared lens's arrays"),
        ("json_edited", "document_sha256 must match"),
        ("json_list", "must hold a JSON object"),
        ("scenario_edited", "sha256 of scenario.toml must match"),
    ],
)
def test_a_changed_prepared_lens_is_refused(prepared, tmp_path, capsys, damage, expected):
    folder = tmp_path / "lens"
    shutil.copytree(prepared, folder)
    chain, meta = folder / "chain.npz", folder / "lens.json"
    if damage == "chain_swapped":  # another lens's posterior (here: the chain rescaled)
        with np.load(chain) as data:
            arrays = {k: data[k] for k in data.files}
        arrays["chain"] = arrays["chain"] * 1.01
        np.savez(chain, **arrays)
    elif damage == "chain_truncated":
        chain.write_bytes(chain.read_bytes()[:100])
    elif damage == "chain_missing":
        chain.unlink()
    elif damage == "json_edited":
        doc = json.loads(meta.read_text())
        doc["fit"]["chi2"] = 0.01
        meta.write_text(json.dumps(doc))
    elif damage == "json_list":
        meta.write_text("[1]")
    elif damage == "scenario_edited":
        text = (folder / "scenario.toml").read_text()
        (folder / "scenario.toml").write_text(text.replace("redshift = 0.41", "redshift = 0.2"))
    err = one_line_exit_2(
        capsys, ["forecast", str(folder), "--transient", "sn/B=2026-12-20", "--quiet"]
    )
    assert expected in err


@pytest.mark.integration
def test_cosmology_of_a_prepared_forecast_is_the_one_used(prepared):
    """P9: --cosmology changes the distances of a prepared forecast as of a scratch one."""
    options = {"n_samples": 500, "budget": False, "now": Time("2026-12-01")}
    own = forecast_prepared(prepared, **options)
    planck = forecast_prepared(prepared, cosmology_name="Planck18", **options)
    d_own = next(im for im in own.images if im.label == "D").delay_days["median"]
    d_planck = next(im for im in planck.images if im.label == "D").delay_days["median"]
    # H0 67.66 instead of 70 (astropy's Planck18 realisation, Planck 2018 VI table 2) and
    # another Om0: delays longer by about 70/67.66
    assert d_planck / d_own == pytest.approx(70.0 / 67.66, rel=0.02)


@pytest.mark.integration
def test_another_cosmology_is_refused_where_the_prepared_fit_depends_on_it(tmp_path):
    """Families at two redshifts were fitted with distance ratios of the prepared
    cosmology: a forecast under another one would use a chain made with other settings."""
    group = tmp_path / "group"
    prepare_lens(ROOT / "scenarios" / "kessoway_group.toml", seed=2, out=group, **FAST)
    with pytest.raises(InputError, match="cosmology must be the one the lens was prepared"):
        forecast_prepared(group, n_samples=500, budget=False, cosmology_name="Planck18")


@pytest.mark.parametrize("date", ["9999-12-25", "0001-01-05"])
def test_dates_beyond_the_calendar_are_one_line(prepared, capsys, date):
    """P5: ISO 8601 dates have four-digit years."""
    err = one_line_exit_2(
        capsys,
        ["forecast", str(prepared), "--transient", f"sn/B={date}", "--samples", "500", "--quiet"],
    )
    assert "within the years 1-9999" in err


def test_an_absurd_date_sigma_is_one_line(prepared, capsys):
    err = one_line_exit_2(
        capsys, ["forecast", str(prepared), "--transient", "sn/B=2026-12-20±1e9", "--quiet"]
    )
    assert "--transient SIGMA must be between 0 and 3650 days" in err


# -- batch: fingerprints, one refusal, a silent scheduler (B1-B6) ------------------------
@pytest.mark.parametrize(
    "flag, value, expected",
    [
        ("--seed", "-1", "--seed must be an integer >= 0"),
        ("--samples", "-5", "--samples must be an integer between 100"),
        ("--steps", "0", "--steps must be an integer >= "),
        ("--scheduler", "not a url", "--scheduler must be an address like tcp://HOST:PORT"),
    ],
)
def test_batch_settings_are_refused_once_before_any_system(tmp_path, capsys, flag, value, expected):
    cat = tmp_path / "cat"
    cat.mkdir()
    shutil.copy(QUAD, cat / "vq.toml")
    shutil.copytree(ROOT / "models", cat / "models")
    err = one_line_exit_2(capsys, ["batch", str(cat), "--out", str(tmp_path / "o"), flag, value])
    assert expected in err
    assert not (tmp_path / "o").exists()


def test_a_scheduler_that_never_answers_times_out(monkeypatch):
    """B5: a server that accepts and stays silent: refused after the timeout, no hang."""
    from lensdelay.cli import batch

    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(5)
    port = server.getsockname()[1]
    held = []
    stop = threading.Event()

    def accept():
        server.settimeout(0.2)
        while not stop.is_set():
            try:
                held.append(server.accept()[0])
            except OSError:
                pass

    thread = threading.Thread(target=accept, daemon=True)
    thread.start()
    monkeypatch.setattr(batch, "SCHEDULER_TIMEOUT", 2.0)

    class SilentClient:  # what a Dask client does against such a server: it waits
        def __init__(self, address, timeout):
            with socket.create_connection(("127.0.0.1", port)) as conn:
                conn.recv(1)

    try:
        with pytest.raises(InputError, match="could not be reached within 2 s"):
            batch._connect(SilentClient, f"tcp://127.0.0.1:{port}")
    finally:
        stop.set()
        for conn in held:
            conn.close()
        server.close()


@pytest.mark.integration
def test_batch_reruns_what_changed_and_keeps_what_did_not(tmp_path, capsys):
    """B3/B4: another --now, an edited scenario, a damaged forecast.json are redone."""
    cat = tmp_path / "cat"
    cat.mkdir()
    shutil.copy(QUAD, cat / "vq.toml")
    shutil.copytree(ROOT / "models", cat / "models")
    out = tmp_path / "out"
    base = ["batch", str(cat), "--out", str(out), "--workers", "1", "--quiet",
            "--samples", "500", "--steps", "100", "--walkers", "16"]
    assert main([*base, "--now", "2026-12-04"]) == 0
    assert main([*base, "--now", "2026-12-04"]) == 0
    assert "(1 done before, 0 now)" in capsys.readouterr().out
    assert main([*base, "--now", "2027-06-01"]) == 0
    text = capsys.readouterr().out
    assert "(0 done before, 1 now)" in text and "inputs or the settings changed" in text
    summary = Table.read(out / "summary.ecsv", format="ascii.ecsv")
    assert summary.meta["now"].startswith("2027-06-01")
    (out / "vq" / "forecast.json").write_text("")
    assert main([*base, "--now", "2027-06-01"]) == 0
    assert "unreadable or incomplete" in capsys.readouterr().out
    edited = (cat / "vq.toml").read_text().replace('date = "2026-11-28"', 'date = "2027-03-01"')
    (cat / "vq.toml").write_text(edited)
    assert main([*base, "--now", "2027-06-01"]) == 0
    assert "(0 done before, 1 now)" in capsys.readouterr().out
    doc = json.loads((out / "vq" / "forecast.json").read_text())
    assert doc["detection"]["date"].startswith("2027-03-01")


def test_unknown_observability_or_brightness_is_not_ranked():
    """B12: a system whose next image has no site or no magnitude is not ranked."""
    from lensdelay.cli.batch import summary_row

    image = {"family": "sn", "label": "B", "status": "future",
             "date": dict.fromkeys(("median", "p16", "p84", "p2.5", "p97.5"), "2027-01-01"),
             "delay_days": {"median": 20.0}}
    assert summary_row("s", {"images": [image]})["triage"] == "observability unknown"
    seen = dict(image, observability={"probability_observable": 0.9})
    assert summary_row("s", {"images": [seen]})["triage"] == "brightness unknown"


# -- report: one system per page, damaged values, --out (R1-R3) --------------------------
def test_report_refuses_outputs_of_two_systems(tmp_path, capsys):
    folder = tmp_path / "mix"
    folder.mkdir()
    for job, path in (("forecast", "a.toml"), ("fit", "b.toml")):
        prov = {"version": "x", "input_files": [{"path": path, "sha256": path * 8}]}
        doc = {"provenance": prov} if job == "forecast" else prov
        (folder / f"{job}.json").write_text(json.dumps(doc))
    from lensdelay.io.report_inputs import _check_same_system

    docs = {j: json.loads((folder / f"{j}.json").read_text()) for j in ("forecast", "fit")}
    with pytest.raises(InputError, match="must hold the outputs of one system"):
        _check_same_system(docs, folder)


@pytest.mark.parametrize(
    "target, expected",
    [("file/report.html", "must be in an existing folder"), ("dir", "must be a file name")],
)
def test_report_out_is_checked_first(tmp_path, capsys, target, expected):
    (tmp_path / "file").write_text("x")
    (tmp_path / "dir").mkdir()
    err = one_line_exit_2(capsys, ["report", str(tmp_path), "--out", str(tmp_path / target)])
    assert expected in err


# -- units and formats of tables (D1-D6, C3-C5) -----------------------------------------
def _curves(tmp_path, name, **columns):
    path = tmp_path / name
    Table(columns).write(path, format="ascii.ecsv" if name.endswith("ecsv") else "ascii.csv")
    return path


def _quasar_columns(n=40):
    rng = np.random.default_rng(1)
    t = np.arange(n) * 3.0 + 58000.0
    return {
        "image": np.repeat(["A", "B"], n),
        "time": np.concatenate([t, t]),
        "mag": 18 + 0.1 * rng.standard_normal(2 * n),
        "mag_err": np.full(2 * n, 0.02),
    }


@pytest.mark.parametrize("unit, factor", [(u.yr, 1 / 365.25), (u.s, 86400.0), (u.h, 24.0)])
def test_time_units_are_honoured(tmp_path, unit, factor):
    cols = _quasar_columns()
    t = Table(cols)
    t["time"] = t["time"] * factor * unit
    path = tmp_path / "c.ecsv"
    t.write(path, format="ascii.ecsv")
    assert np.allclose(read_light_curves(path).time, cols["time"], rtol=0, atol=1e-6)


def test_mag_err_in_mmag_and_a_time_column_are_read(tmp_path):
    cols = _quasar_columns()
    t = Table(cols)
    t["mag_err"] = t["mag_err"] * 1000 * u.mmag
    t["time"] = Time(cols["time"], format="mjd", scale="tdb")
    path = tmp_path / "c.ecsv"
    t.write(path, format="ascii.ecsv")
    lc = read_light_curves(path)
    assert np.allclose(lc.mag_err, 0.02)
    # TDB - UTC is 69.184 s in 2017-2018 (37 leap seconds + 32.184 s: common practice)
    assert np.allclose((cols["time"] - lc.time) * 86400.0, 69.184, atol=0.01)


def test_a_unit_that_does_not_convert_is_refused(tmp_path):
    t = Table(_quasar_columns())
    t["time"] = t["time"] * u.m
    path = tmp_path / "c.ecsv"
    t.write(path, format="ascii.ecsv")
    with pytest.raises(InputError, match="column 'time' must have a unit convertible to d"):
        read_light_curves(path)


def test_dates_with_utc_offsets_are_converted(tmp_path):
    cols = _quasar_columns()
    iso = Time(cols["time"], format="mjd", scale="utc").isot
    dates = [s + "+05:00" for s in iso]
    path = _curves(tmp_path, "c.csv", image=cols["image"], date=dates, mag=cols["mag"],
                   mag_err=cols["mag_err"])
    assert np.allclose(read_light_curves(path).time, cols["time"] - 5 / 24, atol=1e-6)


def test_upper_limits_need_no_error_and_may_have_negative_flux(tmp_path):
    cols = _quasar_columns()
    flux = 10 ** (-0.4 * (cols["mag"] - 25))
    flux_err = flux * 0.02
    limit = np.zeros(len(flux), dtype=bool)
    limit[3] = True
    flux[3], flux_err[3] = -3.0, 0.0
    path = _curves(tmp_path, "c.csv", image=cols["image"], time=cols["time"], flux=flux,
                   flux_err=flux_err, upper_limit=limit)
    lc = read_light_curves(path)
    assert lc.upper_limit.sum() == 1 and np.isfinite(lc.mag[~lc.upper_limit]).all()


def _members_scenario(tmp_path, table: str, suffix="csv"):
    (tmp_path / f"m.{suffix}").write_text(table)
    shutil.copytree(ROOT / "models", tmp_path / "models", dirs_exist_ok=True)
    text = QUAD.read_text()
    text += (
        f"\n[members]\ncatalogue = \"m.{suffix}\"\nreference_mag = 19.0\n"
        "einstein_radius = 0.1\ncut = 5.0\n"
    )
    path = tmp_path / "s.toml"
    path.write_text(text)
    return path


def test_duplicate_member_ids_are_refused(tmp_path):
    path = _members_scenario(tmp_path, "id,x,y,mag\ng1,4,3,20\ng1,4,3,20\n")
    with pytest.raises(InputError, match="column 'id' must name each member once"):
        load_scenario(path)


def test_member_ids_of_a_csv_stay_text(tmp_path):
    path = _members_scenario(tmp_path, "id,x,y,mag\n1,4,3,20\n01,-5,2,21\n")
    (tmp_path / "s.toml").write_text(
        (tmp_path / "s.toml").read_text().replace("cut = 5.0", 'cut = 5.0\nexclude = ["1"]')
    )
    sc, _ = load_scenario(path)
    assert sc.model.members.ids == ("01",)


def test_member_positions_in_arcmin_are_converted(tmp_path):
    table = (
        "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: id, datatype: string}\n"
        "# - {name: x, unit: arcmin, datatype: float64}\n"
        "# - {name: y, unit: arcmin, datatype: float64}\n# - {name: mag, datatype: float64}\n"
        "id x y mag\ng1 0.1 0.05 20.5\n"
    )
    sc, _ = load_scenario(_members_scenario(tmp_path, table, "ecsv"))
    members = sc.model.members
    assert members.x[0] == pytest.approx(6.0) and members.y[0] == pytest.approx(3.0)


@pytest.mark.parametrize(
    "redshift, expected",
    [
        ("{ value = 2.4, min = 2.4, max = 2.4 }", "max must exceed min by more than 0.001"),
        ("{ prior = [2.4, 0.1] }", "must give min and max"),
    ],
)
def test_degenerate_free_redshifts_are_one_line(tmp_path, redshift, expected):
    text = QUAD.read_text().replace("redshift = 1.42", f"redshift = {redshift}", 1)
    text = text.replace("[lens]", "[lens]\nreference_source_redshift = 1.42", 1)
    path = tmp_path / "s.toml"
    path.write_text(text)
    with pytest.raises(InputError, match=expected.replace("(", r"\(")):
        load_scenario(path)


@pytest.mark.parametrize("label", ["C{2}", 'C"2', "C\n2"])
def test_labels_every_output_cannot_carry_are_refused(tmp_path, label):
    path = tmp_path / "s.toml"
    shutil.copytree(ROOT / "models", tmp_path / "models")
    # json.dumps gives a valid TOML basic string (escaped quote and line break)
    path.write_text(QUAD.read_text().replace('label = "C"', f"label = {json.dumps(label)}", 1))
    with pytest.raises(InputError, match="must not contain braces"):
        load_scenario(path)


# -- delays.json read strictly (E1-E10) ---------------------------------------------------
def _delays_doc(**change):
    doc = {
        "reference_image": "B",
        "family": "sn",
        "images": [
            {"label": "B", "delay_days": dict.fromkeys(("median", "p16", "p84"), 0.0)},
            {"label": "D", "delay_days": {"median": 10.0, "p16": 9.5, "p84": 10.5}},
        ],
    }
    doc.update(change)
    return doc


@pytest.mark.parametrize(
    "change, expected",
    [
        ({"images": {"B": 0}}, "images must be a list of objects"),
        ({"images": ["B", "D"]}, "images must be a list of objects"),
        ({"reference_image": "Z"}, "reference_image must be an image of family sn"),
        ({"images": [{"label": "D", "delay_days": {"median": float("nan"), "p16": 9, "p84": 11}}]},
         "must hold finite numbers"),
        ({"images": [{"label": "D", "delay_days": {"median": 10, "p16": 10, "p84": 10}}]},
         "an interval of positive width"),
        ({"images": [{"label": "D", "delay_days": {"median": 10, "p16": 11, "p84": 9}}]},
         "an interval of positive width"),
        ({"images": [{"label": "D", "delay_days": {"median": 10, "p16": 9, "p84": 11}},
                     {"label": "D", "delay_days": {"median": 30, "p16": 29, "p84": 31}}]},
         "list each image once"),
        ({"covariance_days2": {"labels": ["D"], "matrix": [[-0.25]]}}, "variances must be > 0"),
        ({"covariance_days2": {"labels": ["C", "D"], "matrix": [[1, 0.2], [0.1, 1]]}},
         "must be symmetric"),
    ],
)
def test_bad_delays_json_is_one_line(tmp_path, change, expected):
    path = tmp_path / "delays.json"
    path.write_text(json.dumps(_delays_doc(**change)))
    sc, _ = load_scenario(QUAD)
    with pytest.raises(InputError, match=expected):
        read_delays_json(path, sc)


def test_a_covariance_unlike_the_quantiles_is_warned(tmp_path):
    path = tmp_path / "delays.json"
    path.write_text(
        json.dumps(_delays_doc(covariance_days2={"labels": ["D"], "matrix": [[25.0]]}))
    )
    sc, _ = load_scenario(QUAD)
    with pytest.warns(LensdelayWarning, match="the covariance is used"):
        delays, cov = read_delays_json(path, sc)
    assert cov[0, 0] == 25.0


def test_the_same_pair_in_the_scenario_and_in_delays_json_is_refused(tmp_path):
    from lensdelay.api import _with_light_curve_delays

    doc = _delays_doc()
    doc["reference_image"] = "A"
    doc["images"] = [{"label": "B", "delay_days": {"median": 26.8, "p16": 26.3, "p84": 27.3}}]
    doc["family"] = "qso"
    path = tmp_path / "delays.json"
    path.write_text(json.dumps(doc))
    sc, used = load_scenario(ROOT / "scenarios" / "ostrin_double.toml")
    with pytest.raises(InputError, match="must be given once"):
        _with_light_curve_delays(sc, used, path)


# -- delays that are not measurements (D12-D15) -------------------------------------------
def test_chain_verdicts_tell_converged_from_not():
    rng = np.random.default_rng(2)
    steps, walkers = 400, 32
    # stationary and well mixed: AR(1) walkers around one value (τ ≈ 10 steps)
    x = np.zeros((steps, walkers))
    for k in range(1, steps):
        x[k] = 0.8 * x[k - 1] + 0.6 * rng.standard_normal(walkers)
    good = x[:, :, None]
    # walkers stuck in two places
    stuck = good + np.where(np.arange(walkers) < walkers // 2, 0.0, 5.0)[None, :, None]
    # an ensemble diffusing out from a small ball (a flat posterior): spread still growing
    widening = np.cumsum(0.05 * rng.standard_normal((steps, walkers)), axis=0)[:, :, None]
    verdicts = chain_verdicts(np.concatenate([good, stuck, widening], axis=2), steps, walkers)
    assert verdicts[0] == ""
    assert "walkers disagree" in verdicts[1] and "--steps" in verdicts[1]
    assert "not converge" in verdicts[2]


def test_cadence_is_per_band():
    """D15: three bands minutes apart each visit are one visit every 2.5 days."""
    from lensdelay.lightcurves.curves import LightCurves

    t = np.repeat(np.arange(30) * 2.5, 3) + np.tile([0.0, 0.01, 0.02], 30)
    band = np.tile(["g", "r", "i"], 30)
    lc = LightCurves(np.full(90, "A"), t, np.full(90, 20.0), np.full(90, 0.02), band,
                     np.zeros(90, dtype=bool))
    assert lc.cadence() == pytest.approx(2.5)


@pytest.mark.parametrize("value", ["0", "-5"])
def test_max_delay_must_be_positive(tmp_path, capsys, value):
    path = _curves(tmp_path, "c.ecsv", **_quasar_columns())
    err = one_line_exit_2(capsys, ["delays", str(path), f"--max-delay={value}"])
    assert "max_delay must be a number of days > 0" in err


@pytest.mark.integration
def test_images_without_usable_data_are_listed_not_dropped(tmp_path):
    """D10/D11: an image seen only as limits, or only in another band, is listed."""
    from lensdelay.api import measure_delays

    cols = _quasar_columns(60)
    n = len(cols["time"]) // 2
    image = np.concatenate([cols["image"], np.full(n, "C")])
    time = np.concatenate([cols["time"], cols["time"][:n]])
    mag = np.concatenate([cols["mag"], np.full(n, 23.0)])
    err = np.concatenate([cols["mag_err"], np.full(n, 0.1)])
    limit = np.concatenate([np.zeros(2 * n, dtype=bool), np.ones(n, dtype=bool)])
    path = _curves(tmp_path, "c.csv", image=image, time=time, mag=mag, mag_err=err,
                   upper_limit=limit)
    res = measure_delays(curves=path, kind="quasar", steps=200, walkers=16, simulations=0)
    c = res.image("C")
    assert not c.measurable and "only upper limits" in c.statement
    assert [im["label"] for im in res.as_dict()["images"]] == ["A", "B", "C"]


# -- memory: posterior maps streamed over pixel blocks (R7) -------------------------------
@pytest.mark.integration
def test_posterior_maps_do_not_depend_on_the_block_size(monkeypatch):
    from lensdelay.api import fit_scenario
    from lensdelay.inference import maps

    fitted = fit_scenario(QUAD, sample=True, seed=2, **FAST)
    rows = fitted.chain.samples()[:60]
    args = dict(size=2.0, pixel=0.2, family="sn", reference="B", rows=rows)
    whole = maps.fitted_maps(fitted.likelihood, fitted.fit.values, **args)
    monkeypatch.setattr(maps, "BLOCK_VALUES", 7 * len(rows))  # 7 pixels at a time
    blocks = maps.fitted_maps(fitted.likelihood, fitted.fit.values, **args)
    for key in whole.median:
        assert np.array_equal(whole.median[key], blocks.median[key], equal_nan=True)
        assert np.array_equal(whole.spread[key], blocks.spread[key], equal_nan=True)


# -- figures: labels of crowded images (the cluster finder chart) -------------------------
def test_finder_labels_do_not_overlap_on_a_crowded_field():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from lensdelay.report.finder import _overlap, _place_labels

    fig = Figure(figsize=(6, 6))
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.set_xlim(-60, 60)
    ax.set_ylim(-60, 60)
    # five images within a few arcseconds on a two-arcminute field
    xy = [(0.0, 0.0), (2.0, 1.0), (-1.5, 2.5), (1.0, -2.0), (3.0, 3.0)]
    labels = [(x, y, f"X{k}: 2043-05-01..2047-11-30") for k, (x, y) in enumerate(xy)]
    _place_labels(fig, ax, labels)
    renderer = fig.canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in ax.texts]
    assert len(boxes) == len(labels)
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert _overlap(boxes[i], boxes[j]) == 0.0
