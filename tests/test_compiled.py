"""The compiled lens kernels against the numpy formulas (the reference) and closed forms."""

import numpy as np
import pytest
from test_profiles import CASES, POINTS

from lensdelay.lensing import compiled
from lensdelay.lensing.images import newton_polish
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import (
    EllipticalPowerLaw,
    ExternalShear,
    IsothermalEllipsoid,
    IsothermalMultipole,
    MassSheet,
    NFWHalo,
    PointMass,
    SingularIsothermalSphere,
    TruncatedIsothermal,
)
from lensdelay.lensing.profiles.stack import ProfileStack

pytestmark = pytest.mark.skipif(not compiled.enabled(), reason="numba not installed")

METHODS = ("deflection", "potential", "hessian", "convergence", "deflection_and_potential")


def _both(lens, method, *args):
    fast = getattr(lens, method)(*args)
    with compiled.disabled():
        slow = getattr(lens, method)(*args)
    return fast, slow


def _close(fast, slow, rtol=1e-12):
    """Relative agreement, with zero judged against the largest value of the output."""
    fast = fast if isinstance(fast, tuple) else (fast,)
    slow = slow if isinstance(slow, tuple) else (slow,)
    for a, b in zip(fast, slow):
        a, b = np.asarray(a), np.asarray(b)
        assert a.shape == b.shape
        scale = max(float(np.max(np.abs(b))), 1e-300)
        np.testing.assert_allclose(a, b, rtol=rtol, atol=rtol * scale)


def _points(rng):
    """The profile tests' points, random ones and the exact origin and profile centres."""
    extra = rng.uniform(-3, 3, size=(40, 2))
    centres = np.array([[0.0, 0.0], [0.1, -0.2], [-0.05, 0.1], [0.02, -0.03], [0.2, 0.1]])
    return np.vstack([POINTS, extra, centres])


@pytest.mark.parametrize("name", CASES)
@pytest.mark.parametrize("method", METHODS)
def test_kernel_matches_numpy_formulas(name, method, rng):
    """Every profile's kernel reproduces its numpy formula to 1e-12 (centres included)."""
    lens = Lens((CASES[name],))
    p = _points(rng)
    with np.errstate(all="ignore"):
        fast, slow = _both(lens, method, p[:, 0], p[:, 1], 0.8)
    _close(fast, slow)


def _recipe(values):
    """The default galaxy recipe's components with parameters of any shape."""
    return Lens(
        (
            EllipticalPowerLaw(
                einstein_radius=values[0],
                slope=values[1],
                axis_ratio=values[2],
                position_angle=values[3],
                x=values[4],
                y=values[5],
            ),
            ExternalShear(strength=values[6], position_angle=values[7]),
            IsothermalMultipole(
                order=3, cosine=values[8], sine=values[9], x=values[4], y=values[5]
            ),
            IsothermalMultipole(
                order=4, cosine=values[10], sine=values[11], x=values[4], y=values[5]
            ),
        )
    )


def _walkers(rng, n):
    centre = np.array([1.1, 2.05, 0.7, 30.0, 0.01, -0.02, 0.06, 100.0, 0.01, -0.005, 0.008, 0.01])
    spread = np.array([0.05, 0.1, 0.1, 10.0, 0.01, 0.01, 0.02, 20.0, 0.005, 0.005, 0.005, 0.005])
    return centre + spread * rng.standard_normal((n, len(centre)))


@pytest.mark.parametrize("coords", ["per-walker", "shared"])
def test_walkers_times_points(coords, rng):
    """Parameters (P, 1) against coordinates (P, n) or (1, n): one model per row."""
    values = _walkers(rng, 16)
    lens = _recipe([v[:, None] for v in values.T])
    shape = (16, 5) if coords == "per-walker" else (1, 5)
    x, y = rng.uniform(-1.5, 1.5, size=(2,) + shape)
    scale = rng.uniform(0.8, 1.2, size=(16, 1))
    for method in METHODS:
        fast, slow = _both(lens, method, x, y, scale)
        _close(fast, slow)
        assert (fast[0] if isinstance(fast, tuple) else fast).shape == (16, 5)
    # each row is that walker's own model
    row = 3 if coords == "per-walker" else 0
    with compiled.disabled():
        alone = _recipe(values[3]).deflection(x[row], y[row], scale[3, 0])[0]
    _close(lens.deflection(x, y, scale)[0][3], alone)


