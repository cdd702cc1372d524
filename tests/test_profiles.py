"""Mass profiles: internal consistency and published special cases."""

import re

import numpy as np
import pytest
from scipy import integrate

from lensdelay.errors import InputError
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

CASES = {
    "point": PointMass(einstein_radius=0.9, x=0.1, y=-0.2),
    "SIS": SingularIsothermalSphere(einstein_radius=1.1, x=-0.05, y=0.1),
    "SIE": IsothermalEllipsoid(
        einstein_radius=1.2, axis_ratio=0.6, position_angle=35.0, x=0.02, y=-0.03
    ),
    "SIE-round": IsothermalEllipsoid(einstein_radius=1.2, axis_ratio=1.0, position_angle=10.0),
    "SIE-cored": IsothermalEllipsoid(
        einstein_radius=1.0, axis_ratio=0.7, position_angle=-20.0, core=0.2
    ),
    "SIE-cored-round": IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=1.0, core=0.2),
    "power_law-steep": EllipticalPowerLaw(
        einstein_radius=1.0, slope=2.3, axis_ratio=0.5, position_angle=70.0
    ),
    "power_law-shallow": EllipticalPowerLaw(
        einstein_radius=1.3, slope=1.7, axis_ratio=0.8, position_angle=-40.0, x=0.1
    ),
    "NFW": NFWHalo(kappa_s=0.3, scale_radius=4.0, x=0.3, y=0.2),
    "multipole-m3": IsothermalMultipole(order=3, cosine=0.02, sine=-0.01, x=0.1, y=-0.05),
    "multipole-m4": IsothermalMultipole(order=4, cosine=-0.015, sine=0.03),
    "truncated": TruncatedIsothermal(
        einstein_radius=0.3, cut=2.0, axis_ratio=0.7, position_angle=40.0, x=0.2, y=0.1
    ),
    "truncated-cored-round": TruncatedIsothermal(einstein_radius=0.3, core=0.1, cut=1.5),
    "shear": ExternalShear(strength=0.07, position_angle=25.0),
    "sheet": MassSheet(convergence_value=0.1),
}

# Points away from centres and away from the NFW u = 1 ring, but also one close to it.
POINTS = np.array([[0.7, 0.4], [-1.3, 0.9], [0.2, -1.7], [2.5, 2.2], [-0.45, -0.35], [4.3, 0.2]])


