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
    """A delay scales as 1/H0 (D_Δt ∝ 1/H0): with κ_ext = 0 and no detection-date
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
