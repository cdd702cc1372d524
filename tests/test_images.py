"""Image finder and arrival times against closed forms and a brute-force search."""

import numpy as np
import pytest

from lensdelay.lensing.distances import DAYS_PER_MPC_ARCSEC2
from lensdelay.lensing.critical import critical_lines
from lensdelay.lensing.delays import delays_relative_to, fermat_to_days
from lensdelay.lensing.images import ImageFinder, find_images, newton_polish
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import (
    EllipticalPowerLaw,
    ExternalShear,
    IsothermalEllipsoid,
    NFWHalo,
    PointMass,
    SingularIsothermalSphere,
)

D_DT = 2500.0  # Mpc, an arbitrary time-delay distance for the closed-form checks


@pytest.mark.parametrize("beta", [0.05, 0.3, 0.8])
def test_sis_images_and_delay(beta):
    """SIS: images at β ± θE, μ = 1 ± θE/... and Δt = (D_dt/c)·2θEβ (SEF92, Sect. 8.1.4)."""
    te = 1.2
    lens = Lens((SingularIsothermalSphere(einstein_radius=te),))
    t = find_images(lens, [beta], [0.0])
    assert len(t) == 2
    np.testing.assert_allclose(np.sort(t.x), [beta - te, beta + te], atol=1e-10)
    np.testing.assert_allclose(t.y, 0.0, atol=1e-10)
    days = fermat_to_days(t.fermat, D_DT)
    assert days[1] - days[0] == pytest.approx(D_DT * DAYS_PER_MPC_ARCSEC2 * 2 * te * beta, rel=1e-9)
    # the outer image (minimum) arrives first
    assert t.x[0] > 0 and t.parity[0] == 0 and t.parity[1] == 1


@pytest.mark.parametrize("u_", [0.1, 0.5, 1.5])
def test_point_mass_images_magnifications_delay(u_):
    """Point lens (SEF92 Sect. 8.1.1, common textbook forms): θ± = (β ± √(β²+4θE²))/2,
    μ± = (u²+2)/(2u√(u²+4)) ± ½, μ₊ + μ₋ = 1 (signed), and
    Δt = (D_dt/c) θE² [u√(u²+4)/2 + ln((√(u²+4)+u)/(√(u²+4)−u))]."""
    te = 0.8
    beta = u_ * te
    lens = Lens((PointMass(einstein_radius=te),))
    t = find_images(lens, [0.0], [beta])
    assert len(t) == 2
    root = np.sqrt(beta**2 + 4 * te**2)
    np.testing.assert_allclose(np.sort(t.y), [(beta - root) / 2, (beta + root) / 2], atol=1e-10)
    s = np.sqrt(u_**2 + 4)
    mu_plus = (u_**2 + 2) / (2 * u_ * s) + 0.5
    mu_minus = (u_**2 + 2) / (2 * u_ * s) - 0.5
    np.testing.assert_allclose(
        sorted(np.abs(t.magnification)), sorted([mu_plus, mu_minus]), rtol=1e-9
    )
    assert t.magnification.sum() == pytest.approx(1.0, rel=1e-9)
    expected = D_DT * DAYS_PER_MPC_ARCSEC2 * te**2 * (u_ * s / 2 + np.log((s + u_) / (s - u_)))
    days = fermat_to_days(t.fermat, D_DT)
    assert days[1] - days[0] == pytest.approx(expected, rel=1e-9)


def test_delays_relative_to_reference_are_antisymmetric_and_additive():
    """Δt_ij = −Δt_ji and Δt_ik = Δt_ij + Δt_jk (from the definition Δt_i = t_i − t_ref)."""
    t = np.array([3.0, 10.0, -4.0])
    d0 = delays_relative_to(t, 0)
    d1 = delays_relative_to(t, 1)
    assert d0[1] == -d1[0]
    assert d0[2] == pytest.approx(d0[1] + delays_relative_to(t, 1)[2])


