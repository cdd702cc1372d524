"""Delays from light curves (issue 15): the models against independent computations,
recovery of known delays, honest failure, bad input, and the flow into the timing model."""

import json

import numpy as np
import pytest
from scipy import stats

from lensdelay.cli.main import main
from lensdelay.errors import InputError
from lensdelay.inference.timing import TimingData
from lensdelay.lightcurves.curves import LightCurves
from lensdelay.lightcurves.measure import dispersion_delay, measure_delays
from lensdelay.lightcurves.quasar import OFFSET_PRIOR_MAG, TREND_PRIOR_MAG, QuasarDelayModel
from lensdelay.lightcurves.simulate import (
    damped_random_walk,
    seasonal_epochs,
    simulate_quasar,
    simulate_supernova,
)
from lensdelay.model.scenario import MeasuredDelay


def test_damped_random_walk_has_its_variance_and_correlation(rng):
    """Var = σ² and corr(Δt = τ) = e⁻¹ (Kelly, Bechtold & Siemiginowska 2009, eq. 1-3)."""
    sigma, tau = 0.2, 50.0
    t = np.arange(0, 200_000, 5.0)
    x = damped_random_walk(t, sigma, tau, rng)
    assert np.var(x) == pytest.approx(sigma**2, rel=0.05)
    lag = int(tau / 5.0)
    assert np.corrcoef(x[:-lag], x[lag:])[0, 1] == pytest.approx(np.exp(-1), abs=0.02)


def _small_pair(rng, delay=7.0, n=25):
    t = np.sort(rng.uniform(0, 120, n))
    curves = simulate_quasar(
        {"A": t, "B": t},
        {"A": 0.0, "B": delay},
        0.2,
        40.0,
        {"A": 0.02, "B": 0.03},
        {"B": (0.3, 0.05)},
        rng,
    )
    return curves


@pytest.mark.parametrize("order", [0, 1, 2])
def test_quasar_likelihood_is_the_dense_gaussian(rng, order):
    """The celerite2 + Woodbury marginal likelihood equals the multivariate normal of the
    data with the full covariance K_DRW + diag(σ²) + X Λ Xᵀ built densely (scipy)."""
    curves = _small_pair(rng)
    model = QuasarDelayModel(curves, "A", order=order)
    delay, ln_sigma, ln_tau = 6.3, np.log(0.18), np.log(35.0)
    shift = np.where(curves.image == "B", delay, 0.0)
    ts = curves.time - shift
    k = np.exp(2 * ln_sigma) * np.exp(-np.abs(ts[:, None] - ts[None, :]) / np.exp(ln_tau))
    lam = np.diag(model.prior_variances)
    cov = k + np.diag(curves.mag_err**2) + model.design @ lam @ model.design.T
    dense = stats.multivariate_normal(np.zeros(len(ts)), cov).logpdf(curves.mag)
    assert model.log_likelihood([delay], ln_sigma, ln_tau) == pytest.approx(dense, rel=1e-9)
    assert model.prior_variances[0] == OFFSET_PRIOR_MAG**2
    if order:
        assert model.prior_variances[1] == TREND_PRIOR_MAG**2


def test_dispersion_cross_check_finds_a_noiseless_shift():
    t = np.arange(0, 300, 2.0)
    signal = lambda x: 0.3 * np.sin(x / 17.0) + 0.1 * np.sin(x / 5.3)  # noqa: E731
    shift = 12.0
    curves = LightCurves(
        np.array(["A"] * len(t) + ["B"] * len(t)),
        np.concatenate([t, t]),
        np.concatenate([signal(t), signal(t - shift) + 0.5]),
        np.full(2 * len(t), 0.01),
        np.full(2 * len(t), ""),
        np.zeros(2 * len(t), dtype=bool),
    )
    grid = np.arange(-40, 40.01, 0.5)
    assert dispersion_delay(curves, "A", "B", grid, window=2.0) == pytest.approx(shift, abs=0.5)


@pytest.mark.integration
def test_quasar_delays_recovered_with_their_covariance(rng):
    """Three images, three seasons: every true delay inside its 95% interval; the
    covariance's diagonal is the samples' variance."""
    epochs = seasonal_epochs(58000, 3, 200, 4.0, rng)
    truth = {"A": 0.0, "B": 22.0, "C": -9.0}
    curves = simulate_quasar(
        {lab: epochs for lab in truth},
        truth,
        0.15,
        120.0,
        {lab: 0.02 for lab in truth},
        {"B": (0.2, 0.04, -0.02), "C": (-0.1, 0.0, 0.03)},
        rng,
    )
    res = measure_delays(curves, "A", kind="quasar", steps=600, simulations=0, seed=2)
    for im in res.images:
        d = im.delay_days
        assert im.measurable and d["p2.5"] <= truth[im.label] <= d["p97.5"]
        assert abs(d["median"] - truth[im.label]) < 3.0
    # flux ratios from the magnitude offsets at the middle of the data (the trends' c0)
    for im, c0 in zip(res.images, (0.2, -0.1)):
        r = im.flux_ratio
        assert r["p2.5"] <= 10 ** (-0.4 * c0) <= r["p97.5"]
    assert res.covariance_labels == ("B", "C")
    np.testing.assert_allclose(
        np.diag(res.covariance_days2), np.var(res.samples, axis=0, ddof=1), rtol=1e-9
    )
    assert res.goodness["dof"] > 0 and 0.0 <= res.goodness["p_value"] <= 1.0