def _members(rng, m, half_width, **more):
    """A stack of m truncated isothermal members scattered over ±half_width arcsec."""
    values = {
        "einstein_radius": rng.uniform(0.1, 0.5, m),
        "cut": rng.uniform(2.0, 6.0, m),
        "x": rng.uniform(-half_width, half_width, m),
        "y": rng.uniform(-half_width, half_width, m),
        **more,
    }
    return ProfileStack(TruncatedIsothermal, values)


def test_cluster_members_summed_in_the_kernel(rng):
    """A stack of 60 truncated members plus a halo: the kernel sums them per point."""
    members = _members(
        rng, 60, 30.0, axis_ratio=rng.uniform(0.5, 1.0, 60), position_angle=rng.uniform(0, 180, 60)
    )
    halo = IsothermalEllipsoid(einstein_radius=15.0, axis_ratio=0.8, core=2.0, position_angle=20)
    lens = Lens((halo, members, NFWHalo(kappa_s=0.2, scale_radius=40.0, x=5.0)))
    x, y = rng.uniform(-40, 40, size=(2, 300))
    for method in METHODS:
        fast, slow = _both(lens, method, x, y)
        _close(fast, slow)


def test_fixed_members_beside_walkers(rng):
    """Members with one value each (M,) beside a halo with one per walker (P, 1)."""
    members = _members(rng, 7, 5.0)  # the rest of their parameters left at the defaults
    halo = IsothermalEllipsoid(einstein_radius=rng.uniform(4, 5, (5, 1)), core=1.0)
    lens = Lens((halo, members))
    x, y = rng.uniform(-6, 6, size=(2, 5, 9))
    for method in METHODS:
        fast, slow = _both(lens, method, x, y)
        _close(fast, slow)
    assert compiled.pack(lens) is not None


def test_newton_in_the_kernel_matches_numpy(rng):
    """Newton's method from perturbed images: the same roots (to 1e-10 arcsec) per walker."""
    values = _walkers(rng, 8)
    lens = _recipe([v[:, None] for v in values.T])
    with compiled.disabled():
        single = _recipe(values[0])
        from lensdelay.lensing.images import find_images

        found = find_images(single, 0.05, 0.03)
    starts_x, starts_y = found.x[None, :], found.y[None, :]
    args = (lens, starts_x + 0.01, starts_y - 0.01, np.full((8, 1), 0.05), np.full((8, 1), 0.03))
    kw = dict(iterations=15, max_step=0.05, tolerance=1e-11)
    fx, fy, ferr = newton_polish(*args, **kw)
    with compiled.disabled():
        sx, sy, serr = newton_polish(*args, **kw)
    ok = serr < 1e-8
    assert ok.sum() >= 8  # at least the first walker's images converge
    np.testing.assert_array_equal(ferr < 1e-8, ok)
    np.testing.assert_allclose(fx[ok], sx[ok], atol=1e-10)
    np.testing.assert_allclose(fy[ok], sy[ok], atol=1e-10)