def _brute_force(lens, bx, by, extent, n=500, chunk=40):
    """Reference: local minima of |β(θ) − β_s|² on a dense grid, polished by Newton."""
    g = np.linspace(-extent, extent, n)
    gx, gy = np.meshgrid(g, g)
    mx, my = lens.source_position(gx, gy)
    found = []
    h = g[1] - g[0]
    for s0 in range(0, len(bx), chunk):
        sx, sy = bx[s0 : s0 + chunk, None, None], by[s0 : s0 + chunk, None, None]
        d2 = (mx[None] - sx) ** 2 + (my[None] - sy) ** 2
        c = d2[:, 1:-1, 1:-1]
        is_min = np.ones_like(c, dtype=bool)
        for di in (-1, 0, 1):
            for dj in (-1, 0, 1):
                if di or dj:
                    is_min &= c <= d2[:, 1 + di : n - 1 + di, 1 + dj : n - 1 + dj]
        k, i, j = np.nonzero(is_min)
        x0, y0 = gx[1 + i, 1 + j], gy[1 + i, 1 + j]
        src = s0 + k
        x, y, err = newton_polish(lens, x0, y0, bx[src], by[src], max_step=h)
        ok = err < 1e-10
        found.append(np.stack([src[ok], x[ok], y[ok]], axis=1))
    return np.concatenate(found)


COMPLETENESS_LENSES = {
    "SIE+shear": Lens(
        (
            IsothermalEllipsoid(
                einstein_radius=1.1, axis_ratio=0.65, position_angle=40.0, x=0.03, y=-0.02
            ),
            ExternalShear(strength=0.08, position_angle=-20.0),
        )
    ),
    "cored SIE": Lens(
        (
            IsothermalEllipsoid(
                einstein_radius=1.0, axis_ratio=0.75, position_angle=-15.0, core=0.12
            ),
        )
    ),
    "NFW+SIE": Lens(
        (
            NFWHalo(kappa_s=0.15, scale_radius=6.0, x=0.4, y=-0.3),
            IsothermalEllipsoid(einstein_radius=0.8, axis_ratio=0.7, position_angle=60.0),
        )
    ),
}


@pytest.mark.parametrize("name", COMPLETENESS_LENSES)
def test_finder_is_complete_against_dense_grid(name, rng):
    """No image with |μ| > 1e-3 that a dense-grid search finds is missed, on 1,000 random
    sources, and every image maps back to its source within 1e-8 arcsec (issue 2)."""
    lens = COMPLETENESS_LENSES[name]
    n_src = 1000
    # sources spread over (and beyond) the caustics, where the multiplicity changes
    radius = 0.6 * np.sqrt(rng.uniform(0, 1, n_src))
    angle = rng.uniform(0, 2 * np.pi, n_src)
    bx, by = radius * np.sin(angle), radius * np.cos(angle)
    finder = ImageFinder(lens, source_radius=0.6)
    ours = finder.solve(bx, by)
    mx, my = lens.source_position(ours.x, ours.y)
    assert np.max(np.hypot(mx - bx[ours.source_index], my - by[ours.source_index])) < 1e-8
    ref = _brute_force(lens, bx, by, finder.extent)
    mu = np.abs(lens.magnification(ref[:, 1], ref[:, 2]))
    ref = ref[mu > 1e-3]
    missed = 0
    for src, x, y in ref:
        mine = ours.of_source(int(src))
        if not np.any(np.hypot(mine.x - x, mine.y - y) < 1e-6):
            missed += 1
    assert missed == 0
    # image counts are odd for non-singular lenses (Burke 1981), even for these singular ones
    counts = ours.counts(n_src)
    if name == "cored SIE":
        assert np.all(counts % 2 == 1)


def test_cored_sie_central_image_is_a_maximum():
    """A cored lens has a faint central image at the Fermat maximum (SEF92 Sect. 5.4, odd-number
    theorem)."""
    lens = COMPLETENESS_LENSES["cored SIE"]
    t = find_images(lens, [0.02], [0.01])
    assert len(t) == 5
    centre = t.select(t.parity == 2)
    assert len(centre) == 1 and np.hypot(centre.x[0], centre.y[0]) < 0.12
    assert 0 < centre.magnification[0] < 1


