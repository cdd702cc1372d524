"""The global delay search (issue 26): its pieces against independent computations, and
its answers on curves built outside its own model.

Check values: the multivariate normal density (scipy.stats), the Matérn-3/2 covariance
(Rasmussen & Williams 2006, eq. 4.17), the B-splines' partition of unity (de Boor 1978,
ch. IX), and delays put into simulated curves by the tests themselves.
"""

import numpy as np
import pytest
from scipy import stats

from lensdelay.errors import InputError
from lensdelay.lightcurves.curves import LightCurves
from lensdelay.lightcurves.extrinsic import Extrinsic
from lensdelay.lightcurves.measure import measure_delays
from lensdelay.lightcurves.quasar import QuasarDelayModel
from lensdelay.lightcurves.search import (
    PairScan,
    admitted,
    overlap_counts,
    season_length,
)
from lensdelay.lightcurves.simulate import (
    damped_random_walk,
    matern32_process,
    seasonal_epochs,
    simulate_quasar,
    smooth_drift,
)

FAMILIES = [
    Extrinsic("polynomial", 2.0, 0.5),
    Extrinsic("spline", 40.0, 0.2),
    Extrinsic("slow-gp", 60.0, 0.3),
]


def _two_band_pair(rng, n=30):
    t = np.sort(rng.uniform(0, 150, n))
    rows = []
    for band in ("g", "r"):
        c = simulate_quasar(
            {"A": t, "B": t},
            {"A": 0.0, "B": 9.0},
            0.2,
            40.0,
            {"A": 0.02, "B": 0.03},
            {"B": (0.3, 0.05)},
            rng,
        )
        rows.append((c, band))
    return LightCurves(
        np.concatenate([c.image for c, _ in rows]),
        np.concatenate([c.time for c, _ in rows]),
        np.concatenate([c.mag for c, _ in rows]),
        np.concatenate([c.mag_err for c, _ in rows]),
        np.concatenate([np.full(len(c.time), b) for c, b in rows]),
        np.zeros(sum(len(c.time) for c, _ in rows), dtype=bool),
    )


@pytest.mark.parametrize("extrinsic", FAMILIES, ids=lambda e: e.family)
def test_likelihood_is_the_dense_gaussian_in_two_bands(rng, extrinsic):
    """celerite2 + Woodbury = the multivariate normal with the dense covariance: a DRW per
    band (independent bands), the errors times each image's factor, and X Λ Xᵀ of the
    offsets and extrinsic columns (scipy.stats.multivariate_normal)."""
    curves = _two_band_pair(rng)
    model = QuasarDelayModel(curves, "A", extrinsic=extrinsic)
    model.set_error_scale([1.0, 1.7])
    delay, ln_sigma, ln_tau = 8.4, np.log(0.18), np.log(35.0)
    ts = curves.time - np.where(curves.image == "B", delay, 0.0)
    same_band = curves.band[:, None] == curves.band[None, :]
    k = np.exp(2 * ln_sigma) * np.exp(-np.abs(ts[:, None] - ts[None, :]) / np.exp(ln_tau))
    err = curves.mag_err * np.where(curves.image == "B", 1.7, 1.0)
    cov = k * same_band + np.diag(err**2)
    cov += model.design @ np.diag(model.prior_variances) @ model.design.T
    dense = stats.multivariate_normal(np.zeros(len(ts)), cov).logpdf(curves.mag)
    assert model.log_likelihood([delay], ln_sigma, ln_tau) == pytest.approx(dense, rel=1e-9)


def test_slow_process_columns_reproduce_the_matern_covariance():
    """Φ Φᵀ (amplitude 1) equals the Matérn-3/2 covariance (R&W 2006, eq. 4.17) to 1%
    of its variance: the inducing times every ℓ/4 lose almost nothing."""
    t = np.linspace(0, 900, 200)
    phi = Extrinsic("slow-gp", 200.0, 1.0).columns(t, 0.0, 900.0)
    r = np.sqrt(3) * np.abs(t[:, None] - t[None, :]) / 200.0
    exact = (1 + r) * np.exp(-r)
    assert np.max(np.abs(phi @ phi.T - exact)) < 0.01


