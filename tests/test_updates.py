"""Issue 10: updates that obey probability -- measured delays, sightings, past/future as of now.

The probability model (lensdelay/timing.py): t0 ~ N(detection, σ_det²); a measured delay
d ~ N(Δt_a − Δt_b, σ²) constrains delays only; a sighting s ~ N(t0 + Δt_i, σ_s²) constrains
both. Expected values come from the convolution of Gaussians and the product of Gaussians
(any statistics text, e.g. Bishop 2006, Pattern Recognition and Machine Learning, eqs.
2.113-2.117), scipy.stats as a general-purpose reference, and astropy.time for dates.
"""

import json
import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.time import Time
from scipy import stats

from lensdelay.forecast.budget import covariance_terms
from lensdelay.forecast.result import ImageSampleSet
from lensdelay.cli.main import build_parser, main
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.lensing.distances import LensDistances
from lensdelay.errors import InputError, LensdelayWarning
from lensdelay.inference.fit import fit
from lensdelay.forecast.samples import image_tracks
from lensdelay.dates import day_of, median_day
from lensdelay.report.text import forecast_text
from lensdelay.api import forecast_scenario as run_forecast
from lensdelay.forecast.combine import image_status
from lensdelay.forecast.sightings import parse_sightings
from lensdelay.lensing.lens import Lens
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.io.reading import load_scenario
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.model.simulate import simulate_family, to_toml
from lensdelay.model.scenario import MeasuredDelay as DelayRow
from lensdelay.inference.timing import SightingRow, TimingData

FAST = dict(walkers=20, steps=300, n_samples=4000, progress=False)
DETECTION = "2027-01-10"
QUAD = Lens(
    (
        IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),
        ExternalShear(strength=0.05, position_angle=-40.0),
    )
)


def _quiet_forecast(*args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        return run_forecast(*args, **kwargs)


def _image(res, label):
    return next(im for im in res.images if im.label == label)


def _half68(q):
    return 0.5 * (q["p84"] - q["p16"])


# -- a double with a measured delay ------------------------------------------------------
def _sis_delay_days(beta=0.3, theta_e=1.0, z_l=0.5, z_s=2.0):
    """SIS: Δt = (D_dt/c)·2θEβ between its two images (Schneider, Ehlers & Falco 1992, Sect.
    8.1.4)."""
    return LensDistances(DEFAULT_COSMOLOGY, z_l, z_s).days_per_arcsec2(z_s) * 2 * theta_e * beta


def _double(tmp_path, date_sigma, delay=None, delay_sigma=0.54, name="double"):
    lens = Lens((IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=1.0),))
    fam = simulate_family(
        lens, 0.3, 0.0, label="q", redshift=2.0, sigma=0.003, rng=np.random.default_rng(2)
    )
    doc = {
        "name": "Test double",
        "lens": {"redshift": 0.5},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [fam],
        "transient": {
            "family": "q",
            "seen_in": "A",
            "date": DETECTION,
            "date_sigma_days": date_sigma,
        },
    }
    if delay is not None:
        doc["delay"] = [
            {"family": "q", "image": "B", "relative_to": "A", "days": delay, "sigma": delay_sigma}
        ]
    path = tmp_path / f"{name}.toml"
    # a round SIS at the origin: 1 lens parameter and the source for 4 constraints
    path.write_text(
        to_toml(doc) + '\n[[mass]]\nprofile = "SIS"\n'
        "einstein_radius = { value = 1.0, min = 0.5, max = 2.0 }\n"
    )
    return path


@pytest.mark.integration
@pytest.mark.parametrize("date_sigma", [1.0, 10.0])
def test_measured_delay_sets_the_date_spread(tmp_path, date_sigma):
    """B's date = detection + the measured delay, σ ≈ √(σ_delay² + σ_det²) (convolution of
    Gaussians); the measured delay never moves the reference image's own window."""
    measured = _sis_delay_days()
    path = _double(tmp_path, date_sigma, delay=measured)
    res = _quiet_forecast(str(path), now=Time("2027-01-01", scale="utc"), **FAST)
    b, a = _image(res, "B"), _image(res, "A")
    assert b.date_offset_days["median"] == pytest.approx(measured, abs=0.1 * date_sigma + 0.1)
    # the model's own spread (H0 ± 7%, κ ± 5%: ~2 d) narrows the measurement a little
    expected = np.hypot(0.54, date_sigma)
    assert _half68(b.date_offset_days) == pytest.approx(expected, rel=0.08)
    assert _half68(b.delay_days) < 0.56
    assert _half68(a.date_offset_days) == pytest.approx(date_sigma, rel=0.05)
    assert res.timing.models[0].route in ("reweight", "resample")
    assert res.timing.models[0].effective_samples >= 0.1 * FAST["n_samples"]
    tension = res.timing.tensions[0]
    assert abs(tension.sigma) < 2 and not tension.in_tension


