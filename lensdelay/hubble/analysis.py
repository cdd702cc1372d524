"""H0 from measured delays, and how predicted delays depend on H0, Ωm and w.

Delays scale as D_dt (1 − κext): the data constrain D_dt^model = D_dt (1 − κext), so
a sampler with H0 free at κext = 0 ("H0_eff") gives the physical answer exactly as
H0 = H0_eff · (1 − κext) · D̂(Ωm)/D̂(Ωm_ref), D̂ the time-delay distance at fixed H0
(Falco, Gorenstein & Shapiro 1985 for the mass sheet; the 1/H0 scaling is exact
without radiation). Priors on κext and Ωm are then applied sample by sample.
Pure computation: no files, no CLI.
"""

from __future__ import annotations

import functools
import itertools

import numpy as np
from astropy import units as u
from astropy.cosmology import FlatLambdaCDM

from lensdelay.lensing.delays import delay_scale, fermat_difference_to_days
from lensdelay.lensing.distances import DelayDistanceTable, LensDistances
from lensdelay.inference.priors import draw_kappa
from lensdelay.inference.summaries import quantile_summary as summary

__all__ = [
    "KAPPA_COMPARISON",
    "pair_delays",
    "delay_curves",
    "h0_posterior",
    "kappa_comparison",
]


KAPPA_COMPARISON = ((0.0, 0.0), (0.0, 0.05), (0.05, 0.05), (-0.05, 0.05), (0.1, 0.05))


def pair_delays(like, rows) -> dict:
    """Lens-model delays (days, scenario cosmology) of every observed image pair, per row."""
    preds = like.predict(rows)
    out = {}
    for k, (fam, pred) in enumerate(zip(like.families, preds)):
        per_arcsec2 = like.family_days(k, rows)  # per row when the redshift is free
        for i, j in itertools.combinations(range(len(fam.labels)), 2):
            scale = like.delay_scale(rows) if like.use_delays else 1.0
            days = fermat_difference_to_days(
                pred["fermat"][:, j] - pred["fermat"][:, i], per_arcsec2, scale
            )
            out[(fam.label, fam.labels[j], fam.labels[i])] = days
    return out


def delay_curves(
    pairs: dict,
    h0_ref: float,
    h0_grid=None,
    cosmology=None,
    z_l=None,
    z_s_of=None,
    om0_grid=None,
    w_grid=None,
) -> list[dict]:
    """Median and 68/95% bands of each pair's delay along H0 (and optionally Ωm, w)."""
    h0_grid = np.linspace(50.0, 90.0, 41) if h0_grid is None else np.asarray(h0_grid)
    rows = []
    for (fam, a, b), days in pairs.items():
        q = np.array(list(summary(days).values()))  # median, p16, p84, p2.5, p97.5
        for h0 in h0_grid:
            rows.append(
                {
                    "family": fam,
                    "image": a,
                    "relative_to": b,
                    "axis": "H0",
                    "value": float(h0),
                    **dict(
                        zip(
                            ("median", "p16", "p84", "p2.5", "p97.5"),
                            map(float, q * delay_scale(h0, h0_ref)),
                        )
                    ),
                }
            )
        base = None
        for axis, grid in (("Om0", om0_grid), ("w0", w_grid)):
            if grid is None or cosmology is None:
                continue
            z_s = z_s_of[fam]
            if base is None:
                base = LensDistances(cosmology, z_l, z_s).time_delay_distance(z_s).to_value(u.Mpc)
            for v in grid:
                if axis == "Om0":
                    c = FlatLambdaCDM(H0=cosmology.H0, Om0=v, Tcmb0=cosmology.Tcmb0)
                else:
                    from astropy.cosmology import FlatwCDM

                    c = FlatwCDM(H0=cosmology.H0, Om0=cosmology.Om0, w0=v, Tcmb0=cosmology.Tcmb0)
                ratio = LensDistances(c, z_l, z_s).time_delay_distance(z_s).to_value(u.Mpc) / base
                rows.append(
                    {
                        "family": fam,
                        "image": a,
                        "relative_to": b,
                        "axis": axis,
                        "value": float(v),
                        **dict(
                            zip(("median", "p16", "p84", "p2.5", "p97.5"), map(float, q * ratio))
                        ),
                    }
                )
    return rows


@functools.lru_cache(maxsize=16)
def _table(z_l: float, z_s: float, lo: float, hi: float) -> DelayDistanceTable:
    """Fast D_dt(Ωm) tables are built once per (z_l, z_s, range) and reused."""
    return DelayDistanceTable(z_l, z_s, (lo, hi), nodes=25)


def h0_posterior(h0_eff, like, *, kappa_ext=(0.0, 0.05), om0_prior=None, rng=None) -> dict:
    """H0 and D_dt posteriors from samples of H0_eff (κext = 0, scenario Ωm)."""
    rng = np.random.default_rng(0) if rng is None else rng
    sc = like.scenario
    cosmo = sc.cosmology
    fam = sc.family(sc.delays[0].family)
    n = len(h0_eff)
    kappa = draw_kappa(kappa_ext[0], kappa_ext[1], n, rng)
    ratio = np.ones(n)
    om_used = None
    if om0_prior is not None and isinstance(cosmo, FlatLambdaCDM) and om0_prior[1] > 0:
        lo = max(0.05, om0_prior[0] - 6 * om0_prior[1])
        hi = min(0.95, om0_prior[0] + 6 * om0_prior[1])
        table = _table(sc.lens_redshift, fam.redshift, lo, hi)
        om = np.clip(rng.normal(om0_prior[0], om0_prior[1], n), lo, hi)
        ratio = table(70.0, om) / table(70.0, cosmo.Om0)
        om_used = list(om0_prior)
    h0 = h0_eff * (1.0 - kappa) * ratio
    d_ref = (
        LensDistances(cosmo, sc.lens_redshift, sc.reference_source_redshift)
        .time_delay_distance(fam.redshift)
        .to_value(u.Mpc)
    )
    d_model = d_ref * delay_scale(h0_eff, like.h0_ref)  # what the delays measure: D_dt (1 − κ)
    d_true = d_model / (1.0 - kappa)
    return {
        "H0": summary(h0, np.ones(n)),
        "D_dt_Mpc": summary(d_true, np.ones(n)),
        "D_dt_model_Mpc": summary(d_model, np.ones(n)),
        "kappa_ext": list(kappa_ext),
        "Om0_prior": om_used,
        "samples_H0": h0,
    }


def kappa_comparison(h0_eff, like, om0_prior=None, extra=None, rng=None) -> list[dict]:
    """The H0 answer under a few κext priors side by side (the mass-sheet degeneracy)."""
    priors = list(KAPPA_COMPARISON) + (
        [tuple(extra)] if extra and tuple(extra) not in KAPPA_COMPARISON else []
    )
    out = []
    for k in priors:
        post = h0_posterior(
            h0_eff,
            like,
            kappa_ext=k,
            om0_prior=om0_prior,
            rng=np.random.default_rng(0) if rng is None else rng,
        )
        out.append({"kappa_ext": list(k), "H0": post["H0"], "samples_H0": post["samples_H0"]})
    return out
