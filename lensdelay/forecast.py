"""From a lens-model posterior to dated, brightness-rated, observability-checked images.

For every posterior sample the images of the transient's source are solved at once
(Newton, vectorised over samples, started from the best-fit images), their Fermat
potentials turned into delays relative to the image the transient was seen in, then
combined sample by sample with the H0 prior, the external convergence κ_ext
(delays × (1 − κ_ext)), the detection-date error and a microlensing scatter on
brightness. Measured dates of further images condition the samples by importance
weights. Several models are combined with BIC (or equal) weights.

This module computes; it reads and writes nothing.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .images import find_images, newton_polish
from .lens import PARITIES
from .likelihood import ImageLikelihood

#: Default H0 prior, km/s/Mpc: wide enough to span both the early-universe (~67) and
#: distance-ladder (~73) values at about 1σ, so a forecast commits to neither.
DEFAULT_H0_PRIOR = (70.0, 5.0)
#: Default external convergence prior: typical galaxy-scale lines of sight
#: (common practice; scatter of a few per cent).
DEFAULT_KAPPA_EXT = (0.0, 0.05)
#: Default microlensing scatter on each image's magnitude (common practice for
#: lensed supernovae: a few tenths of a magnitude).
DEFAULT_MICROLENSING_MAG = 0.3
#: Images fainter than this (AB mag) are flagged.
DEFAULT_DEPTH = 25.0
QUANTILES = {"median": 50.0, "p16": 16.0, "p84": 84.0, "p2.5": 2.5, "p97.5": 97.5}


@dataclass(frozen=True)
class ForecastSettings:
    """Choices of one forecast run (all reported in the outputs)."""

    n_samples: int = 20000
    seed: int = 1
    h0_prior: tuple[float, float] | None = DEFAULT_H0_PRIOR
    kappa_ext: tuple[float, float] = DEFAULT_KAPPA_EXT
    microlensing_mag: float = DEFAULT_MICROLENSING_MAG
    depth: float = DEFAULT_DEPTH
    weighting: str = "bic"
    seen: dict = field(default_factory=dict)     # label -> (Time, sigma_days)
    model_prior: str = "flat"                    # prior of the mass-model posterior


def weighted_quantiles(values, weights, percents) -> np.ndarray:
    """Quantiles (percent) of weighted samples; NaN values are skipped."""
    values = np.asarray(values, dtype=float)
    weights = np.asarray(weights, dtype=float)
    ok = np.isfinite(values) & (weights > 0)
    if not np.any(ok):
        return np.full(len(percents), np.nan)
    v, w = values[ok], weights[ok]
    order = np.argsort(v)
    v, w = v[order], w[order]
    cdf = (np.cumsum(w) - 0.5 * w) / np.sum(w)
    return np.interp(np.asarray(percents) / 100.0, cdf, v)


def summary(values, weights) -> dict:
    q = weighted_quantiles(values, weights, list(QUANTILES.values()))
    return {k: float(x) for k, x in zip(QUANTILES, q)}


@dataclass
class ImageSamples:
    """One image's per-sample predictions within one model."""

    family: str
    label: str
    observed: bool
    x: np.ndarray
    y: np.ndarray
    delay: np.ndarray           # days, relative to the reference image; NaN if absent
    magnification: np.ndarray
    parity: np.ndarray          # codes
    rank: np.ndarray            # 1 = first
    exists: np.ndarray          # bool


@dataclass
class ModelForecast:
    """All images of the transient's family under one model."""

    model_label: str
    bic: float
    images: list[ImageSamples]
    detection_offset: np.ndarray        # days, the per-sample detection-date error
    weights: np.ndarray                 # importance weights (updating); sum 1
    base_weights: np.ndarray            # the same before updating
    h0: np.ndarray
    kappa_ext: np.ndarray
    lens_only_delay: dict               # label -> delays at fixed H0 and κ_ext = 0 (for the budget)
    seen_used: dict
    notes: list[str]


def _label_unobserved(existing, n):
    labels, k = [], 1
    while len(labels) < n:
        cand = f"X{k}"
        if cand not in existing:
            labels.append(cand)
        k += 1
    return labels