@pytest.mark.integration
def test_reference_window_is_the_same_with_and_without_the_delay(tmp_path):
    """t0 has the detection's prior whether or not a delay is measured (the delay is a
    difference of two images' times and says nothing about t0)."""
    without = _quiet_forecast(str(_double(tmp_path, 3.0, name="a")), **FAST)
    with_delay = _quiet_forecast(
        str(_double(tmp_path, 3.0, delay=_sis_delay_days(), name="b")), **FAST
    )
    for res in (without, with_delay):
        assert _half68(_image(res, "A").date_offset_days) == pytest.approx(3.0, rel=0.05)


# -- a sighting far from the prediction ----------------------------------------------------
def _quad(tmp_path, seen_in="A", drop=None, name="quad"):
    fam = simulate_family(
        QUAD, 0.03, 0.02, label="sn", redshift=1.6, sigma=0.003, rng=np.random.default_rng(4)
    )
    if drop is not None:
        fam["image"] = [im for im in fam["image"] if im["label"] != drop]
    doc = {
        "name": "Test quad",
        "lens": {"redshift": 0.4},
        "sky": {"ra": 115.0, "dec": -20.0},
        "family": [fam],
        "lens_light": {"x": 0, "y": 0, "sigma": 0.01},
        "transient": {
            "family": "sn",
            "seen_in": seen_in,
            "date": "2027-03-01",
            "date_sigma_days": 1.0,
            "magnitude": 22.0,
        },
    }
    if drop is None:
        doc["model"] = "models/sie_shear.toml"
    path = tmp_path / f"{name}.toml"
    text = to_toml(doc)
    if drop is not None:
        # three images and the light centre (8 constraints): the shear is held at its true value
        text += (
            '\n[[mass]]\nprofile = "SIE"\neinstein_radius = { value = 1.0, min = 0.05, max = 5.0 '
            "}\n"
            "axis_ratio = { value = 0.8, min = 0.2, max = 1.0 }\nposition_angle = { value = 30.0 "
            "}\n"
            "x = { value = 0.0, min = -1.0, max = 1.0 }\ny = { value = 0.0, min = -1.0, max = 1.0 "
            "}\n"
            '\n[[mass]]\nprofile = "shear"\nstrength = 0.05\nposition_angle = -40.0\n'
        )
    path.write_text(text)
    return path


@pytest.mark.integration
def test_sighting_five_sigma_away_is_reported_and_nothing_collapses(tmp_path):
    """A sighting 5σ from the prediction: the forecast runs, the tension is reported above
    3σ, and every interval rests on at least N/10 effective samples."""
    path = _quad(tmp_path)
    now = Time("2027-03-02", scale="utc")
    base = _quiet_forecast(str(path), now=now, **FAST)
    d = _image(base, "D").date_offset_days
    sigma_s = 0.5
    spread = np.hypot(_half68(d), sigma_s)
    when = Time("2027-03-01", scale="utc") + (d["median"] + 5 * spread) * u.day
    # a sighting has happened: judged as of a day after it
    res = _quiet_forecast(
        str(path), now=when + 1 * u.day, seen=[f"sn/D={when.isot}±{sigma_s}"], **FAST
    )
    tension = res.timing.tensions[0]
    assert tension.in_tension and tension.sigma > 3
    assert 0 < tension.p_value < 0.01
    model = res.timing.models[0]
    assert model.effective_samples >= 0.1 * FAST["n_samples"]
    seen = _image(res, "D")
    assert seen.status == "seen" and any("sigma from the prediction" in f for f in seen.flags)
    for im in res.images:
        assert _half68(im.date_offset_days) > 0.3 * sigma_s, im.label
    text = forecast_text(res)
    assert "WARNING: sighting sn/D" in text and "wrong image identification" in text


