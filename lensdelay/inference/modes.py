"""Several fit modes in one posterior sample, each with its posterior mass.

A quad's χ² surface can hold more than one valley (an ellipticity and a shear that trade
places, a slope branch): the fit keeps the polished optima that lie apart from the best
(:attr:`lensdelay.inference.fit.FitResult.alternatives`). A Markov chain started in one
valley rarely crosses to another, so each valley within :data:`MODE_DCHI2` of the best is
sampled by its own chain, and the chains are mixed by the posterior mass of their valleys.

The mass of a valley k is estimated from its own chain by the Laplace approximation
(e.g. MacKay 2003, Information Theory, Inference, and Learning Algorithms, sec. 27.1):
for a Gaussian valley of d parameters, Z_k = p_k,max (2π)^(d/2) (det Σ_k)^(1/2) and the mean of
ln p over its samples is ln p_k,max − d/2, so

    ln Z_k ≈ ⟨ln p⟩_k + d/2 + ½ ln det Σ_k + const,

with p the posterior density in the model's parameters (likelihood × prior) and Σ_k the
chain's covariance; the constant is the same for every valley. The valleys' chains are
mixed by giving each a share of walkers proportional to Z_k (the largest keeps all of its
walkers), so the mixed chain keeps the walkers × steps layout every later stage reads.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

__all__ = [
    "DISTINCT_MODE",
    "distinct_modes",
    "MODE_DCHI2",
    "MAX_EXTRA_MODES",
    "DISTINCT_CHAINS",
    "ModeShare",
    "modes_to_sample",
    "log_mode_mass",
    "mix_modes",
]


#: Δχ² within which another fit mode holds at least about 1% of the posterior
#: (e^(−9.2/2) ≈ 0.01): such a mode is sampled and mixed in.
MODE_DCHI2 = 9.2
#: Most fit modes sampled besides the best one (each costs one more chain).
MAX_EXTRA_MODES = 2
#: Error bars of the best fit apart in some parameter for two chains to sample distinct
#: valleys (as the fit's own test, :data:`DISTINCT_MODE`).
DISTINCT_CHAINS = 3.0


@dataclass(frozen=True)
class ModeShare:
    """One fit mode of a mixed posterior sample."""

    #: χ² of the mode's polished optimum.
    chi2: float
    #: Share of the posterior mass (the mixed sample's walkers follow it).
    weight: float
    #: Walkers of the mixed chain that sample this mode.
    walkers: int


def modes_to_sample(result) -> list[tuple[float, np.ndarray]]:
    """The fit's other optima worth their own chain: within MODE_DCHI2, best first."""
    near = [
        (chi2, values)
        for chi2, values in getattr(result, "alternatives", [])
        if chi2 - result.chi2 <= MODE_DCHI2
    ]
    return sorted(near, key=lambda c: c[0])[:MAX_EXTRA_MODES]


def log_mode_mass(like, chain) -> float:
    """Laplace estimate of the log posterior mass sampled by ``chain`` (module docstring).

    The density is evaluated again in the model's own parameters (the chain's stored
    log-probabilities are in the sampling coordinates), so that it and the covariance
    refer to the same parameters. ``-inf`` when the chain holds no finite density.
    """
    rows = chain.samples()
    logp = np.asarray(like.log_probability(rows), dtype=float)
    good = np.isfinite(logp)
    if good.sum() <= rows.shape[1]:
        return -np.inf
    cov = np.atleast_2d(np.cov(rows[good], rowvar=False))
    sign, logdet = np.linalg.slogdet(cov)
    if sign <= 0:
        return -np.inf
    return float(np.mean(logp[good]) + 0.5 * rows.shape[1] + 0.5 * logdet)


def _centre(chain, periods, reference) -> np.ndarray:
    """Median of a chain's samples, angles taken about ``reference`` (their period)."""
    rows = chain.samples().copy()
    for i, period in enumerate(periods):
        if period:
            rows[:, i] = (
                reference[i] + (rows[:, i] - reference[i] + period / 2) % period - period / 2
            )
    return np.median(rows, axis=0)


def _apart(a, b, periods, scale) -> bool:
    """Whether two centres lie more than DISTINCT_CHAINS error bars apart in some parameter."""
    diff = np.abs(a - b)
    for i, period in enumerate(periods):
        if period:
            diff[i] = min(diff[i] % period, period - diff[i] % period)
    return bool(np.any(diff / scale > DISTINCT_CHAINS))


def _rewrap(chain, periods, reference):
    """The chain with its angles wrapped about ``reference`` (the best fit), as sample does."""
    values = chain.chain.copy()
    for i, period in enumerate(periods):
        if period:
            values[..., i] = (
                reference[i] + (values[..., i] - reference[i] + period / 2) % period - period / 2
            )
    return replace(chain, chain=values)


