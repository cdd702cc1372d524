"""The forecast job: scenario → fits → posteriors → per-image dates, brightness, windows.

Reads inputs through :mod:`lensdelay.loading`; returns a plain result dictionary
that :mod:`lensdelay.forecast_outputs` turns into files and text.
"""
from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
from astropy import units as u
from astropy.time import Time

from .commands import provenance
from .cosmology import cosmology_from_spec
from .errors import InputError, LensdelayWarning
from .fit import fit
from .forecast import (
    ForecastSettings, combine, majority, model_forecast, parity_name, summary, weighted_quantiles,
)
from .likelihood import ImageLikelihood
from .loading import load_scenario
from .posterior import sample
from .scenario import Site, parse_date
from .schedule import build_calendar


def parse_seen(items, scenario) -> dict:
    """``--seen LABEL=DATE`` items, plus the scenario's measured delays of the
    transient's family relative to the image it was seen in."""
    tr = scenario.transient
    fam = scenario.family(tr.family)
    out = {}
    for d in scenario.delays:
        if d.family == tr.family and d.relative_to == tr.seen_in:
            out[d.image] = (tr.date + d.days * u.day, d.sigma)
    for item in items or []:
        if "=" not in item:
            raise InputError(f"--seen must be LABEL=DATE, got {item!r}")
        label, _, date = item.partition("=")
        if label not in fam.labels:
            raise InputError(f"--seen label must be an observed image of family {tr.family!r} "
                             f"({', '.join(fam.labels)}), got {label!r}")
        if label == tr.seen_in:
            raise InputError(f"--seen label must differ from the reference image {tr.seen_in!r}, got {label!r}")
        out[label] = (parse_date(date, f"--seen {label}"), max(tr.date_sigma_days, 0.5))
    return out


