"""Weighted sample summaries: quantiles, the five-number summary, effective sample size.

Every posterior summary in lensdelay is the same five quantiles (median, 16%, 84%,
2.5%, 97.5%) of weighted samples; they are computed here and nowhere else.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "QUANTILES",
    "weighted_quantiles",
    "quantile_summary",
    "effective_sample_size",
]


#: The reported quantiles, name → percent.
QUANTILES = {"median": 50.0, "p16": 16.0, "p84": 84.0, "p2.5": 2.5, "p97.5": 97.5}


def weighted_quantiles(values, weights, percents) -> np.ndarray:
    """Quantiles (percent) of weighted samples; NaN values and zero weights are skipped.

    The weighted empirical CDF is placed at the centre of each sample's weight
    (Hazen's plotting position generalised to weights), then interpolated linearly.
    """
    values = np.asarray(values, dtype=float)
    weights = np.broadcast_to(np.asarray(weights, dtype=float), values.shape)
    ok = np.isfinite(values) & (weights > 0)
    if not np.any(ok):
        return np.full(len(percents), np.nan)
    v, w = values[ok], weights[ok]
    order = np.argsort(v, kind="stable")
    v, w = v[order], w[order]
    cdf = (np.cumsum(w) - 0.5 * w) / np.sum(w)
    return np.interp(np.asarray(percents, dtype=float) / 100.0, cdf, v)


def quantile_summary(values, weights=None) -> dict:
    """``{"median", "p16", "p84", "p2.5", "p97.5"}`` of (weighted) samples."""
    values = np.asarray(values, dtype=float)
    weights = np.ones_like(values) if weights is None else weights
    q = weighted_quantiles(values, weights, list(QUANTILES.values()))
    return {k: float(x) for k, x in zip(QUANTILES, q)}


def effective_sample_size(weights) -> float:
    """Kish's effective sample size (Σw)²/Σw² of importance weights (Kish 1965)."""
    w = np.asarray(weights, dtype=float)
    w = w[np.isfinite(w) & (w > 0)]
    if not len(w):
        return 0.0
    return float(np.sum(w) ** 2 / np.sum(w * w))
