"""Distances: astropy as the reference, plus closed forms and handbook figures."""

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from astropy.cosmology import FlatLambdaCDM, Planck18, z_at_value

from lensdelay.model.cosmology import DEFAULT_COSMOLOGY, cosmology_from_spec
from lensdelay.lensing.distances import (
    DAYS_PER_MPC_ARCSEC2,
    DelayDistanceTable,
    LensDistances,
    time_dilation,
)
from lensdelay.errors import InputError

C_KMS = const.c.to_value(u.km / u.s)


def test_einstein_de_sitter_closed_form():
    """D_A = (2c/H0)(1 − 1/√(1+z))/(1+z) for Ωm = 1 (Hogg 1999, astro-ph/9905116, Sect. 5)."""
    eds = FlatLambdaCDM(H0=70.0, Om0=1.0, Tcmb0=0.0)
    lens = LensDistances(eds, 0.5, 2.0)
    for z in (0.7, 1.0, 2.0, 3.5):
        closed = 2 * C_KMS / 70.0 * (1 - 1 / np.sqrt(1 + z)) / (1 + z)
        assert lens.source_distance(z).to_value(u.Mpc) == pytest.approx(closed, rel=1e-9)
    # D_ls in a flat universe = (D_C(z_s) − D_C(z_l)) / (1 + z_s) (Hogg 1999, eq. 19)
    dc = lambda z: 2 * C_KMS / 70.0 * (1 - 1 / np.sqrt(1 + z))  # noqa: E731
    assert lens.lens_source_distance(2.0).to_value(u.Mpc) == pytest.approx(
        (dc(2.0) - dc(0.5)) / 3.0, rel=1e-9
    )


def test_time_delay_distance_matches_astropy():
    """D_dt = (1 + z_l) D_l D_s / D_ls (SEF92 eq. 5.45), astropy distances as reference."""
    lens = LensDistances(Planck18, 0.48, 1.62)
    dl = Planck18.angular_diameter_distance(0.48)
    ds = Planck18.angular_diameter_distance(1.62)
    dls = Planck18.angular_diameter_distance(0.48, 1.62)
    assert lens.time_delay_distance(1.62).to_value(u.Mpc) == pytest.approx(
        (1.48 * dl * ds / dls).to_value(u.Mpc), rel=1e-12
    )


def test_deflection_scale():
    """Scale = (D_ls/D_s)(z_s)/(D_ls/D_s)(z_ref): 1 at z_ref, grows with z_s (CONVENTIONS.md)."""
    lens = LensDistances(DEFAULT_COSMOLOGY, 0.3, 1.0)
    assert lens.deflection_scale(1.0) == pytest.approx(1.0)
    assert lens.deflection_scale(0.6) < 1.0 < lens.deflection_scale(3.0)


def test_rule_of_thumb_days_per_gpc_arcsec2():
    """1 Gpc × 1 arcsec² ≈ 28.0 days (CONVENTIONS.md, from the definitions)."""
    assert 1000.0 * DAYS_PER_MPC_ARCSEC2 == pytest.approx(28.0, abs=0.05)


@pytest.mark.parametrize(
    "gyr, lo, hi", [(1.0, 1.036, 1.036), (5.0, 6.06, 6.09), (10.0, 15.9, 16.0)]
)
def test_light_travel_vs_comoving_distance(gyr, lo, hi):
    """Light that travelled 1/5/10 Gyr left a source now ≈ 1.036 / 6.06-6.09 / 15.9-16.0
    billion light years away, Planck-2018-like cosmology (common practice; 1.5 % tolerance)."""
    z = z_at_value(Planck18.lookback_time, gyr * u.Gyr)
    dc = Planck18.comoving_distance(z).to_value(u.lyr) / 1e9
    assert lo * 0.985 <= dc <= hi * 1.015


def test_time_dilation_at_10000_kms():
    """γ − 1 ≈ 0.056 % at 10,000 km/s (special relativity; common practice)."""
    assert time_dilation(10000.0) == pytest.approx(5.6e-4, rel=0.01)


def test_fast_table_accuracy_and_exact_h0_scaling(rng):
    """Fast D_dt within 1e-6 of astropy (issue requirement) and exact 1/H0 scaling
    (no radiation, so E(z) does not depend on H0: Hogg 1999, eq. 14)."""
    table = DelayDistanceTable(0.5, 2.1)
    assert table.max_relative_error <= 1e-6
    h0 = rng.uniform(50, 90, 8)
    om = rng.uniform(0.1, 0.6, 8)
    fast = table(h0, om)
    for f, h, o in zip(fast, h0, om):
        ref = (
            LensDistances(FlatLambdaCDM(H0=h, Om0=o, Tcmb0=0.0), 0.5, 2.1)
            .time_delay_distance(2.1)
            .to_value(u.Mpc)
        )
        assert f == pytest.approx(ref, rel=1e-6)


@pytest.mark.parametrize(
    "spec, text",
    [
        ({"name": "Planck99"}, "cosmology.name must be one of"),
        ({"H0": 70.0}, "missing 'Om0'"),
        ({"H0": -5.0, "Om0": 0.3}, "cosmology.H0 must be between"),
        ({"H0": 70.0, "Om0": 0.0}, r"cosmology.Om0 must be in \(0, 1.5\]"),
    ],
)
def test_bad_cosmology(spec, text):
    """Bad [cosmology] tables are refused with the field named (brief: bad input)."""
    with pytest.raises(InputError, match=text):
        cosmology_from_spec(spec)


def test_source_behind_lens_required():
    """z_s ≤ z_l is refused (a source in front of the lens is not lensed)."""
    with pytest.raises(InputError, match="greater than the lens redshift"):
        LensDistances(DEFAULT_COSMOLOGY, 0.5, 0.5)
