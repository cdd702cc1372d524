"""From a lens-model posterior to the dates and brightness of every image.

For every forecast sample the images of the transient's source are solved at once
(Newton, vectorised over samples, started from the best-fit images); their Fermat
potentials become delays after the image the transient was seen in, scaled sample
by sample by H0 (D_dt ∝ 1/H0) and by (1 − κ_ext). Each image's date is t0 + Δt_i
with t0 the date the event reached the reference image (:mod:`lensdelay.inference.timing`).

Measured delays and sightings update the samples by one of two routes
(:func:`update_on_timing`): importance weights when enough effective samples remain
(at least ``min_ess_fraction`` of them), otherwise a new posterior sample with the
measurements as likelihood terms (done by the caller, which owns the sampler).

This module computes; it reads and writes nothing.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from lensdelay.errors import InputError
from lensdelay.forecast.perturbers import PerturberPopulation
from lensdelay.lensing.delays import delay_scale, fermat_difference_to_days
from lensdelay.lensing.images import find_images, keep_distinct_tracks, newton_polish
from lensdelay.lensing.lens import PARITIES
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.modes import MODE_DCHI2
from lensdelay.inference.priors import draw_kappa
from lensdelay.inference.timing import TimingData

__all__ = [
    "DEFAULT_H0_PRIOR",
    "DEFAULT_KAPPA_EXT",
    "DEFAULT_MICROLENSING_MAG",
    "DEFAULT_DEPTH",
    "MIN_ESS_FRACTION",
    "AGREEMENT",
    "Sighting",
    "ForecastSettings",
    "ImageTrack",
    "label_unobserved",
    "image_tracks",
    "ModelSamples",
    "track_columns",
    "solve_samples",
    "mode_notes",
    "SAMPLE_RANGE",
    "check_sample_count",
    "draw_scale_priors",
    "majority",
    "WEIGHTINGS",
    "model_weights",
    "match_tracks",
    "parity_name",
]


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
#: Importance weights are kept only while at least this fraction of the samples is
#: effective; below it the posterior is sampled again with the measurements.
MIN_ESS_FRACTION = 0.1
#: Agreement below which an image's parity, arrival rank or order is flagged.
AGREEMENT = 0.95


@dataclass(frozen=True)
class Sighting:
    """Image ``family/label`` showed the event on ``date`` ± ``sigma_days``."""

    family: str
    label: str
    date: object  # astropy Time
    sigma_days: float
    sigma_stated: bool = True  # False: the default was used


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
    sightings: tuple[Sighting, ...] = ()
    model_prior: str = "flat"  # prior of the mass-model posterior
    min_ess_fraction: float = MIN_ESS_FRACTION
    # unseen perturbers marginalised per sample (None: off); see forecast/perturbers.py
    perturbers: PerturberPopulation | None = field(default_factory=PerturberPopulation)


@dataclass(frozen=True)
class ImageTrack:
    """One image of the transient's family: observed, or predicted at the best fit."""

    family: str
    label: str
    observed: bool
    x: float  # start of Newton's method, arcsec
    y: float


def label_unobserved(existing, n) -> list[str]:
    """``X1``, ``X2``, … skipping labels already in use."""
    labels, k = [], 1
    while len(labels) < n:
        cand = f"X{k}"
        if cand not in existing:
            labels.append(cand)
        k += 1
    return labels


