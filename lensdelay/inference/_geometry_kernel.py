"""numba kernel behind :meth:`lensdelay.inference.moves.FisherLangevinMove._geometry`.

The numpy path of the move is the reference: per walker row, the Gauss–Newton metric
G = Jᵀ J (+ the priors' diagonal), the gradient g = −Jᵀ r, the Cholesky factor G = L Lᵀ
(Golub & Van Loan 2013, *Matrix Computations*, 4th ed., Algorithm 4.2.1), the inverse
square root S = L⁻ᵀ by forward substitution, the drift G⁻¹ g = S Sᵀ g and log det G.
One compiled pass over the walkers replaces a dozen batched numpy calls whose overhead,
for 32 walkers in 14 parameters, cost more than the arithmetic (the tests hold the two
paths to 1e-10 relative).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["cholesky_geometry"]


@njit(cache=True, error_model="numpy", inline="always")
def _lower_inverse(chol, inv, n):
    """L⁻¹ of the lower-triangular ``chol`` into ``inv``, by forward substitution."""
    for c in range(n):
        for i in range(n):
            inv[i, c] = 0.0
        inv[c, c] = 1.0 / chol[c, c]
        for i in range(c + 1, n):
            s = 0.0
            for k in range(c, i):
                s -= chol[i, k] * inv[k, c]
            inv[i, c] = s / chol[i, i]


@njit(cache=True, error_model="numpy")
def cholesky_geometry(jacobian, residuals, prior_metric, pivot_floor):
    """Metric, drift, inverse square root and log det per row; flags rows left to numpy.

    Parameters
    ----------
    jacobian : ndarray, (P, m, n)
    residuals : ndarray, (P, m)
    prior_metric : ndarray, (n, n)
        Added to Jᵀ J (zeros for none).
    pivot_floor : float
        A row whose smallest Cholesky pivot is below ``pivot_floor`` times its largest
        (or that is not finite or not positive definite) is flagged for the
        eigen-decomposition with floored eigenvalues.

    Returns
    -------
    drift (P, n), inv_sqrt (P, n, n), metric (P, n, n), logdet (P,), grad (P, n) and
    flagged (P,) bool. Flagged rows hold only G and g: the caller finishes them.
    """
    p, m, n = jacobian.shape
    drift = np.zeros((p, n))
    inv_sqrt = np.zeros((p, n, n))
    metric = np.zeros((p, n, n))
    logdet = np.zeros(p)
    flagged = np.zeros(p, dtype=np.bool_)
    chol = np.zeros((n, n))
    inv = np.zeros((n, n))
    grad = np.zeros((p, n))
    tmp = np.zeros(n)
    for w in range(p):
        finite = True
        for i in range(n):
            for j in range(i + 1):
                s = prior_metric[i, j]
                for k in range(m):
                    s += jacobian[w, k, i] * jacobian[w, k, j]
                metric[w, i, j] = s
                metric[w, j, i] = s
                if not math.isfinite(s):
                    finite = False
            g = 0.0
            for k in range(m):
                g -= jacobian[w, k, i] * residuals[w, k]
            grad[w, i] = g
        if not finite:
            flagged[w] = True
            continue
        # Cholesky, column by column (lower triangle)
        ok = True
        low_pivot = math.inf
        high_pivot = 0.0
        for j in range(n):
            d = metric[w, j, j]
            for k in range(j):
                d -= chol[j, k] * chol[j, k]
            if not d > 0.0:
                ok = False
                break
            low_pivot = min(low_pivot, d)
            high_pivot = max(high_pivot, d)
            ljj = math.sqrt(d)
            chol[j, j] = ljj
            for i in range(j + 1, n):
                s = metric[w, i, j]
                for k in range(j):
                    s -= chol[i, k] * chol[j, k]
                chol[i, j] = s / ljj
        if not ok or low_pivot < pivot_floor * high_pivot:
            flagged[w] = True
            continue
        _lower_inverse(chol, inv, n)
        total = 0.0
        for i in range(n):
            total += math.log(chol[i, i] * chol[i, i])
            # S = L⁻ᵀ: S[i, j] = L⁻¹[j, i]
            for j in range(n):
                inv_sqrt[w, i, j] = inv[j, i]
        logdet[w] = total
        # drift = S Sᵀ g = L⁻ᵀ (L⁻¹ g)
        for i in range(n):
            s = 0.0
            for k in range(i + 1):
                s += inv[i, k] * grad[w, k]
            tmp[i] = s
        for i in range(n):
            s = 0.0
            for k in range(i, n):
                s += inv[k, i] * tmp[k]
            drift[w, i] = s
    return drift, inv_sqrt, metric, logdet, grad, flagged