@pytest.mark.parametrize("name", CASES)
def test_deflection_is_gradient_of_potential(name):
    """α = ∇ψ (definition; SEF92 eq. 5.9), checked by central differences."""
    prof, h = CASES[name], 1e-5
    x, y = POINTS.T
    ax, ay = prof.deflection(x, y)
    num_x = (prof.potential(x + h, y) - prof.potential(x - h, y)) / (2 * h)
    num_y = (prof.potential(x, y + h) - prof.potential(x, y - h)) / (2 * h)
    np.testing.assert_allclose(ax, num_x, rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(ay, num_y, rtol=1e-6, atol=1e-8)


@pytest.mark.parametrize("name", CASES)
def test_hessian_is_gradient_of_deflection(name):
    """ψ_ij = ∂α_i/∂θ_j (definition), by central differences."""
    prof, h = CASES[name], 1e-5
    x, y = POINTS.T
    hxx, hxy, hyy = prof.hessian(x, y)
    axp, ayp = prof.deflection(x + h, y)
    axm, aym = prof.deflection(x - h, y)
    bxp, byp = prof.deflection(x, y + h)
    bxm, bym = prof.deflection(x, y - h)
    np.testing.assert_allclose(hxx, (axp - axm) / (2 * h), rtol=1e-5, atol=1e-8)
    np.testing.assert_allclose(hxy, (ayp - aym) / (2 * h), rtol=1e-5, atol=1e-8)
    np.testing.assert_allclose(hxy, (bxp - bxm) / (2 * h), rtol=1e-5, atol=1e-8)
    np.testing.assert_allclose(hyy, (byp - bym) / (2 * h), rtol=1e-5, atol=1e-8)


@pytest.mark.parametrize("name", CASES)
def test_laplacian_is_twice_convergence(name):
    """∇²ψ = 2κ (Poisson equation of lensing, SEF92 eq. 5.10)."""
    prof = CASES[name]
    x, y = POINTS.T
    hxx, _, hyy = prof.hessian(x, y)
    np.testing.assert_allclose(hxx + hyy, 2 * prof.convergence(x, y), rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("name", CASES)
def test_finite_at_centre_and_axes(name):
    """No NaN or inf at r = 0 or on the axes (common practice: finite floors)."""
    prof = CASES[name]
    x = np.array([prof.x, prof.x, prof.x + 0.3, 0.0])
    y = np.array([prof.y, prof.y + 0.3, prof.y, 0.0])
    for out in (
        prof.convergence(x, y),
        *prof.deflection(x, y),
        prof.potential(x, y),
        *prof.hessian(x, y),
    ):
        assert np.all(np.isfinite(out)), name


@pytest.mark.parametrize("q", [1.0, 1 - 1e-9, 1 - 1e-6, 1 - 1e-3])
def test_sie_tends_to_sis(q):
    """SIE at q → 1 is the SIS (Kormann et al. 1994, Sect. 3; CONVENTIONS.md)."""
    sie = IsothermalEllipsoid(einstein_radius=1.3, axis_ratio=q, position_angle=17.0)
    sis = SingularIsothermalSphere(einstein_radius=1.3)
    x, y = POINTS.T
    tol = 5 * (1 - q) + 1e-9
    np.testing.assert_allclose(sie.deflection(x, y), sis.deflection(x, y), rtol=tol, atol=tol)
    np.testing.assert_allclose(sie.potential(x, y), sis.potential(x, y), rtol=tol, atol=tol)
    np.testing.assert_allclose(sie.hessian(x, y), sis.hessian(x, y), rtol=tol, atol=tol)


@pytest.mark.parametrize("q", [0.3, 0.6, 0.95, 1.0])
def test_power_law_isothermal_is_sie(q):
    """Elliptical power law at γ = 2 is the SIE (Tessore & Metcalf 2015, Sect. 3)."""
    pl = EllipticalPowerLaw(einstein_radius=1.1, slope=2.0, axis_ratio=q, position_angle=50.0)
    sie = IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=q, position_angle=50.0)
    x, y = POINTS.T
    np.testing.assert_allclose(pl.deflection(x, y), sie.deflection(x, y), rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(pl.potential(x, y), sie.potential(x, y), rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(pl.hessian(x, y), sie.hessian(x, y), rtol=1e-9, atol=1e-11)


@pytest.mark.parametrize("slope", [1.5, 2.0, 2.4])
def test_power_law_sphere_deflection(slope):
    """Round power law: α(r) = θE (θE/r)^(γ−2), i.e. κ̄(<r) = (θE/r)^(γ−1) (SEF92 Sect. 8.1.4,
    common practice)."""
    pl = EllipticalPowerLaw(einstein_radius=1.2, slope=slope, axis_ratio=1.0)
    r = np.array([0.3, 1.2, 2.7])
    ax, ay = pl.deflection(r, 0 * r)
    np.testing.assert_allclose(ax, 1.2 * (1.2 / r) ** (slope - 2), rtol=1e-12)


@pytest.mark.parametrize(
    "prof",
    [
        IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.5, position_angle=30.0),
        EllipticalPowerLaw(einstein_radius=1.0, slope=2.25, axis_ratio=0.6, position_angle=-10.0),
        EllipticalPowerLaw(einstein_radius=1.0, slope=1.8, axis_ratio=0.4, position_angle=80.0),
    ],
    ids=["SIE", "PL-2.25", "PL-1.8"],
)
def test_mean_convergence_inside_einstein_ellipse_is_one(prof):
    """Mean κ inside R = θE is exactly 1 (CONVENTIONS.md normalisation), by 2-D quadrature."""
    q = prof.axis_ratio
    phi = np.deg2rad(prof.position_angle)

    def kappa(radius, t):
        xp, yp = radius * np.cos(t) / np.sqrt(q), radius * np.sin(t) * np.sqrt(q)
        x = np.sin(phi) * xp - np.cos(phi) * yp
        y = np.cos(phi) * xp + np.sin(phi) * yp
        return prof.convergence(x, y) * radius  # dA = R dR dt in these coordinates

    mass, _ = integrate.dblquad(
        lambda t, radius: kappa(radius, t), 0, 1.0, 0, 2 * np.pi, epsabs=1e-9
    )
    assert mass / np.pi == pytest.approx(1.0, rel=1e-6)


def test_nfw_deflection_matches_integral_of_convergence():
    """α(r) = (2/r) ∫₀ʳ κ(r') r' dr' (Wright & Brainerd 2000, eq. 13), by quadrature."""
    halo = NFWHalo(kappa_s=0.4, scale_radius=3.0)
    for r in [0.05, 1.0, 2.9999, 3.0, 3.0001, 7.5, 20.0]:
        inner, _ = integrate.quad(
            lambda s: halo.convergence(s, 0.0) * s, 0, r, limit=200, points=[3.0] if r > 3 else None
        )
        ax, _ = halo.deflection(r, 0.0)
        assert ax == pytest.approx(2 * inner / r, rel=1e-7)


def test_nfw_convergence_at_scale_radius():
    """κ(u = 1) = 2κs/3 (Wright & Brainerd 2000, eq. 11, limit u → 1)."""
    halo = NFWHalo(kappa_s=0.25, scale_radius=5.0)
    k = halo.convergence(np.array([5.0, 5.0 + 1e-9, 5.0 - 1e-7, 5.0 * 1.001]), 0.0)
    np.testing.assert_allclose(k[:3], 2 * 0.25 / 3, rtol=1e-6)
    assert abs(k[3] - 2 * 0.25 / 3) < 1e-3


def test_shear_components_follow_conventions():
    """ψ_xx − ψ_yy = 2γ cos 2φγ and ψ_xy = −γ sin 2φγ (CONVENTIONS.md)."""
    g, pa = 0.08, 31.0
    hxx, hxy, hyy = ExternalShear(strength=g, position_angle=pa).hessian(0.3, -0.2)
    assert hxx - hyy == pytest.approx(2 * g * np.cos(np.deg2rad(2 * pa)))
    assert hxy == pytest.approx(-g * np.sin(np.deg2rad(2 * pa)))


@pytest.mark.parametrize("pa", [0.0, 30.0, 75.0, 120.0])
def test_shear_angle_points_to_perturber(pa):
    """The tidal field of a distant point mass at position angle φ is a shear with
    φγ = φ and γ = θE²/D² (SEF92 Sect. 8.1, expansion of ψ = θE² ln|θ − D|)."""
    d, te = 40.0, 2.0
    px, py = d * np.sin(np.deg2rad(pa)), d * np.cos(np.deg2rad(pa))
    tidal = PointMass(einstein_radius=te, x=px, y=py).hessian(0.0, 0.0)
    shear = ExternalShear(strength=te**2 / d**2, position_angle=pa).hessian(0.0, 0.0)
    np.testing.assert_allclose(tidal, shear, atol=1e-12)


def test_lens_sums_components_and_broadcasts_parameters():
    """A lens is the sum of its parts; array-valued parameters evaluate many models at once."""
    parts = (CASES["SIE"], CASES["shear"], CASES["NFW"])
    lens = Lens(parts)
    x, y = POINTS.T
    total = sum(p.potential(x, y) for p in parts)
    np.testing.assert_allclose(lens.potential(x, y), total)
    radii = np.array([[0.9], [1.0], [1.1]])
    many = Lens((IsothermalEllipsoid(einstein_radius=radii, axis_ratio=0.7, position_angle=20.0),))
    out = many.deflection(x[None, :], y[None, :])[0]
    one = Lens(
        (IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),)
    ).deflection(x, y)[0]
    np.testing.assert_allclose(out[2], one)


@pytest.mark.parametrize(
    "kwargs, text",
    [
        (dict(einstein_radius=-1.0), "einstein_radius must be > 0"),
        (dict(einstein_radius=0.0), "einstein_radius must be > 0"),
        (dict(einstein_radius=1.0, axis_ratio=1.2), "axis_ratio must be in (0, 1]"),
        (dict(einstein_radius=1.0, axis_ratio=0.0), "axis_ratio must be in (0, 1]"),
        (dict(einstein_radius=float("nan")), "must be finite"),
        (dict(einstein_radius=1.0, core=-0.1), "core must be >= 0"),
    ],
)
def test_profile_rules(kwargs, text):
    """Unphysical parameters raise InputError naming the parameter (brief: bad input)."""
    with pytest.raises(InputError, match=re.escape(text)):
        IsothermalEllipsoid(**kwargs)


@pytest.mark.parametrize("name", CASES)
def test_one_pass_deflection_and_potential_agree(name):
    """The shared-work path gives exactly what the separate methods give (common practice)."""
    prof = CASES[name]
    x, y = POINTS.T
    ax, ay, pot = prof.deflection_and_potential(x, y)
    np.testing.assert_allclose(ax, prof.deflection(x, y)[0], rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(ay, prof.deflection(x, y)[1], rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(pot, prof.potential(x, y), rtol=1e-12, atol=1e-14)


def test_blockwise_evaluation_matches_whole_arrays(rng):
    """Large coordinate arrays are evaluated in cache-sized blocks (lens.BLOCK_POINTS); the
    results equal those of one pass over the whole arrays, shape included (common practice)."""
    from lensdelay.lensing import lens as lens_module
    from lensdelay.lensing.lens import Lens
    from lensdelay.lensing.profiles import (
        EllipticalPowerLaw,
        ExternalShear,
        IsothermalEllipsoid,
        NFWHalo,
    )

    lens = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0, x=0.1),
            EllipticalPowerLaw(
                einstein_radius=0.3, slope=2.2, axis_ratio=0.8, position_angle=-10.0
            ),
            NFWHalo(kappa_s=0.2, scale_radius=5.0),
            ExternalShear(strength=0.05, position_angle=-40.0),
        )
    )
    x, y = rng.uniform(-3, 3, (2, 3 * lens_module.BLOCK_POINTS + 17))
    x, y = x.reshape(-1, 1), y.reshape(-1, 1)  # a 2-D shape must come back too
    blocked = [
        lens.deflection_and_potential(x, y, 0.8),
        lens.hessian(x, y),
        lens.convergence(x, y),
        lens.potential(x, y),
        lens.deflection(x, y),
    ]
    saved = lens_module.BLOCK_POINTS
    try:
        lens_module.BLOCK_POINTS = 10**9
        whole = [
            lens.deflection_and_potential(x, y, 0.8),
            lens.hessian(x, y),
            lens.convergence(x, y),
            lens.potential(x, y),
            lens.deflection(x, y),
        ]
    finally:
        lens_module.BLOCK_POINTS = saved
    for b, w in zip(blocked, whole):
        for bb, ww in zip(b if isinstance(b, tuple) else (b,), w if isinstance(w, tuple) else (w,)):
            assert bb.shape == ww.shape == x.shape
            np.testing.assert_allclose(bb, ww, rtol=1e-13, atol=1e-15)