@pytest.mark.integration
def test_a_predicted_image_can_be_reported_seen(tmp_path):
    """With the faintest image left out, the model predicts it (X1); a sighting of X1 at its
    predicted date is taken, agrees with the prediction, and marks X1 seen."""
    path = _quad(tmp_path, drop="D")
    now = Time("2027-03-02", scale="utc")
    base = _quiet_forecast(str(path), now=now, **FAST)
    x1 = _image(base, "X1")
    assert not x1.observed
    when = Time("2027-03-01", scale="utc") + x1.date_offset_days["median"] * u.day
    res = _quiet_forecast(str(path), now=when + 1 * u.day, seen=[f"X1={when.isot}±1"], **FAST)
    x1 = _image(res, "X1")
    assert x1.status == "seen" and x1.sighted
    assert abs(x1.tension.sigma) < 1


# -- as of now ------------------------------------------------------------------------------
@pytest.mark.integration
def test_now_after_a_window_makes_it_past_and_drops_it_from_the_calendar(tmp_path):
    import icalendar

    path = _double(tmp_path, 1.0)
    before, after = tmp_path / "before", tmp_path / "after"
    common = ["--samples", "2000", "--steps", "300", "--walkers", "20", "--quiet"]
    assert main(["forecast", str(path), "--out", str(before), "--now", DETECTION, *common]) == 0
    doc = json.loads((before / "forecast.json").read_text())
    b = next(im for im in doc["images"] if im["label"] == "B")
    assert b["status"] == "future"
    events = [
        c
        for c in icalendar.Calendar.from_ical((before / "forecast.ics").read_bytes()).walk()
        if c.name == "VEVENT"
    ]
    assert len(events) == 1 and "q/B" in str(events[0]["SUMMARY"])
    late = (Time(b["date"]["p97.5"].rstrip("Z"), scale="utc") + 1 * u.day).isot[:10]
    assert main(["forecast", str(path), "--out", str(after), "--now", late, *common]) == 0
    doc = json.loads((after / "forecast.json").read_text())
    assert next(im for im in doc["images"] if im["label"] == "B")["status"] == "past"
    assert doc["now"].startswith(late)
    events = [
        c
        for c in icalendar.Calendar.from_ical((after / "forecast.ics").read_bytes()).walk()
        if c.name == "VEVENT"
    ]
    assert events == []


@pytest.mark.integration
def test_seen_in_the_last_image_of_a_quad_gives_archival_advice(tmp_path):
    path = _quad(tmp_path, seen_in="D")
    res = _quiet_forecast(str(path), now=Time("2027-03-02", scale="utc"), **FAST)
    text = forecast_text(res)
    for label in "ABC":
        im = _image(res, label)
        assert im.order == "leads" and im.archival_search is not None
        assert im.status != "uncertain"
        assert f"ARCHIVE sn/{label}" in text


@pytest.mark.parametrize(
    "seen, q, now, agreement, expected",
    [
        (True, (-5, 5), 0.0, 1.0, "seen"),
        (False, (-5, -1), 0.0, 1.0, "past"),
        (False, (-5, 5), 0.0, 0.80, "uncertain"),
        (False, (-5, 5), 0.0, 1.0, "now"),  # leads in every sample: not "uncertain"
        (False, (1, 5), 0.0, 1.0, "future"),
        (False, (-5, -1), 0.0, 0.5, "past"),  # over is over, order or not
    ],
)
def test_status_definitions(seen, q, now, agreement, expected):
    """The statuses as docs/statistics.md defines them."""
    assert image_status(seen, {"p2.5": q[0], "p97.5": q[1]}, now, agreement) == expected


# -- the probability model itself ---------------------------------------------------------
def _timing():
    cols = [("s", "A"), ("s", "B"), ("s", "C"), ("s", "X1")]
    return TimingData(
        cols,
        [DelayRow("s", "C", "B", 5.0, 0.7)],
        [SightingRow("s", "B", 12.0, 1.5), SightingRow("s", "X1", 20.0, 2.0)],
        detection_sigma_days=2.5,
        reference=("s", "A"),
    )


