"""H0 dependence, mass-sheet degeneracy and the uncertainty budget (issue 5)."""

import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.cosmology import FlatLambdaCDM

from lensdelay.forecast.budget import ddt_log_derivatives
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.lensing.distances import DAYS_PER_MPC_ARCSEC2, LensDistances, time_dilation
from lensdelay.errors import LensdelayWarning
from lensdelay.api import infer_h0 as run_hubble
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import (
    ExternalShear,
    IsothermalEllipsoid,
    MassSheet,
    SingularIsothermalSphere,
)
from lensdelay.model.simulate import simulate_family, to_toml

pytestmark = pytest.mark.integration


@pytest.mark.parametrize("h0", [55.0, 67.4, 82.0])
def test_delays_scale_exactly_as_inverse_h0(h0):
    """Without radiation every distance is c/H0 × f(z, Ωm), so D_dt ∝ 1/H0 exactly (Hogg 1999,
    eq. 14)."""
    ref = LensDistances(FlatLambdaCDM(H0=70.0, Om0=0.3, Tcmb0=0.0), 0.5, 2.0).time_delay_distance(
        2.0
    )
    other = LensDistances(FlatLambdaCDM(H0=h0, Om0=0.3, Tcmb0=0.0), 0.5, 2.0).time_delay_distance(
        2.0
    )
    assert (other / ref).decompose().value == pytest.approx(70.0 / h0, rel=1e-12)


@pytest.mark.parametrize("kappa", [0.1, -0.08, 0.3])
def test_mass_sheet_transformation(kappa):
    """Falco, Gorenstein & Shapiro 1985: (1−κ)·lens + sheet κ, source × (1−κ): same images,
    same flux ratios, every delay × (1−κ)."""
    lam = 1 - kappa
    lens = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=25.0),
            ExternalShear(strength=0.06, position_angle=-30.0),
        )
    )
    msd = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.1 * lam, axis_ratio=0.7, position_angle=25.0),
            ExternalShear(strength=0.06 * lam, position_angle=-30.0),
            MassSheet(convergence_value=kappa),
        )
    )
    a = find_images(lens, [0.03], [0.02])
    b = find_images(msd, [0.03 * lam], [0.02 * lam])
    assert len(a) == len(b) == 4
    order_b = [int(np.argmin(np.hypot(b.x - x, b.y - y))) for x, y in zip(a.x, a.y)]
    np.testing.assert_allclose(b.x[order_b], a.x, atol=1e-9)
    np.testing.assert_allclose(b.y[order_b], a.y, atol=1e-9)
    mu_a, mu_b = a.magnification, b.magnification[order_b]
    np.testing.assert_allclose(mu_b / mu_b[0], mu_a / mu_a[0], rtol=1e-8)
    np.testing.assert_allclose(
        b.fermat[order_b] - b.fermat[order_b][0],
        lam * (a.fermat - a.fermat[0]),
        rtol=1e-8,
        atol=1e-12,
    )


def _double_scenario(tmp_path, h0_true=70.0, sigma_frac=0.02):
    te, beta, z_l, z_s = 1.0, 0.3, 0.5, 2.0
    lens = Lens((SingularIsothermalSphere(einstein_radius=te),))
    fam = simulate_family(
        lens, beta, 0.0, label="q", redshift=z_s, sigma=1e-5, rng=np.random.default_rng(0)
    )
    d_dt = LensDistances(
        FlatLambdaCDM(H0=h0_true, Om0=0.3, Tcmb0=0.0), z_l, z_s
    ).time_delay_distance(z_s)
    theta_a, theta_b = te + beta, te - beta
    days = d_dt.to_value(u.Mpc) * DAYS_PER_MPC_ARCSEC2 * (theta_a**2 - theta_b**2) / 2
    doc = {
        "lens": {"redshift": z_l},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [fam],
        "delay": [
            {
                "family": "q",
                "image": "B",
                "relative_to": "A",
                "days": days,
                "sigma": sigma_frac * days,
            }
        ],
        "mass": [{"profile": "SIS", "einstein_radius": te}],
    }
    path = tmp_path / "double.toml"
    path.write_text(to_toml(doc))
    return path, days


