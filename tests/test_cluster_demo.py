"""Injection–recovery on the invented Tarrow cluster (issue 16), end to end; slow (~13 min).

The scenario was simulated from scenarios/tarrow_truth.json (scenarios/generate.py);
benchmarks/bench_cluster_demo.py runs the same and prints the figures in docs/benchmarks.md.
"""

import pathlib
import sys

import pytest

pytestmark = pytest.mark.slow

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent.parent / "benchmarks"))


def test_the_demo_cluster_recovers_its_truth():
    from bench_cluster_demo import NOISE, run

    out = run(walkers=64, steps=600, samples=2000, now="2026-12-03")
    # image-plane rms close to the noise put in: a 2-D offset of σ per coordinate has
    # rms √2 σ, less the share the fitted parameters absorb (√(dof / constraints))
    sigma2 = (7 * NOISE["sn"] ** 2 + 36 * NOISE["arc"] ** 2) / 43  # 7 + 36 images
    expected = (2 * sigma2 * out["dof"] / 86) ** 0.5  # 86 constraints
    assert 0.7 * expected < out["rms"]["all"] < 1.4 * expected
    for family, rms in out["rms"].items():
        noise = NOISE["sn"] if family == "sn" else NOISE["arc"]
        assert rms < 2 * 2**0.5 * noise, (family, rms)  # 3-7 images a family: loose
    # every true delay of the supernova inside its 95% window; past and future right
    assert out["inside"] == out["n"] == 7
    assert out["status_ok"] == out["n"]
    lo, _, hi = out["z"]
    assert lo <= 2.71 <= hi