def test_closed_forms_through_the_kernel():
    """Published closed forms evaluated by the kernels (not through numpy)."""
    r = np.array([0.3, 1.0, 2.7])
    x, y = r * np.cos(0.4), r * np.sin(0.4)
    # SIS: |α| = θE, κ = θE/2r (Schneider, Ehlers & Falco 1992, eqs. 8.35-8.36)
    ax, ay = Lens((SingularIsothermalSphere(einstein_radius=1.3),)).deflection(x, y)
    np.testing.assert_allclose(np.hypot(ax, ay), 1.3, rtol=1e-14)
    k = Lens((SingularIsothermalSphere(einstein_radius=1.3),)).convergence(x, y)
    np.testing.assert_allclose(k, 0.65 / r, rtol=1e-14)
    # point mass: |α| = θE²/r (SEF 1992, eq. 8.33)
    ax, ay = Lens((PointMass(einstein_radius=0.9),)).deflection(x, y)
    np.testing.assert_allclose(np.hypot(ax, ay), 0.81 / r, rtol=1e-14)
    # NFW: κ(r = rs) = 2κs/3 (Wright & Brainerd 2000, eq. 11, limit u → 1)
    k = Lens((NFWHalo(kappa_s=0.3, scale_radius=4.0),)).convergence(
        np.array([4.0]), np.array([0.0])
    )
    np.testing.assert_allclose(k, 0.2, rtol=1e-12)
    # mass sheet: α = κ θ (Falco, Gorenstein & Shapiro 1985)
    ax, _ = Lens((MassSheet(convergence_value=0.1),)).deflection(x, y)
    np.testing.assert_allclose(ax, 0.1 * x, rtol=1e-14)


def test_shapes_the_kernel_cannot_take_fall_back_to_numpy(rng):
    """Parameters varying along two axes: no kernel layout; the numpy path answers."""
    lens = Lens((IsothermalEllipsoid(einstein_radius=rng.uniform(1, 2, (3, 4))),))
    x = rng.uniform(-1, 1, (3, 4))
    assert compiled.evaluate(lens, x, x) is None
    assert lens.deflection(x, x)[0].shape == (3, 4)


def test_empty_and_single_points(rng):
    """No points give empty outputs of the broadcast shape; one point a 0-d answer."""
    lens = Lens((IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.7),))
    empty = np.zeros(0)
    ax, ay = lens.deflection(empty, empty, 0.9)
    assert ax.shape == (0,) and ay.shape == (0,)
    x, y, err = newton_polish(lens, empty, empty, 0.1, 0.0)
    assert x.shape == (0,) and err.shape == (0,)
    fast, slow = _both(lens, "hessian", 0.3, -0.4)
    assert np.shape(fast[0]) == ()
    _close(fast, slow)


def test_rules_are_trusted_only_inside_checked_bounds():
    """Within rules_trusted() a profile skips its checks; bounds decide when that is safe."""
    from lensdelay.errors import InputError
    from lensdelay.lensing.profiles.base import rule_holds_between, rules_trusted

    with pytest.raises(InputError, match="axis_ratio must be in"):
        IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=1.5)
    with rules_trusted():
        IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=1.5)  # not checked here
    with pytest.raises(InputError):  # and checked again after the block
        IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=1.5)
    assert rule_holds_between(IsothermalEllipsoid, "axis_ratio", 0.2, 1.0)
    assert not rule_holds_between(IsothermalEllipsoid, "axis_ratio", 0.2, 1.2)
    assert not rule_holds_between(EllipticalPowerLaw, "slope", 0.5, 2.5)
    assert rule_holds_between(EllipticalPowerLaw, "slope", 1.5, 2.65)
    assert rule_holds_between(MassSheet, "convergence", -0.2, 0.5)
    assert not rule_holds_between(IsothermalMultipole, "order", 2.0, 4.0)