def test_timing_likelihood_is_the_marginal_multivariate_normal(rng):
    """log L differences equal scipy's multivariate normal with t0 integrated out:
    covariance diag(σ²) + σ_det² on the sighting block."""
    timing = _timing()
    cov = np.diag([0.7**2, 1.5**2, 2.0**2])
    cov[1:, 1:] += 2.5**2
    arrival = rng.normal(0, 10, (50, 4))
    mean = np.column_stack(
        [
            arrival[:, 2] - arrival[:, 1],
            arrival[:, 1] - arrival[:, 0],
            arrival[:, 3] - arrival[:, 0],
        ]
    )
    ref = stats.multivariate_normal(mean=np.zeros(3), cov=cov)
    expected = ref.logpdf(np.array([5.0, 12.0, 20.0]) - mean)
    got = timing.log_likelihood(arrival)
    np.testing.assert_allclose(got - got[0], expected - expected[0], rtol=1e-10, atol=1e-9)


def test_t0_conditional_matches_a_brute_force_posterior(rng):
    """p(t0 | delays, sightings) on a grid (prior × likelihoods, normalised numerically)
    against the closed-form product of Gaussians."""
    timing = _timing()
    arrival = np.array([[0.0, 11.0, 16.5, 17.0]])
    grid = np.linspace(-15, 15, 30001)
    logp = stats.norm.logpdf(grid, 0, 2.5)
    logp += stats.norm.logpdf(12.0, grid + 11.0, 1.5) + stats.norm.logpdf(20.0, grid + 17.0, 2.0)
    p = np.exp(logp - logp.max())
    p /= np.trapezoid(p, grid)
    mean = np.trapezoid(grid * p, grid)
    sd = np.sqrt(np.trapezoid((grid - mean) ** 2 * p, grid))
    m, s = timing.t0_conditional(arrival)
    assert m[0] == pytest.approx(mean, abs=1e-6) and s[0] == pytest.approx(sd, rel=1e-6)
    draws = timing.draw_t0(np.repeat(arrival, 20000, axis=0), rng)
    assert np.mean(draws) == pytest.approx(mean, abs=0.05) and np.std(draws) == pytest.approx(
        sd, rel=0.03
    )


def test_timing_refuses_bad_rows():
    with pytest.raises(InputError, match="sighting image must differ from the reference image"):
        TimingData(
            [("s", "A"), ("s", "B")],
            sightings=[SightingRow("s", "A", 1.0, 1.0)],
            detection_sigma_days=1.0,
            reference=("s", "A"),
        )
    with pytest.raises(InputError, match="must be one of the forecast's images"):
        TimingData([("s", "A")], [DelayRow("s", "B", "A", 1.0, 1.0)])


@pytest.mark.integration
def test_timing_jacobian_with_a_tracked_image_matches_finite_differences(tmp_path, brute_jacobian):
    """The joint likelihood (positions, a measured delay, a sighting of a predicted image,
    H0 and κ_ext free): implicit-function Jacobian = brute-force central differences that
    solve the lens equation again (Schneider, Ehlers & Falco 1992, eq. 5.20)."""
    sc, _ = load_scenario(str(_quad(tmp_path, drop="D")))
    like = ImageLikelihood(sc, sc.model)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        best = fit(like).values
    tracks, _ = image_tracks(like, best, "sn")
    predicted = [t for t in tracks if not t.observed]
    assert predicted
    timing = TimingData(
        [(t.family, t.label) for t in tracks],
        [DelayRow("sn", "C", "B", 3.0, 0.5)],
        [SightingRow("sn", predicted[0].label, 12.0, 1.0)],
        detection_sigma_days=1.0,
        reference=("sn", "A"),
    )
    joint = ImageLikelihood(
        sc,
        sc.model,
        timing=timing,
        h0_prior=(70.0, 5.0),
        kappa_prior=(0.0, 0.05),
        tracked={"sn": {t.label: (t.x, t.y) for t in predicted}},
    )
    assert joint.names[-2:] == ["H0", "kappa_ext"]
    values = np.concatenate([best, [68.0, 0.03]])
    jac = joint.information_jacobian(values)[0]
    num = brute_jacobian(joint.data_residuals, values)
    np.testing.assert_allclose(jac, num, rtol=1e-4, atol=1e-6 * np.max(np.abs(num)))


