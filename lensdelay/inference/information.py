"""The Jacobian of a likelihood's normalised residuals in its parameters.

It shapes the Langevin move's proposals (the local Fisher metric Jᵀ J) and gives the
Jeffreys prior (½ log det Jᵀ J). Image positions follow the parameters through the lens
equation (implicit-function theorem), so no lens equation is solved again.
"""

from __future__ import annotations

import numpy as np

from lensdelay.lensing import compiled

__all__ = ["information_jacobian"]

#: Relative step of the central differences for the Fisher information.
_INFO_STEP = 1e-6


def information_jacobian(
    like, params: np.ndarray, preds=None, columns=None, scheme: str = "central"
) -> np.ndarray:
    """∂(normalised residuals of ``like``)/∂(parameters) at the predicted images, (P, m, n).

    Image positions move with the parameters by the implicit-function theorem
    applied to the lens equation θ − s α(θ; p) = β:
    dθ/dp = A⁻¹ (s ∂α/∂p + ∂β/∂p), A = I − s ∂α/∂θ (Schneider, Ehlers & Falco
    1992, eq. 5.20 for A). ∂α/∂p (and the Fermat potential and magnification for
    delay and flux rows) come from central differences in the parameters, at the
    images moved along dθ/dp, so no lens equation is solved again. Rows of Gaussian
    priors and of the lens-light centre are constant.

    ``columns`` (indices of parameters) limits the differences to those parameters;
    the other columns are then zero (a conditional fit needs no more, at a fraction
    of the cost).

    ``scheme``: ``"central"`` (error O(h²), 2 lens evaluations per parameter) or
    ``"forward"`` (error O(h), about 1e-6 relative at the step h = 1e-6·max(1, abs(p));
    n + 1 evaluations, half the cost). The forward scheme serves where the Jacobian
    only shapes proposals (a Metropolis–Hastings ratio keeps the target exact); the
    Jeffreys prior, part of the target, uses the central one.
    """
    if scheme not in ("central", "forward"):
        raise ValueError(f"scheme must be 'central' or 'forward', got {scheme!r}")
    params = np.atleast_2d(np.asarray(params, dtype=float))
    preds = like.predict(params) if preds is None else preds
    n_rows, n_all = params.shape
    cols = np.arange(n_all) if columns is None else np.asarray(columns, dtype=int)
    position = {int(c): k for k, c in enumerate(cols)}
    n_par = len(cols)  # the differenced parameters
    step = _INFO_STEP * np.maximum(1.0, np.abs(params))  # (P, n)
    # steps never leave the bounds (a best fit may sit on q = 1 or γ = 0): one-sided
    # there, and every difference is divided by the step actually taken
    up = np.minimum(step, like.upper - params)[:, cols]  # (P, n), ≥ 0
    down = np.minimum(step, params - like.lower)[:, cols]
    # central: rows p + up e_k, then p - down e_k, for every k (2 n P rows, k-major);
    # forward: rows p + h e_k (h = up, or -down on an upper bound), then p itself
    # ((n + 1) P rows). hi/lo: the signed steps of the two blocks, (n, P, 1).
    if scheme == "central":
        hi, lo = up.T[:, :, None], -down.T[:, :, None]
    else:
        hi, lo = np.where(up > 0, up, -down).T[:, :, None], np.zeros((1, n_rows, 1))
    eye = np.eye(n_all)[cols]
    high = params[None, :, :] + hi * eye[:, None, :]
    low = params[None, :, :] + lo * eye[:, None, :] if scheme == "central" else params[None]
    shifted = np.concatenate([high, low]).reshape(-1, n_all)
    span = hi - lo  # (n, P, 1)
    need_derived = like.use_delays or like.use_fluxes
    blocks, lens_rows = _lens_blocks(like, cols, high, low, scheme, need_derived)
    lens = like.lens_for(lens_rows)
    jac_parts, fermat_pm, mu_pm = [], [], []
    steps = (shifted, lens_rows, blocks, n_rows, span, hi, lo, position, scheme == "central")
    for k, (fam, pred) in enumerate(zip(like.families, preds)):
        parts, derived = _family_derivatives(like, k, fam, pred, lens, steps, need_derived)
        jac_parts += parts
        if derived is not None:
            fermat_pm.append(derived[0])
            mu_pm.append(derived[1])
    for i, (_, sig) in {**like.priors, **like.centre_prior}.items():
        row = np.zeros((n_rows, 1, n_par))
        if i in position:
            row[:, 0, position[i]] = 1.0 / sig
        jac_parts.append(row)
    jac = np.concatenate(jac_parts, axis=1)
    if need_derived:
        derived = np.hstack(like._derived_residuals(shifted, fermat_pm, mu_pm))
        derived = derived.reshape(-1, n_rows, derived.shape[-1])
        ddiff = (derived[:n_par] - derived[n_par:]) / span  # (n, P, m')
        jac = np.concatenate([jac, np.moveaxis(ddiff, 0, -1)], axis=1)
    if columns is None:
        return jac
    full = np.zeros(jac.shape[:2] + (n_all,))
    full[:, :, cols] = jac
    return full


