"""Uncertainty budget of every image's delay and date, from the forecast's own samples.

Each image's date is D = t0 + Δt with Δt = L · (H_ref/H0) · (1 − κ_ext), L the
lens-model delay at the reference cosmology. Around the means, per sample,

    D − D̄ ≈ c_lens + c_family + c_H0 + c_κ + c_t0,

    c_lens   = s̄ (S − S̄_m)            (within the sample's own model m)
    c_pert   = s̄ (P − P̄_m)            (unseen perturbers, drawn per sample)
    c_family = s̄ (L̄_m − L̄)            (between models: their mixture)
    c_H0     = L̄ (1 − κ̄) H_ref (1/H0 − mean(1/H0))
    c_κ      = L̄ H_ref mean(1/H0) (κ̄ − κ_ext)
    c_t0     = t0 − t̄0

with s̄ the mean delay scale, L = S + P the smooth model's delay S plus the change P
the unseen perturbers make (:mod:`lensdelay.forecast.perturbers`). Each term is
Cov(D, c_k) (weighted): the terms sum to Var(D) up to the linearisation's remainder,
which is reported too. Before any measurement the sources are independent and each
term is simply Var(c_k); after a measured delay or a sighting they are correlated (a
delay fixes L·(H_ref/H0)(1 − κ), not each factor) and the covariance terms split what
variance is left, some of them negative. The budget is computed on the samples after the update.

Two more terms are not sampled in the windows (each below 1% of a delay for galaxy
lenses) and are given by first-order propagation (the delta method):

* Ωm: (Δt · ∂ln D_dt/∂Ωm · σ_Ωm)²
* peculiar velocity of the lens: v along the line of sight shifts z_l by
  (1 + z_l) v/c; (Δt · ∂ln D_dt/∂z_l · (1 + z_l) σ_v/c)²; special-relativistic time
  dilation adds (γ − 1) ≈ v²/2c², far smaller (common practice).

Pure computation: no files, no CLI.
"""

from __future__ import annotations

import numpy as np
from astropy import constants as const
from astropy import units as u
from astropy.cosmology import FlatLambdaCDM

from lensdelay.lensing.distances import LensDistances

__all__ = [
    "DEFAULT_VELOCITY_KMS",
    "DEFAULT_OM0_SIGMA",
    "SAMPLED_TERMS",
    "EXTRA_TERMS",
    "TERMS",
    "ddt_log_derivatives",
    "covariance_terms",
    "delay_budget",
]


#: Typical line-of-sight velocity dispersion of lens galaxies and groups (common practice).
DEFAULT_VELOCITY_KMS = 300.0
#: Ωm uncertainty used for the budget when the cosmology is flat ΛCDM (Planck-2018-like
#: precision; common practice).
DEFAULT_OM0_SIGMA = 0.02
#: Terms carried by the forecast's samples.
SAMPLED_TERMS = (
    "lens model",
    "unseen perturbers",
    "model family",
    "H0 prior",
    "kappa_ext",
    "detection date",
)
#: Terms propagated to first order only (not in the windows).
EXTRA_TERMS = ("Omega_m", "peculiar velocity")
TERMS = SAMPLED_TERMS + EXTRA_TERMS


def ddt_log_derivatives(cosmology, z_l: float, z_s: float) -> tuple[float, float]:
    """∂ln D_dt/∂Ωm (flat ΛCDM, else 0) and ∂ln D_dt/∂z_l, by central differences."""

    def ddt(cosmo, zl):
        return LensDistances(cosmo, zl, z_s).time_delay_distance(z_s).to_value(u.Mpc)

    h = 1e-4
    base = ddt(cosmology, z_l)
    d_z = (ddt(cosmology, z_l + h) - ddt(cosmology, z_l - h)) / (2 * h) / base
    d_om = 0.0
    if isinstance(cosmology, FlatLambdaCDM):
        h0, om = cosmology.H0.value, cosmology.Om0
        up = FlatLambdaCDM(H0=h0, Om0=om + 1e-3, Tcmb0=cosmology.Tcmb0)
        dn = FlatLambdaCDM(H0=h0, Om0=om - 1e-3, Tcmb0=cosmology.Tcmb0)
        d_om = (ddt(up, z_l) - ddt(dn, z_l)) / 2e-3 / base
    return float(d_om), float(d_z)


def _mean(x, w):
    return float(np.sum(w * x))


