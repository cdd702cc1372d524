"""Posterior sampling of a likelihood with emcee, checkpointed so runs can resume.

The log-probability is evaluated for all walkers in one vectorised call
(``vectorize=True``). Every ``checkpoint_every`` steps the chain, the walkers' state
and the generator state are saved to ``DIR/chain.npz`` (numpy, no pickle); a run
started again with ``resume=True`` continues from there and -- with the same seed --
ends with exactly the chain an uninterrupted run would have made.
"""

from __future__ import annotations

import logging
import sys
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lensdelay.errors import InputError, LensdelayWarning, choices_text
from lensdelay.inference.coordinates import SampledTarget, SamplingCoordinates, polar_pairs
from lensdelay.inference.stop import StopRequest

__all__ = [
    "SamplerSettings",
    "DEFAULT_SAMPLER",
    "StopRequest",
    "MOVES",
    "LANGEVIN_MAX_PARAMETERS",
    "Chain",
    "MIN_STEPS",
    "check_sampler_settings",
    "int_seed",
    "sample",
    "integrated_time",
    "RHAT_GOAL",
    "MIN_STEPS_TO_EXTEND",
    "EXTEND_FACTOR",
    "MAX_RHAT",
    "potential_scale_reduction",
]


#: Proposal moves :func:`sample` can use ("auto" picks one by the number of parameters).
MOVES = ("auto", "langevin", "differential", "stretch")
#: Most parameters "auto" samples with the Langevin move. Each of its steps differences
#: the residuals in every parameter for every walker (2n extra lens evaluations per
#: walker): worth it for a galaxy lens's ~10 parameters, where it mixes fastest, but a
#: cluster model's 20-60 parameters and hundreds of member galaxies make a step tens of
#: times dearer than a log-probability, so those get the differential-evolution moves.
LANGEVIN_MAX_PARAMETERS = 20


@dataclass
class Chain:
    """Samples and diagnostics of one sampler run."""

    names: list[str]
    chain: np.ndarray  # (steps, walkers, ndim)
    log_prob: np.ndarray  # (steps, walkers)
    acceptance: np.ndarray  # per walker
    autocorr: np.ndarray  # per parameter, steps
    burn: int
    thin: int
    seed: int
    warnings: list[str]
    move: str
    rhat: np.ndarray  # per parameter, walkers as chains (after burn-in); NaN: none moved
    #: importance sampling only (``move == "importance"``): draws made and what they are
    #: worth, (Σw)²/Σw²; the chain then holds equally weighted resampled rows, one walker
    draws: int | None = None
    effective_samples: float | None = None
    #: Fit modes mixed in this chain (:func:`lensdelay.inference.modes.mix_modes`), each
    #: with its weight and walkers; empty when the best fit's valley was sampled alone.
    modes: tuple = ()

    def samples(self) -> np.ndarray:
        """Flat samples after burn-in and thinning: (n, ndim)."""
        return self.chain[self.burn :: self.thin].reshape(-1, self.chain.shape[-1])

    def effective_sample_sizes(self) -> np.ndarray:
        """Independent samples each parameter's draws are worth, per parameter.

        Markov chain: walkers × (steps − burn-in) / τ (Goodman & Weare 2010, CAMCoS 5,
        65; Foreman-Mackey et al. 2013, PASP 125, 306, sec. 3); importance sampling:
        (Σw)²/Σw² for every parameter.
        """
        if self.effective_samples is not None:
            return np.full(self.chain.shape[-1], float(self.effective_samples))
        steps, walkers = self.chain.shape[:2]
        with np.errstate(divide="ignore", invalid="ignore"):
            return walkers * (steps - self.burn) / np.asarray(self.autocorr, dtype=float)


#: Fewest sampler steps accepted: fewer cannot estimate an autocorrelation time.
MIN_STEPS = 50


def check_sampler_settings(walkers: int, steps: int, seed: int) -> None:
    """Refuse sampler settings that cannot work (before anything is computed)."""
    for name, value, low in (
        ("walkers", walkers, 2),
        ("steps", steps, MIN_STEPS),
        ("seed", seed, 0),
    ):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise InputError(f"{name} must be an integer >= {low}, got {value!r}")