def test_power_law_shallow_has_central_image_steep_does_not():
    """γ < 2: α → 0 at the centre, so a central image exists; γ ≥ 2: it is swallowed (Evans &
    Hunter 2002)."""
    shallow = Lens((EllipticalPowerLaw(einstein_radius=1.0, slope=1.6, axis_ratio=0.8),))
    steep = Lens((EllipticalPowerLaw(einstein_radius=1.0, slope=2.3, axis_ratio=0.8),))
    assert np.any(find_images(shallow, [0.05], [0.03]).parity == 2)
    assert not np.any(find_images(steep, [0.05], [0.03]).parity == 2)


def test_fermat_potential_is_stationary_at_images():
    """Images are stationary points of τ (Fermat's principle, SEF92 eq. 5.39)."""
    lens = COMPLETENESS_LENSES["SIE+shear"]
    t = find_images(lens, [0.04], [0.05])
    h = 1e-6
    for x, y in zip(t.x, t.y):
        gx = (
            lens.fermat_potential(x + h, y, 0.04, 0.05)
            - lens.fermat_potential(x - h, y, 0.04, 0.05)
        ) / (2 * h)
        gy = (
            lens.fermat_potential(x, y + h, 0.04, 0.05)
            - lens.fermat_potential(x, y - h, 0.04, 0.05)
        ) / (2 * h)
        assert abs(gx) < 1e-7 and abs(gy) < 1e-7


def test_sis_critical_curve_and_caustic():
    """SIS: the critical curve is the circle r = θE; its caustic degenerates to a point (SEF92
    Sect. 8.1.4)."""
    lines = critical_lines(Lens((SingularIsothermalSphere(einstein_radius=1.3),)), extent=2.0)
    assert len(lines) == 1
    r = np.hypot(lines[0].x, lines[0].y)
    np.testing.assert_allclose(r, 1.3, atol=1e-8)
    assert np.max(np.hypot(lines[0].caustic_x, lines[0].caustic_y)) < 1e-7


def test_sie_caustic_cusps_bound_the_quads():
    """A source inside the SIE's diamond caustic has four images, one outside two (Kormann et
    al. 1994)."""
    lens = Lens((IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.6, position_angle=0.0),))
    lines = critical_lines(lens, extent=2.0)
    tangential = max(lines, key=lambda c: np.ptp(c.x))
    # the caustic's extent along the minor axis (x here, since PA = 0 puts the major axis on y)
    cusp = np.max(np.abs(tangential.caustic_x))
    assert len(find_images(lens, [0.9 * cusp], [0.0])) == 4
    assert len(find_images(lens, [1.1 * cusp], [0.0])) == 2


def test_nearly_aligned_source_behind_a_large_round_lens():
    """Regression (found by Hypothesis): |β| ≪ θE puts both SIS images in a ring thinner than
    the radial sampling of the search area; both must still be found at β ± θE (SEF92 8.1.4)."""
    lens = Lens(
        (IsothermalEllipsoid(einstein_radius=2.0, axis_ratio=1.0), ExternalShear(strength=0.0))
    )
    t = find_images(lens, [0.0], [0.015625])
    np.testing.assert_allclose(np.sort(t.y), [0.015625 - 2.0, 0.015625 + 2.0], atol=1e-10)


def test_find_images_converts_angles_and_refuses_other_units():
    """50 mas is 0.05 arcsec (astropy units); a length is not an angle."""
    from astropy import units as u

    from lensdelay.errors import InputError

    sis = Lens((SingularIsothermalSphere(einstein_radius=1.0),))
    with_units = find_images(sis, 50 * u.mas, 20 * u.mas)
    plain = find_images(sis, 0.05, 0.02)
    np.testing.assert_allclose(np.sort(with_units.x), np.sort(plain.x), atol=1e-12)
    assert np.max(np.hypot(with_units.x, with_units.y)) < 1.1  # not 51 arcsec away
    with pytest.raises(InputError, match="beta_x must be an angle"):
        find_images(sis, 3 * u.km, 0.0)