@pytest.mark.parametrize("name", CASES)
def test_hessian_at_the_exact_centre_keeps_poisson(name):
    """At r = 0 the Hessian is its direction average (κ, 0, κ), so ∇²ψ = 2κ (SEF92 eq. 5.10)
    holds at the centre too; an empty Hessian there would give μ = 1."""
    prof = CASES[name]
    hxx, hxy, hyy = prof.hessian(np.array([prof.x]), np.array([prof.y]))
    kappa = prof.convergence(np.array([prof.x]), np.array([prof.y]))
    np.testing.assert_allclose(hxx + hyy, 2 * kappa, rtol=1e-12)


@pytest.mark.parametrize("pa", [0.0, 25.0, 70.0])
def test_slightly_elliptical_sie_is_sis_plus_quadrupole(pa):
    """To first order in δ = 1 − q the SIE's κ = θE/2R is θE/2r · (1 + (δ/2) cos 2(φ − φ0))
    (expanding R² = r²(1 − δ cos 2(φ − φ0)), derivation common practice), i.e. an SIS plus
    the m = 2 multipole with (c, s) = (θE δ/2)(cos 2φ0, sin 2φ0): deflections agree to O(δ²)."""
    te, delta = 1.3, 1e-3
    sie = IsothermalEllipsoid(einstein_radius=te, axis_ratio=1 - delta, position_angle=pa)
    amp = te * delta / 2
    two_phi = np.deg2rad(2 * pa)
    approx = Lens(
        (
            SingularIsothermalSphere(einstein_radius=te),
            IsothermalMultipole(order=2, cosine=amp * np.cos(two_phi), sine=amp * np.sin(two_phi)),
        )
    )
    x, y = POINTS.T
    ax, ay = sie.deflection(x, y)
    bx, by = approx.deflection(x, y)
    assert np.max(np.hypot(ax - bx, ay - by)) < 5 * delta**2 * te
    # and the first-order term itself is seen: without the multipole the error is O(δ)
    cx, cy = SingularIsothermalSphere(einstein_radius=te).deflection(x, y)
    assert np.max(np.hypot(ax - cx, ay - cy)) > 0.1 * delta * te