def mix_modes(like, result, chains: list, chi2s: list[float]):
    """One chain holding every distinct mode's chain in proportion to its posterior mass.

    Parameters
    ----------
    like : ImageLikelihood
        The likelihood the chains sampled (``log_probability``, ``periods``).
    result : FitResult
        The best fit (its values and errors set the angle wrap and the distinctness scale).
    chains : list of Chain
        The best mode's chain first, then one per other mode, each of the same walkers.
    chi2s : list of float
        The χ² of each chain's starting optimum.

    Returns
    -------
    (Chain, list of ModeShare, list of str)
        The mixed chain (the best mode's alone when no other mode stays distinct), the
        shares of the modes kept, and notes saying what was done.
    """
    periods = like.periods
    scale = np.where(np.isfinite(result.errors) & (result.errors > 0), result.errors, np.inf)
    kept, centres, notes = [], [], []
    for k, (chain, chi2) in enumerate(zip(chains, chi2s)):
        centre = _centre(chain, periods, result.values)
        if k and not all(_apart(centre, c, periods, scale) for c in centres):
            notes.append(
                f"the chain started in the fit mode of chi2 {chi2:.1f} joined another mode's "
                "valley: sampled once"
            )
            continue
        kept.append((chain, chi2, log_mode_mass(like, chain)))
        centres.append(centre)
    if len(kept) == 1:
        return chains[0], [], notes
    log_mass = np.array([m for _, _, m in kept])
    weights = np.exp(log_mass - np.max(log_mass))
    weights = weights / weights.sum()
    walkers = chains[0].chain.shape[1]
    counts = np.rint(walkers * weights / weights.max()).astype(int)
    shares = [
        ModeShare(float(c2), float(w), int(n)) for (_, c2, _), w, n in zip(kept, weights, counts)
    ]
    parts = [(ch, n) for (ch, _, _), n in zip(kept, counts) if n > 0]
    length = min(ch.chain.shape[0] for ch, _ in parts)
    burn = min(length // 2, max(max(ch.burn - (ch.chain.shape[0] - length), 0) for ch, _ in parts))
    values, logp, accepted = [], [], []
    for ch, n in parts:
        ch = _rewrap(ch, periods, result.values)
        pick = np.unique(np.rint(np.linspace(0, walkers - 1, n)).astype(int))
        values.append(ch.chain[-length:, pick])
        logp.append(ch.log_prob[-length:, pick])
        accepted.append(np.asarray(ch.acceptance)[pick])
    best = chains[0]
    listing = ", ".join(f"chi2 {s.chi2:.1f}: {100 * s.weight:.0f}%" for s in shares)
    notes.append(
        f"the fit has {len(shares)} distinct modes within delta chi2 {MODE_DCHI2:g}; each was "
        f"sampled and the windows mix them by posterior mass ({listing})"
    )
    dropped = [s for s in shares if s.walkers == 0]
    if dropped:
        notes.append(
            f"{len(dropped)} of them hold less than 1/{2 * walkers} of the largest mode's mass "
            "(not one walker's share) and were left out"
        )
    mixed = replace(
        best,
        chain=np.concatenate(values, axis=1),
        log_prob=np.concatenate(logp, axis=1),
        acceptance=np.concatenate(accepted),
        # the worst of the modes' chains per parameter (fmax: NaN only where all are NaN,
        # without numpy's all-NaN warning)
        autocorr=np.fmax.reduce([np.asarray(ch.autocorr, dtype=float) for ch, _ in parts]),
        burn=int(burn),
        thin=int(max(ch.thin for ch, _ in parts)),
        rhat=np.fmax.reduce([np.asarray(ch.rhat, dtype=float) for ch, _ in parts]),
        warnings=list(dict.fromkeys([w for ch, _ in parts for w in ch.warnings] + notes)),
    )
    return mixed, shares, notes


#: Error bars (of the best fit) apart in some parameter for another optimum to be a mode.
DISTINCT_MODE = 3.0


def distinct_modes(like, polished, best, errors) -> list:
    """The polished optima other than ``best`` that lie apart from it and from each other.

    Apart: more than DISTINCT_MODE of the best fit's error bars in some parameter (angles
    compared modulo their period).
    """
    scale = np.where(np.isfinite(errors) & (errors > 0), errors, np.inf)
    kept: list = []
    for chi2, v in sorted(polished, key=lambda c: c[0]):
        others = [best] + [k[1] for k in kept]
        distinct = True
        for o in others:
            diff = np.abs(v - o)
            for i, period in enumerate(like.periods):
                if period:
                    diff[i] = min(diff[i] % period, period - diff[i] % period)
            if not np.any(diff / scale > DISTINCT_MODE):
                distinct = False
                break
        if distinct:
            kept.append((float(chi2), np.array(v, dtype=float)))
    return kept
