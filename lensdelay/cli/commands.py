"""What each sub-command does, between the files and the physics.

Functions here read inputs through :mod:`lensdelay.loading`, call the physics
modules, and return plain JSON-ready dictionaries; printing and writing belong to
:mod:`lensdelay.cli`, :mod:`lensdelay.report` and :mod:`lensdelay.outputs`.
"""
from __future__ import annotations

import numpy as np

from lensdelay.version import __version__
from lensdelay.model.cosmology import cosmology_from_spec, describe_cosmology
from lensdelay.lensing.distances import LensDistances
from lensdelay.errors import InputError
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import PARITIES
from lensdelay.io.reading import file_hash, load_model


def _redshifts(doc: dict, source: str, lens_redshift, source_redshift):
    lens_tab = doc.get("lens", {})
    if not isinstance(lens_tab, dict):
        raise InputError(f"lens must be a table, got {lens_tab!r}", source)
    z_l = lens_redshift if lens_redshift is not None else lens_tab.get("redshift")
    if z_l is None:
        raise InputError("lens.redshift is needed for delays in days "
                         "(give [lens] redshift or --lens-redshift), got nothing", source)
    z_ref = lens_tab.get("reference_source_redshift")
    z_s = source_redshift if source_redshift is not None else z_ref
    if z_s is None:
        raise InputError("a source redshift is needed (give --source-redshift or "
                         "[lens] reference_source_redshift), got nothing", source)
    z_ref = z_s if z_ref is None else z_ref
    for name, z in (("lens.redshift", z_l), ("source redshift", z_s),
                    ("lens.reference_source_redshift", z_ref)):
        if isinstance(z, bool) or not isinstance(z, (int, float)) or not np.isfinite(z) or z <= 0:
            raise InputError(f"{name} must be a positive finite number, got {z!r}", source)
    return float(z_l), float(z_s), float(z_ref)


def images_command(model_path: str, beta_x: float, beta_y: float, *,
                   source_redshift=None, lens_redshift=None) -> dict:
    """All images of one source behind the model in ``model_path``."""
    model, doc = load_model(model_path)
    z_l, z_s, z_ref = _redshifts(doc, model_path, lens_redshift, source_redshift)
    try:
        cosmo = cosmology_from_spec(doc.get("cosmology"))
        distances = LensDistances(cosmo, z_l, z_ref)
        scale = distances.deflection_scale(z_s)
        days = distances.days_per_arcsec2(z_s)
    except InputError as err:
        raise err.with_source(model_path) from err
    lens = model.lens()
    table = find_images(lens, [beta_x], [beta_y], scale)
    t = table.fermat * days
    first = t.min() if len(t) else 0.0
    labels = [chr(ord("A") + i) if i < 26 else f"I{i + 1}" for i in range(len(table))]
    images = [
        {"label": lab, "x": float(x), "y": float(y), "magnification": float(mu),
         "parity": PARITIES[int(p)], "delay_days": float(dt - first)}
        for lab, x, y, mu, p, dt in zip(labels, table.x, table.y, table.magnification,
                                        table.parity, t)
    ]
    return {
        "tool": "lensdelay", "version": __version__, "input_sha256": file_hash(model_path),
        "model": model_path, "cosmology": describe_cosmology(cosmo),
        "lens_redshift": z_l, "source_redshift": z_s, "reference_source_redshift": z_ref,
        "source": {"x": beta_x, "y": beta_y},
        "time_delay_distance_Mpc": float(distances.time_delay_distance(z_s).value),
        "delay_reference": "first arrival",
        "images": images,
    }


def provenance(inputs, cosmo, seed=None) -> dict:
    """Version, input hash, cosmology and seed: recorded in every JSON output."""
    out = {"tool": "lensdelay", "version": __version__,
           "inputs": [str(p) for p in inputs], "input_sha256": file_hash(*inputs),
           "cosmology": describe_cosmology(cosmo)}
    if seed is not None:
        out["seed"] = int(seed)
    return out


def check_command(scenario_path: str, model_paths=None) -> dict:
    """Validate a scenario (and its model) without fitting anything."""
    from lensdelay.inference.fit import check_constraints
    from lensdelay.inference.likelihood import ImageLikelihood
    from lensdelay.io.reading import load_scenario

    sc, used = load_scenario(scenario_path, model_paths)
    like = ImageLikelihood(sc, sc.model)
    try:
        check_constraints(like)
    except InputError as err:
        raise err.with_source(scenario_path) from err
    return {"scenario": sc, "likelihood": like, "inputs": used}