def test_multipole_order_must_be_an_integer_from_2_to_10():
    with pytest.raises(InputError, match="multipole.order must be an integer from 2 to 10"):
        IsothermalMultipole(order=3.5)
    with pytest.raises(InputError, match="multipole.order must be an integer from 2 to 10"):
        IsothermalMultipole(order=1)


@pytest.mark.parametrize("q", [1.0, 0.6])
def test_truncated_isothermal_total_mass(q):
    """Total mass π θE (a − s) for any q (CONVENTIONS.md; Elíasdóttir et al. 2007): far
    outside, the deflection is that of a point of that mass, |α| r = M/π (SEF92 eq. 8.8)."""
    te, s, a = 0.4, 0.1, 3.0
    prof = TruncatedIsothermal(einstein_radius=te, core=s, cut=a, axis_ratio=q)
    r = 3000.0
    phi = np.linspace(0, 2 * np.pi, 16, endpoint=False)
    ax, ay = prof.deflection(r * np.sin(phi), r * np.cos(phi))
    np.testing.assert_allclose(np.hypot(ax, ay) * r, te * (a - s), rtol=2e-3)


def test_truncated_isothermal_is_the_cored_sie_inside_the_cut():
    """a → ∞ gives the cored SIE (CONVENTIONS.md): at a = 10⁶ arcsec the deflections near
    the centre agree to the outer ellipsoid's tiny interior deflection."""
    sie = IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.7, position_angle=10.0, core=0.2)
    far = TruncatedIsothermal(
        einstein_radius=1.0, axis_ratio=0.7, position_angle=10.0, core=0.2, cut=1e6
    )
    x, y = POINTS.T
    np.testing.assert_allclose(far.deflection(x, y), sie.deflection(x, y), atol=1e-5)


def test_truncated_isothermal_needs_cut_beyond_core():
    with pytest.raises(InputError, match="truncated_isothermal.cut must be greater than core"):
        TruncatedIsothermal(einstein_radius=0.3, core=1.0, cut=0.5)
