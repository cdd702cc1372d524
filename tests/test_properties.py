"""Property tests (issue 6) with Hypothesis: the loader never crashes; images are
stationary points of the Fermat potential with the right parity; delays compose."""

import os

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from lensdelay.lensing.delays import delays_relative_to
from lensdelay.errors import InputError
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.model.scenario import TOP_KEYS, parse_scenario

FUZZ = int(os.environ.get("LENSDELAY_FUZZ_EXAMPLES", "300"))
KEYS = list(TOP_KEYS) + [
    "label",
    "redshift",
    "image",
    "x",
    "y",
    "sigma",
    "date",
    "seen_in",
    "profile",
    "einstein_radius",
    "axis_ratio",
    "value",
    "min",
    "max",
    "prior",
    "ra",
    "dec",
    "H0",
    "Om0",
    "latitude",
    "solar_elongation",
    "days",
    "relative_to",
    "zz",
]
scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-(10**6), 10**6),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=12),
    st.sampled_from(["SIE", "SIS", "sn", "A", "2027-02-14", "models/sie_shear.toml"]),
)
documents = st.recursive(
    scalars,
    lambda children: st.one_of(
        st.lists(children, max_size=4), st.dictionaries(st.sampled_from(KEYS), children, max_size=6)
    ),
    max_leaves=30,
)


def _loads_or_refuses(doc):
    doc = {k: v for k, v in doc.items() if v is not None}  # TOML has no null

    def no_models(ref):
        raise InputError("no model files in this test")

    try:
        parse_scenario(doc, "fuzz.toml", load_model=no_models)
    except InputError:
        pass


@settings(max_examples=FUZZ, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(KEYS), documents, max_size=10))
def test_loader_never_crashes(doc):
    """Random documents either parse or raise InputError: never any other exception."""
    _loads_or_refuses(doc)


@pytest.mark.slow
@settings(max_examples=10_000, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.dictionaries(st.sampled_from(KEYS), documents, max_size=10))
def test_loader_never_crashes_long(doc):
    """The same property on 10^4 documents (slow: run with -m slow)."""
    _loads_or_refuses(doc)


lenses = st.builds(
    lambda te, q, pa, g, gpa: Lens(
        (
            IsothermalEllipsoid(einstein_radius=te, axis_ratio=q, position_angle=pa),
            ExternalShear(strength=g, position_angle=gpa),
        )
    ),
    st.floats(0.5, 2.0),
    st.floats(0.4, 1.0),
    st.floats(-90, 90),
    st.floats(0.0, 0.15),
    st.floats(-90, 90),
)


@settings(max_examples=40, deadline=None)
@given(lenses, st.floats(-0.3, 0.3), st.floats(-0.3, 0.3))
def test_images_map_back_are_stationary_and_parity_matches(lens, bx, by):
    """Every image maps back to its source; ∇τ = 0 there (Fermat's principle, SEF92 eq. 5.39);
    parity follows det and trace of the Hessian of τ (SEF92 Sect. 5.4). A source exactly
    behind a round lens makes a ring, not images, and is left out."""
    assume(np.hypot(bx, by) > 1e-4)
    t = find_images(lens, [bx], [by])
    assert len(t) >= 1
    sx, sy = lens.source_position(t.x, t.y)
    assert np.max(np.hypot(sx - bx, sy - by)) < 1e-8
    h = 1e-6
    gx = (
        lens.fermat_potential(t.x + h, t.y, bx, by) - lens.fermat_potential(t.x - h, t.y, bx, by)
    ) / (2 * h)
    gy = (
        lens.fermat_potential(t.x, t.y + h, bx, by) - lens.fermat_potential(t.x, t.y - h, bx, by)
    ) / (2 * h)
    assert np.max(np.abs(gx)) < 1e-6 and np.max(np.abs(gy)) < 1e-6
    a11, a12, a22 = lens.jacobian(t.x, t.y)
    det, trace = a11 * a22 - a12**2, a11 + a22
    expected = np.where(det < 0, 1, np.where(trace > 0, 0, 2))
    np.testing.assert_array_equal(t.parity, expected)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.floats(-1e4, 1e4), min_size=3, max_size=6), st.data())
def test_delays_antisymmetric_and_additive(times, data):
    """Δt_ij = −Δt_ji and Δt_ik = Δt_ij + Δt_jk (definition Δt_i = t_i − t_ref)."""
    t = np.array(times)
    i, j, k = (data.draw(st.integers(0, len(t) - 1)) for _ in range(3))
    d_i = delays_relative_to(t, i)
    d_j = delays_relative_to(t, j)
    assert d_i[j] == pytest.approx(-d_j[i], abs=1e-9)
    assert d_i[k] == pytest.approx(d_i[j] + d_j[k], abs=1e-8)
