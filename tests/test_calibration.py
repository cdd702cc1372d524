"""Calibration of the delay intervals (issue 3; slow: run with -m slow, ~10 min)."""
import pathlib
import sys

import pytest

sys.path.insert(0, str(pathlib.Path(__file__).parent.parent / "benchmarks"))


@pytest.mark.slow
def test_delay_intervals_are_calibrated():
    """Over 100 noise realisations of a two-family system the 68% interval holds the truth
    68 ± 7% of the time and the 95% interval 95 ± 4% (issue 3's goal; frequentist coverage,
    common practice). The single near-exactly constrained quad does not meet this (README)."""
    from bench_fit import calibration

    f68, f95, _, _ = calibration(100, 1500, "two-family")
    assert 0.61 <= f68 <= 0.75
    assert 0.91 <= f95 <= 0.99