def test_spline_columns_span_a_smooth_curve_and_not_the_constant():
    """B-splines sum to one (de Boor 1978): after centring no combination is a constant
    offset; a smooth curve is fitted to 1e-3 mag by the columns plus a constant."""
    t = np.linspace(0, 1000, 300)
    phi = Extrinsic("spline", 100.0, 1.0).columns(t, 0.0, 1000.0)
    curve = 0.2 * np.sin(t / 150.0)
    x = np.column_stack([np.ones_like(t), phi])
    coef = np.linalg.lstsq(x, curve, rcond=None)[0]
    assert np.max(np.abs(x @ coef - curve)) < 1e-3
    assert np.allclose(phi.sum(axis=1), 0.0, atol=1e-12)


@pytest.mark.parametrize(
    "family, scale, amplitude, why",
    [
        ("kepler", 1.0, 1.0, "must be one of"),
        ("polynomial", 7.0, 1.0, "order must be 0 to 5"),
        ("spline", 0.0, 1.0, "must be > 0 days"),
        ("slow-gp", 50.0, -1.0, "amplitude must be > 0"),
    ],
)
def test_bad_extrinsic_models_refused(family, scale, amplitude, why):
    with pytest.raises(InputError, match=why):
        Extrinsic(family, scale, amplitude)


def test_overlap_counts_and_the_admitted_delays():
    """Two identical 100-day curves, one point a day: moved by 30 d, 70 of B's points lie
    within a day of A's (counted by hand); moved by 60 d, 40 — below half of 100."""
    t = np.arange(100.0)
    assert overlap_counts(t, t, np.array([30.0, 60.0]), 0.5).tolist() == [70, 40]

    class Model:  # the two attributes admitted() reads
        which = np.repeat([0, 1], 100)

    Model.t = np.concatenate([t, t])
    assert admitted(Model, 1, np.array([0.0, 30.0, 49.0, 51.0, 60.0]), 0.5).tolist() == [
        True,
        True,
        True,
        False,
        False,
    ]


def test_pair_scan_density_draws_and_peak(rng):
    """A Gaussian log-posterior on an uneven grid: density integrates to 1, draws have its
    mean and sd, the parabola peak is exact (a quadratic log-density)."""
    grid = np.concatenate([np.arange(-20, -2, 1.0), np.arange(-2, 6, 0.1), np.arange(6, 20, 1.0)])
    lp = -0.5 * ((grid - 1.23) / 0.8) ** 2
    scan = PairScan(grid, lp, 0.0)
    widths = np.gradient(grid)
    assert np.sum(scan.density() * widths) == pytest.approx(1.0, rel=0.02)
    x = scan.draw(40_000, rng)
    assert np.mean(x) == pytest.approx(1.23, abs=0.02)
    assert np.std(x) == pytest.approx(0.8, rel=0.03)
    assert scan.peak() == pytest.approx(1.23, abs=1e-6)


def test_season_length_of_seasonal_epochs(rng):
    epochs = seasonal_epochs(58000, 4, 200, 3.0, rng)
    assert season_length(epochs) == pytest.approx(200, abs=5)


def test_error_factor_fitted_where_errors_are_understated(rng):
    """Curves scattered by twice their stated errors: the fitted factor is near 2 for that
    image and near 1 for the honest one."""
    t = seasonal_epochs(58000, 3, 200, 3.0, rng)
    curves = simulate_quasar(
        {"A": t, "B": t},
        {"A": 0.0, "B": 20.0},
        0.15,
        100.0,
        {"A": 0.02, "B": 0.04},
        {},
        rng,
    )
    stated = np.where(curves.image == "B", 0.02, 0.02)
    from dataclasses import replace

    model = QuasarDelayModel(replace(curves, mag_err=stated), "A", order=0)
    _, _, scales = model.fit_noise()
    assert scales[0] == pytest.approx(1.0, abs=0.15)
    assert scales[1] == pytest.approx(2.0, rel=0.15)


def test_other_families_have_their_stated_rms(rng):
    """The error budget's processes: Matérn-3/2 variance σ², the drift's rms ≈ amplitude."""
    t = np.linspace(0, 5000, 1500)
    m = np.concatenate([matern32_process(t, 0.3, 50.0, rng) for _ in range(20)])
    assert np.std(m) == pytest.approx(0.3, rel=0.1)
    d = smooth_drift(t, 0.1, 400.0, rng)
    assert np.std(d) == pytest.approx(0.1, rel=0.3)


