import warnings

import numpy as np
import pytest

from lensdelay.errors import LensdelayWarning


@pytest.fixture
def rng():
    """Explicit, seeded randomness for every test that needs it."""
    return np.random.default_rng(20261202)


def numerical_jacobian(residuals, values, relative_step=1e-4):
    """Central differences of ``residuals(values) -> (1, m)`` in every parameter, (m, n).

    The step is larger than an analytic Jacobian's: each brute-force residual carries the
    Newton tolerance (~1e-8 in sigma), which a tiny step would amplify.
    """
    values = np.asarray(values, dtype=float)
    columns = []
    for k in range(len(values)):
        h = relative_step * max(1.0, abs(values[k]))
        up, down = values.copy(), values.copy()
        up[k] += h
        down[k] -= h
        columns.append((residuals(up)[0] - residuals(down)[0]) / (2 * h))
    return np.stack(columns, axis=1)


@pytest.fixture
def brute_jacobian():
    """:func:`numerical_jacobian`, for tests that check an analytic Jacobian."""
    return numerical_jacobian


@pytest.fixture
def quick_forecast_args():
    """``--out OUT`` plus a small, fast, reproducible forecast set-up (as of 2026-12-01)."""

    def args(out):
        return [
            "--out",
            str(out),
            "--samples",
            "500",
            "--steps",
            "100",
            "--walkers",
            "16",
            "--quiet",
            "--now",
            "2026-12-01",
        ]

    return args


QUAD_SCENARIO = "scenarios/vellmar_quad.toml"


@pytest.fixture(scope="module")
def quad():
    """The invented Vellmar quad fitted once (SIE + shear): likelihood, best fit, tracks."""
    from lensdelay.forecast.samples import image_tracks
    from lensdelay.inference.fit import fit
    from lensdelay.inference.likelihood import ImageLikelihood
    from lensdelay.io.reading import load_scenario

    sc, _ = load_scenario(QUAD_SCENARIO)
    like = ImageLikelihood(sc, sc.model)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        result = fit(like)
    tracks, _ = image_tracks(like, result.values, "sn")
    return like, result.values, tracks
