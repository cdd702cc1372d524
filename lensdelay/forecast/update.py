"""The timing update of one model: reweighting its samples, or sampling lens and timing jointly.

The probability model is in :mod:`lensdelay.inference.timing` (docs/statistics.md).
"""

from __future__ import annotations

from dataclasses import replace

from dataclasses import dataclass, field

import numpy as np
from scipy.special import logsumexp

from lensdelay.forecast.samples import (
    MIN_ESS_FRACTION,
    ModelSamples,
    solve_samples,
    track_columns,
)
from lensdelay.inference.summaries import effective_sample_size
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import (
    DEFAULT_SAMPLER,
    SamplerSettings,
    int_seed,
)
from lensdelay.inference.sequence import fit_and_sample
from lensdelay.inference.timing import TimingData

__all__ = [
    "TimingUpdate",
    "importance_update",
    "chain_effective_samples",
    "perturber_covariance",
    "draw_conditional_perturbations",
    "draw_t0",
    "condition_on_timing",
    "resample_jointly",
]


@dataclass
class TimingUpdate:
    """How one model's samples were conditioned on the timing data."""

    route: str  # "none", "reweight" or "resample"
    weights: np.ndarray  # per sample, sum 1
    effective_samples: float
    log_evidence: float  # log E[L_timing] over the samples without timing data
    importance_effective_samples: float | None = None
    notes: list[str] = field(default_factory=list)


def importance_update(
    samples: ModelSamples, timing: TimingData | None, min_fraction: float = MIN_ESS_FRACTION
) -> tuple[TimingUpdate, bool]:
    """Importance weights of the samples given the timing data.

    Returns the update and whether it is good enough (effective sample size at least
    ``min_fraction`` of the samples); if not, the caller samples the posterior anew.
    The log evidence log E[L] (mean over the samples of the timing likelihood, up to
    the Gaussian's constant, which is the same for every model) multiplies the model
    weights: it is the marginal likelihood of the timing data under this model.
    """
    base = samples.valid.astype(float)
    n = len(base)
    if timing is None or not len(timing):
        w = base / max(base.sum(), 1e-300)
        return TimingUpdate("none", w, float(base.sum()), 0.0), True
    arrival = samples.columns(timing)
    logl = timing.log_likelihood(arrival)
    logl = np.where(samples.valid, logl, -np.inf)
    notes = _missing_image_notes(timing, arrival, samples.valid)
    if not np.any(np.isfinite(logl)):
        return TimingUpdate(
            "reweight",
            np.zeros(n),
            0.0,
            -np.inf,
            0.0,
            notes
            + ["the timing data are impossible under every sample (an image they name is missing)"],
        ), False
    log_evidence = float(logsumexp(logl) - np.log(max(base.sum(), 1.0)))
    w = np.exp(logl - np.max(logl))
    ess = effective_sample_size(w)
    update = TimingUpdate("reweight", w / w.sum(), ess, log_evidence, ess, notes)
    return update, ess >= min_fraction * n


def _missing_image_notes(timing: TimingData, arrival: np.ndarray, valid: np.ndarray) -> list[str]:
    """A note per image named by the timing data that some samples lack.

    Such a sample has no arrival time for that image, so it cannot produce the
    measurement: its timing likelihood is zero (the sample keeps no weight).
    """
    notes = []
    needed = np.any(timing.design != 0, axis=0)
    total = max(int(np.sum(valid)), 1)
    for col, (family, label) in enumerate(timing.columns):
        if not needed[col]:
            continue
        lacking = int(np.sum(valid & ~np.isfinite(arrival[:, col])))
        if lacking:
            notes.append(
                f"image {family}/{label} is missing in {100.0 * lacking / total:.1f}% of the "
                f"samples; they cannot produce the measurements that name it (likelihood zero)"
            )
    return notes


def chain_effective_samples(chain) -> float:
    """Walkers × kept steps / τ_max of an emcee run."""
    kept = chain.chain.shape[0] - chain.burn
    tau = float(np.nanmax(chain.autocorr)) if np.all(np.isfinite(chain.autocorr)) else float("inf")
    return chain.chain.shape[1] * kept / max(tau, 1.0)


def perturber_covariance(samples: ModelSamples) -> np.ndarray:
    """Covariance (days², delay units) of the perturbers' delay changes over the tracks."""
    shifts = samples.perturber_days * samples.scale[:, None]
    shifts = shifts[np.all(np.isfinite(shifts), axis=1)]
    if len(shifts) < 2:
        return np.zeros((shifts.shape[1],) * 2)
    return np.atleast_2d(np.cov(shifts, rowvar=False))