def run_forecast(scenario_path: str, model_paths=None, *, n_samples=20000, seed=1, h0=None,
                 cosmology_name=None, kappa_ext=None, microlensing=None, depth=None,
                 weighting="bic", seen=None, site: Site | None = None, walkers=32, steps=2000,
                 today: Time | None = None, progress=True, prior="flat") -> dict:
    """Run the whole forecast; see :func:`lensdelay.forecast.model_forecast` for the physics."""
    model_list = list(model_paths or [None])
    scenarios = []
    inputs = []
    for mp in model_list:
        sc, used = load_scenario(scenario_path, [mp] if mp else None)
        scenarios.append(sc)
        inputs += [p for p in used if p not in inputs]
    sc0 = scenarios[0]
    if sc0.transient is None:
        raise InputError("transient is required for a forecast ([transient] with family, seen_in "
                         "and date), got nothing", scenario_path)
    settings = ForecastSettings()
    if cosmology_name is not None:
        cosmo = cosmology_from_spec({"name": cosmology_name})
        scenarios = [replace(s, cosmology=cosmo) for s in scenarios]
        settings = replace(settings, h0_prior=None)      # a named cosmology means its own H0
    if h0 is not None:
        if not h0[1] > 0:
            raise InputError(f"--h0 sigma must be > 0, got {h0[1]:g}")
        if not 10 <= h0[0] <= 200:
            raise InputError(f"--h0 mean must be between 10 and 200 km/s/Mpc, got {h0[0]:g}")
        settings = replace(settings, h0_prior=(float(h0[0]), float(h0[1])))
    if kappa_ext is not None:
        if not kappa_ext[0] < 1:
            raise InputError(f"--kappa-ext mean must be < 1, got {kappa_ext[0]:g}")
        if kappa_ext[1] < 0:
            raise InputError(f"--kappa-ext sigma must be >= 0, got {kappa_ext[1]:g}")
        settings = replace(settings, kappa_ext=(float(kappa_ext[0]), float(kappa_ext[1])))
    if microlensing is not None:
        if microlensing < 0:
            raise InputError(f"--microlensing must be >= 0 mag, got {microlensing:g}")
        settings = replace(settings, microlensing_mag=float(microlensing))
    if depth is not None:
        settings = replace(settings, depth=float(depth))
    if n_samples < 100 or n_samples > 5_000_000:
        raise InputError(f"--samples must be between 100 and 5000000, got {n_samples}")
    if weighting not in ("bic", "equal"):
        raise InputError(f"--weights must be 'bic' or 'equal', got {weighting!r}")
    settings = replace(settings, n_samples=int(n_samples), seed=int(seed), weighting=weighting, model_prior=prior,
                       seen=parse_seen(seen, sc0))
    site = site or sc0.site
    tr = sc0.transient
    rng = np.random.default_rng(seed)
    per_model, fits, chains = [], [], []
    for sc in scenarios:
        like = ImageLikelihood(sc, sc.model, prior=prior)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", LensdelayWarning)   # reported in the notes instead
            try:
                result = fit(like, seed=seed)
            except InputError as err:
                raise err.with_source(scenario_path) from err
            chain = sample(like, result.values, walkers=walkers, steps=steps,
                           seed=int(rng.integers(2 ** 31)), progress=progress, scales=result.errors)
        mf = model_forecast(like, result.values, chain.samples(), result.bic, tr, settings, rng)
        mf.notes = result.notes + chain.warnings + mf.notes
        if result.dof <= 0:
            mf.notes.insert(0, f"model {result.model_label!r} has {result.dof} degrees of freedom")
        per_model.append(mf)
        fits.append(result)
        chains.append(chain)
    groups, w_model = combine(per_model, settings.weighting)
    images = _summarise_groups(groups, w_model, per_model, tr, settings)
    calendar = None
    if site is not None and sc0.sky is not None:
        # cover the tails too (0.1–99.9%), so the probability counts every sample
        wide = [weighted_quantiles(im["offsets"], im["weights"], [0.1, 99.9]) for im in images]
        lo = min(w[0] for w in wide)
        hi = max(w[1] for w in wide)
        first = tr.date + (np.floor(lo) - 1) * u.day
        n_days = int(np.ceil(hi - lo)) + 3
        step = 20.0 if n_days <= 1200 else 40.0
        calendar = build_calendar(site, sc0.sky, first, n_days, step_minutes=step)
        for im in images:
            _observability(im, calendar, tr)
    return {
        "scenario": sc0, "settings": settings, "site": site, "images": images,
        "models": per_model, "fits": fits, "chains": chains, "model_weights": w_model,
        "calendar": calendar, "today": today or Time.now(), "cosmology": scenarios[0].cosmology,
        "provenance": provenance(inputs, sc0.cosmology if cosmology_name is None else scenarios[0].cosmology, seed),
    }


