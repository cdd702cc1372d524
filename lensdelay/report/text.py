"""Plain-text reports, kept apart from the computation."""
from __future__ import annotations

CAUTION = ("Caution: delays and dates are model-dependent. Line-of-sight structure and the "
           "mass-sheet degeneracy rescale every delay by (1 - kappa_ext); microlensing by stars "
           "in the lens changes image brightness and can shift light-curve features.")


def images_text(result: dict) -> str:
    """Table of images from :func:`lensdelay.commands.images_command`."""
    lines = [
        f"Images of a source at ({result['source']['x']:+.4f}, {result['source']['y']:+.4f}) arcsec, "
        f"z_s = {result['source_redshift']:g}, z_l = {result['lens_redshift']:g}",
        f"D_dt = {result['time_delay_distance_Mpc']:.1f} Mpc ({result['cosmology']['name'] or result['cosmology']['class']})",
        "",
        f"{'image':>5} {'x [arcsec]':>11} {'y [arcsec]':>11} {'magnif.':>9} {'parity':>8} {'delay [d]':>10}",
    ]
    for im in result["images"]:
        lines.append(f"{im['label']:>5} {im['x']:+11.5f} {im['y']:+11.5f} {im['magnification']:+9.3f} "
                     f"{im['parity']:>8} {im['delay_days']:10.3f}")
    if not result["images"]:
        lines.append("  (no images)")
    lines += ["", "x is East, y is North; delay is after the first arrival (positive = later).",
              CAUTION]
    return "\n".join(lines)


def fit_text(res: dict) -> str:
    """Plain-text report of a fit (and posterior)."""
    fr = res["fit"]
    lines = [f"Fit of model {fr.model_label!r} to scenario {res['scenario'].name!r}", ""]
    lines.append(f"{'parameter':<32} {'value':>12} {'± stderr':>10}")
    for n, v, e in zip(fr.names, fr.values, fr.errors):
        err = f"{e:10.4g}" if e == e else f"{'—':>10}"
        lines.append(f"{n:<32} {v:12.5g} {err}")
    lines += ["", f"chi2 = {fr.chi2:.3f} for {fr.n_constraints} constraints and {fr.n_parameters} "
              f"free parameters: dof = {fr.dof}; AIC = {fr.aic:.2f}, BIC = {fr.bic:.2f}"]
    if fr.dof <= 0:
        lines.append("WARNING: no degrees of freedom left: chi2 does not test this model.")
    lines += ["", "residuals (model − observed):",
              f"{'image':<10} {'dx [mas]':>9} {'dy [mas]':>9} {'sigma':>7} {'magnif.':>9}"]
    for r in fr.residuals_mas:
        name = f"{r['family']}/{r['image']}"
        if r["reproduced"]:
            lines.append(f"{name:<10} {r['dx_mas']:9.2f} {r['dy_mas']:9.2f} {r['sigma_mas']:7.1f} "
                         f"{r['magnification']:+9.3f}")
        else:
            lines.append(f"{name:<10} {'not reproduced by the model':>37}")
    if fr.unobserved_images:
        lines += ["", "predicted images that were not observed:"]
        for im in fr.unobserved_images:
            lines.append(f"  {im['family']}: ({im['x']:+.4f}, {im['y']:+.4f}) arcsec, "
                         f"mu = {im['magnification']:+.4f}, {im['parity']}")
    if res.get("linear_delays"):
        lines += ["", "delays at the best fit (scenario cosmology; linearised 1-sigma errors):"]
        for d in res["linear_delays"]:
            lines.append(f"  {d['family']}/{d['image']} − {d['relative_to']}: {d['days']:+.2f} "
                         f"± {d['linearised_sigma_days']:.2f} d")
    for note in fr.notes:
        lines.append(f"NOTE: {note}")
    ch = res.get("chain")
    if ch is not None:
        s = ch.samples()
        lines += ["", f"posterior: {ch.chain.shape[1]} walkers × {ch.chain.shape[0]} steps, burn-in "
                  f"{ch.burn}, thin {ch.thin}, {len(s)} samples; acceptance {ch.acceptance.mean():.2f}; "
                  f"{ch.move} move, {res['likelihood'].prior} prior",
                  f"{'parameter':<32} {'median':>12} {'16%':>12} {'84%':>12} {'tau':>7}"]
        import numpy as np

        for i, n in enumerate(ch.names):
            q = np.percentile(s[:, i], [50, 16, 84])
            lines.append(f"{n:<32} {q[0]:12.5g} {q[1]:12.5g} {q[2]:12.5g} {ch.autocorr[i]:7.0f}")
        for w in ch.warnings:
            lines.append(f"WARNING: {w}")
    return "\n".join(lines)


def _budget_cell(term: dict) -> str:
    """``"  1.23 (  45%)"``; a term below 0.005 d shows as 0 (no "-0.00")."""
    sigma = term["sigma_days"] if abs(term["sigma_days"]) >= 0.005 else 0.0
    percent = term["percent"] if abs(term["percent"]) >= 0.5 else 0.0
    return f"{sigma:8.2f} ({percent:4.0f}%)"


def budget_text(budget: dict) -> str:
    """The uncertainty budget as a table: signed 1-σ days and percent of the date variance."""
    from lensdelay.forecast.budget import SAMPLED_TERMS

    terms = SAMPLED_TERMS + ("remainder",)
    lines = ["Uncertainty budget of each image's date (signed 1-sigma days, share of the variance;",
             "after any update; negative: sources the measurements tied together):",
             f"{'image':<8}" + "".join(f"{t[:14]:>16}" for t in terms) + f"{'total sigma':>13}"]
    for row in budget["images"]:
        cells = "".join(_budget_cell(row["date"][t]) for t in terms)
        lines.append(f"{row['family'] + '/' + row['label']:<8}{cells}{row['date_sigma_days']:13.2f}")
    a = budget["assumptions"]
    extra = ", ".join(f"{r['family']}/{r['label']} {r['date']['Omega_m']['sigma_days']:.2f} d and "
                      f"{r['date']['peculiar velocity']['sigma_days']:.2f} d" for r in budget["images"])
    lines.append(f"Not in the windows (first order): Omega_m (sigma {a['Omega_m_sigma']:g}) and the lens "
                 f"velocity (sigma {a['peculiar_velocity_sigma_kms']:g} km/s): {extra}")
    return "\n".join(lines)