def _sie_major_axis_cusp(lens):
    """Source position of the cusp on the +y (major) axis of an SIE with PA = 0, and the
    critical point mapped onto it (brentq on det A along the axis)."""
    from scipy.optimize import brentq

    y_crit = brentq(
        lambda y: float(lens.jacobian_determinant(np.array(0.0), np.array(y))),
        0.3,
        1.5,
        xtol=1e-15,
    )
    return float(lens.source_position(np.array(0.0), np.array(y_crit))[1]), y_crit


@pytest.mark.parametrize("where", ["fold", "cusp"])
def test_source_on_a_caustic_gives_one_critical_image_not_copies(where):
    """At a fold two images of opposite parity merge, at a cusp three (SEF92 Sect. 6.2-6.3):
    the finder lists the merged image once, as 'critical' with infinite magnification, and
    never lists two roots closer than 0.1 mas with contradictory parities."""
    lens = Lens((IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.7, position_angle=0.0),))
    if where == "cusp":
        beta_y, y_crit = _sie_major_axis_cusp(lens)
        bx, by = 0.0, beta_y
    else:
        tangential = max(critical_lines(lens, extent=2.0), key=lambda c: np.ptp(c.x))
        k = len(tangential.x) // 7  # away from the four cusps
        bx, by = tangential.caustic_x[k], tangential.caustic_y[k]
    t = find_images(lens, [bx], [by])
    sep = np.hypot(t.x[:, None] - t.x[None, :], t.y[:, None] - t.y[None, :])
    assert np.all(sep[np.triu_indices(len(t), 1)] > 1e-4)
    critical = t.select(t.parity == 3)
    assert len(critical) == 1 and np.isinf(critical.magnification[0])
    # the image count drops by two at a fold (2 merge into 1 of 4) and a cusp (3 into 1 of 4)
    assert len(t) == (3 if where == "fold" else 2)
    if where == "cusp":
        np.testing.assert_allclose([critical.x[0], critical.y[0]], [0.0, y_crit], atol=1e-4)


def test_central_image_at_the_exact_centre_of_a_cuspy_profile_is_a_faint_maximum():
    """Power law γ = 1.2 (κ ∝ r^-0.2 diverges, α → 0): a source on the axis has an image at
    the exact centre, a Fermat maximum with |μ| → 0 (Evans & Hunter 2002) -- not the
    μ = +1 'minimum' of an empty Hessian."""
    lens = Lens((EllipticalPowerLaw(einstein_radius=1.0, slope=1.2, axis_ratio=0.7),))
    t = find_images(lens, [0.0], [0.0])
    centre = t.select(np.hypot(t.x, t.y) < 1e-9)
    assert len(centre) == 1
    assert centre.parity[0] == 2 and 0 < centre.magnification[0] < 1e-3


def test_one_mesh_for_several_scales_finds_what_one_mesh_each_finds():
    """find_images_at_scales (shared mesh) against find_images per family."""
    from lensdelay.lensing.images import find_images_at_scales
    from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid, TruncatedIsothermal

    lens = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.2, axis_ratio=0.7, position_angle=20.0),
            TruncatedIsothermal(einstein_radius=0.2, cut=2.0, x=1.6, y=0.4),
            ExternalShear(strength=0.05, position_angle=60.0),
        )
    )
    sources = [([0.05, -0.1], [0.02, 0.08], 0.8), ([0.12], [-0.04], 1.0), ([0.0], [0.15], 1.2)]
    shared = find_images_at_scales(lens, sources)
    for (bx, by, s), table in zip(sources, shared):
        alone = find_images(lens, bx, by, s)
        assert len(table) == len(alone)
        assert np.allclose(np.sort(table.x), np.sort(alone.x), atol=1e-8)
        assert np.allclose(np.sort(table.y), np.sort(alone.y), atol=1e-8)