@pytest.mark.parametrize("name", CASES)
@pytest.mark.parametrize("free", ["all", "some"])
def test_row_packer_equals_packing_the_lens(name, free, rng):
    """A RowPacker's table is the one pack() makes of the same lens, to the last bit."""
    profile = CASES[name]
    kind = profile.kind
    values = compiled.with_defaults(kind, profile.values())
    names = compiled.RAW_FIELDS[kind]
    walkers = 7
    rows, fields = [], {}
    for f, field in enumerate(names):
        fixed = field == "order" or (free == "some" and f % 2 == 1)
        if fixed:
            fields[field] = ("value", float(values[field]))
        else:
            fields[field] = ("column", len(rows))
            # shrunk a little: every row stays a valid profile (q ≤ 1 too)
            rows.append(float(values[field]) * (1.0 - 0.01 * rng.uniform(0.0, 1.0, walkers)))
    rows = np.array(rows).T if rows else np.zeros((walkers, 0))
    packer = compiled.RowPacker([(kind, fields)])
    codes, table, shape = packer(rows)
    lens_values = {
        field: rows[:, [how[1]]] if how[0] == "column" else how[1] for field, how in fields.items()
    }
    if kind == "sheet":
        lens_values = {"convergence": lens_values["convergence"]}
    built = type(profile).from_values(
        {k: v for k, v in lens_values.items() if k in dict(type(profile)._value_fields())}
    )
    ref_codes, ref_table, ref_shape = compiled._pack(Lens((built,)))
    np.testing.assert_array_equal(codes, ref_codes)
    if rows.shape[1]:
        assert shape == ref_shape
    np.testing.assert_array_equal(table, np.broadcast_to(ref_table, table.shape))


def _default_recipe_likelihood():
    """The invented Vellmar quad's likelihood with the default recipe (power law, shear,
    m = 3, 4 multipoles)."""
    from dataclasses import replace

    from lensdelay.inference.likelihood import ImageLikelihood
    from lensdelay.io.reading import load_scenario
    from lensdelay.model.recipe import default_galaxy_recipe

    sc, _ = load_scenario("scenarios/vellmar_quad.toml")
    xs = np.concatenate([[im.x for im in f.images] for f in sc.families])
    ys = np.concatenate([[im.y for im in f.images] for f in sc.families])
    model = default_galaxy_recipe(xs, ys, (0.0, 0.0))
    return ImageLikelihood(replace(sc, model=model), model)


