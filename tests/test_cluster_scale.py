"""Pieces of the cluster-scale issue (16) in place so far: image-plane rms per family,
dates at fixed H0."""

from types import SimpleNamespace

import numpy as np
import pytest

from lensdelay.forecast.result import ImageForecast, ImageSampleSet
from lensdelay.inference.fit import FitResult


def _fit_with(residuals):
    return FitResult("m", [], np.zeros(0), np.zeros(0), 0.0, 0, 0, residuals, [], [], True, "")


def test_image_plane_rms_per_family_and_overall():
    """rms = sqrt(mean |Δθ|²) over the reproduced images (common practice in cluster
    modelling): (3, 4) and (0, 0) mas give 5/√2 mas; a family with nothing reproduced
    gets None."""
    rows = [
        {"family": "a", "image": "A", "reproduced": True, "dx_mas": 3.0, "dy_mas": 4.0},
        {"family": "a", "image": "B", "reproduced": True, "dx_mas": 0.0, "dy_mas": 0.0},
        {"family": "b", "image": "A", "reproduced": True, "dx_mas": 12.0, "dy_mas": 0.0},
        {"family": "c", "image": "A", "reproduced": False},
    ]
    rms = _fit_with(rows).rms_arcsec()
    assert rms["a"] == pytest.approx(5e-3 / np.sqrt(2))
    assert rms["b"] == pytest.approx(12e-3)
    assert rms["c"] is None
    assert rms["all"] == pytest.approx(np.sqrt((25 + 0 + 144) / 3) * 1e-3)


def test_dates_at_fixed_h0_scale_as_one_over_h0(rng):
    """A delay scales as 1/H0 (D_Δt ∝ 1/H0, common practice): with κ_ext = 0 and no detection-date
    spread, the median date offset at H0 = 67 over that at 73 is 73/67 exactly."""
    n = 5000
    lens_days = rng.normal(1000.0, 50.0, n)  # at the reference H0 = 70
    samples = ImageSampleSet(
        offsets=lens_days,
        weights=np.full(n, 1.0 / n),
        delay=lens_days,
        lens_days=lens_days,
        h0=rng.normal(70, 5, n),
        kappa=np.zeros(n),
        t0=np.zeros(n),
        model=np.zeros(n, dtype=int),
        x=np.zeros(n),
        y=np.zeros(n),
    )
    table = ImageForecast.dates_at_h0(SimpleNamespace(samples=samples), (67.0, 70.0, 73.0), 70.0)
    assert table[70.0]["median"] == pytest.approx(np.median(lens_days), rel=1e-3)
    assert table[67.0]["median"] / table[73.0]["median"] == pytest.approx(73 / 67, rel=1e-3)


@pytest.mark.parametrize("walkers", [None, 5])
def test_member_stack_equals_the_sum_of_its_members(rng, walkers):
    """All members in one vectorised pass give what the members give one by one (κ, α, ψ
    and the Hessian), for one model and for per-walker shared parameters."""
    from lensdelay.lensing.profiles import TruncatedIsothermal
    from lensdelay.lensing.profiles.stack import ProfileStack

    m = 25
    shape = (m,) if walkers is None else (m, walkers, 1)
    params = {
        "einstein_radius": rng.uniform(0.1, 1.0, shape),
        "cut": rng.uniform(2.0, 10.0, shape),
        "core": rng.uniform(0.0, 0.3, (m,) + (1,) * (len(shape) - 1)),
        "axis_ratio": rng.uniform(0.5, 1.0, (m,) + (1,) * (len(shape) - 1)),
        "position_angle": rng.uniform(-90, 90, (m,) + (1,) * (len(shape) - 1)),
        "x": rng.uniform(-20, 20, (m,) + (1,) * (len(shape) - 1)),
        "y": rng.uniform(-20, 20, (m,) + (1,) * (len(shape) - 1)),
    }
    stack = ProfileStack(TruncatedIsothermal, params)
    pts = (40,) if walkers is None else (walkers, 40)
    x, y = rng.uniform(-25, 25, pts), rng.uniform(-25, 25, pts)
    singles = [TruncatedIsothermal(**{k: v[i] for k, v in params.items()}) for i in range(m)]
    for method in ("convergence", "potential"):
        expected = sum(getattr(s, method)(x, y) for s in singles)
        np.testing.assert_allclose(getattr(stack, method)(x, y), expected, rtol=1e-12, atol=1e-14)
    for method in ("deflection", "hessian", "deflection_and_potential"):
        got = getattr(stack, method)(x, y)
        for k, part in enumerate(got):
            expected = sum(getattr(s, method)(x, y)[k] for s in singles)
            np.testing.assert_allclose(part, expected, rtol=1e-12, atol=1e-14)
    assert len(stack.centre_points()) == m


def test_far_future_dates_raise_no_time_library_warning():
    """A date 20 years ahead is computed knowingly: no ERFA "dubious year" warning
    reaches the user (lensdelay.dates); other warnings still do."""
    import warnings

    from astropy import units as u
    from astropy.time import Time

    from lensdelay.dates import allows_far_dates

    @allows_far_dates
    def far():
        return (Time("2026-12-01", scale="utc") + 7300 * u.day).iso

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert far().startswith("2046-11")
    with pytest.warns(UserWarning):
        allows_far_dates(lambda: warnings.warn("kept", UserWarning))()


@pytest.mark.parametrize(
    "iso, expected",
    [
        ("2034-02-11T19:36:15Z", "2034 Q1"),
        ("2037-03-31T23:59:59Z", "2037 Q1"),
        ("2028-04-01T00:00:00Z", "2028 Q2"),
        ("2030-12-31T12:00:00Z", "2030 Q4"),
    ],
)
def test_windows_by_quarter(iso, expected):
    from lensdelay.report.text import quarter

    assert quarter(iso) == expected