def covariance_terms(samples, h0_ref: float, with_date: bool) -> dict:
    """Cov(D, c_k) for the sampled sources (module docstring), plus the remainder.

    ``samples`` (an :class:`~lensdelay.forecast.result.ImageSampleSet`) holds per-sample
    ``weights``, ``lens_days``, ``h0``, ``kappa``, ``t0``, ``model`` and ``delay``;
    ``with_date`` adds t0 (the date's budget) or leaves it out (the delay's).
    """
    weights = samples.weights
    ok = (weights > 0) & np.isfinite(samples.delay) & np.isfinite(samples.t0)
    w = weights[ok] / weights[ok].sum()
    L = samples.lens_days[ok]
    P = (
        np.nan_to_num(samples.perturber_days[ok])
        if samples.perturber_days is not None
        else np.zeros_like(L)
    )
    inv_h0 = 1.0 / samples.h0[ok]
    kappa = samples.kappa[ok]
    t0 = samples.t0[ok]
    model = samples.model[ok]
    total = samples.delay[ok] + (t0 if with_date else 0.0)
    scale = h0_ref * inv_h0 * (1.0 - kappa)
    s_bar, L_bar = _mean(scale, w), _mean(L, w)
    L_model = np.zeros_like(L)
    P_model = np.zeros_like(L)
    for m in np.unique(model):
        sel = model == m
        norm = max(np.sum(w[sel]), 1e-300)
        L_model[sel] = np.sum(w[sel] * L[sel]) / norm
        P_model[sel] = np.sum(w[sel] * P[sel]) / norm
    contrib = {
        "lens model": s_bar * ((L - P) - (L_model - P_model)),
        "unseen perturbers": s_bar * (P - P_model),
        "model family": s_bar * (L_model - L_bar),
        "H0 prior": L_bar * (1.0 - _mean(kappa, w)) * h0_ref * (inv_h0 - _mean(inv_h0, w)),
        "kappa_ext": L_bar * h0_ref * _mean(inv_h0, w) * (_mean(kappa, w) - kappa),
        "detection date": (t0 - _mean(t0, w)) if with_date else np.zeros_like(t0),
    }
    centred = total - _mean(total, w)
    linear = sum(contrib.values())
    contrib["remainder"] = centred - linear
    return {k: float(np.sum(w * centred * (c - _mean(c, w)))) for k, c in contrib.items()} | {
        "_variance": float(np.sum(w * centred**2))
    }


def delay_budget(
    res, velocity_kms: float = DEFAULT_VELOCITY_KMS, om0_sigma: float = DEFAULT_OM0_SIGMA
) -> dict:
    """Each source's share of each image's delay and date variance (forecast result → dict)."""
    sc = res.scenario
    tr = sc.transient
    fam = sc.family(tr.family)
    cosmo = res.cosmology
    h0_ref = float(cosmo.H0.value)
    d_om, d_z = ddt_log_derivatives(cosmo, sc.lens_redshift, fam.redshift)
    om_sigma = om0_sigma if d_om != 0.0 else 0.0
    c_kms = const.c.to_value(u.km / u.s)
    rows = []
    for im in res.images:
        if im.label == tr.seen_in and im.observed:
            continue
        med = im.delay_days["median"]
        extra = {
            "Omega_m": (med * d_om * om_sigma) ** 2,
            "peculiar velocity": (med * d_z * (1 + sc.lens_redshift) * velocity_kms / c_kms) ** 2,
        }
        row = {"family": im.family, "label": im.label, "delay_median_days": med}
        for name, with_date in (("delay", False), ("date", True)):
            terms = covariance_terms(im.samples, h0_ref, with_date)
            variance = terms.pop("_variance")
            part = {}
            for term in SAMPLED_TERMS + ("remainder",):
                var = terms[term]
                part[term] = {
                    "sigma_days": float(np.copysign(np.sqrt(abs(var)), var)),
                    "percent": float(100 * var / variance) if variance > 0 else 0.0,
                    "in_windows": True,
                }
            for term, var in extra.items():
                part[term] = {
                    "sigma_days": float(np.sqrt(var)),
                    "percent": float(100 * var / variance) if variance > 0 else 0.0,
                    "in_windows": False,
                }
            row[name] = part
            row[f"{name}_sigma_days"] = float(np.sqrt(variance))
        rows.append(row)
    st = res.settings
    return {
        "images": rows,
        "assumptions": {
            "peculiar_velocity_sigma_kms": velocity_kms,
            "Omega_m_sigma": om_sigma,
            "dlnDdt_dOm0": d_om,
            "dlnDdt_dzl": d_z,
            "H0_prior": list(st.h0_prior) if st.h0_prior else None,
            "kappa_ext": list(st.kappa_ext),
            "unseen_perturbers": (
                st.perturbers.as_dict()
                if st.perturbers is not None and st.perturbers.active
                else None
            ),
            "note": "each sampled term is Cov(date, contribution) over the forecast's samples "
            "after any "
            "update, so the terms add up to the variance (negative terms: sources the "
            "measurements tied together); Omega_m and the lens velocity are first-order "
            "estimates that the windows do not include",
        },
    }