def model_forecast(like: ImageLikelihood, best: np.ndarray, posterior: np.ndarray, bic: float,
                   transient, settings: ForecastSettings, rng: np.random.Generator) -> ModelForecast:
    """Per-sample images, delays and magnifications of the transient's family under one model.

    Parameters
    ----------
    like : ImageLikelihood
    best : ndarray
        Best-fit parameter vector.
    posterior : ndarray, (m, n_par)
        Posterior samples of the lens-model parameters (drawn with replacement).
    transient : lensdelay.scenario.Transient
    """
    notes = []
    k_fam = [f.label for f in like.families].index(transient.family)
    fam = like.families[k_fam]
    n = settings.n_samples
    draws = posterior[rng.integers(0, len(posterior), n)]
    # -- images at the best fit: observed ones matched, the rest labelled anew -------
    lens_best = like.model.lens(best[:like.n_model])
    bx, by = best[like.source_slice(k_fam)]
    table = find_images(lens_best, [bx], [by], fam.scale)
    starts_x, starts_y, labels, observed = [], [], [], []
    used = np.zeros(len(table), dtype=bool)
    for i, lab in enumerate(fam.labels):
        d = np.hypot(table.x - fam.x[i], table.y - fam.y[i])
        j = int(np.argmin(d)) if len(d) else -1
        if j < 0 or d[j] > max(10 * fam.sigma[i], 0.05) or used[j]:
            notes.append(f"observed image {lab} has no model counterpart at the best fit; "
                         "it is forecast from its observed position")
            starts_x.append(fam.x[i])
            starts_y.append(fam.y[i])
        else:
            used[j] = True
            starts_x.append(table.x[j])
            starts_y.append(table.y[j])
        labels.append(lab)
        observed.append(True)
    extra = np.nonzero(~used)[0]
    for j, lab in zip(extra, _label_unobserved(set(fam.labels), len(extra))):
        starts_x.append(table.x[j])
        starts_y.append(table.y[j])
        labels.append(lab)
        observed.append(False)
    sx, sy = np.array(starts_x), np.array(starts_y)
    # -- all samples at once --------------------------------------------------------
    lens = like.lens_for(draws)
    sbx = draws[:, like.source_slice(k_fam)][:, :1]
    sby = draws[:, like.source_slice(k_fam)][:, 1:]
    x, y, err = newton_polish(lens, np.broadcast_to(sx, (n, len(sx))), np.broadcast_to(sy, (n, len(sy))),
                              sbx, sby, fam.scale, iterations=40, max_step=0.05)
    exists = err < 1e-8
    for i in range(len(sx)):          # two tracks on one image: the later one has vanished
        for j in range(i + 1, len(sx)):
            exists[:, j] &= ~(np.hypot(x[:, i] - x[:, j], y[:, i] - y[:, j]) < 1e-6)
    with np.errstate(all="ignore"):
        tau = lens.fermat_potential(x, y, sbx, sby, fam.scale)
        mu = lens.magnification(x, y, fam.scale)
    parity = lens.parity_code(x, y, fam.scale)
    tau = np.where(exists, tau, np.nan)
    ref = labels.index(transient.seen_in)
    if not np.all(exists[:, ref]):
        notes.append(f"the reference image {transient.seen_in} is missing in "
                     f"{100 * np.mean(~exists[:, ref]):.1f}% of samples; those samples are dropped")
    # -- cosmology, mass sheet, dates ------------------------------------------------
    if settings.h0_prior is not None:
        h0 = rng.normal(settings.h0_prior[0], settings.h0_prior[1], n)
        h0 = np.where(h0 > 1.0, h0, np.nan)
    else:
        h0 = np.full(n, like.h0_ref)
    if like.use_delays:
        h0 = draws[:, -1]
    kext = rng.normal(settings.kappa_ext[0], settings.kappa_ext[1], n) if settings.kappa_ext[1] > 0 \
        else np.full(n, settings.kappa_ext[0])
    # D_dt ∝ 1/H0 exactly without radiation (and to ~1e-4 with it)
    lens_days = (tau - tau[:, ref:ref + 1]) * fam.days_per_arcsec2
    delay = lens_days * (like.h0_ref / h0)[:, None] * (1.0 - kext)[:, None]
    det_offset = rng.normal(0.0, transient.date_sigma_days, n) if transient.date_sigma_days > 0 \
        else np.zeros(n)
    rank = np.argsort(np.argsort(np.where(exists, tau, np.inf), axis=1), axis=1) + 1
    weights = np.where(np.isfinite(delay[:, ref]) & np.isfinite(h0), 1.0, 0.0)
    base_weights = weights / max(weights.sum(), 1e-300)
    # -- updating on measured dates of further images -------------------------------
    seen_used = {}
    for lab, (date, sigma) in settings.seen.items():
        if lab not in labels:
            continue
        measured = (date - transient.date).to_value("day")
        i = labels.index(lab)
        sig = max(float(sigma), 1e-3)
        pred = det_offset + delay[:, i]
        logw = -0.5 * ((pred - measured) / sig) ** 2
        logw = np.where(np.isfinite(logw), logw, -np.inf)
        if np.any(np.isfinite(logw)):
            logw = logw - np.max(logw[np.isfinite(logw)])
        weights = weights * np.exp(logw)
        seen_used[lab] = {"date": date.isot, "sigma_days": sig, "delay_days": measured}
    total = weights.sum()
    if not total > 0:
        weights = np.ones(n)
        notes.append("the measured dates are incompatible with every sample; updating ignored")
        seen_used = {}
        total = n
    weights = weights / total
    ess = 1.0 / np.sum(weights ** 2)
    if seen_used and ess < 200:
        notes.append(f"after updating only {ess:.0f} effective samples remain; increase --samples")
    images = []
    for i, lab in enumerate(labels):
        images.append(ImageSamples(fam.label, lab, observed[i], x[:, i], y[:, i],
                                   np.where(exists[:, i], delay[:, i], np.nan),
                                   np.where(exists[:, i], mu[:, i], np.nan), parity[:, i],
                                   rank[:, i], exists[:, i]))
    fixed = {lab: lens_days[:, i] for i, lab in enumerate(labels)}
    return ModelForecast(like.model.label, bic, images, det_offset, weights, base_weights, h0, kext,
                         fixed, seen_used, notes)