@pytest.mark.integration
def test_supernova_delay_and_flux_ratio_recovered(rng):
    epochs = np.arange(60000, 60110, 2.5)
    curves = simulate_supernova(
        {(lab, b): epochs for lab in "AB" for b in ("g", "r")},
        {"A": 0.0, "B": 11.0},
        {"g": (900.0, 60012.0, 3.0, 15.0), "r": (1100.0, 60014.0, 4.0, 25.0)},
        {("A", "g"): 1.0, ("A", "r"): 1.0, ("B", "g"): 0.5, ("B", "r"): 0.52},
        0.02,
        rng,
        floor_flux=4.0,
    )
    res = measure_delays(curves, "A", steps=1000, simulations=3, seed=3)
    b = res.image("B")
    assert res.kind == "supernova"
    assert b.delay_days["p2.5"] <= 11.0 <= b.delay_days["p97.5"]
    assert b.flux_ratio["p2.5"] <= 0.51 <= b.flux_ratio["p97.5"]
    assert b.simulation_spread_days is not None and b.simulation_spread_days > 0


@pytest.mark.integration
def test_delay_longer_than_the_data_is_not_reported(rng):
    """Curves that cannot overlap (a delay beyond the data span): no number, a statement."""
    epochs = np.arange(58000, 58150, 3.0)
    curves = simulate_quasar(
        {"A": epochs, "B": epochs},
        {"A": 0.0, "B": 400.0},
        0.2,
        60.0,
        {"A": 0.02, "B": 0.02},
        {},
        rng,
    )
    res = measure_delays(curves, "A", kind="quasar", order=0, steps=400, simulations=0)
    b = res.image("B")
    assert not b.measurable and b.delay_days is None
    assert "not measurable from these data" in b.statement
    doc = res.as_dict()
    assert doc["images"][1]["delay_days"] is None


def test_correlated_delays_enter_the_timing_likelihood_as_one_gaussian():
    """TimingData with a delay covariance: log-likelihood = the bivariate normal (scipy)."""
    delays = [MeasuredDelay("q", "B", "A", 10.0, 1.0), MeasuredDelay("q", "C", "A", 25.0, 2.0)]
    cov = np.array([[1.0, 1.2], [1.2, 4.0]])
    timing = TimingData([("q", "A"), ("q", "B"), ("q", "C")], delays, delay_covariance=cov)
    arrival = np.array([[0.0, 11.0, 23.0]])
    expected = stats.multivariate_normal([10.0, 25.0], cov).logpdf([11.0, 23.0])
    const = -0.5 * np.log(np.linalg.det(2 * np.pi * cov))
    assert timing.log_likelihood(arrival)[0] + const == pytest.approx(expected, rel=1e-10)


def _curves_file(tmp_path, rows, header="image,time,mag,mag_err"):
    path = tmp_path / "curves.csv"
    path.write_text(header + "\n" + "\n".join(rows) + "\n")
    return path


GOOD = ["A,58000,19.0,0.02", "A,58003,19.1,0.02", "B,58000,19.5,0.02", "B,58004,19.4,0.02"]