def image_tracks(
    like: ImageLikelihood, best: np.ndarray, family: str
) -> tuple[list[ImageTrack], list[str]]:
    """Every image of ``family`` at the best fit: observed ones matched, the rest labelled anew.

    Returns the tracks and notes (an observed image the model lacks is forecast from its
    observed position).
    """
    notes = []
    k = [f.label for f in like.families].index(family)
    fam = like.families_at(best)[k]
    lens_best = like.model.lens(best[: like.n_model])
    bx, by = best[like.source_slice(k)]
    table = find_images(lens_best, [bx], [by], fam.scale)
    used = np.zeros(len(table), dtype=bool)
    tracks = []
    for i, lab in enumerate(fam.labels):
        d = np.hypot(table.x - fam.x[i], table.y - fam.y[i])
        j = int(np.argmin(d)) if len(d) else -1
        if j < 0 or d[j] > max(10 * fam.sigma[i], 0.05) or used[j]:
            notes.append(
                f"observed image {lab} has no model counterpart at the best fit; "
                "it is forecast from its observed position"
            )
            tracks.append(ImageTrack(family, lab, True, float(fam.x[i]), float(fam.y[i])))
        else:
            used[j] = True
            tracks.append(ImageTrack(family, lab, True, float(table.x[j]), float(table.y[j])))
    extra = np.nonzero(~used)[0]
    for j, lab in zip(extra, label_unobserved(set(fam.labels), len(extra))):
        tracks.append(ImageTrack(family, lab, False, float(table.x[j]), float(table.y[j])))
    return tracks, notes


@dataclass
class ModelSamples:
    """Per-sample images of the transient's family under one model (n samples, m images).

    ``lens_days`` are delays after the reference image at the reference cosmology and
    κ_ext = 0; ``delay = lens_days · scale`` with scale = (H_ref/H0)(1 − κ_ext).
    ``perturber_days`` is the part of ``lens_days`` that unseen perturbers add
    (:mod:`lensdelay.forecast.perturbers`; zero when the term is off).
    """

    model_label: str
    tracks: list[ImageTrack]
    reference: int  # column of the reference image
    x: np.ndarray
    y: np.ndarray
    exists: np.ndarray
    lens_days: np.ndarray
    magnification: np.ndarray
    parity: np.ndarray
    rank: np.ndarray
    h0: np.ndarray
    kappa: np.ndarray
    scale: np.ndarray
    perturber_days: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.perturber_days is None:
            self.perturber_days = np.zeros_like(self.lens_days)

    @property
    def labels(self) -> list[str]:
        """Image labels in column order."""
        return [t.label for t in self.tracks]

    @property
    def delay(self) -> np.ndarray:
        """Delays after the reference image (days), per sample and image."""
        return self.lens_days * self.scale[:, None]

    @property
    def valid(self) -> np.ndarray:
        """Samples in which the reference image exists and the delay scale is finite."""
        return self.exists[:, self.reference] & np.isfinite(self.scale)

    def columns(self, timing: TimingData) -> np.ndarray:
        """Delays of the images ``timing`` refers to, in its column order (NaN: absent)."""
        cols = track_columns(self.tracks, timing.columns)
        return np.where(self.exists[:, cols], self.delay[:, cols], np.nan)


def track_columns(tracks, columns) -> list[int]:
    """Position in ``tracks`` of each (family, label) of ``columns`` (a timing's columns)."""
    index = {(t.family, t.label): i for i, t in enumerate(tracks)}
    return [index[c] for c in columns]