# -- the budget ----------------------------------------------------------------------------
def test_model_family_term_is_the_spread_between_models(rng):
    """Two equally weighted models whose delays differ by 2 d with tiny spread each: the
    between-model variance is ¼·2² = 1 d² (law of total variance)."""
    n = 20000
    model = np.repeat([0, 1], n)
    lens_days = np.concatenate([rng.normal(10, 0.01, n), rng.normal(12, 0.01, n)])
    samples = ImageSampleSet(
        offsets=lens_days,
        weights=np.full(2 * n, 1.0 / (2 * n)),
        delay=lens_days,
        lens_days=lens_days,
        h0=np.full(2 * n, 70.0),
        kappa=np.zeros(2 * n),
        t0=np.zeros(2 * n),
        model=model,
        x=np.zeros(2 * n),
        y=np.zeros(2 * n),
    )
    terms = covariance_terms(samples, 70.0, with_date=True)
    assert terms["model family"] == pytest.approx(1.0, rel=1e-3)
    assert terms["_variance"] == pytest.approx(1.0 + 1e-4, rel=1e-3)


@pytest.mark.integration
def test_budget_model_family_term_in_a_two_model_forecast(tmp_path):
    path = _quad(tmp_path)
    res = _quiet_forecast(
        str(path),
        models=["models/sie_shear.toml", "models/power_law_shear.toml"],
        weighting="equal",
        now=Time("2027-03-02", scale="utc"),
        **FAST,
    )
    from lensdelay.forecast.budget import delay_budget

    budget = delay_budget(res)
    d = next(r for r in budget["images"] if r["label"] == "D")
    medians = [v["delay_median"] for v in _image(res, "D").per_model.values()]
    assert abs(medians[0] - medians[1]) > 0.01
    # the term is Cov(D, s̄(L̄_model − L̄)): the between-model variance of the models' mean
    # lens delays, plus cross terms with the independent H0 and κ draws that vanish but
    # for sampling noise of about √(between · var(D) / n) (law of total variance:
    # common practice). A near-zero term can come out slightly negative, so the check is
    # against the between-model variance itself, not its sign.
    s = _image(res, "D").samples
    ok = (s.weights > 0) & np.isfinite(s.delay)
    w = s.weights[ok] / s.weights[ok].sum()
    # each sample's delay is its lens-model delay times (H_ref/H0)(1 − κ_ext)
    scale = np.sum(w * s.delay[ok] / s.lens_days[ok])
    mean_l = np.sum(w * s.lens_days[ok])
    between = sum(
        np.sum(w[s.model[ok] == m])
        * (
            scale
            * (
                np.sum(w * s.lens_days[ok] * (s.model[ok] == m)) / np.sum(w[s.model[ok] == m])
                - mean_l
            )
        )
        ** 2
        for m in np.unique(s.model[ok])
    )
    variance = np.sum(w * (s.delay[ok] - np.sum(w * s.delay[ok])) ** 2)
    term = d["delay"]["model family"]["percent"] / 100 * variance
    assert abs(term - between) < 4 * np.sqrt(between * variance / ok.sum()) + 1e-3 * variance
    text = forecast_text(res)
    assert "per-model median delays" in text and "sie_shear" in text and "power_law_shear" in text


# -- small things ----------------------------------------------------------------------------
def test_parse_sightings_forms_and_defaults(tmp_path):
    sc, _ = load_scenario(str(_quad(tmp_path)))
    got = parse_sightings(
        ["sn/C=2027-03-04±1.5", "D=2027-03-09T06:00:00Z+-0.25", "B=2027-03-02"], sc
    )
    assert [(s.family, s.label, s.sigma_days, s.sigma_stated) for s in got] == [
        ("sn", "C", 1.5, True),
        ("sn", "D", 0.25, True),
        ("sn", "B", 1.0, False),
    ]
    assert got[1].date.isot.startswith("2027-03-09T06:00:00")
    for bad, message in [
        ("C", "must be \\[FAMILY/\\]LABEL=DATE"),
        ("other/C=2027-03-04", "transient's family"),
        ("A=2027-03-04", "must differ from the image the transient was detected in"),
        ("C=2027-03-04±-1", "sigma must be > 0"),
        ("C=2027-03-04±x", "sigma must be a number"),
    ]:
        with pytest.raises(InputError, match=message):
            parse_sightings([bad], sc)