def test_no_image_brighter_than_a_tenth_is_missed_on_a_field_of_members(rng):
    """Completeness on a small cluster field: 40 truncated members around an elliptical
    halo, against a brute-force search on a uniform 0.05" grid (tests/grid_search.py;
    benchmarks/bench_image_finder.py runs a 2' field with 140 members)."""
    from grid_search import dense_grid_images, missed_images

    from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid, TruncatedIsothermal
    from lensdelay.lensing.profiles.stack import ProfileStack

    n = 40
    r = 22.0 * rng.uniform(0.05, 1.0, n) ** 0.7
    phi = rng.uniform(0, 2 * np.pi, n)
    luminosity = 10 ** (-0.4 * rng.exponential(1.2, n))
    members = ProfileStack(
        TruncatedIsothermal,
        dict(
            einstein_radius=0.5 * luminosity**0.5,
            core=np.zeros(n),
            cut=8.0 * luminosity**0.5,
            axis_ratio=rng.uniform(0.5, 1.0, n),
            position_angle=rng.uniform(-90, 90, n),
            x=r * np.sin(phi),
            y=r * np.cos(phi),
        ),
    )
    lens = Lens(
        (
            IsothermalEllipsoid(einstein_radius=8.0, axis_ratio=0.7, position_angle=30, core=2.0),
            members,
            ExternalShear(strength=0.03, position_angle=-20.0),
        )
    )
    for scale, (bx, by) in ((0.8, (0.4, -0.3)), (1.1, (-0.9, 0.5))):
        table = find_images(lens, [bx], [by], scale)
        ((gx, gy, gmu),) = dense_grid_images(lens, bx, by, scale, extent=26.0, spacing=0.05)
        assert np.sum(gmu > 0.1) >= 3  # a multiply imaged source
        assert missed_images(table, gx, gy, gmu) == []


@pytest.mark.parametrize("compiled_on", [True, False])
def test_mesh_evaluates_each_shared_corner_once_with_the_same_values(compiled_on):
    """The mesh's lens values at distinct points, put back at every copy, equal a direct
    evaluation at every point (kernels: bit for bit, each point alone; numpy: to 1e-15,
    the power law's series length follows the slowest point of a call); one pass for α
    and the Hessian equals the two calls. Reference: Lens.deflection and Lens.hessian,
    checked against closed forms above (equality for the same arithmetic: common practice)."""
    from lensdelay.lensing import compiled
    from lensdelay.lensing.images import _once_per_point

    lens = Lens(
        (
            EllipticalPowerLaw(einstein_radius=1.1, axis_ratio=0.7, position_angle=20, slope=2.1),
            ExternalShear(strength=0.05, position_angle=10),
        )
    )
    edges = np.linspace(-2.0, 2.0, 41)
    gx, gy = np.meshgrid(edges, edges)
    offsets = np.array([[0, 0], [1, 0], [0, 1], [1, 1], [0.5, 0.5]])
    px = gx.ravel()[:, None] + 0.1 * offsets[:, 0]  # neighbours share corners
    py = gy.ravel()[:, None] + 0.1 * offsets[:, 1]
    context = compiled.disabled() if not compiled_on else np.errstate()
    with context:
        once = _once_per_point(lens.deflection_and_hessian, px, py)
        direct = (*lens.deflection(px, py), *lens.hessian(px, py))
        fused = lens.deflection_and_hessian(px, py)
    assert len(np.unique(np.stack([px.ravel(), py.ravel()], 1), axis=0)) < px.size
    for a, b, c in zip(once, direct, fused):
        assert a.shape == b.shape == px.shape
        if compiled_on:
            np.testing.assert_array_equal(a, b)
        else:
            np.testing.assert_allclose(a, b, rtol=1e-15, atol=1e-15)
        np.testing.assert_array_equal(c, b)