def test_sis_h0_from_one_delay_matches_closed_form(tmp_path):
    """SIS: Δt = (D_dt/c)(θA² − θB²)/2 (SEF92, Sect. 8.1.4) inverted for D_dt, hence H0."""
    path, days = _double_scenario(tmp_path, h0_true=64.0, sigma_frac=0.002)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = run_hubble(
            str(path), kappa_ext=(0.0, 0.0), om0=(0.3, 0.0), walkers=8, steps=400, progress=False
        )
    assert res.h0["H0"]["median"] == pytest.approx(64.0, rel=0.005)
    expected_ddt = 2 * days / DAYS_PER_MPC_ARCSEC2 / ((1.3) ** 2 - 0.7**2)
    assert res.h0["D_dt_Mpc"]["median"] == pytest.approx(expected_ddt, rel=0.005)
    # the mass-sheet degeneracy: H0 ∝ (1 − κ_ext)
    comp = {tuple(k["kappa_ext"]): k["H0"]["median"] for k in res.kappa_comparison}
    assert comp[(0.1, 0.05)] / comp[(0.0, 0.0)] == pytest.approx(0.9, rel=0.01)


def test_quad_delays_at_chosen_h0_recovered(tmp_path):
    """Injection-recovery: three delays simulated at H0 = 66 with 2% errors give H0 within 2σ
    (issue 5)."""
    truth = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.2, axis_ratio=0.7, position_angle=30.0),
            ExternalShear(strength=0.05, position_angle=-20.0),
        )
    )
    rng = np.random.default_rng(8)
    fam = simulate_family(truth, 0.05, 0.03, label="s", redshift=1.8, sigma=0.003, rng=rng)
    t = find_images(truth, [0.05], [0.03])
    t = t.select(np.abs(t.magnification) > 0.05)
    scale = LensDistances(FlatLambdaCDM(H0=66.0, Om0=0.3, Tcmb0=0.0), 0.45, 1.8).days_per_arcsec2(
        1.8
    )
    delays = []
    for k in range(1, len(t)):
        d = (t.fermat[k] - t.fermat[0]) * scale
        delays.append(
            {
                "family": "s",
                "image": fam["image"][k]["label"],
                "relative_to": "A",
                "days": d + rng.normal(0, 0.02 * abs(d)),
                "sigma": 0.02 * abs(d),
            }
        )
    doc = {
        "lens": {"redshift": 0.45},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [fam],
        "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.01},
        "delay": delays,
        "model": "models/sie_shear.toml",
    }
    path = tmp_path / "quad.toml"
    path.write_text(to_toml(doc))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = run_hubble(
            str(path), kappa_ext=(0.0, 0.0), om0=(0.3, 0.0), walkers=24, steps=800, progress=False
        )
    h = res.h0["H0"]
    sigma = 0.5 * (h["p84"] - h["p16"])
    assert abs(h["median"] - 66.0) < 2 * sigma


def test_peculiar_velocity_terms_are_small():
    """Time dilation at 10,000 km/s is ≈ 0.056 % (common practice); for a 300 km/s lens the
    redshift shift (1+z)v/c changes D_dt by well under 1 % (our budget's velocity term)."""
    assert time_dilation(10000.0) == pytest.approx(5.6e-4, rel=0.01)
    assert time_dilation(300.0) < 1e-6
    _, d_z = ddt_log_derivatives(DEFAULT_COSMOLOGY, 0.5, 2.0)
    relative = abs(d_z) * 1.5 * 300.0 / 299792.458
    assert relative < 0.01