def _mismatched_pair(rng, delay=-15.0):
    """A DRW quasar whose images carry microlensing *not* of the fitted families: a slow
    random walk of its own (0.15 mag over ~2 yr) and a drift, four seasons."""
    t = seasonal_epochs(58000, 4, 200, 4.0, rng)
    src = np.concatenate([t, t - delay])
    intrinsic = damped_random_walk(src, 0.25, 150.0, rng)
    err = 0.02
    mag = intrinsic + err * rng.standard_normal(len(src))
    mag[: len(t)] += damped_random_walk(t, 0.15, 700.0, rng)
    mag[len(t) :] += smooth_drift(t, 0.15, 500.0, rng) + 0.4
    n = len(src)
    return LightCurves(
        np.repeat(["A", "B"], len(t)),
        np.concatenate([t, t]),
        mag,
        np.full(n, err),
        np.full(n, ""),
        np.zeros(n, dtype=bool),
        "mismatched",
    )


@pytest.mark.integration
def test_a_pair_with_foreign_microlensing_does_not_run_off(rng):
    """The failure of issue 26: curves pushed apart until they no longer overlap. Here the
    microlensing is of families the model does not fit, the search is the default
    (±0.8 of the span): the delay comes out near the truth, its 95% interval holds it."""
    curves = _mismatched_pair(rng)
    res = measure_delays(curves, "A", kind="quasar", simulations=2, seed=3)
    b = res.image("B")
    assert b.measurable, b.statement
    assert b.delay_days["p2.5"] <= -15.0 <= b.delay_days["p97.5"]
    assert abs(b.delay_days["median"] + 15.0) < 5.0
    assert len(res.settings["models"]) == 9  # the models compared (search.extrinsic_models)


@pytest.mark.integration
def test_two_bands_are_both_used(rng):
    """A second band is used, not dropped: every row enters, and the note says so."""
    epochs = seasonal_epochs(58000, 2, 200, 4.0, rng)
    curves = [
        simulate_quasar(
            {"A": epochs, "B": epochs},
            {"A": 0.0, "B": 15.0},
            0.2,
            80.0,
            {"A": 0.02, "B": 0.02},
            {},
            rng,
        )
        for _ in range(2)
    ]
    two = LightCurves(
        np.concatenate([c.image for c in curves]),
        np.concatenate([c.time for c in curves]),
        np.concatenate([curves[0].mag, curves[1].mag + 0.3]),
        np.concatenate([c.mag_err for c in curves]),
        np.repeat(["r", "g"], len(curves[0].time)),
        np.zeros(2 * len(curves[0].time), dtype=bool),
    )
    res = measure_delays(two, "A", kind="quasar", simulations=0)
    assert len(res.curves.time) == len(two.time)
    assert any("all 2 bands used" in n for n in res.notes)
    b = res.image("B").delay_days
    assert b["p2.5"] <= 15.0 <= b["p97.5"]


def test_a_constant_curve_is_refused_in_one_line():
    t = np.arange(0.0, 100.0, 2.0)
    n = len(t)
    curves = LightCurves(
        np.repeat(["A", "B"], n),
        np.concatenate([t, t]),
        np.concatenate([np.sin(t / 9.0), np.full(n, 19.0)]),
        np.full(2 * n, 0.02),
        np.full(2 * n, ""),
        np.zeros(2 * n, dtype=bool),
        "flat.csv",
    )
    with pytest.raises(InputError, match="flat.csv.*column mag of image B must vary"):
        measure_delays(curves, "A", kind="quasar", simulations=0)


@pytest.mark.integration
def test_curves_that_never_overlap_give_no_number(rng):
    """B observed only after A's campaign ended (true delay 10 d): shifted by ~400 d the
    curves overlap in time but share no variability; no number, an honest statement."""
    ta = np.arange(58000.0, 58150.0, 3.0)
    tb = ta + 400.0
    c = simulate_quasar(
        {"A": ta, "B": tb}, {"A": 0.0, "B": 10.0}, 0.2, 60.0, {"A": 0.02, "B": 0.02}, {}, rng
    )
    res = measure_delays(c, "A", kind="quasar", simulations=0)
    b = res.image("B")
    assert not b.measurable and b.delay_days is None
    assert "no variability in common" in b.statement


