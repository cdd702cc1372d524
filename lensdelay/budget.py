"""Uncertainty budget of every image's delay and date.

Each image's delay is Δt = L · (H_ref/H0) · (1 − κext) · g(Ωm) · v-term, with L the
lens-model delay at the reference cosmology; its date adds the detection-date error.
To first order the variance splits into independent terms (the delta method):

* lens model (image astrometry through the posterior): Var(L) · ⟨factor⟩²
* model family (several models): the weighted spread of per-model median delays
* H0 prior: (Δt · σ_H0/H0)²
* κext: (Δt · σ_κ/(1 − κ̄))²
* Ωm: (Δt · ∂ln D_dt/∂Ωm · σ_Ωm)²
* detection date: σ_date² (dates only)
* peculiar velocity of the lens: v along the line of sight shifts z_l by
  (1 + z_l) v/c; (Δt · ∂ln D_dt/∂z_l · (1 + z_l) σ_v/c)²; special-relativistic
  time dilation adds (γ − 1) ≈ v²/2c², far smaller (common practice).

Shares are the terms divided by their sum. Pure computation: no files, no CLI.
"""
from __future__ import annotations

import numpy as np
from astropy import constants as const
from astropy import units as u
from astropy.cosmology import FlatLambdaCDM

from .cosmology import LensDistances
from .forecast import weighted_quantiles

#: Typical line-of-sight velocity dispersion of lens galaxies and groups (common practice).
DEFAULT_VELOCITY_KMS = 300.0
#: Ωm uncertainty used for the budget when the cosmology is flat ΛCDM (Planck-2018-like
#: precision; common practice).
DEFAULT_OM0_SIGMA = 0.02
TERMS = ("lens model", "model family", "H0 prior", "kappa_ext", "Omega_m", "detection date",
         "peculiar velocity")


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


def delay_budget(res: dict, velocity_kms: float = DEFAULT_VELOCITY_KMS,
                 om0_sigma: float = DEFAULT_OM0_SIGMA) -> dict:
    """Variance shares of each image's delay and date (forecast result → JSON-ready dict)."""
    sc, st = res["scenario"], res["settings"]
    tr = sc.transient
    fam = sc.family(tr.family)
    cosmo = res["cosmology"]
    d_om, d_z = ddt_log_derivatives(cosmo, sc.lens_redshift, fam.redshift)
    om_sigma = om0_sigma if d_om != 0.0 else 0.0
    c_kms = const.c.to_value(u.km / u.s)
    rows = []
    w_model = res["model_weights"]
    for im in res["images"]:
        if im["status"] == "seen":
            continue
        med = im["delay_days"]["median"]
        lens_var, medians = 0.0, []
        for m_index, m in enumerate(res["models"]):
            lab = im["label"]
            if lab not in m.lens_only_delay:
                continue
            L = m.lens_only_delay[lab]
            w = np.where(np.isfinite(L), m.weights, 0.0)
            if w.sum() <= 0:
                continue
            q16, q50, q84 = weighted_quantiles(L, w, [16, 50, 84])
            factor = med / q50 if q50 else 1.0
            lens_var += w_model[m_index] * (0.5 * (q84 - q16) * factor) ** 2
            medians.append((w_model[m_index], q50 * factor))
        if len(medians) > 1:
            ws = np.array([a for a, _ in medians])
            vs = np.array([b for _, b in medians])
            mean = np.sum(ws * vs) / ws.sum()
            family_var = float(np.sum(ws * (vs - mean) ** 2) / ws.sum())
        else:
            family_var = 0.0
        h0_var = (med * st.h0_prior[1] / st.h0_prior[0]) ** 2 if st.h0_prior else 0.0
        k_var = (med * st.kappa_ext[1] / (1 - st.kappa_ext[0])) ** 2
        om_var = (med * d_om * om_sigma) ** 2
        v_var = (med * d_z * (1 + sc.lens_redshift) * velocity_kms / c_kms) ** 2
        date_var = tr.date_sigma_days ** 2
        delay_terms = [lens_var, family_var, h0_var, k_var, om_var, 0.0, v_var]
        date_terms = delay_terms[:5] + [date_var, v_var]
        row = {"family": im["family"], "label": im["label"], "delay_median_days": med, "delay": {}, "date": {}}
        for name, terms in (("delay", delay_terms), ("date", date_terms)):
            total = sum(terms)
            for term, var in zip(TERMS, terms):
                row[name][term] = {"sigma_days": float(np.sqrt(var)),
                                   "percent": float(100 * var / total) if total > 0 else 0.0}
        rows.append(row)
    return {"images": rows, "assumptions": {
        "peculiar_velocity_sigma_kms": velocity_kms, "Omega_m_sigma": om_sigma,
        "dlnDdt_dOm0": d_om, "dlnDdt_dzl": d_z,
        "H0_prior": list(st.h0_prior) if st.h0_prior else None, "kappa_ext": list(st.kappa_ext),
        "note": "first-order (delta-method) split into independent terms; the forecast samples "
                "themselves vary the lens model, H0, kappa_ext and the detection date"}}