@pytest.mark.integration
def test_unknown_sighting_label_is_refused_after_the_fit(tmp_path, capsys):
    path = _quad(tmp_path)
    out = tmp_path / "out"
    assert (
        main(
            [
                "forecast",
                str(path),
                "--seen",
                "X7=2027-03-04",
                "--now",
                "2027-04-01",
                "--out",
                str(out),
                "--samples",
                "500",
                "--steps",
                "100",
                "--walkers",
                "20",
                "--quiet",
            ]
        )
        == 2
    )
    err = capsys.readouterr().err
    assert "--seen image must be one of the forecast's images" in err and err.count("\n") == 1
    assert not out.exists()


def test_windows_round_outward_and_medians_to_the_nearest_day():
    assert day_of("2027-02-10T16:24:00Z") == "2027-02-10"  # a window starting then starts on 02-10
    assert day_of("2027-02-12T03:00:00Z") == "2027-02-12"  # ... and one ending then ends on 02-12
    assert median_day("2027-02-13T23:48:00Z") == "2027-02-14"


@pytest.mark.integration
def test_header_states_the_h0_used_and_json_has_mjd(tmp_path):
    """--cosmology Planck18 uses H0 = 67.66 (astropy's Planck18: Planck 2018 VI, Table 2,
    TT,TE,EE+lowE+lensing+BAO); MJD beside every ISO date (astropy.time)."""
    path = _double(tmp_path, 1.0)
    res = _quiet_forecast(str(path), cosmology_name="Planck18", **FAST)
    assert "H0 = 67.66 km/s/Mpc (fixed, Planck18)" in forecast_text(res)
    from lensdelay.io.forecast_files import forecast_json, forecast_table

    doc = forecast_json(res)
    for im in doc["images"]:
        for k, iso in im["date"].items():
            assert im["date_mjd"][k] == pytest.approx(
                Time(iso.rstrip("Z"), scale="utc").mjd, abs=2e-5
            )  # ISO to the second
    assert "mjd_median" in forecast_table(res).colnames


def test_warnings_are_one_clean_line(tmp_path, capsys):
    path = _double(tmp_path, 1.0)
    path.write_text(path.read_text().replace("sigma = 0.003", "sigma = 1e-7", 1))
    assert main(["check", str(path)]) == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("lensdelay: warning: ") and ".py" not in err[0]


def test_every_option_has_help():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.choices and isinstance(a.choices, dict))
    for name, p in sub.choices.items():
        for action in p._actions:
            if action.dest == "help":
                continue
            assert action.help, f"{name} {action.option_strings or action.dest} has no help"