def fit_command(scenario_path: str, model_paths=None, *, use_delays=False, use_fluxes=False,
                flux_floor=0.2, sample=False,
                walkers=32, steps=2000, seed=1, resume=False, out_dir=None, progress=True,
                prior="flat") -> dict:
    """Fit (and optionally sample) the scenario's model; returns results and figures."""
    from lensdelay.inference.fit import fit
    from lensdelay.inference.likelihood import ImageLikelihood
    from lensdelay.io.reading import load_scenario

    sc, used = load_scenario(scenario_path, model_paths)
    if not flux_floor > 0:
        raise InputError(f"--flux-floor must be > 0 mag, got {flux_floor:g}")
    like = ImageLikelihood(sc, sc.model, use_delays=use_delays, use_fluxes=use_fluxes,
                           flux_floor_mag=flux_floor, prior=prior)
    import warnings

    from lensdelay.errors import LensdelayWarning

    with warnings.catch_warnings():
        # the report states these (dof, short chains); a warning would say it twice
        warnings.simplefilter("ignore", LensdelayWarning)
        try:
            result = fit(like, seed=seed)
        except InputError as err:
            raise err.with_source(scenario_path) from err
    from lensdelay.inference.fit import delay_errors

    linear_delays = []
    for k, fam in enumerate(like.families):
        days, errs = delay_errors(like, result, family=k)
        for lab, d, e in zip(fam.labels[1:], days[1:], errs[1:]):
            linear_delays.append({"family": fam.label, "image": lab, "relative_to": fam.labels[0],
                                  "days": float(d), "linearised_sigma_days": float(e)})
    chain = None
    if sample:
        from lensdelay.inference.sampling import sample as run_sampler

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", LensdelayWarning)
            chain = run_sampler(like, result.values, walkers=walkers, steps=steps, seed=seed,
                                checkpoint_dir=out_dir, resume=resume, progress=progress,
                                scales=result.errors)
    return {"scenario": sc, "likelihood": like, "fit": result, "chain": chain,
            "linear_delays": linear_delays,
            "provenance": provenance(used, sc.cosmology, seed)}


def fit_json(res: dict) -> dict:
    """The JSON document of a fit (and its posterior, if sampled)."""
    fr, like = res["fit"], res["likelihood"]
    doc = dict(res["provenance"])
    doc.update({
        "scenario": res["scenario"].name, "model": fr.model_label,
        "parameters": {n: {"value": float(v), "stderr": (float(e) if np.isfinite(e) else None)}
                       for n, v, e in zip(fr.names, fr.values, fr.errors)},
        "chi2": fr.chi2, "constraints": fr.n_constraints, "free_parameters": fr.n_parameters,
        "dof": fr.dof, "aic": fr.aic, "bic": fr.bic,
        "residuals_mas": fr.residuals_mas, "unobserved_images": fr.unobserved_images,
        "at_bounds": fr.at_bounds, "notes": fr.notes, "converged": fr.success,
        "delays_linearised": res.get("linear_delays", []),
        "uses_delays": like.use_delays, "uses_flux_ratios": like.use_fluxes,
        "flux_floor_mag": like.flux_floor_mag if like.use_fluxes else None,
        "prior": like.prior,
        # part of chi2 paid for predicted, unobserved images brighter than the faintest observed
        "chi2_extra_images": float(np.sum(like.extra_image_residuals(like.predict(fr.values[None, :])) ** 2)),
    })
    ch = res.get("chain")
    if ch is not None:
        s = ch.samples()
        doc["posterior"] = {
            "move": ch.move, "prior": like.prior,
            "walkers": int(ch.chain.shape[1]), "steps": int(ch.chain.shape[0]), "burn": ch.burn,
            "thin": ch.thin, "acceptance_fraction": float(np.mean(ch.acceptance)),
            "autocorrelation_steps": {n: float(t) for n, t in zip(ch.names, ch.autocorr)},
            "warnings": ch.warnings,
            "summary": {n: summarise(s[:, i]) for i, n in enumerate(ch.names)},
        }
    return doc


def summarise(values) -> dict:
    """median, p16, p84, p2.5, p97.5 of samples."""
    q = np.percentile(values, [50, 16, 84, 2.5, 97.5])
    return {"median": float(q[0]), "p16": float(q[1]), "p84": float(q[2]),
            "p2.5": float(q[3]), "p97.5": float(q[4])}


def register_more(sub, number) -> None:
    """Sub-commands beyond ``images``."""
    from lensdelay.cli import fit as cli_more

    cli_more.register(sub, number)