def majority(codes, weights):
    """The most common code and the weighted fraction of samples that agree with it."""
    codes = np.asarray(codes)
    values = np.unique(codes)
    shares = np.array([weights[codes == v].sum() for v in values])
    k = int(np.argmax(shares))
    return values[k], float(shares[k] / max(shares.sum(), 1e-300))


def combine(models: list[ModelForecast], weighting: str = "bic", match_radius: float = 0.15):
    """Merge per-model forecasts into one set of images with mixture weights.

    Observed images are matched by label; unobserved ones by position (median within
    ``match_radius`` arcsec); an image some models lack keeps weight only from those
    that have it. Returns (images, model weights) where images is a list of dicts of
    concatenated samples.
    """
    if weighting == "equal":
        w_model = np.ones(len(models))
    else:
        bic = np.array([m.bic for m in models])
        w_model = np.exp(-0.5 * (bic - bic.min()))
    w_model = w_model / w_model.sum()
    groups: list[dict] = []
    for m_index, m in enumerate(models):
        for im in m.images:
            mx, my = float(np.nanmedian(im.x)), float(np.nanmedian(im.y))
            target = None
            for g in groups:
                if im.observed and g["observed"] and g["label"] == im.label:
                    target = g
                elif (not im.observed and not g["observed"]
                      and np.hypot(g["x"] - mx, g["y"] - my) < match_radius and m_index not in g["models"]):
                    target = g
                if target is not None:
                    break
            if target is None:
                target = {"label": im.label, "family": im.family, "observed": im.observed,
                          "x": mx, "y": my, "parts": [], "models": []}
                groups.append(target)
            target["parts"].append((m_index, im, m))
            target["models"].append(m_index)
    return groups, w_model


def parity_name(code) -> str:
    return PARITIES[int(code)]