def _three_season_pair(rng, delay, cadence=3.0):
    """A DRW quasar double (σ 0.2 mag, τ 100 d), three seasons at ``cadence`` days."""
    epochs = seasonal_epochs(58000, 3, 200, cadence, rng)
    return simulate_quasar(
        {"A": epochs, "B": epochs},
        {"A": 0.0, "B": delay},
        0.2,
        100.0,
        {"A": 0.02, "B": 0.02},
        {},
        rng,
    )


@pytest.mark.integration
def test_given_delay_ranges_are_a_prior_and_are_recorded(rng):
    c = _three_season_pair(rng, 25.0)
    res = measure_delays(c, "A", kind="quasar", simulations=0, delay_ranges={"B": (0.0, 60.0)})
    b = res.image("B").delay_days
    assert b["p2.5"] <= 25.0 <= b["p97.5"]
    assert any("within the given ranges" in n for n in res.notes)
    assert res.settings["delay_ranges"] == {"B": [0.0, 60.0]}
    with pytest.raises(InputError, match="delay_ranges must name images"):
        measure_delays(c, "A", kind="quasar", simulations=0, delay_ranges={"Q": (0, 1)})


def _pair(a, b, mean, sd, rng, why=""):
    from lensdelay.lightcurves.search import PairResult

    x = rng.normal(mean, sd, 20_000)
    return PairResult(a, b, x, x, mean, 0.0, 0.0, 0.0, 10.0, 1.0, {}, why)


def test_network_links_an_image_through_another_pair(rng):
    """C − A not measurable, but B − A = 10 ± 1 and C − B = 5 ± 1: C = 15 ± √2 (the sum of
    two independent Gaussians); two pairs for two unknowns, no widening."""
    from lensdelay.lightcurves.search import network

    pairs = [
        _pair("A", "B", 10.0, 1.0, rng),
        _pair("A", "C", 0.0, 1.0, rng, why="not measurable: no variability in common"),
        _pair("B", "C", 5.0, 1.0, rng),
    ]
    _, final, linked, _ = network(["A", "B", "C"], pairs, 20_000, rng)
    assert linked == [True, True]
    assert np.median(final[:, 1]) == pytest.approx(15.0, abs=0.05)
    assert np.std(final[:, 1]) == pytest.approx(np.sqrt(2.0), rel=0.03)


def test_network_weighted_least_squares_and_its_widening(rng):
    """Three pairs for two unknowns, B − A = 10 ± 1, C − A = 16 ± 1, C − B = 5 ± 1: the
    least-squares solution (by hand: B = 10 + (16 − 10 − 5)/3 = 10.333, C = 15.667) with
    the spread sqrt(2/3) × sqrt(3/2) = 1 (the GLS error times √(pairs/unknowns))."""
    from lensdelay.lightcurves.search import network

    pairs = [
        _pair("A", "B", 10.0, 1.0, rng),
        _pair("A", "C", 16.0, 1.0, rng),
        _pair("B", "C", 5.0, 1.0, rng),
    ]
    _, final, linked, _ = network(["A", "B", "C"], pairs, 20_000, rng)
    assert np.median(final[:, 0]) == pytest.approx(10.0 + 1.0 / 3.0, abs=0.05)
    assert np.median(final[:, 1]) == pytest.approx(16.0 - 1.0 / 3.0, abs=0.05)
    assert np.std(final[:, 0]) == pytest.approx(1.0, rel=0.03)


def test_network_widens_pairs_that_disagree(rng):
    """B − A = 10 ± 1, C − A = 20 ± 1, C − B = 5 ± 1: the loop misses by 5, χ² = 25/3 for
    one degree of freedom, so the spread (1, as above) is widened by S = √(25/3) (Birge
    1932; the Particle Data Group's scale factor)."""
    from lensdelay.lightcurves.search import network

    pairs = [
        _pair("A", "B", 10.0, 1.0, rng),
        _pair("A", "C", 20.0, 1.0, rng),
        _pair("B", "C", 5.0, 1.0, rng),
    ]
    stat, final, _, scale = network(["A", "B", "C"], pairs, 20_000, rng)
    assert scale == pytest.approx(np.sqrt(25.0 / 3.0), rel=0.02)
    assert np.std(final[:, 0]) == pytest.approx(np.sqrt(25.0 / 3.0), rel=0.04)
    # the statistical draws are not widened by the disagreement
    assert np.std(stat[:, 0]) == pytest.approx(1.0, rel=0.03)