@pytest.mark.parametrize(
    "args, message",
    [
        (["--now", "yesterday"], "--now must be an ISO 8601 date"),
        (["--seen", "B"], "--seen must be [FAMILY/]LABEL=DATE[±SIGMA]"),
        (["--seen", "B=2027-01-20±0"], "--seen q/B sigma must be > 0 and at most 3650 days"),
    ],
)
def test_bad_update_arguments_exit_2_with_one_line(tmp_path, capsys, args, message):
    path = _double(tmp_path, 1.0)
    out = tmp_path / "out"
    assert main(["forecast", str(path), "--out", str(out), "--quiet", *args]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
    assert not out.exists()


def test_kappa_draws_stay_below_one(rng):
    """A prior allowed by the 0.1% rule is truncated at 1: no draw flips delay signs
    (the mass-sheet factor 1 − κ_ext stays positive; Falco, Gorenstein & Shapiro 1985)."""
    from lensdelay.inference.priors import check_kappa_prior, draw_kappa

    mean, sigma = check_kappa_prior(0.6, 0.125)  # P(κ ≥ 1) = 6.9e-4: allowed (scipy.stats)
    draws = draw_kappa(mean, sigma, 200_000, rng)
    assert draws.max() < 1.0
    assert abs(np.mean(draws) - 0.6) < 0.002


@pytest.mark.parametrize(
    "argv, message",
    [
        (
            ["forecast", "scenarios/vellmar_quad.toml", "--steps", "0"],
            "--steps must be an integer >= 50, got 0",
        ),
        (
            ["forecast", "scenarios/vellmar_quad.toml", "--steps", "5"],
            "--steps must be an integer >= 50, got 5",
        ),
        (
            ["forecast", "scenarios/vellmar_quad.toml", "--seed", "-1"],
            "--seed must be an integer >= 0, got -1",
        ),
        (
            ["fit", "scenarios/vellmar_quad.toml", "--sample", "--steps", "-5"],
            "--steps must be an integer >= 50",
        ),
        (["fit", "scenarios/vellmar_quad.toml", "--seed", "-1"], "--seed must be an integer >= 0"),
        (
            ["hubble", "scenarios/ostrin_double.toml", "--steps", "1"],
            "--steps must be an integer >= 50",
        ),
        (["forecast", "scenarios/vellmar_quad.toml", "--sample", "100"], "unrecognized arguments"),
        (
            [
                "fit",
                "scenarios/vellmar_quad.toml",
                "--model",
                "models/sie_shear.toml",
                "--model",
                "models/power_law_shear.toml",
            ],
            "--model may be given once",
        ),
        (
            ["forecast", "scenarios/vellmar_quad.toml", "--site", "-30", "-70", "-20000"],
            "--site height must be within [-500, 9000] metres",
        ),
    ],
)
def test_settings_that_cannot_work_are_refused_in_one_line(argv, message, capsys):
    """Refuse or honour, never ignore (issue 12, items 8 and 13): one line, exit 2."""
    try:
        code = main(argv)
    except SystemExit as exit_:  # argparse's own usage errors
        code = exit_.code
    assert code == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1, err


@pytest.mark.integration
def test_an_image_only_some_models_predict_is_not_presented_as_certain(tmp_path):
    """Two equally weighted recipes, only the cored one predicting a central image: that image
    exists in about half of the forecast, is flagged, and its calendar entry says so
    (issue 12, item 5)."""
    cored = tmp_path / "cored.toml"
    cored.write_text(
        '[[mass]]\nprofile = "SIE"\neinstein_radius = { value = 1.0, min = 0.05, max = 5.0 }\n'
        "axis_ratio = { value = 0.8, min = 0.2, max = 1.0 }\nposition_angle = { value = 30.0 }\n"
        "x = { value = 0.0, min = -1.0, max = 1.0 }\ny = { value = 0.0, min = -1.0, max = 1.0 }\n"
        "core = 0.15\n"
        '\n[[mass]]\nprofile = "shear"\nstrength = { value = 0.05, min = 0.0, max = 0.3 }\n'
        "position_angle = { value = 10.0 }\n"
    )
    res = _quiet_forecast(
        str(_quad(tmp_path)),
        models=["models/sie_shear.toml", str(cored)],
        weighting="equal",
        now=Time("2027-03-02", scale="utc"),
        **FAST,
    )
    central = [im for im in res.images if not im.observed]
    assert central, "the cored model predicts a central image"
    for im in central:
        assert im.exists_fraction < 0.6
        assert any("exists in only" in f for f in im.flags)
    from lensdelay.io.forecast_files import forecast_ics

    ics = forecast_ics(res)
    if any(im.status in ("now", "future", "uncertain") for im in central):
        assert "possible image" in ics.replace("\r\n ", "")


@pytest.mark.parametrize(
    "weighting, acceptable, evidence, expected",
    [
        # BIC: exp(-ΔBIC/2), a difference of 10 leaves the second recipe e^-5 of the weight
        ("bic", None, [0.0, 0.0, 0.0], np.array([1.0, np.exp(-5.0), np.exp(-10.0)])),
        # acceptable recipes share equally, a poor one gets nothing
        ("acceptable", [True, True, False], [0.0, 0.0, 0.0], np.array([1.0, 1.0, 0.0])),
        # ... times the timing data's marginal likelihood
        ("acceptable", [True, True, True], [0.0, np.log(3.0), 0.0], np.array([1.0, 3.0, 1.0])),
        # none acceptable: all share
        ("acceptable", [False, False, False], [0.0, 0.0, 0.0], np.array([1.0, 1.0, 1.0])),
        ("equal", None, [0.0, 5.0, -5.0], np.array([1.0, 1.0, 1.0])),
    ],
)
def test_model_weights(weighting, acceptable, evidence, expected):
    """Weights of several recipes (docs/statistics.md, 'How a forecast is made'); by hand."""
    from lensdelay.forecast.samples import model_weights

    w = model_weights([100.0, 110.0, 120.0], evidence, weighting, acceptable)
    np.testing.assert_allclose(w, expected / expected.sum(), rtol=1e-12)