def solve_samples(
    like: ImageLikelihood,
    draws: np.ndarray,
    tracks: list[ImageTrack],
    reference: str,
    h0: np.ndarray,
    kappa: np.ndarray,
    perturbers=None,
    rng: np.random.Generator | None = None,
) -> ModelSamples:
    """All images of the tracks' family for every parameter row of ``draws`` at once.

    Parameters
    ----------
    like : ImageLikelihood
        The likelihood ``draws`` belong to (its parameter layout).
    draws : ndarray, (n, n_par)
        Posterior samples of the likelihood's parameters.
    tracks : list of ImageTrack
        Where to start Newton's method for each image (the best fit's images).
    reference : str
        Label of the image the transient was seen in.
    h0, kappa : ndarray, (n,)
        H0 (km/s/Mpc) and κ_ext per sample.
    perturbers : lensdelay.forecast.perturbers.PerturberResponse, optional
        Unseen perturbers to draw for every sample (with ``rng``); their delay change is
        added to ``lens_days`` and kept apart in ``perturber_days``.
    """
    family = tracks[0].family
    k_fam = [f.label for f in like.families].index(family)
    n = len(draws)
    sx = np.array([t.x for t in tracks])
    sy = np.array([t.y for t in tracks])
    lens = like.lens_for(draws)
    src = draws[:, like.source_slice(k_fam)]
    sbx, sby = src[:, :1], src[:, 1:]
    fam_scale = like.family_scale(k_fam, draws)  # per sample when the redshift is free
    x, y, err = newton_polish(
        lens,
        np.broadcast_to(sx, (n, len(sx))),
        np.broadcast_to(sy, (n, len(sy))),
        sbx,
        sby,
        fam_scale,
        iterations=40,
        max_step=0.05,
    )
    # two tracks on one image: the later one has vanished
    exists = keep_distinct_tracks(x, y, err < 1e-8, 1e-6)
    with np.errstate(all="ignore"):
        tau = lens.fermat_potential(x, y, sbx, sby, fam_scale)
        mu = lens.magnification(x, y, fam_scale)
    parity = lens.parity_code(x, y, fam_scale)
    tau = np.where(exists, tau, np.nan)
    ref = [t.label for t in tracks].index(reference)
    days = np.reshape(like.family_days(k_fam, draws), (-1, 1))
    lens_days = fermat_difference_to_days(tau - tau[:, ref : ref + 1], days)
    perturber_days = np.zeros_like(lens_days)
    if perturbers is not None:
        from lensdelay.forecast.perturbers import perturber_delays

        perturber_days = np.where(
            exists, perturber_delays(perturbers, x, y, ref, np.ravel(days), rng), np.nan
        )
        lens_days = lens_days + perturber_days
    rank = np.argsort(np.argsort(np.where(exists, tau, np.inf), axis=1), axis=1) + 1
    scale = delay_scale(h0, like.h0_ref, kappa)
    return ModelSamples(
        like.model.label,
        list(tracks),
        ref,
        x,
        y,
        exists,
        lens_days,
        np.where(exists, mu, np.nan),
        parity,
        rank,
        h0,
        kappa,
        scale,
        perturber_days,
    )


def mode_notes(like: ImageLikelihood, result, tracks: list[ImageTrack], reference: str, mixed=()):
    """A note for each other fit mode whose delays differ from the best fit's.

    The fit keeps the polished optima that lie apart from the best
    (:attr:`lensdelay.inference.fit.FitResult.alternatives`); one within
    :data:`~lensdelay.inference.modes.MODE_DCHI2` whose arrival order differs, or any of
    whose delays differs by more than 20% and 0.5 d, is reported with its delays, and
    whether the windows mix it in (its χ² among the ``mixed`` modes' shares, a chain's
    :attr:`~lensdelay.inference.sampling.Chain.modes`) or follow the best fit's mode only.
    """
    notes = []
    in_mix = {round(s.chi2, 6) for s in mixed if s.walkers > 0}
    for chi2, values in getattr(result, "alternatives", []):
        if chi2 - result.chi2 > MODE_DCHI2:
            continue
        rows = np.vstack([result.values, values])
        both = solve_samples(like, rows, tracks, reference, np.full(2, like.h0_ref), np.zeros(2))
        best, other = both.lens_days
        exists = both.exists[0] & both.exists[1]
        differ = np.any(both.rank[0] != both.rank[1]) or np.any(
            exists & (np.abs(other - best) > np.maximum(0.5, 0.2 * np.abs(best)))
        )
        if not differ:
            continue

        def listing(days):
            return ", ".join(f"{t.label} {d:+.1f}" for t, d, e in zip(tracks, days, exists) if e)

        notes.append(
            f"another fit mode (chi2 {chi2:.1f} against the best {result.chi2:.1f}) predicts "
            f"delays {listing(other)} d (best fit: {listing(best)} d); "
            + (
                "the windows mix both modes by their posterior mass"
                if round(float(chi2), 6) in in_mix
                else "the windows follow the best fit's mode only"
            )
        )
    return notes


#: The forecast's sample count must lie within these (fewer gives no tails; more, no memory).
SAMPLE_RANGE = (100, 5_000_000)


def check_sample_count(n_samples) -> None:
    """Refuse a forecast sample count outside SAMPLE_RANGE (or not an integer)."""
    low, high = SAMPLE_RANGE
    if (
        isinstance(n_samples, bool)
        or not isinstance(n_samples, (int, np.integer))
        or not low <= n_samples <= high
    ):
        raise InputError(
            f"n_samples must be an integer between {low} and {high}, got {n_samples!r}"
        )


