"""The sequence every job runs: fit, judge the fit, sample the posterior.

A poor fit is fitted again with a model error on the positions before anything is
sampled (:func:`fit_and_sample`), so fit, maps, forecast, hubble and prepare agree on
it; a model with fewer constraints than parameters is sampled by conditional importance
sampling (:func:`importance_chain`), every other one by the Markov chain
(:func:`lensdelay.inference.sampling.sample`), each other fit mode by its own chain,
mixed by mass (:mod:`lensdelay.inference.modes`).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path


import numpy as np

from lensdelay.errors import FitError, InputError, LensdelayWarning
from lensdelay.inference.fit import fit, underconstrained_note
from lensdelay.inference.misfit import (
    POOR_FIT_P,
    ModelError,
    judged_p_value,
    largest_residual,
    position_floor,
)
from lensdelay.inference.importance import ImportanceDraws, conditional_importance
from lensdelay.inference.modes import mix_modes, modes_to_sample
from lensdelay.inference import sampling
from lensdelay.inference.sampling import (
    DEFAULT_SAMPLER,
    Chain,
    StopRequest,
    int_seed,
    _progress_display,
)

__all__ = [
    "MODEL_ERROR_ROUNDS",
    "MODEL_ERROR_CAP",
    "IMPORTANCE_DRAWS",
    "IMPORTANCE_BATCHES",
    "IMPORTANCE_WANTED",
    "IMPORTANCE_MIN",
    "IMPORTANCE_ROWS",
    "importance_chain",
    "sample_posterior",
    "fit_and_sample",
]


#: Most refits with a growing model error (each sets the floor again at the new best fit).
MODEL_ERROR_ROUNDS = 4
#: The model error never exceeds this many times the first fit's largest image residual.
MODEL_ERROR_CAP = 10.0


def _with_model_error(like, result, fit_seed):
    """A poor fit (p < POOR_FIT_P) is fitted again with a model error on the positions.

    ``like`` is changed in place (:meth:`ImageLikelihood.set_position_floor`); the
    returned result carries :class:`ModelError` and a note. A scenario that already has
    a floor is not judged twice.
    """
    if getattr(like, "use_delays", False):
        # a joint fit with timing data: its misfit may be a tension between the delays and
        # the positions, which is reported as such; loosening the positions would hide it.
        # The positions-only fit before it has already been judged (its floor is inherited).
        return result
    p = judged_p_value(result.chi2, result.dof)
    if p >= POOR_FIT_P or like.scenario.position_floor > 0:
        return result
    first, floor, refit = result, 0.0, result
    # never far beyond the misfit actually seen: a floor much larger than the first fit's
    # residuals would only throw the positions' information away
    cap = MODEL_ERROR_CAP * largest_residual(like, result.values)
    # the floor is set at the best fit, which moves once positions are looser: a few rounds
    for _ in range(MODEL_ERROR_ROUNDS):
        extra = position_floor(like, refit.values)
        if extra <= 0 or floor >= cap:
            break
        floor = min(float(np.hypot(floor, extra)), cap)
        like.set_position_floor(floor)
        refit = fit(like, seed=fit_seed)
        if judged_p_value(refit.chi2, refit.dof) >= POOR_FIT_P:
            break
    if floor <= 0:
        return result
    error = ModelError(floor, first.chi2, first.dof, p)
    return replace(refit, model_error=error, notes=[error.note(), *refit.notes])


#: Draws of the importance sampler per batch, and most batches.
IMPORTANCE_DRAWS = 20_000
IMPORTANCE_BATCHES = 5
#: Effective samples wanted from importance sampling (another batch is drawn below it),
#: and fewest accepted (below it the Markov chain samples instead).
IMPORTANCE_WANTED = 1000
IMPORTANCE_MIN = 300
#: Equally weighted rows the importance draws are resampled to.
IMPORTANCE_ROWS = 8000


def importance_chain(like, best: np.ndarray, seed: int) -> tuple[Chain | None, str]:
    """A :class:`Chain` of resampled conditional-importance draws, or None (use MCMC).

    For models with no more constraints than parameters, whose posterior sheet a Markov
    chain barely crosses (:mod:`lensdelay.inference.importance`). None when the method
    does not apply (a free parameter without a proper prior) or its draws are worth
    fewer than :data:`IMPORTANCE_MIN` independent ones; the second element then says why.
    """
    rng = np.random.default_rng(seed)
    batches = []
    for _ in range(IMPORTANCE_BATCHES):
        draws = conditional_importance(like, best, IMPORTANCE_DRAWS, rng)
        if draws is None:
            return None, "a free parameter has no proper prior to draw it from"
        batches.append(draws)
        merged = ImportanceDraws(
            np.concatenate([b.rows for b in batches]),
            np.concatenate([b.log_weights for b in batches]),
            draws.pinned,
            sum(b.n_draws for b in batches),
        )
        if merged.effective_samples >= IMPORTANCE_WANTED:
            break
    ess = merged.effective_samples
    if ess < IMPORTANCE_MIN:
        return None, (
            f"its draws were worth {ess:.0f} independent samples (fewer than {IMPORTANCE_MIN})"
        )
    rows = merged.resample(IMPORTANCE_ROWS, rng)
    ndim = rows.shape[1]
    # wrap periodic parameters (position angles) around the best fit, as the chain does
    for i, period in enumerate(like.periods):
        if period:
            rows[:, i] = best[i] + (rows[:, i] - best[i] + period / 2) % period - period / 2
    notes = []
    if ess < IMPORTANCE_WANTED:
        notes.append(
            f"importance sampling gave {ess:.0f} effective samples from {merged.n_draws} draws; "
            "the tails of the windows are uncertain"
        )
        warnings.warn(notes[-1], LensdelayWarning, stacklevel=2)
    return Chain(
        list(like.names),
        rows[:, None, :],
        like.log_probability(rows)[:, None],
        np.full(1, np.nan),
        # one "step" per independent draw: walkers × rows / τ equals the effective samples
        np.full(ndim, IMPORTANCE_ROWS / ess),
        0,
        1,
        seed,
        notes,
        "importance",
        np.full(ndim, np.nan),
        draws=merged.n_draws,
        effective_samples=ess,
    ), ""


def sample_posterior(like, start: np.ndarray, *, seed: int = 1, **chain_options) -> Chain:
    """The posterior of ``like`` around the best fit ``start``, by the right method.

    A model with fewer constraints than parameters is sampled by conditional importance
    sampling (:func:`importance_chain`; no checkpoint is written, it takes seconds), and
    by the Markov chain (:func:`sample`, with ``chain_options``) otherwise, or when
    importance sampling does not apply or its draws are worth fewer than
    :data:`IMPORTANCE_MIN` independent ones.
    """
    if like.dof <= 0:
        chain, why = importance_chain(like, start, seed)
        if chain is not None:
            progress = chain_options.get("progress", False)
            if progress:
                _progress_display(progress, 1)(1)
            return chain
        chain = sampling.sample(like, start, seed=seed, **chain_options)
        note = (
            f"the model has {like.dof} degrees of freedom, a case importance sampling serves "
            f"best, but it could not be used ({why}): the posterior was sampled by the Markov "
            "chain instead"
        )
        warnings.warn(note, LensdelayWarning, stacklevel=2)
        return replace(chain, warnings=[note, *chain.warnings])
    return sampling.sample(like, start, seed=seed, **chain_options)


def _sample_other_modes(
    like, result, chain, others, steps, walkers, seed, progress, stop, checkpoint_dir, resume
):
    """``chain`` mixed with a chain of each other fit mode (:mod:`lensdelay.inference.modes`).

    Each mode's chain has its own seed (spawned from ``seed``) and checkpoint folder
    (``mode1``, ``mode2`` inside ``checkpoint_dir``), so a resumed run repeats this one.
    """
    chains, chi2s = [chain], [result.chi2]
    children = np.random.SeedSequence(seed).spawn(len(others))
    for k, ((chi2, values), child) in enumerate(zip(others, children), start=1):
        folder = Path(checkpoint_dir) / f"mode{k}" if checkpoint_dir else None
        try:
            other = sampling.sample(
                like,
                values,
                walkers=walkers,
                steps=steps,
                seed=int_seed(child),
                progress=progress,
                stop=stop,
                scales=result.errors,
                checkpoint_dir=folder,
                resume=resume,
            )
        except (FitError, FloatingPointError, ValueError, np.linalg.LinAlgError):
            # a mode the sampler cannot start in (no finite density near it) adds nothing
            continue
        if other.chain.shape[1] == chain.chain.shape[1]:
            chains.append(other)
            chi2s.append(chi2)
    mixed, shares, _ = mix_modes(like, result, chains, chi2s)
    return replace(mixed, modes=tuple(shares))


def fit_and_sample(
    like,
    *,
    walkers: int = DEFAULT_SAMPLER.walkers,
    steps: int | Callable = 2000,
    fit_seed: int = 1,
    sample_seed: int = 1,
    progress=False,
    stop: StopRequest | None = None,
    checkpoint_dir=None,
    resume: bool = False,
    sample: bool = True,
):
    """Fit ``like`` and sample its posterior around the best fit: the sequence every job runs.

    The fit is judged, and a poor one fitted again with a model error on the positions
    (:func:`_with_model_error`), before anything is sampled, so fit, maps, forecast,
    hubble and prepare agree on a poor fit. The posterior is sampled by
    :func:`sample_posterior`, each other fit mode by its own chain, mixed by mass
    (:mod:`lensdelay.inference.modes`).

    Warnings of the fit and the sampler (degrees of freedom, short chains) are not
    raised: they are in the results' ``notes`` and ``warnings``, which the reports print.
    An input error of the fit names the scenario's file.

    Parameters
    ----------
    like : ImageLikelihood
    steps : int or callable
        Sampler steps, or a function of the fit result that returns them.
    fit_seed, sample_seed : int
        Seeds of the fit's starts and of the sampler.

    sample : bool
        False stops after the fit (the chain returned is None).

    Returns
    -------
    (FitResult, Chain or None)
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        try:
            result = fit(like, seed=fit_seed)
            result = _with_model_error(like, result, fit_seed)
        except InputError as err:
            raise err.with_source(like.scenario.source) from err
        if not sample:
            return _judged(like, result), None
        n_steps = steps(result) if callable(steps) else steps
        chain = sample_posterior(
            like,
            result.values,
            walkers=walkers,
            steps=n_steps,
            seed=sample_seed,
            progress=progress,
            stop=stop,
            scales=result.errors,
            checkpoint_dir=checkpoint_dir,
            resume=resume,
        )
        others = modes_to_sample(result)
        if others and chain.move != "importance":
            chain = _sample_other_modes(
                like,
                result,
                chain,
                others,
                n_steps,
                walkers,
                sample_seed,
                progress,
                stop,
                checkpoint_dir,
                resume,
            )
    return _judged(like, result), chain


def _judged(like, result):
    """``result`` with the warnings a poor or under-constrained fit deserves (and notes)."""
    if result.model_error is not None:
        warnings.warn(
            f"{like.model.label}: {result.model_error.note()}", LensdelayWarning, stacklevel=3
        )
    if like.dof < 0:
        note = underconstrained_note(like)
        result.notes.insert(0, note)
        warnings.warn(f"{like.model.label}: {note}", LensdelayWarning, stacklevel=3)
    return result
