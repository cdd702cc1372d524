"""Fit modes: distinct optima kept by the fit and reported by the forecast (issue 28)."""

from __future__ import annotations

import warnings

import numpy as np

from lensdelay.errors import LensdelayWarning


def test_distinct_modes_compare_angles_modulo_their_period(quad):
    """Optima apart by > 3 error bars are modes; an angle 179.9° from another is not."""
    from lensdelay.inference.fit import _distinct_modes

    like, values, _ = quad
    errors = np.full(len(values), 0.01)
    angle = like.names.index("mass[0].position_angle")
    period = like.periods[angle]
    turned = values.copy()
    turned[angle] += period - 0.001  # the same angle
    moved = values.copy()
    moved[0] += 0.1  # ten error bars in θE
    found = _distinct_modes(like, [(1.0, values), (2.0, turned), (3.0, moved)], values, errors)
    assert [c for c, _ in found] == [3.0]


def test_a_close_mode_with_other_delays_is_reported(quad):
    """Another mode within Δχ² 9.2 whose delays differ gets a note; a worse one does not."""
    from dataclasses import replace as dc_replace

    from lensdelay.forecast.samples import mode_notes
    from lensdelay.inference.fit import fit as fit_again

    like, values, tracks = quad
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        result = fit_again(like)
    other = values.copy()
    other[like.names.index("mass[1].strength")] *= 1.6  # more shear: other delays
    close = dc_replace(result, alternatives=[(result.chi2 + 2.0, other)])
    far = dc_replace(result, alternatives=[(result.chi2 + 20.0, other)])
    notes = mode_notes(like, close, tracks, "B")
    assert len(notes) == 1 and "another fit mode" in notes[0]
    assert mode_notes(like, far, tracks, "B") == []