def draw_scale_priors(
    settings: ForecastSettings, h0_ref: float, n: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """H0 and κ_ext per sample from their priors (H0 fixed when the prior is None)."""
    if settings.h0_prior is not None:
        h0 = rng.normal(settings.h0_prior[0], settings.h0_prior[1], n)
        h0 = np.where(h0 > 1.0, h0, np.nan)
    else:
        h0 = np.full(n, h0_ref)
    kappa = draw_kappa(*settings.kappa_ext, n, rng)
    return h0, kappa


def majority(codes, weights):
    """The most common code and the weighted fraction of samples that agree with it."""
    codes = np.asarray(codes)
    values = np.unique(codes)
    if not len(values):  # no sample has this image
        return 0, 0.0
    shares = np.array([weights[codes == v].sum() for v in values])
    k = int(np.argmax(shares))
    return values[k], float(shares[k] / max(shares.sum(), 1e-300))


#: How several recipes are combined (``--weights``).
WEIGHTINGS = ("bic", "acceptable", "equal")


def model_weights(bic, log_evidence, weighting: str = "bic", acceptable=None) -> np.ndarray:
    """Model weights of a forecast with several recipes.

    ``"bic"``: exp(−BIC/2) × the timing data's marginal likelihood. In practice this puts
    nearly all the weight on one recipe, and with it the windows lose the spread between
    plausible recipes. ``"acceptable"``: the same prior weight for every recipe whose fit
    is acceptable (``acceptable``: p ≥ 0.01, or no degrees of freedom to judge by) and
    none for the others (all of them when none is acceptable), times the timing data's
    marginal likelihood, so measured delays can still tell recipes apart. ``"equal"``:
    the same for every model whatever the data.
    """
    bic = np.asarray(bic, dtype=float)
    if weighting == "equal":
        w = np.ones(len(bic))
    elif weighting == "acceptable":
        ok = np.ones(len(bic), dtype=bool) if acceptable is None else np.asarray(acceptable)
        if not np.any(ok):
            ok = np.ones(len(bic), dtype=bool)
        logw = np.where(ok, 0.0, -np.inf) + np.asarray(log_evidence, dtype=float)
        logw = np.where(np.isfinite(logw), logw, -np.inf)
        if not np.any(np.isfinite(logw)):
            logw = np.where(ok, 0.0, -np.inf)
        w = np.exp(logw - np.max(logw))
    else:
        logw = -0.5 * (bic - bic.min()) + np.asarray(log_evidence, dtype=float)
        logw = np.where(np.isfinite(logw), logw, -np.inf)
        w = np.exp(logw - np.max(logw))
    return w / w.sum()


def match_tracks(models: list[ModelSamples], match_radius: float = 0.15) -> list[dict]:
    """Group the same image across models.

    Observed images are matched by label; predicted ones by best-fit position (within
    ``match_radius`` arcsec), each model at most once per group. Returns groups
    ``{"family", "label", "observed", "x", "y", "members": [(model index, column)]}``;
    the first model to have an image names it.
    """
    groups: list[dict] = []
    for m_index, m in enumerate(models):
        for col, t in enumerate(m.tracks):
            target = None
            for g in groups:
                if t.observed and g["observed"] and g["label"] == t.label:
                    target = g
                elif (
                    not t.observed
                    and not g["observed"]
                    and np.hypot(g["x"] - t.x, g["y"] - t.y) < match_radius
                    and m_index not in [mm for mm, _ in g["members"]]
                ):
                    target = g
                if target is not None:
                    break
            if target is None:
                target = {
                    "family": t.family,
                    "label": t.label,
                    "observed": t.observed,
                    "x": t.x,
                    "y": t.y,
                    "members": [],
                }
                groups.append(target)
            target["members"].append((m_index, col))
    return groups


def parity_name(code) -> str:
    """The name of a parity code (minimum, saddle, maximum)."""
    return PARITIES[int(code)]
