"""``fit.json``: a fit and its posterior as JSON."""

from __future__ import annotations

import numpy as np

from lensdelay.inference.summaries import quantile_summary

__all__ = ["fit_json"]


def fit_json(res: dict) -> dict:
    """The JSON document of a fit (and its posterior, if sampled)."""
    fr, like = res.fit, res.likelihood
    doc = dict(res.provenance)
    doc.update(
        {
            "scenario": res.scenario.name,
            "model": fr.model_label,
            "parameters": {
                n: {"value": float(v), "stderr": (float(e) if np.isfinite(e) else None)}
                for n, v, e in zip(fr.names, fr.values, fr.errors)
            },
            "chi2": fr.chi2,
            "quality": fr.quality(),
            "constraints": fr.n_constraints,
            "free_parameters": fr.n_parameters,
            "dof": fr.dof,
            "aic": fr.aic,
            "bic": fr.bic,
            "residuals_mas": fr.residuals_mas,
            "rms_arcsec": fr.rms_arcsec(),
            "unobserved_images": fr.unobserved_images,
            "at_bounds": fr.at_bounds,
            "notes": fr.notes,
            "converged": fr.success,
            "delays_linearised": list(res.linear_delays),
            "uses_delays": like.use_delays,
            "uses_flux_ratios": like.use_fluxes,
            "flux_floor_mag": like.flux_floor_mag if like.use_fluxes else None,
            "prior": like.prior,
            # part of chi2 paid for predicted, unobserved images brighter than the faintest observed
            "chi2_extra_images": float(
                np.sum(like.extra_image_residuals(like.predict(fr.values[None, :])) ** 2)
            ),
        }
    )
    ch = res.chain
    if ch is not None:
        s = ch.samples()
        if ch.move == "importance":
            doc["posterior"] = {
                "method": "conditional importance sampling",
                "prior": like.prior,
                "draws": ch.draws,
                "effective_samples": ch.effective_samples,
                "resampled": len(s),
                "warnings": ch.warnings,
                "summary": {n: quantile_summary(s[:, i]) for i, n in enumerate(ch.names)},
            }
            return doc
        doc["posterior"] = {
            "move": ch.move,
            "prior": like.prior,
            "walkers": int(ch.chain.shape[1]),
            "steps": int(ch.chain.shape[0]),
            "burn": ch.burn,
            "thin": ch.thin,
            "acceptance_fraction": float(np.mean(ch.acceptance)),
            "autocorrelation_steps": {n: float(t) for n, t in zip(ch.names, ch.autocorr)},
            # walkers × (steps − burn-in) / τ: what each parameter's draws are worth
            "effective_samples": {
                n: (float(e) if np.isfinite(e) else None)
                for n, e in zip(ch.names, ch.effective_sample_sizes())
            },
            # Gelman-Rubin R-hat, walkers as chains (None where no walker moved)
            "potential_scale_reduction": {
                n: (float(r) if np.isfinite(r) else None) for n, r in zip(ch.names, ch.rhat)
            },
            "warnings": ch.warnings,
            "summary": {n: quantile_summary(s[:, i]) for i, n in enumerate(ch.names)},
        }
    return doc