@pytest.mark.parametrize("compiled_on", [True, False])
def test_newton_gives_potential_and_hessian_at_its_roots(compiled_on):
    """With ``at_roots`` the solver also returns ψ and the Hessian at the roots: those
    Lens.potential_and_hessian gives there, bit for bit (the kernel's last evaluation is
    that evaluation; reference: Lens.potential_and_hessian, checked against closed forms
    in test_compiled.py; equality for the same arithmetic: common practice)."""
    from lensdelay.lensing import compiled

    lens = Lens(
        (
            EllipticalPowerLaw(einstein_radius=1.1, axis_ratio=0.7, position_angle=20, slope=2.1),
            ExternalShear(strength=0.05, position_angle=10),
        )
    )
    rng = np.random.default_rng(4)
    x0, y0 = rng.uniform(-1.5, 1.5, (2, 6, 4))
    bx, by = rng.uniform(-0.1, 0.1, (2, 6, 1))
    scale = rng.uniform(0.8, 1.1, (6, 1))
    context = compiled.disabled() if not compiled_on else np.errstate()
    with context:
        x, y, err, *at = newton_polish(lens, x0, y0, bx, by, scale, iterations=15, at_roots=True)
        plain = newton_polish(lens, x0, y0, bx, by, scale, iterations=15)
        with np.errstate(all="ignore"):
            direct = lens.potential_and_hessian(x, y, scale)
    for a, b in zip((x, y, err), plain):
        np.testing.assert_array_equal(a, b)
    assert len(at) == 4
    for a, b in zip(at, direct):
        np.testing.assert_array_equal(a, b)


def _lines_one_by_one(lens, scale, extent, resolution, polish_steps=3):
    """The critical lines as computed before sharing the grid: det A from the lens at this
    scale, each line polished on its own (the reference of the test below)."""
    import contourpy

    g = np.linspace(-extent, extent, resolution)
    gx, gy = np.meshgrid(g, g)
    with np.errstate(all="ignore"):
        det = lens.jacobian_determinant(gx, gy, scale)
    det = np.where(np.isfinite(det), det, np.nan)
    gen = contourpy.contour_generator(gx, gy, det, line_type=contourpy.LineType.Separate)
    out = []
    for line in gen.lines(0.0):
        x, y = line[:, 0].copy(), line[:, 1].copy()
        if len(x) < 3:
            continue
        with np.errstate(all="ignore"):
            for _ in range(polish_steps):
                d0 = lens.jacobian_determinant(x, y, scale)
                jd = lens.jacobian_determinant
                ddx = (jd(x + 1e-6, y, scale) - jd(x - 1e-6, y, scale)) / (2 * 1e-6)
                ddy = (jd(x, y + 1e-6, scale) - jd(x, y - 1e-6, scale)) / (2 * 1e-6)
                g2 = ddx * ddx + ddy * ddy
                sx, sy = -d0 * ddx / g2, -d0 * ddy / g2
                fine = np.isfinite(sx) & (np.hypot(sx, sy) < 2 * extent / resolution)
                x, y = np.where(fine, x + sx, x), np.where(fine, y + sy, y)
        out.append((x, y, *lens.source_position(x, y, scale)))
    return out


@pytest.mark.parametrize(
    "lens",
    [
        Lens((IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.6, position_angle=30),)),
        Lens(
            (
                EllipticalPowerLaw(
                    einstein_radius=1.0, axis_ratio=0.7, position_angle=10, slope=2.2
                ),
                PointMass(einstein_radius=0.2, x=1.1, y=0.3),
                ExternalShear(strength=0.06, position_angle=70),
            )
        ),
    ],
)
def test_critical_lines_at_several_scales_share_one_grid(lens):
    """Families at several redshifts: the grid's Hessian once, scaled per family, and all
    vertices polished together give each scale's lines as computed one scale and one line
    at a time (det A from Lens.jacobian_determinant: bit for bit, the same products;
    common practice)."""
    from lensdelay.lensing.critical import critical_lines_at_scales

    scales = [0.7, 1.0, 1.3]
    shared = critical_lines_at_scales(lens, scales, extent=2.5, resolution=120)
    for scale, lines in zip(scales, shared):
        reference = _lines_one_by_one(lens, scale, 2.5, 120)
        assert len(lines) == len(reference) > 0
        for line, ref in zip(lines, reference):
            for a, b in zip((line.x, line.y, line.caustic_x, line.caustic_y), ref):
                np.testing.assert_array_equal(a, b)