def draw_conditional_perturbations(
    samples: ModelSamples, timing: TimingData, covariance: np.ndarray, rng
) -> ModelSamples:
    """Each sample's perturber delay change P drawn given the measurements (Gaussian).

    With P ~ N(0, Σ) over the tracks, the rows y = A (T + P) + b t0 + ε with
    Cov(b t0 + ε) = C, P given y − A T is Gaussian with mean K (y − A T) and covariance
    Σ − K A Σ, K = Σ Aᵀ (A Σ Aᵀ + C)⁻¹ (conditioning of a joint Gaussian; Rasmussen &
    Williams 2006, Gaussian Processes for Machine Learning, eq. A.6). The samples' smooth
    delays T are their own; P is added to ``lens_days`` (divided by each sample's scale).
    """
    design = np.zeros((len(timing), len(samples.tracks)))
    for j, col in enumerate(track_columns(samples.tracks, timing.columns)):
        design[:, col] += timing.design[:, j]
    arrival = np.where(samples.exists, samples.delay, np.nan)
    residual = timing.values[None, :] - np.nan_to_num(arrival) @ design.T  # (n, m)
    gain = covariance @ design.T @ np.linalg.inv(design @ covariance @ design.T + timing.covariance)
    mean = residual @ gain.T
    posterior = covariance - gain @ design @ covariance
    vals, vecs = np.linalg.eigh(0.5 * (posterior + posterior.T))
    root = vecs * np.sqrt(np.clip(vals, 0.0, None))[None, :]
    shift = mean + rng.standard_normal(mean.shape) @ root.T
    shift = shift - shift[:, samples.reference : samples.reference + 1]  # delays after it
    per_lens = np.where(samples.exists, shift / samples.scale[:, None], np.nan)
    return replace(
        samples,
        lens_days=samples.lens_days + np.nan_to_num(per_lens),
        perturber_days=per_lens,
    )


def draw_t0(timing, samples, tr, rng) -> np.ndarray:
    """t0 − detection date per sample: from its exact conditional given the delays."""
    n = len(samples.scale)
    if timing is None:
        return tr.date_sigma_days * rng.standard_normal(n)
    t0 = timing.draw_t0(samples.columns(timing), rng)
    return np.where(np.isfinite(t0), t0, np.nan)


def condition_on_timing(
    sc,
    like,
    chain,
    tracks,
    timing,
    prior_samples,
    settings,
    *,
    seed,
    sampler: SamplerSettings = DEFAULT_SAMPLER,
    progress=False,
    stop=None,
    perturbers=(None, None),
):
    """Condition one model's forecast samples on the timing data.

    Importance weights when they leave at least ``settings.min_ess_fraction`` of the
    samples effective; otherwise the joint posterior (positions and timing, H0 and
    κ_ext free with their priors) is sampled again. Returns the samples, the update
    and the new chain (None when re-weighting sufficed). ``sampler``: the settings of a
    new sample (walkers, the fewest steps, the mass-model prior). ``perturbers``: the
    unseen perturbers' response and generator (:func:`solve_samples`), drawn anew for a
    new sample.
    """
    update, good = importance_update(prior_samples, timing, settings.min_ess_fraction)
    if good:
        return prior_samples, update, None
    response, perturber_rng = perturbers
    # a new sample: the perturbers enter as Gaussian scatter of the arrival times with the
    # covariance of their drawn delay changes (drawn anew given the measurements below)
    scatter = perturber_covariance(prior_samples) if response is not None else None
    fit_seed, sample_seed, draw_seed = (
        np.random.SeedSequence(seed).spawn(3) if isinstance(seed, int) else seed.spawn(3)
    )
    seeds = (int_seed(fit_seed), int_seed(sample_seed), np.random.default_rng(draw_seed))
    return resample_jointly(
        sc,
        like,
        chain,
        tracks,
        timing,
        update,
        settings,
        sampler,
        seeds,
        progress=progress,
        stop=stop,
        scatter=(scatter, perturber_rng),
    )


