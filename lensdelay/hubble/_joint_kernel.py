"""numba kernel behind :class:`lensdelay.hubble.joint.JointLikelihood` (compiled on first use).

The same arithmetic as the numpy path of ``JointLikelihood.lens_log_likelihood``, line for
line, one parameter set and one lens at a time without temporaries: every lens's Monte
Carlo average over its draws of the delays' and the dispersion's Gaussian likelihoods.
Lenses are packed into flat arrays with start offsets (``*_start[i]`` to
``*_start[i + 1]``); the tests hold the two paths to 1e-10.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

__all__ = ["lens_log_likelihoods"]

ISOTROPIC, CONSTANT, OSIPKOV_MERRITT = 0, 1, 2


@njit(cache=True, error_model="numpy", parallel=True)
def lens_log_likelihoods(
    hyper,  # (P, 4): λ̄, s_λ, anisotropy mean, anisotropy scatter
    anisotropy_kind,
    draw_start,
    kappa,
    z_lambda,
    z_ani,
    delay_start,
    model_days,  # per lens: N_i × m_i, row-major, at draw_start[i] * ... see md_start
    md_start,
    measured,
    cov_inv,
    ci_start,
    norm,
    ddt_scale,  # (P, M)
    n_bins,  # per lens: apertures with a measured dispersion (0: no kinematics)
    bin_start,
    observed,
    error,
    base,
    rows,
    rows_start,
    n_par,
    axis,
    axis_start,
    kin_ratio,  # (P, L)
):
    """The log likelihood of every lens at every parameter set: (P, L)."""
    n_sets = hyper.shape[0]
    n_lenses = draw_start.shape[0] - 1
    out = np.empty((n_sets, n_lenses))
    for p in prange(n_sets):
        resid = np.empty(max(1, measured.shape[0]))
        lam_mean, lam_scatter = hyper[p, 0], hyper[p, 1]
        ani_scatter = hyper[p, 3]
        # the anisotropy parameter's position on the tables' axis: ln r_a or β
        if anisotropy_kind == OSIPKOV_MERRITT:
            ani_centre = math.log(hyper[p, 2])
        else:
            ani_centre = hyper[p, 2]
        for i in range(n_lenses):
            b0, n_b = bin_start[i], n_bins[i]
            error_norm = 0.0
            for b in range(n_b):
                error_norm += math.log(error[b0 + b] * math.sqrt(2.0 * math.pi))
            d0, d1 = draw_start[i], draw_start[i + 1]
            m0, m1 = delay_start[i], delay_start[i + 1]
            m = m1 - m0
            # a running log-sum-exp over the draws: peak is the largest term so far
            peak = -np.inf
            total = 0.0
            for n in range(d0, d1):
                sheet = (lam_mean + lam_scatter * z_lambda[n]) * (1.0 - kappa[n])
                if sheet <= 0.0:
                    continue
                term = 0.0
                if m > 0:
                    row = md_start[i] + (n - d0) * m
                    for a in range(m):
                        resid[a] = (
                            measured[m0 + a] - ddt_scale[p, m0 + a] * model_days[row + a] * sheet
                        )
                    chi2 = 0.0
                    for a in range(m):
                        for b in range(m):
                            chi2 += resid[a] * cov_inv[ci_start[i] + a * m + b] * resid[b]
                    term += -0.5 * chi2 + norm[i]
                if n_b > 0:
                    k = n_par[i]
                    j, frac = 0, 0.0
                    if k > 1:
                        a0 = axis_start[i]
                        where = ani_centre + ani_scatter * z_ani[n]
                        where = min(max(where, axis[a0]), axis[a0 + k - 1])
                        # bisection for the node below ``where`` (no temporaries)
                        lo, hi = 0, k - 1
                        while hi - lo > 1:
                            mid = (lo + hi) // 2
                            if axis[a0 + mid] <= where:
                                lo = mid
                            else:
                                hi = mid
                        j = lo
                        frac = (where - axis[a0 + j]) / (axis[a0 + j + 1] - axis[a0 + j])
                    scale = kin_ratio[p, i] * base[n] * sheet
                    chi2 = 0.0
                    for b in range(n_b):
                        # this draw's row of aperture b: rows are (draws, apertures, nodes)
                        r0 = rows_start[i] + ((n - d0) * n_b + b) * k
                        if k == 1:
                            ln_j = rows[r0]
                        else:
                            ln_j = rows[r0 + j] * (1.0 - frac) + rows[r0 + j + 1] * frac
                        predicted = math.sqrt(scale * math.exp(ln_j))
                        z = (observed[b0 + b] - predicted) / error[b0 + b]
                        chi2 += z * z
                    term += -0.5 * chi2 - error_norm
                if term > peak:
                    total = (total * math.exp(peak - term) if total > 0.0 else 0.0) + 1.0
                    peak = term
                else:
                    total += math.exp(term - peak)
            count = d1 - d0
            out[p, i] = -np.inf if total == 0.0 else peak + math.log(total) - math.log(count)
    return out
