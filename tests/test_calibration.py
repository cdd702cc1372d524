"""Calibration of the delay intervals (issue 3; slow: run with -m slow, ~10 min per case)."""
import pathlib
import sys

import pytest

sys.path.insert(0, str(pathlib.Path(__file__).parent.parent / "benchmarks"))


@pytest.mark.slow
@pytest.mark.parametrize("system,prior", [("quad", "flat"), ("quad", "jeffreys"), ("two-family", "flat")])
def test_delay_intervals_are_calibrated(system, prior):
    """Over 100 noise realisations the 68% interval holds the truth 68 ± 7% of the time and the
    95% interval 95 ± 4% (issue 3's goal; frequentist coverage, common practice). The single
    cross quad (SIE + shear, 10 constraints for 9 parameters) is the hard case: with emcee's
    stretch move alone it gave 55% and 74% (README)."""
    from bench_fit import calibration

    f68, f95, _, _ = calibration(100, 1500, system, prior)
    assert 0.61 <= f68 <= 0.75
    assert 0.91 <= f95 <= 0.99