def _summarise_groups(groups, w_model, per_model, tr, settings):
    images = []
    rng = np.random.default_rng(settings.seed + 1)
    for g in groups:
        delay, mu, parity, rank, offs, weights, base = [], [], [], [], [], [], []
        mags = []
        per_model_medians = {}
        for m_index, im, m in g["parts"]:
            wm = w_model[m_index]
            ref_im = next(i for i in m.images if i.label == tr.seen_in)
            delay.append(im.delay)
            mu.append(im.magnification)
            parity.append(im.parity)
            rank.append(im.rank)
            offs.append(m.detection_offset + im.delay)
            w = np.where(im.exists, m.weights, 0.0)
            wb = np.where(im.exists, m.base_weights, 0.0)
            weights.append(wm * w / max(m.weights.sum(), 1e-300))
            base.append(wm * wb / max(m.base_weights.sum(), 1e-300))
            ref_mag = tr.magnitude
            if ref_mag is not None:
                ratio = np.abs(im.magnification) / np.abs(ref_im.magnification)
                scatter = rng.normal(0, settings.microlensing_mag, len(ratio)) if (
                    settings.microlensing_mag > 0 and im.label != tr.seen_in) else 0.0
                mags.append(ref_mag - 2.5 * np.log10(ratio) + scatter)
            per_model_medians[m.model_label] = float(weighted_quantiles(im.delay, w, [50])[0])
        delay, mu, offs = map(np.concatenate, (delay, mu, offs))
        parity, rank = np.concatenate(parity), np.concatenate(rank)
        weights, base = np.concatenate(weights), np.concatenate(base)
        exists_share = float(weights.sum() / max(sum(w_model[p[0]] for p in g["parts"]), 1e-300))
        valid = np.isfinite(delay) & (weights > 0)
        par, par_share = majority(parity[valid], weights[valid])
        rk, rk_share = majority(rank[valid], weights[valid])
        off_q = weighted_quantiles(offs, weights, [2.5, 16, 50, 84, 97.5])
        base_q = weighted_quantiles(offs, base, [2.5, 97.5])
        is_ref = g["observed"] and g["label"] == tr.seen_in
        if is_ref:
            status = "seen"
        elif off_q[4] < 0:
            status = "past"
        elif off_q[0] > 0:
            status = "future"
        else:
            status = "uncertain"
        entry = {
            "family": g["family"], "label": g["label"], "observed": bool(g["observed"]),
            "x": g["x"], "y": g["y"], "parity": parity_name(par), "parity_agreement": par_share,
            "arrival_rank": int(rk), "rank_agreement": rk_share,
            "flag": [] if min(par_share, rk_share) >= 0.95 else
            ["parity or arrival order differs between samples (< 95% agree)"],
            "exists_fraction": exists_share, "status": status,
            "delay_days": summary(delay, weights), "magnification": summary(mu, weights),
            "offsets": offs, "weights": weights, "offsets_q": (off_q[0], off_q[4]),
            "date_offset_days": {"median": off_q[2], "p16": off_q[1], "p84": off_q[3],
                                 "p2.5": off_q[0], "p97.5": off_q[4]},
            "per_model_delay_median": per_model_medians,
            "model_spread_days": (float(np.ptp(list(per_model_medians.values())))
                                  if len(per_model_medians) > 1 else 0.0),
        }
        width_now = off_q[4] - off_q[0]
        width_before = base_q[1] - base_q[0]
        entry["interval95_shrink"] = (float(width_now / width_before)
                                      if settings.seen and width_before > 0 else None)
        if mags:
            mag = np.concatenate(mags)
            entry["magnitude"] = summary(mag, weights)
            entry["fainter_than_depth"] = bool(entry["magnitude"]["median"] > settings.depth)
        else:
            entry["magnitude"] = None
            entry["fainter_than_depth"] = None
        if exists_share < 0.95 and not is_ref:
            entry["flag"].append(f"the image exists in only {100 * exists_share:.0f}% of samples")
        images.append(entry)
    images.sort(key=lambda e: (e["date_offset_days"]["median"], e["label"]))
    return images


def _observability(im, calendar, tr):
    """Observable days in the 95% window and the chance the event falls on one."""
    start_offset = (tr.date - calendar.start).to_value("day")
    offs = im["offsets"] + start_offset
    ok = np.isfinite(offs) & (im["weights"] > 0)
    observable = calendar.is_observable(offs[ok])
    w = im["weights"][ok]
    prob = float(np.sum(w[observable]) / max(np.sum(w), 1e-300))
    lo, hi = im["offsets_q"]
    d0, d1 = int(np.floor(lo + start_offset)), int(np.floor(hi + start_offset))
    runs = calendar.windows(d0, d1)
    n_obs = int(sum(b - a + 1 for a, b in runs))
    im["observability"] = {
        "probability_observable": prob,
        "observable_days_in_95": n_obs, "days_in_95": int(d1 - d0 + 1),
        "windows": [[(calendar.start + a * u.day).iso[:10], (calendar.start + b * u.day).iso[:10]]
                    for a, b in runs],
    }
