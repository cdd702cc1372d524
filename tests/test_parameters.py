"""The parameter space of a likelihood (lensdelay.inference.parameters): the layout of a row."""

import numpy as np
import pytest

from lensdelay.errors import InputError
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.parameters import H0_RANGE, ParameterSpace


def test_layout_model_then_sources_then_delay_scale(quad):
    """Model parameters, the sources, then H0 and κ_ext when timing data are fitted; angles
    periodic; H0 flat within H0_RANGE; κ_ext's Gaussian prior bounded below 1."""
    like, _, _ = quad
    space = ParameterSpace.build(
        like.model,
        like.families,
        like.scenario.families,
        h0_ref=70.0,
        use_delays=True,
        kappa_prior=(0.0, 0.05),
    )
    n = space.n_model
    assert space.names[:n] == [p.name for p in like.model.free]
    label = like.families[0].label
    assert space.names[n : n + 2] == [f"source[{label}].x", f"source[{label}].y"]
    assert space.names[space.h0_index] == "H0" and space.names[space.kappa_index] == "kappa_ext"
    assert (space.lower[space.h0_index], space.upper[space.h0_index]) == H0_RANGE
    assert space.priors[space.kappa_index] == (0.0, 0.05)
    assert space.upper[space.kappa_index] == pytest.approx(0.5)  # ten sigma
    wide = ParameterSpace.build(
        like.model,
        like.families,
        like.scenario.families,
        h0_ref=70.0,
        use_delays=True,
        kappa_prior=(0.5, 0.2),
    )
    assert wide.upper[wide.kappa_index] == 0.95  # below 1: delays never turn around
    assert space.n_positional == n + 2
    angles = [i for i, name in enumerate(space.names) if name.endswith("position_angle")]
    assert angles and all(space.periods[i] == 180.0 for i in angles)
    assert space.scale_start == [70.0, 0.0]
    # the source box: twice the farthest image's distance plus 1″ (common practice here)
    fam = like.families[0]
    reach = 2 * np.max(np.hypot(fam.x, fam.y)) + 1
    assert space.upper[n] == pytest.approx(reach)


def test_the_likelihood_reads_its_layout_from_the_space(quad):
    like, _, _ = quad
    assert like.names is like.space.names and like.lower is like.space.lower
    assert like.h0_index is None and like.n_positional == len(like.names)


def test_a_fixed_kappa_and_an_unknown_h0_prior_word(quad):
    like, _, _ = quad
    args = (like.model, like.families, like.scenario.families)
    fixed = ParameterSpace.build(
        *args, h0_ref=70.0, use_delays=True, h0_prior="fixed", kappa_prior=(0.1, 0.0)
    )
    assert fixed.h0_index is None and fixed.kappa_index is None and fixed.kappa_fixed == 0.1
    with pytest.raises(InputError, match="h0_prior must be None, 'fixed' or"):
        ParameterSpace.build(*args, h0_ref=70.0, use_delays=True, h0_prior="free")
    assert isinstance(like, ImageLikelihood)