def test_an_image_no_measurable_pair_reaches_is_not_linked(rng):
    from lensdelay.lightcurves.search import network

    pairs = [
        _pair("A", "B", 10.0, 1.0, rng),
        _pair("A", "C", 0.0, 1.0, rng, why="no"),
        _pair("B", "C", 5.0, 1.0, rng, why="no"),
    ]
    _, final, linked, _ = network(["A", "B", "C"], pairs, 1000, rng)
    assert linked == [True, False] and np.all(np.isnan(final[:, 1]))


@pytest.mark.integration
def test_an_instrument_seen_by_one_image_only(rng):
    """B's second half comes from a camera A never used, 0.3 mag off: its offset is
    fitted for B alone and the delay still holds the truth (no false precision)."""
    from dataclasses import replace

    c = _three_season_pair(rng, 30.0, cadence=4.0)
    late_b = (c.image == "B") & (c.time > np.median(c.time))
    c = replace(c, mag=c.mag + 0.3 * late_b, instrument=np.where(late_b, "cam2", "cam1"))
    res = measure_delays(c, "A", kind="quasar", simulations=0)
    b = res.image("B")
    assert b.measurable, b.statement
    assert b.delay_days["p2.5"] <= 30.0 <= b.delay_days["p97.5"]
    assert any("B/cam2" in n for n in res.notes)


@pytest.mark.parametrize("bad", ["B=5", "B=9:2", "=1:2", "B=nan:3"])
def test_bad_delay_range_refused_in_one_line(tmp_path, capsys, bad):
    from lensdelay.cli.main import main

    curves = tmp_path / "c.csv"
    curves.write_text(
        "image,time,mag,mag_err\nA,1,19,0.1\nA,2,19.1,0.1\nB,1,19,0.1\nB,2,19.2,0.1\n"
    )
    with pytest.raises(SystemExit) as stop:  # argparse's own exit, one line on stderr
        main(["delays", str(curves), "--delay-range", bad, "--out", str(tmp_path / "o")])
    assert stop.value.code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "delay-range" in err[0] and "LOW" in err[0]
    assert not (tmp_path / "o").exists()


def test_a_forecast_json_bounds_the_search(tmp_path):
    """--delay-prior: the forecast's 95% intervals (after seen_in) widened by their width,
    differenced to the reference: by hand from the numbers written here."""
    import json

    from lensdelay.io.lightcurve_files import delay_ranges_from_forecast

    doc = {
        "images": [
            {"family": "q", "label": "A", "delay_days": {"p2.5": 0.0, "p97.5": 0.0}},
            {"family": "q", "label": "B", "delay_days": {"p2.5": 20.0, "p97.5": 30.0}},
        ]
    }
    path = tmp_path / "forecast.json"
    path.write_text(json.dumps(doc))
    # A: width 0 → padded by 0.5 d: (-0.5, 0.5); B: (10, 40); B after A: (9.5, 40.5)
    assert delay_ranges_from_forecast(path, "A", "q") == {"B": (9.5, 40.5)}
    with pytest.raises(InputError, match="reference image 'Z'"):
        delay_ranges_from_forecast(path, "Z", "q")
    path.write_text("{}")
    with pytest.raises(InputError, match="forecast.json.*'images' list"):
        delay_ranges_from_forecast(path, "A")


@pytest.mark.integration
def test_a_delay_held_by_the_given_range_is_not_a_measurement(rng):
    """A range of 3 d that excludes the true 25 d: no number — within the range the curves
    do not match (no variability in common) or the posterior piles up at its bound."""
    c = _three_season_pair(rng, 25.0)
    res = measure_delays(c, "A", kind="quasar", simulations=0, delay_ranges={"B": (10.0, 13.0)})
    b = res.image("B")
    assert not b.measurable and b.delay_days is None
    assert "held by the given range" in b.statement or "no variability in common" in b.statement