def test_likelihood_lenses_carry_the_row_packers_table(rng):
    """The likelihood's lenses for walker rows hold the table pack() makes (default recipe),
    and build their profiles only when asked (numpy path, pickling)."""
    like = _default_recipe_likelihood()
    lo = np.where(np.isfinite(like.lower), like.lower, -1.0)
    hi = np.where(np.isfinite(like.upper), like.upper, 1.0)
    rows = lo + (hi - lo) * rng.uniform(0.2, 0.8, (9, len(lo)))
    lens = like.lens_for(rows)
    assert "components" not in lens.__dict__  # deferred: the kernels need no profile
    x, y = rng.uniform(-1.5, 1.5, (2, 9, 5))
    fast = lens.deflection(x, y)
    carried = lens.__dict__["_compiled_pack"]
    ref = compiled._pack(lens)  # builds the profiles on first use
    np.testing.assert_array_equal(carried[0], ref[0])
    np.testing.assert_array_equal(carried[1], ref[1])
    assert carried[2] == ref[2]
    # a deferred lens pickles as a built one and its numpy path is the reference
    import pickle

    again = pickle.loads(pickle.dumps(like.lens_for(rows)))
    with compiled.disabled():
        slow = again.deflection(x, y)
    np.testing.assert_allclose(fast, slow, rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("prior_widths", [None, [0.0, 2.0, 0.0, 0.5, 0.0, 1.0]])
def test_langevin_geometry_kernel_matches_numpy(prior_widths, rng):
    """The Langevin move's metric, drift, inverse square root and log det: compiled against
    numpy (the reference) to 1e-10, rows the kernel must hand to the eigen-decomposition
    included (a parameter no residual sees, a non-finite Jacobian). Their definitions:
    G = JᵀJ, S Sᵀ = G⁻¹, drift G⁻¹g with g = −Jᵀr (Girolami & Calderhead 2011, eqs. 9–10)."""
    from lensdelay.inference.moves import FisherLangevinMove

    jac = rng.standard_normal((12, 9, 6))
    res = rng.standard_normal((12, 9))
    jac[3, :, 2] = 0.0  # a parameter no residual sees: singular G
    jac[5, :, 4] = 1e-7 * jac[5, :, 1]  # nearly dependent columns: pivots 1e-14 apart
    jac[7, 2, 3] = np.nan  # a failed evaluation
    move = FisherLangevinMove(None, prior_widths=prior_widths)
    fast = move._geometry(res, jac)
    with compiled.disabled():
        slow = move._geometry(res, jac)
    good = [0, 1, 2, 4, 6, 8, 9, 10, 11]
    for a, b in zip(fast, slow):
        np.testing.assert_allclose(a[good], b[good], rtol=1e-10, atol=1e-12)
        # rows 3 and 5 go through the floored eigenvalues (condition number 1e12): the
        # rounding of JᵀJ (1e-16, summed in another order) is magnified to ~1e-4 there
        for row in (3, 5, 7):
            scale = np.max(np.abs(b[row]))
            np.testing.assert_allclose(a[row], b[row], rtol=1e-3, atol=1e-3 * scale)
    drift, inv_sqrt, metric, _ = fast
    assert np.all(inv_sqrt[7] == 1e-6 * np.eye(6))  # frozen: no proposal from a NaN
    # S Sᵀ G = I and G drift = g where G is well conditioned
    eye = inv_sqrt[good] @ np.swapaxes(inv_sqrt[good], 1, 2) @ metric[good]
    np.testing.assert_allclose(eye, np.broadcast_to(np.eye(6), eye.shape), atol=1e-9)
    grad = -(np.swapaxes(jac[good], 1, 2) @ res[good][:, :, None])[:, :, 0]
    np.testing.assert_allclose((metric[good] @ drift[good][:, :, None])[..., 0], grad, atol=1e-9)


def test_block_deflections_equal_the_tiled_evaluation_bit_for_bit(rng):
    """Shifted lenses that differ from the unshifted one in a component or two (a
    forward-difference Jacobian's blocks) give, evaluating only what changed, the very
    values the kernel gives for every block in full (default recipe, one step per
    parameter, the lens's own rows as they are packed). Reference: evaluate_all, checked
    against the published closed forms in test_closed_forms_through_the_kernel (equality
    to the bit for a shortcut that drops no arithmetic: common practice)."""
    like = _default_recipe_likelihood()
    lo = np.where(np.isfinite(like.lower), like.lower, -1.0)
    hi = np.where(np.isfinite(like.upper), like.upper, 1.0)
    base = lo + (hi - lo) * rng.uniform(0.2, 0.8, (5, len(lo)))
    n = like.n_model
    shifted = [base + 1e-3 * np.eye(len(lo))[k] for k in range(n)]  # one model step each
    lens = like.lens_for(np.concatenate([*shifted, base]))
    x, y = rng.uniform(-1.5, 1.5, (2, 5, 4))
    x[0, 0] = np.nan  # a point the lens cannot take stays NaN in every block
    ax, ay = compiled.block_deflections(lens, x, y, 0.9, n)
    full_x, full_y = lens.deflection(np.tile(x, (n + 1, 1)), np.tile(y, (n + 1, 1)), 0.9)
    np.testing.assert_array_equal(ax, full_x.reshape(n + 1, 5, 4))
    np.testing.assert_array_equal(ay, full_y.reshape(n + 1, 5, 4))
    # a scale per lens row (a family of free redshift), blocks that differ in it alone
    scale = rng.uniform(0.8, 1.2, (5 * (n + 1), 1))
    ax, ay = compiled.block_deflections(lens, x, y, scale, n)
    full_x, full_y = lens.deflection(np.tile(x, (n + 1, 1)), np.tile(y, (n + 1, 1)), scale)
    np.testing.assert_array_equal(ax, full_x.reshape(n + 1, 5, 4))
    np.testing.assert_array_equal(ay, full_y.reshape(n + 1, 5, 4))
    with compiled.disabled():
        assert compiled.block_deflections(lens, x, y, 0.9, n) is None
    assert compiled.block_deflections(lens, x, y, np.full((5, 1), 0.9), n) is None