@dataclass(frozen=True)
class SamplerSettings:
    """How a posterior is sampled: the same for fit, forecast, hubble, maps and prepare.

    Validated on construction (:func:`check_sampler_settings`; ``prior`` one of
    :data:`lensdelay.inference.likelihood.PRIOR_CHOICES`). The defaults are the ones every
    job uses.
    """

    #: emcee walkers (at least twice the number of parameters are used).
    walkers: int = 32
    #: Steps per walker (a chain that has not mixed runs on, up to twice as many).
    steps: int = 2000
    #: The mass-model prior: flat in the recipe's parameters, or Jeffreys'.
    prior: str = "flat"

    def __post_init__(self):
        from lensdelay.inference.likelihood import PRIOR_CHOICES

        check_sampler_settings(self.walkers, self.steps, 0)
        if self.prior not in PRIOR_CHOICES:
            raise InputError(
                f"prior must be one of {choices_text(PRIOR_CHOICES)}, got {self.prior!r}"
            )


#: The sampler settings every job uses unless told otherwise (defined once, here).
DEFAULT_SAMPLER = SamplerSettings()


def _data_fingerprint(like) -> str:
    """A short hash of what the posterior depends on: parameters, bounds, priors, data.

    A checkpoint records it, so that ``resume`` refuses a chain made for another
    scenario or model, not only another seed or shape.
    """
    import hashlib

    parts = [repr(list(getattr(like, "names", []))), repr(getattr(like, "priors", {}))]
    for attr in ("lower", "upper"):
        parts.append(np.asarray(getattr(like, attr, []), dtype=float).tobytes().hex())
    for fam in getattr(like, "families", []):
        parts.append(np.concatenate([fam.x, fam.y, fam.sigma, [fam.scale]]).tobytes().hex())
    timing = getattr(like, "timing", None)
    if timing is not None:
        parts.append(np.concatenate([timing.values, timing.sigmas]).tobytes().hex())
    return hashlib.sha256("|".join(parts).encode()).hexdigest()[:16]


def int_seed(seed_sequence: np.random.SeedSequence) -> int:
    """An int seed (for lmfit's starts and emcee's generator) drawn from a SeedSequence child."""
    return int(seed_sequence.generate_state(1)[0] % (2**31))


def _progress_display(progress, total: int):
    """The sampler's progress display: a tqdm bar, a caller's function, or nothing.

    ``progress=True`` gives a bar on stderr; a callable is called as
    ``progress(done, total)``. Returns an update function taking the steps done.
    """
    if callable(progress):
        return lambda done: progress(done, total)
    if not progress:
        return lambda done: None
    from tqdm import tqdm

    bar = tqdm(total=total, desc="sampling", unit="step", leave=False, file=sys.stderr)

    def update(done):
        bar.update(done - bar.n)
        if done >= total:
            bar.close()

    return update