@pytest.mark.parametrize(
    "rows, header, message",
    [
        (GOOD[:2], "image,time,mag,mag_err", "at least two images"),
        ([r.rsplit(",", 1)[0] for r in GOOD], "image,time,mag", "needs a column 'mag_err'"),
        (GOOD, "image,when,mag,mag_err", "needs a column 'time'"),
        (
            ["A,58003,19.0,0.02", "A,58000,19.1,0.02", *GOOD[2:]],
            None,
            "must increase within image A",
        ),
        (["A,58000,nan,0.02", *GOOD[1:]], None, "must hold finite numbers"),
        ([*GOOD, "Z,58010,19.2,0.02"], None, "'Z'"),
        (["A,58000,19.0,0", *GOOD[1:]], None, "'mag_err' must be > 0"),
    ],
)
def test_bad_light_curves_refused_in_one_line(tmp_path, capsys, rows, header, message):
    _curves_file(tmp_path, rows, header or "image,time,mag,mag_err")
    scenario = tmp_path / "s.toml"
    scenario.write_text(
        '[lens]\nredshift = 0.5\n[[family]]\nlabel = "q"\nredshift = 2.0\n'
        '[[family.image]]\nlabel = "A"\nx = 1.0\ny = 0.0\nsigma = 0.01\n'
        '[[family.image]]\nlabel = "B"\nx = -0.8\ny = 0.1\nsigma = 0.01\n'
        '[transient]\nfamily = "q"\nseen_in = "A"\ndate = "2027-01-01"\n'
        'light_curves = "curves.csv"\n'
        '[[mass]]\nprofile = "SIS"\neinstein_radius = { value = 0.9, min = 0.1, max = 3.0 }\n'
    )
    out = tmp_path / "out"
    assert main(["delays", str(scenario), "--out", str(out), "--steps", "100"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0] and "curves.csv" in err[0]
    assert not out.exists()


@pytest.mark.integration
def test_delays_json_feeds_the_forecast_with_its_covariance(tmp_path, rng):
    """lensdelay delays writes delays.json (CONVENTIONS.md keys); forecast --delays reads
    it: the measured delay and its covariance enter the timing data."""
    epochs = seasonal_epochs(58000, 2, 200, 3.0, rng)
    curves = simulate_quasar(
        {"A": epochs, "B": epochs},
        {"A": 0.0, "B": 30.0},
        0.2,
        100.0,
        {"A": 0.02, "B": 0.02},
        {"B": (0.4,)},
        rng,
    )
    path = tmp_path / "curves.ecsv"
    from astropy.table import Table

    Table(
        {"image": curves.image, "time": curves.time, "mag": curves.mag, "mag_err": curves.mag_err}
    ).write(path, format="ascii.ecsv")
    out = tmp_path / "out"
    args = ["delays", str(path), "--kind", "quasar", "--steps", "300", "--simulations", "2"]
    assert main([*args, "--out", str(out)]) == 0
    doc = json.loads((out / "delays.json").read_text())
    assert doc["reference_image"] == "A"
    assert [im["label"] for im in doc["images"]] == ["A", "B"]
    assert set(doc["images"][1]["delay_days"]) == {"median", "p16", "p84", "p2.5", "p97.5"}
    assert doc["covariance_days2"]["labels"] == ["B"]
    assert (out / "light_curves.png").stat().st_size > 10_000

    from lensdelay.api import _with_light_curve_delays, load_scenario

    from dataclasses import replace

    # the demo double without its own measured B - A (the same pair twice is refused)
    sc = replace(load_scenario("scenarios/ostrin_double.toml"), delays=(), delay_covariance=None)
    sc2, used, notes = _with_light_curve_delays(sc, [], out / "delays.json")
    assert len(sc2.delays) == len(sc.delays) + 1
    new = sc2.delays[-1]
    assert (new.image, new.relative_to) == ("B", "A")
    assert new.days == pytest.approx(doc["images"][1]["delay_days"]["median"])
    assert sc2.delay_covariance[-1, -1] == pytest.approx(doc["covariance_days2"]["matrix"][0][0])


@pytest.mark.integration
def test_instrument_offsets_are_fitted(rng):
    """Two instruments whose zero points differ by 0.3 mag, switching mid-campaign (as
    monitoring programmes merge telescopes): with the `instrument` column the quasar model
    fits an offset per image and instrument and recovers the delay; the note says so."""
    from dataclasses import replace

    from lensdelay.lightcurves.measure import measure_delays

    epochs = seasonal_epochs(58000, 3, 200, 3.0, rng)
    curves = simulate_quasar(
        {"A": epochs, "B": epochs}, {"A": 0.0, "B": 25.0}, 0.2, 100.0,
        {"A": 0.02, "B": 0.02}, {"B": (0.4,)}, rng,
    )
    second = curves.time > np.median(curves.time)  # the second instrument takes over
    shifted = replace(curves, mag=curves.mag + 0.3 * second,
                      instrument=np.where(second, "cam2", "cam1"))
    res = measure_delays(shifted, "A", kind="quasar", steps=400, walkers=24, simulations=0)
    b = res.image("B")
    assert b.measurable, b.statement
    assert b.delay_days["p2.5"] <= 25.0 <= b.delay_days["p97.5"]
    assert any("instrument offset(s) fitted" in n for n in res.notes)


def test_supernova_curves_mixing_instruments_in_a_band_are_refused():
    from lensdelay.lightcurves.measure import _one_instrument_per_image

    t = np.arange(10.0)
    lc = LightCurves(np.repeat(["A", "B"], 5), t, np.full(10, 20.0), np.full(10, 0.05),
                     np.full(10, "g"), np.zeros(10, dtype=bool), "sn.csv",
                     np.array(["x", "y"] * 5))
    with pytest.raises(InputError, match="one instrument per image and band"):
        _one_instrument_per_image(lc)