def _resample_notes(update, jchain, n, n_steps, ess, want) -> list[str]:
    """What a joint resample says: why it ran, how long, and what it is worth."""
    notes = list(update.notes) + [
        f"the measurements left {update.importance_effective_samples:.0f} effective samples of "
        f"{n} after "
        f"re-weighting; the posterior was sampled again with them ({n_steps} steps, "
        f"about {ess:.0f} independent samples)"
    ]
    notes += list(jchain.warnings)
    if ess < want:
        notes.append(
            f"only about {ess:.0f} independent samples (goal {want:.0f}); raise --steps (this "
            f"run took {n_steps}) or --walkers"
        )
    return notes


def _joint_likelihood(sc, like, tracks, timing, settings, sampler) -> ImageLikelihood:
    """Positions and timing data together, H0 and κ_ext free with their priors.

    The predicted images the timing data name are followed by Newton's method.
    """
    tracked = {
        tracks[0].family: {
            t.label: (t.x, t.y)
            for t in tracks
            if not t.observed and (t.family, t.label) in timing.columns
        }
    }
    return ImageLikelihood(
        like.scenario,  # with the positions' model error, if the fit needed one
        sc.model,
        prior=sampler.prior,
        timing=timing,
        h0_prior=settings.h0_prior if settings.h0_prior is not None else "fixed",
        kappa_prior=settings.kappa_ext,
        tracked=tracked,
    )


def resample_jointly(
    sc,
    like,
    chain,
    tracks,
    timing,
    update,
    settings,
    sampler: SamplerSettings,
    seeds,
    *,
    progress=False,
    stop=None,
    scatter=(None, None),
):
    """Sample the joint posterior of lens, H0, κ_ext given positions and timing data.

    ``scatter``: the unseen perturbers' delay covariance over the tracks (days², or None)
    and a generator. The timing likelihood then carries it as extra scatter of the
    arrival times, and each sample's perturbation is drawn from its Gaussian
    conditional given the measurements (:func:`draw_conditional_perturbations`).
    """
    st = settings
    covariance, perturber_rng = scatter
    if covariance is not None:
        cols = track_columns(tracks, timing.columns)
        smooth_timing = timing
        timing = timing.with_arrival_covariance(covariance[np.ix_(cols, cols)])
    joint = _joint_likelihood(sc, like, tracks, timing, st, sampler)
    fit_seed, sample_seed, rng = seeds
    # enough steps that the kept chain holds min_ess_fraction·n independent samples,
    # judged by the autocorrelation time of the positions-only chain
    tau = float(np.nanmax(chain.autocorr)) if np.all(np.isfinite(chain.autocorr)) else 50.0
    want = st.min_ess_fraction * st.n_samples
    walkers = sampler.walkers
    needed = int(np.ceil(1.5 * want * tau / max(walkers, 2 * joint.n_parameters))) + int(2 * tau)
    n_steps = int(min(max(sampler.steps, needed), 50_000))
    jres, jchain = fit_and_sample(
        joint,
        walkers=walkers,
        steps=n_steps,
        fit_seed=fit_seed,
        sample_seed=sample_seed,
        progress=progress,
        stop=stop,
    )
    flat = jchain.samples()
    n = st.n_samples
    draws = flat[rng.integers(0, len(flat), n)]
    h0 = draws[:, joint.h0_index] if joint.h0_index is not None else np.full(n, like.h0_ref)
    kappa = (
        draws[:, joint.kappa_index]
        if joint.kappa_index is not None
        else np.full(n, joint.kappa_fixed)
    )
    samples = solve_samples(joint, draws, tracks, sc.transient.seen_in, h0, kappa)
    if covariance is not None:
        samples = draw_conditional_perturbations(samples, smooth_timing, covariance, perturber_rng)
    ess = min(float(n), chain_effective_samples(jchain))
    notes = _resample_notes(update, jchain, n, n_steps, ess, want)
    # re-solved images may lack one the timing data name: such a sample cannot produce
    # the measurement, likelihood zero as in the re-weighting (TimingData.log_likelihood)
    possible = samples.valid & np.isfinite(timing.log_likelihood(samples.columns(timing)))
    if not np.any(possible):  # impossible under this model (no sample has those images)
        return samples, TimingUpdate("resample", np.zeros(n), 0.0, -np.inf, 0.0, notes), jchain
    weights = possible.astype(float)
    return (
        samples,
        TimingUpdate(
            "resample",
            weights / weights.sum(),
            ess,
            update.log_evidence,
            update.importance_effective_samples,
            notes,
        ),
        jchain,
    )