def _proposal_moves(move: str, like, coords, target):
    """(move name, emcee moves, the Langevin move or None) for ``move`` ("auto" picks)."""
    import emcee

    from lensdelay.inference.moves import FisherLangevinMove

    langevin = None
    if move == "auto":
        move = "langevin" if len(like.names) <= LANGEVIN_MAX_PARAMETERS else "differential"
    if move == "langevin":
        # now and then an ensemble stretch: a walker that strays onto a steep wall, where
        # the local geometry says little, is pulled back by the others
        # with fewer constraints than parameters some directions are seen by the priors
        # alone: the move then explores them at the priors' widths
        under = getattr(like, "dof", 0) < 0  # a test target may not count constraints
        widths = coords.prior_scales(like.lower, like.upper, like.periods) if under else None
        langevin = FisherLangevinMove(target, prior_widths=widths)
        moves = [(langevin, 0.9), (emcee.moves.StretchMove(), 0.1)]
    elif move == "differential":
        moves = [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
    elif move == "stretch":
        moves = emcee.moves.StretchMove()
    else:
        raise InputError(f"move must be one of {choices_text(MOVES)}, got {move!r}")
    return move, moves, langevin


def _run_until_mixed(sampler, backend, state, names, steps, max_steps, every, show, stop):
    """Run the chain to ``steps``, then on by halves while the walkers disagree.

    Judged by R̂ over the second half in the sampling coordinates (no angle wraps there),
    at most to ``max_steps``; the checkpoint is written every ``every`` steps and a stop
    request honoured there. Returns the steps done and R̂ where the run-on began (None
    when it did not, or was resumed past it).
    """
    done = backend.iteration
    # the lengths at which convergence is judged: steps, then every half of it up to the
    # cap; a resumed run continues to the next of them, as the uninterrupted run did
    checks = list(range(steps, max_steps + 1, max(steps // 2, 1)))
    checks = checks if checks[-1] == max_steps else [*checks, max_steps]
    goal = next(c for c in checks if c >= done) if done <= max_steps else done
    first_rhat = None  # R̂ where the run-on began (unknown when resumed past it)
    while True:
        while done < goal:
            n = min(every, goal - done)
            # starts that were all moved onto the best fit are identical: allowed, they spread
            state = sampler.run_mcmc(state, n, progress=False, skip_initial_state_check=True)
            done += n
            backend.write(names)
            show(done)
            if stop.requested:
                stop.active = False
                raise KeyboardInterrupt
        if done >= max_steps:
            break
        # R-hat over the second half, in the sampling coordinates (no angle wraps there)
        worst = np.nanmax(potential_scale_reduction(backend.get_chain()[done // 2 :]))
        if not worst > RHAT_GOAL:
            break
        if done == steps:
            first_rhat = float(worst)
        goal = next(c for c in checks if c > done)
    return done, first_rhat


def _diagnosed_chain(backend, like, coords, start, asked, steps, first_rhat, seed, move):
    """The finished run as a :class:`Chain` in the model's parameters, with its notes.

    Autocorrelation time, burn-in and thinning, R̂ between walkers, and a note (and a
    warning) for a short chain, walkers that never moved or never mixed, or a run-on.
    """
    chain, logp, accepted = backend.get_chain(), backend.get_log_prob(), backend.accepted
    ndim = chain.shape[-1]
    # τ in the sampling coordinates (no angle wraps there), from the second half so the
    # walkers' initial spread does not inflate it
    tau = integrated_time(chain[len(chain) // 2 :])
    chain = coords.to_model(chain.reshape(-1, ndim)).reshape(chain.shape)
    # wrap periodic parameters (position angles) around the best fit: no wrap straddling
    for i, period in enumerate(like.periods):
        if period:
            chain[..., i] = start[i] + (chain[..., i] - start[i] + period / 2) % period - period / 2
    notes = []
    finite = np.isfinite(tau)
    if not np.any(finite):
        # every parameter's chain is flat (the walkers never moved, e.g. a source exactly
        # on a caustic): no autocorrelation time, and the spread means nothing
        tau_max = steps / 10.0
        notes.append(
            "the sampler's walkers did not move, so no autocorrelation time could be estimated "
            "and the posterior spread is not trustworthy; check the images against caustics"
        )
        warnings.warn(notes[-1], LensdelayWarning, stacklevel=3)
    else:
        tau_max = float(np.max(tau[finite]))
    burn = int(min(steps // 2, max(2 * tau_max, steps // 5)))
    if steps < 50 * tau_max and np.any(finite):
        fewest = chain.shape[1] * (steps - burn) / tau_max
        notes.append(
            f"chain of {steps} steps is shorter than 50 autocorrelation times "
            f"(max tau = {tau_max:.0f} steps; worth about {fewest:.0f} independent samples); "
            f"run longer (--steps, now {steps}) before trusting the tails"
        )
        warnings.warn(notes[-1], LensdelayWarning, stacklevel=3)
    if steps > asked:
        measured = "" if first_rhat is None else f"R-hat {first_rhat:.2f}, "
        notes.append(
            f"the walkers had not mixed after {asked} steps ({measured}above the goal "
            f"{RHAT_GOAL}): the chain ran on to {steps} steps (at most {EXTEND_FACTOR}x --steps)"
        )
    thin = max(1, int(tau_max // 4))
    rhat = potential_scale_reduction(chain[burn:])
    worst = int(np.nanargmax(rhat)) if np.any(np.isfinite(rhat)) else None
    if worst is not None and rhat[worst] > MAX_RHAT:
        # τ is estimated from the walkers together and can look fine while each walker
        # stays near where it started: R̂ compares the walkers with one another
        notes.append(
            f"the walkers have not mixed (R-hat {rhat[worst]:.2f} for {like.names[worst]}, "
            f"more than {MAX_RHAT}): the spread comes largely from their randomised starting "
            f"fits, an approximation of the posterior; run longer (--steps, now {steps}) or "
            f"with more walkers (--walkers, now {chain.shape[1]}) before trusting the tails"
        )
        warnings.warn(notes[-1], LensdelayWarning, stacklevel=3)
    return Chain(
        list(like.names), chain, logp, accepted / steps, tau, burn, thin, seed, notes, move, rhat
    )


def sample(
    like,
    start: np.ndarray,
    *,
    walkers: int = DEFAULT_SAMPLER.walkers,
    steps: int = DEFAULT_SAMPLER.steps,
    seed: int = 1,
    checkpoint_dir: str | Path | None = None,
    resume: bool = False,
    checkpoint_every: int = 200,
    progress=False,
    stop: StopRequest | None = None,
    scales=None,
    move: str = "auto",
    components: bool = True,
) -> Chain:
    """Sample the posterior of ``like`` around ``start``.

    The walkers move in :class:`lensdelay.inference.coordinates.SamplingCoordinates` (ellipticity
    and shear components), where the valley is nearly straight; the density is that of
    ``like`` (the change of variables is accounted for), and the returned chain is in
    the model's own parameters. The checkpoint holds the sampling coordinates.

    Parameters
    ----------
    like : ImageLikelihood or alike
        Has ``log_probability(rows)``, ``evaluate(rows)`` (for the Langevin move),
        ``names``, ``periods``, ``lower``, ``upper``.
    start : ndarray
        Best-fit vector; walkers start in a small Gaussian ball around it.
    scales : ndarray, optional
        Ball widths per parameter (e.g. the fit's standard errors).
    move : {"auto", "langevin", "differential", "stretch"}
        ``"auto"`` (default): ``"langevin"`` up to :data:`LANGEVIN_MAX_PARAMETERS`
        parameters, ``"differential"`` above.
        ``"langevin"``: :class:`lensdelay.inference.moves.FisherLangevinMove`, which
        follows the local shape of the posterior, every walker its own chain;
        ``"differential"``: emcee's differential-evolution moves (ter Braak 2006, Stat.
        Comput. 16, 239; the snooker variant, ter Braak & Vrugt 2008, Stat. Comput. 18,
        435, one proposal in five), which cost one log-probability per walker and step;
        ``"stretch"``: emcee's affine-invariant ensemble move (mixes slowly along
        curved valleys; kept for comparison).
    components : bool
        Sample ellipticity and shear components (default); False samples the recipe's
        own parameters (for comparison in the benchmark).
    progress : bool or callable
        False (default): silent. True: a progress bar on stderr. A function: called as
        ``progress(steps_done, steps)`` after every checkpoint block.
    stop : StopRequest, optional
        Checked after every checkpoint block; when requested, the chain so far is kept
        in the checkpoint and KeyboardInterrupt is raised.
    """
    # emcee and the moves load when a chain is drawn, not when a chain is only read
    # (a forecast from a prepared lens)
    import emcee

    from lensdelay.inference.backend import NpzCheckpoint
    from lensdelay.inference.starts import starting_ball

    check_sampler_settings(walkers, steps, seed)
    ndim = len(start)
    if walkers < 2 * ndim:
        walkers = 2 * ndim  # emcee's ensemble moves need twice as many walkers as parameters
    rng = np.random.default_rng(seed)
    # pairs whose posterior may reach zero shear or a round lens stay polar (no 1/γ spike)
    polar = (
        polar_pairs(like.names, start, scales, getattr(like, "priors", {})) if components else set()
    )
    coords = SamplingCoordinates(like.names, like.lower, like.upper, components, polar)
    target = SampledTarget(like, coords)
    move, moves, langevin = _proposal_moves(move, like, coords, target)
    # what a resumed run must share with the checkpoint besides seed and shape
    setup = (
        f"move {move}, prior {getattr(like, 'prior', 'flat')}, components {components}, "
        f"polar {sorted(polar)}, data {_data_fingerprint(like)}"
    )
    path = Path(checkpoint_dir) / "chain.npz" if checkpoint_dir else None
    backend = NpzCheckpoint(path, seed, setup)
    resumed = resume and backend.read(walkers, ndim)
    # a run of the default length or longer goes on until the walkers agree (or a cap)
    max_steps = steps * EXTEND_FACTOR if steps >= MIN_STEPS_TO_EXTEND else steps
    if resumed and backend.iteration > max_steps:
        raise InputError(
            f"steps must be at least the {backend.iteration} steps already in {path} to resume, "
            f"got {steps}"
        )
    sampler = emcee.EnsembleSampler(
        walkers, ndim, target.log_probability, vectorize=True, moves=moves, backend=backend
    )
    # the starting points and the step are drawn again on resume, identically (same
    # seed), so a resumed chain continues with the step the first run chose
    emcee_seed = int(rng.integers(2**31))
    state = starting_ball(like, coords, target, start, scales, walkers, rng)
    if langevin is not None:
        langevin.tune(state.coords, state.log_prob, rng)
    if resumed:
        state = None  # emcee continues from the backend's last sample and random state
    else:
        # emcee draws from its own RandomState; seed it from our generator
        sampler.random_state = np.random.RandomState(emcee_seed).get_state()
    done = backend.iteration
    show = _progress_display(progress, steps)
    show(done)
    stop = stop if stop is not None else StopRequest()
    stop.active, stop.requested = True, False
    done, first_rhat = _run_until_mixed(
        sampler, backend, state, like.names, steps, max_steps, checkpoint_every, show, stop
    )
    stop.active = False
    return _diagnosed_chain(backend, like, coords, start, steps, done, first_rhat, seed, move)


def integrated_time(chain: np.ndarray) -> np.ndarray:
    """The integrated autocorrelation time per parameter (emcee's estimate), silently.

    emcee logs its own short-chain message; ours say it with the numbers, and the library
    stays silent (its logger is quieted for this call only). NaN for a flat chain.
    """
    import emcee

    autocorr_log = logging.getLogger("emcee.autocorr")
    level = autocorr_log.level
    autocorr_log.setLevel(logging.ERROR)
    try:
        with np.errstate(invalid="ignore", divide="ignore"):
            return emcee.autocorr.integrated_time(chain, quiet=True)
    finally:
        autocorr_log.setLevel(level)


#: A chain of at least MIN_STEPS_TO_EXTEND steps whose walkers do not agree (R̂ above
#: RHAT_GOAL, the note's threshold, over its second half) runs on, half its length at a
#: time, to at most EXTEND_FACTOR times its steps; a shorter run (a quick look asked for)
#: stays as asked and its notes say whether it mixed.
RHAT_GOAL = 1.1
MIN_STEPS_TO_EXTEND = 1000
EXTEND_FACTOR = 2

#: Largest potential scale reduction R̂ accepted without a note (Gelman et al. 2013,
#: Bayesian Data Analysis, 3rd ed., sec. 11.4: common practice).
MAX_RHAT = 1.1


def potential_scale_reduction(chain: np.ndarray) -> np.ndarray:
    """Gelman–Rubin R̂ per parameter, each walker one chain (chain: (steps, walkers, ndim)).

    With n steps, W the mean of the walkers' variances and B/n the variance of their
    means, R̂ = √(((n − 1)/n · W + B/n) / W) (Gelman & Rubin 1992, Statistical Science 7,
    457, eqs. 3–4, without the degrees-of-freedom factor). NaN where no walker moves.
    """
    n = chain.shape[0]
    if n < 2:
        return np.full(chain.shape[-1], np.nan)
    within = np.mean(np.var(chain, axis=0, ddof=1), axis=0)
    between = np.var(np.mean(chain, axis=0), axis=0, ddof=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.sqrt(((n - 1) / n * within + between) / within)