@pytest.mark.parametrize(
    "argv, message",
    [
        (["--kappa-ext", "1.0", "0.05"], "--kappa-ext mean must be in [-0.5, 1), got 1"),
        (["--kappa-ext", "-5", "0.05"], "--kappa-ext mean must be in [-0.5, 1), got -5"),
        (
            ["--kappa-ext", "0.9", "0.5"],
            "--kappa-ext prior must put at most 0.001 of its probability",
        ),
        (
            ["--kappa-ext", "0", "0.6"],
            "--kappa-ext prior must put at most 0.001 of its probability",
        ),
        (["--kappa-ext", "0.0", "-0.1"], "--kappa-ext sigma must be >= 0"),
    ],
)
def test_hubble_bad_arguments(argv, message, tmp_path, capsys):
    """κ_ext ≥ 1 (a sheet that would flip every delay) and a negative sigma are refused (issue
    5)."""
    from lensdelay.cli.main import main

    path, _ = _double_scenario(tmp_path)
    out = tmp_path / "out"
    assert main(["hubble", str(path), "--out", str(out), "--quiet", *argv]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
    assert not out.exists()


def test_h0_under_another_cosmology_class(tmp_path):
    """Any astropy class on request: with w0 = -0.8 the same delay implies a different H0, and
    the delay still scales as 1/H0 (no radiation; Hogg 1999)."""
    from astropy.cosmology import FlatwCDM

    path, days = _double_scenario(tmp_path, h0_true=70.0, sigma_frac=0.002)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = run_hubble(
            str(path),
            kappa_ext=(0.0, 0.0),
            om0=(0.3, 0.0),
            walkers=8,
            steps=300,
            progress=False,
            cosmology_class="FlatwCDM",
            class_params={"w0": -0.8},
        )
    ref = LensDistances(FlatLambdaCDM(H0=70.0, Om0=0.3, Tcmb0=0.0), 0.5, 2.0).time_delay_distance(
        2.0
    )
    alt = LensDistances(
        FlatwCDM(H0=70.0, Om0=0.3, w0=-0.8, Tcmb0=0.0), 0.5, 2.0
    ).time_delay_distance(2.0)
    expected = 70.0 * (alt / ref).decompose().value
    assert res.h0["H0"]["median"] == pytest.approx(expected, rel=0.005)


def test_hubble_command_writes_every_file(tmp_path):
    """End to end on the demo double with its measured delay: hubble.json carries H0 and D_dt
    summaries and the κ_ext comparison; the curve table and both figures are written."""
    import json

    from lensdelay.cli.main import main

    out = tmp_path / "out"
    assert (
        main(
            [
                "hubble",
                "scenarios/ostrin_double.toml",
                "--out",
                str(out),
                "--steps",
                "300",
                "--walkers",
                "16",
                "--quiet",
            ]
        )
        == 0
    )
    doc = json.loads((out / "hubble.json").read_text())
    assert set(doc["H0"]) == {"median", "p16", "p84", "p2.5", "p97.5"}
    assert 40 < doc["H0"]["median"] < 110 and doc["kappa_ext_comparison"]
    # the quality of both fits is kept (issue 13): chi2, dof, p, bound hits
    for key in ("fit_quality", "joint_fit_quality"):
        q = doc[key]
        assert {"chi2", "dof", "p_value", "at_bounds", "position_model_error_mas"} <= set(q)
    # one more datum (the delay) and one more parameter (H0)
    assert doc["joint_fit_quality"]["dof"] == doc["fit_quality"]["dof"]
    for name in ("hubble_curves.ecsv", "hubble_curves.png", "hubble_posterior.pdf"):
        assert (out / name).stat().st_size > 0


@pytest.mark.parametrize(
    "option, message",
    [
        ({"om0": 0.3}, r"om0 must be two numbers \(mean, sigma\), got 0.3"),
        ({"om0": "0.3 0.02"}, r"om0 must be two numbers \(mean, sigma\), got '0.3 0.02'"),
        ({"kappa_ext": 0.05}, r"kappa_ext must be two numbers \(mean, sigma\), got 0.05"),
    ],
)
def test_python_priors_of_the_wrong_kind_are_one_input_error(option, message):
    """infer_h0's priors checked before any fit (they were TypeErrors from inside)."""
    from pathlib import Path

    from lensdelay.errors import InputError

    quad = Path(__file__).resolve().parent.parent / "scenarios" / "vellmar_quad.toml"
    with pytest.raises(InputError, match=message):
        run_hubble(quad, **option)