def _lens_blocks(like, cols, high, low, scheme, need_derived):
    """Which blocks of shifted rows the lens is evaluated on, and those rows.

    Returns (``blocks``, rows): block ``blocks[b]`` of the evaluated rows stands for block
    b of the shifted rows (``high`` blocks, then ``low``); a slice of all when every
    block is evaluated. A step in a source position, H0 or κ_ext leaves the lens and
    every family's deflection scale as they were, so in the forward scheme without delay
    or flux rows its block is the unshifted one (the last), evaluated anyway: the same
    numbers, bit for bit, at a fraction of the cost.
    """
    n_all = high.shape[-1]
    lens_seen = np.ones(len(cols), dtype=bool)
    n_model = getattr(like, "n_model", None)
    if scheme == "forward" and not need_derived and n_model is not None:
        scaled = {fam.redshift_index for fam in like.families}
        lens_seen = np.array([c < n_model or c in scaled for c in cols], dtype=bool)
    if lens_seen.all():
        return slice(None), np.concatenate([high, low]).reshape(-1, n_all)
    seen = np.flatnonzero(lens_seen)
    blocks = np.full(len(cols) + 1, len(seen))  # the unshifted block, evaluated last
    blocks[seen] = np.arange(len(seen))
    return blocks, np.concatenate([high[seen], low]).reshape(-1, n_all)


def _family_derivatives(like, k, fam, pred, lens, steps, need_derived):
    """One family's rows of the Jacobian: its images' offsets, differenced.

    ``steps``: the shifted parameter rows, the rows the lens was built for and the block
    of them each block of shifted rows takes (:func:`_lens_blocks`), the number of rows,
    the steps taken, the signed steps of the two blocks, each differenced parameter's
    position and whether the scheme is central. Returns the position rows and, when
    delay or flux rows are needed, the Fermat potentials and magnifications at the
    images moved along dθ/dp.
    """
    shifted, lens_rows, blocks, n_rows, span, hi, lo, position, central = steps
    n_par = len(span)  # the differenced parameters
    n_obs = pred["x"].shape[1]
    # observed images, then tracked predicted ones (timing rows may need them)
    x = np.hstack([pred["x"], pred["track_x"]])  # (P, I)
    y = np.hstack([pred["y"], pred["track_y"]])
    n_copies = len(shifted) // n_rows
    n_blocks = len(lens_rows) // n_rows
    shifted_scale = like.family_scale(k, lens_rows)
    with np.errstate(all="ignore"):
        # the kernel evaluates again only the components a block's step changes
        fused = compiled.block_deflections(lens, x, y, shifted_scale, n_blocks - 1)
        if fused is None:
            ax, ay = lens.deflection(
                np.tile(x, (n_blocks, 1)), np.tile(y, (n_blocks, 1)), shifted_scale
            )
        else:
            ax, ay = fused
        # A at the observed images' predictions is known from predict; only the
        # tracked images' is computed (none on the sampler's usual path)
        a11, a12, a22 = pred["magnification_matrix"]
        if pred["track_x"].shape[1]:
            tracked_a = pred["lens"].jacobian(pred["track_x"], pred["track_y"], pred["scale"])
            a11, a12, a22 = (
                np.hstack([known, np.broadcast_to(extra, pred["track_x"].shape)])
                for known, extra in zip((a11, a12, a22), tracked_a)
            )
    ax = ax.reshape(-1, n_rows, ax.shape[-1])[blocks]
    ay = ay.reshape(-1, n_rows, ay.shape[-1])[blocks]
    dax = (ax[:n_par] - ax[n_par:]) / span  # (n, P, I)
    day = (ay[:n_par] - ay[n_par:]) / span
    # the source position moves the images one for one
    sl = like.source_slice(k)
    if sl.start in position:
        dax[position[sl.start]] += 1.0
    if sl.start + 1 in position:
        day[position[sl.start + 1]] += 1.0
    with np.errstate(all="ignore"):
        det = a11 * a22 - a12 * a12
        dxdp = (a22 * dax - a12 * day) / det  # (n, P, I)
        dydp = (a11 * day - a12 * dax) / det
    parts = [
        np.moveaxis(dxdp[..., :n_obs] / fam.sigma, 0, -1),
        np.moveaxis(dydp[..., :n_obs] / fam.sigma, 0, -1),
    ]
    if need_derived:
        # the images moved along dθ/dp with each row's step (not at all for p)
        low_x = x + lo * dxdp if central else x[None]
        low_y = y + lo * dydp if central else y[None]
        moved_x = np.concatenate([x + hi * dxdp, low_x]).reshape(-1, x.shape[1])
        moved_y = np.concatenate([y + hi * dydp, low_y]).reshape(-1, x.shape[1])
        bx = shifted[:, sl][:, :1]
        by = shifted[:, sl][:, 1:]
        with np.errstate(all="ignore"):
            tau_pm = lens.fermat_potential(moved_x, moved_y, bx, by, shifted_scale)
            mu = lens.magnification(moved_x[:, :n_obs], moved_y[:, :n_obs], shifted_scale)
        exists = np.tile(np.isfinite(pred["track_fermat"]), (n_copies, 1))
        tau_pm[:, n_obs:] = np.where(exists, tau_pm[:, n_obs:], np.nan)
        return parts, (tau_pm, mu)
    return parts, None
