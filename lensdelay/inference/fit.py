"""Least-squares fit of a mass model to image positions, with lmfit.

Two stages: a fast magnification-weighted source-plane fit (no lens-equation solve)
to get close, then the image-plane χ² of :class:`lensdelay.inference.likelihood.ImageLikelihood`,
which solves the lens equation at every step. The result carries everything a report
needs; reports and figures live elsewhere.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field

import numpy as np

from lensdelay.lensing.delays import fermat_difference_to_days
from lensdelay.errors import FitError, InputError, LensdelayWarning
from lensdelay.lensing.lens import PARITIES
from lensdelay.inference.modes import distinct_modes
from lensdelay.inference.likelihood import MISSING_IMAGE_PENALTY, ImageLikelihood
from lensdelay.inference.misfit import POOR_FIT_P, ModelError, fit_p_value, judged_p_value

__all__ = [
    "FitResult",
    "improper_parameters",
    "underconstrained_note",
    "check_constraints",
    "initial_vector",
    "fit",
    "describe",
    "observed_delays",
    "delay_errors",
]


def _safe(name: str) -> str:
    return "p_" + re.sub(r"\W", "_", name)


@dataclass
class FitResult:
    """Best fit of one model to one scenario."""

    model_label: str
    names: list[str]
    values: np.ndarray
    errors: np.ndarray
    chi2: float
    n_constraints: int
    n_parameters: int
    residuals_mas: list[dict]
    unobserved_images: list[dict]
    at_bounds: list[str]
    success: bool
    message: str
    covariance: np.ndarray | None = None
    notes: list[str] = field(default_factory=list)
    #: Set when the first fit was poor: the floor given to the image positions and that
    #: fit's χ² (:mod:`lensdelay.inference.misfit`); chi2 above is then the refit's.
    model_error: ModelError | None = None
    #: Other local optima the fit's polished starts reached, distinct from the best (more
    #: than modes.DISTINCT_MODE error bars apart in some parameter): (χ², values) each.
    alternatives: list = field(default_factory=list)

    @property
    def p_value(self) -> float | None:
        """P(χ²_dof ≥ chi2), None without degrees of freedom."""
        return fit_p_value(self.chi2, self.dof)

    @property
    def dof(self) -> int:
        """Degrees of freedom: constraints minus free parameters."""
        return self.n_constraints - self.n_parameters

    @property
    def aic(self) -> float:
        """Akaike information criterion, χ² + 2k."""
        return self.chi2 + 2 * self.n_parameters

    @property
    def bic(self) -> float:
        """Bayesian information criterion, χ² + k ln n."""
        return self.chi2 + self.n_parameters * np.log(max(self.n_constraints, 1))

    def quality(self) -> dict:
        """How good the fit is, as plain data for files and reports.

        ``chi2``, ``dof`` and ``p_value`` (None without degrees of freedom); ``poor``
        (p below :data:`lensdelay.inference.misfit.POOR_FIT_P`, judged on the first fit);
        ``position_model_error_mas`` with the first fit's ``chi2_before``/``p_before``
        when a floor was given; ``at_bounds``, parameters that ended on a bound.
        """
        err = self.model_error
        return {
            "chi2": float(self.chi2),
            "dof": int(self.dof),
            "p_value": self.p_value,
            "poor": err is not None or judged_p_value(self.chi2, self.dof) < POOR_FIT_P,
            "position_model_error_mas": 1e3 * err.floor_arcsec if err else 0.0,
            "chi2_before": err.chi2 if err else None,
            "p_before": err.p_value if err else None,
            "at_bounds": list(self.at_bounds),
        }

    def rms_arcsec(self) -> dict:
        """Image-plane rms offset, model − observed, per family and over all images.

        sqrt(mean (θ_model − θ_obs)²) over the images the model reproduces, in arcsec (the
        number cluster modellers quote); ``"all"`` pools every family. None for a family
        with no reproduced image.
        """
        per, pooled = {}, []
        for r in self.residuals_mas:
            if r["reproduced"]:
                d2 = (r["dx_mas"] ** 2 + r["dy_mas"] ** 2) * 1e-6
                per.setdefault(r["family"], []).append(d2)
                pooled.append(d2)
            else:
                per.setdefault(r["family"], [])
        out = {f: (float(np.sqrt(np.mean(v))) if v else None) for f, v in per.items()}
        out["all"] = float(np.sqrt(np.mean(pooled))) if pooled else None
        return out

    def value(self, name: str) -> float:
        """The best-fit value of one parameter by name."""
        return float(self.values[self.names.index(name)])


def improper_parameters(like: ImageLikelihood) -> list[str]:
    """Free mass-model parameters whose prior is not proper on its own.

    A parameter has a proper prior when it has a Gaussian prior, finite bounds on both
    sides (flat between them) or is an angle (defined modulo its period).
    """
    out = []
    for i in range(like.n_model):
        bounded = np.isfinite(like.lower[i]) and np.isfinite(like.upper[i])
        if i not in like.priors and not bounded and not like.periods[i]:
            out.append(like.names[i])
    return out


def underconstrained_note(like: ImageLikelihood) -> str:
    """What a model with fewer constraints than free parameters means for its answer."""
    return (
        f"{like.n_parameters} free parameters but only {like.n_constraints} constraints: "
        "the posterior is proper only through the priors and bounds, which set part of "
        "the answer"
    )


def check_constraints(like: ImageLikelihood) -> None:
    """Refuse under-constrained set-ups without proper priors; warn on the others.

    With fewer constraints than free parameters the posterior is still proper when every
    mass-model parameter has a proper prior (:func:`improper_parameters`); it is then
    sampled, with a warning that the priors set part of the answer.
    """
    if like.dof < 0:
        improper = improper_parameters(like)
        if improper:
            raise InputError(
                f"model {like.model.label!r} has {like.n_parameters} free parameters "
                f"(including 2 source coordinates per family) but only {like.n_constraints} "
                f"constraints, and {', '.join(improper)} have no prior and no finite bounds; "
                "fix them or give them bounds or a prior, got an under-constrained fit"
            )
        warnings.warn(
            f"model {like.model.label!r}: {underconstrained_note(like)}",
            LensdelayWarning,
            stacklevel=2,
        )
        return
    if like.dof == 0:
        warnings.warn(
            f"model {like.model.label!r} is exactly constrained (0 degrees of freedom): "
            "it can match the images exactly, so chi2 says nothing about its quality",
            LensdelayWarning,
            stacklevel=2,
        )


def _source_plane_residuals(like: ImageLikelihood, rows: np.ndarray) -> np.ndarray:
    """Magnification-weighted source-plane residuals A⁻¹(β(θ_obs) − β̄)/σ, rows (P, n)."""
    rows = np.atleast_2d(rows)
    lens = like.lens_for(rows)
    out = []
    for k, fam in enumerate(like.families):
        beta = rows[:, like.source_slice(k)]
        out += like.source_plane_offsets(lens, fam, like.family_scale(k, rows), beta)
    out += like.prior_residuals(rows)
    r = np.hstack([np.broadcast_to(o, (len(rows), o.shape[1])) for o in out])
    return np.where(np.isfinite(r), r, 1e6)


def _source_plane_start(like: ImageLikelihood, start: np.ndarray) -> np.ndarray:
    """The source-plane fit from ``start``: the fast stage that explores (see :func:`fit`)."""
    return _lmfit(like, start, lambda rows: _source_plane_residuals(like, rows), n_data=None)[0]


#: Relative step of the forward differences of the least-squares Jacobian (√ε, as in
#: scipy's '2-point' scheme: Press et al. 2007, Numerical Recipes, 3rd ed., sec. 5.7).
_JACOBIAN_STEP = float(np.sqrt(np.finfo(float).eps))


def _lmfit(like, start, resid_rows, n_data):
    """Least squares (lmfit, trust-region reflective) of ``resid_rows`` from ``start``.

    ``resid_rows`` maps parameter rows (P, n) to residual rows (P, m). Its Jacobian is
    taken by forward differences with every shifted row in one vectorised call (the
    likelihood evaluates many rows for little more than one), not one call per
    parameter: on a cluster with 30 parameters this makes each fit several times faster.
    """
    # imported here: lmfit loads scipy.stats (about 0.6 s), which a forecast from a
    # prepared lens, never fitting, does without
    import lmfit

    params = lmfit.Parameters()
    # the source-plane stage sees image positions only: H0 and κ_ext stay where they are
    names = like.names[: like.n_positional] if n_data is None else like.names
    n_free = len(names)
    for i, name in enumerate(names):
        lo, hi = like.lower[i], like.upper[i]
        val = float(np.clip(start[i], lo, hi))
        params.add(_safe(name), value=val, min=lo, max=hi)
    upper = like.upper[:n_free]

    def full(v):
        return np.append(v, start[n_free:]) if n_free < len(like.names) else v

    def values_of(p):
        return np.array([p[_safe(n)].value for n in names])

    def wrapped(p):
        return resid_rows(full(values_of(p))[None, :])[0]

    def jacobian(p):
        v = values_of(p)
        step = _JACOBIAN_STEP * np.maximum(1.0, np.abs(v))
        # step backwards where a forward step would leave the bounds
        step = np.where(v + step > upper, -step, step)
        rows = np.repeat(full(v)[None, :], n_free + 1, axis=0)
        rows[np.arange(1, n_free + 1), np.arange(n_free)] += step
        r = resid_rows(rows)
        return (r[1:] - r[0]).T / step

    # sigmas are known: do not rescale the covariance by the reduced chi2
    with warnings.catch_warnings():
        # a singular covariance makes lmfit take square roots of negative variances:
        # those errors come back as NaN, which the callers handle
        warnings.simplefilter("ignore", RuntimeWarning)
        out = lmfit.minimize(
            wrapped, params, method="least_squares", scale_covar=False, Dfun=jacobian
        )
    v = values_of(out.params)
    errs = np.array([out.params[_safe(n)].stderr or np.nan for n in names])
    if n_free < len(like.names):
        v = full(v)
        errs = np.append(errs, np.full(len(like.names) - n_free, np.nan))
    return v, errs, out


def initial_vector(like: ImageLikelihood) -> np.ndarray:
    """Recipe start values, sources at the mean observed position mapped back."""
    v = list(like.model.start_vector())
    lens = like.model.lens()
    for fam in like.families:
        sx, sy = lens.source_position(fam.x, fam.y, fam.scale)
        v += [float(np.mean(sx)), float(np.mean(sy))]
    # free family redshifts start where the scenario puts them (FamilyData.scale is there)
    v += [f.redshift for f in like.scenario.families if f.redshift_free]
    v += like.scale_start
    return np.array(v)


def fit(like: ImageLikelihood, *, starts: int = 8, polish: int = 3, seed: int = 0) -> FitResult:
    """Fit ``like`` and describe the best fit.

    ``starts`` source-plane fits are run from the recipe's values, the extra ones
    with position angles turned by multiples of 180°/starts and other values jittered
    within their bounds (seeded). The ``polish`` best of them (by image-plane χ²) go
    on to the image-plane fit, and the best of those is kept: the χ² surface of
    ellipticity against shear has more than one valley.

    The likelihood is then set to watch the images the best fit predicts but nobody
    observed (:meth:`ImageLikelihood.watch_unobserved`); if one is brighter than the
    faintest observed image, the fit is polished again with that penalty, so later
    sampling and reports use it too. ``like`` keeps the watch list.
    """
    check_constraints(like)
    like.watched = [(np.empty(0), np.empty(0)) for _ in like.families]
    rng = np.random.default_rng(seed)
    base = initial_vector(like)
    candidates = []
    for s in range(max(starts, 1)):
        start = base.copy()
        if s:
            for i, period in enumerate(like.periods):
                if period:
                    start[i] += s * period / starts
                elif i < like.n_model and np.isfinite(like.lower[i]) and np.isfinite(like.upper[i]):
                    span = like.upper[i] - like.lower[i]
                    start[i] = np.clip(
                        start[i] + rng.normal(0, 0.1 * span), like.lower[i], like.upper[i]
                    )
        try:
            v = _source_plane_start(like, start)
        except (ValueError, FloatingPointError):
            continue
        cost = float(np.sum(like.residuals(v) ** 2))
        if np.isfinite(cost):
            candidates.append((cost, s, v))
    if not candidates:
        raise FitError(f"model {like.model.label!r}: no starting point gave a finite chi2")
    candidates.sort(key=lambda c: c[0])
    best = None
    polished = []
    for _, _, v in candidates[: max(polish, 1)]:
        if like.h0_index is not None:
            # the best H0 for the current Fermat differences, then fit everything
            i = like.h0_index
            grid = np.linspace(like.lower[i], like.upper[i], 381)
            trial = np.repeat(v[None, :], len(grid), axis=0)
            trial[:, i] = grid
            v[i] = grid[np.argmin(np.sum(like.residuals(trial) ** 2, axis=1))]
        values, errors, out = _lmfit(like, v, like.residuals, n_data=like.n_constraints)
        chi2 = float(np.sum(like.residuals(values) ** 2))
        polished.append((chi2, values))
        if best is None or chi2 < best[0] - 1e-9:
            best = (chi2, values, errors, out)
    chi2, values, errors, out = best
    alternatives = distinct_modes(like, polished, values, errors)
    like.watch_unobserved(values)
    resid = like.residuals(values)[0]  # constraints, then the extra-image penalties
    chi2 = float(np.sum(resid**2))
    if np.any(resid[like.n_constraints :] > 0):
        values2, errors2, out2 = _lmfit(like, values, like.residuals, n_data=like.n_constraints)
        chi2_2 = float(np.sum(like.residuals(values2) ** 2))
        if chi2_2 < chi2:
            values, errors, out = values2, errors2, out2
            like.watch_unobserved(values)
            chi2 = float(np.sum(like.residuals(values) ** 2))  # with the new watch list
    for i, period in enumerate(like.periods):  # report angles in (-90, 90]
        if period:
            values[i] = -((-values[i] + period / 2) % period - period / 2)
    result = describe(like, values, errors, chi2, out)
    result.alternatives = alternatives
    return result


def describe(like: ImageLikelihood, values, errors, chi2, out=None) -> FitResult:
    """Residuals, unobserved images and bound checks at ``values``.

    The unobserved images are those ``like`` watches (set by :func:`fit` at ``values``
    with :meth:`ImageLikelihood.watch_unobserved`).
    """
    preds = like.predict(values[None, :])
    rows, unobserved, notes = [], [], []
    single = like.model.lens(values[: like.n_model])
    for k, (fam, pred) in enumerate(zip(like.families_at(values), preds)):
        for i, lab in enumerate(fam.labels):
            ok = bool(pred["ok"][0, i])
            rows.append(
                {
                    "family": fam.label,
                    "image": lab,
                    "dx_mas": float((pred["x"][0, i] - fam.x[i]) * 1e3) if ok else None,
                    "dy_mas": float((pred["y"][0, i] - fam.y[i]) * 1e3) if ok else None,
                    "sigma_mas": float(fam.sigma[i] * 1e3),
                    "magnification": float(pred["mu"][0, i]) if ok else None,
                    "reproduced": ok,
                }
            )
            if not ok:
                notes.append(
                    f"image {fam.label}/{lab} is not reproduced by the model "
                    f"(penalised by {MISSING_IMAGE_PENALTY:g} sigma)"
                )
        # the images the model predicts but nobody observed: the fit's watch list
        wx, wy = like.watched[k]
        with np.errstate(all="ignore"):
            mus = single.magnification(wx, wy, fam.scale)
            parities = single.parity_code(wx, wy, fam.scale)
        faintest = min(
            (abs(pred["mu"][0, i]) for i in range(len(fam.labels)) if pred["ok"][0, i]),
            default=np.inf,
        )
        for j in range(len(wx)):
            mu = float(mus[j])
            entry = {
                "family": fam.label,
                "x": float(wx[j]),
                "y": float(wy[j]),
                "magnification": mu,
                "parity": PARITIES[int(parities[j])],
                "brighter_than_faintest_observed": bool(abs(mu) >= faintest),
            }
            unobserved.append(entry)
            if abs(mu) >= faintest:
                notes.append(
                    f"the model predicts an unobserved image of {fam.label} at "
                    f"({entry['x']:+.3f}, {entry['y']:+.3f}) with |mu| = {abs(mu):.2f}, "
                    "brighter than the faintest observed one"
                )
    at_bounds = []
    for i, name in enumerate(like.names):
        span = like.upper[i] - like.lower[i]
        if np.isfinite(span) and span > 0:
            if min(values[i] - like.lower[i], like.upper[i] - values[i]) < 1e-4 * span:
                if not (name.endswith("axis_ratio") and like.upper[i] == 1.0 and values[i] > 0.999):
                    at_bounds.append(name)
    for name in at_bounds:
        notes.append(f"parameter {name} ended on its bound; widen the bound or fix it")
    success = bool(out.success) if out is not None else True
    message = str(out.message) if out is not None else ""
    cov = getattr(out, "covar", None) if out is not None else None
    return FitResult(
        like.model.label,
        list(like.names),
        np.asarray(values),
        np.asarray(errors),
        chi2,
        like.n_constraints,
        like.n_parameters,
        rows,
        unobserved,
        at_bounds,
        success,
        message,
        cov,
        notes,
    )


def observed_delays(like: ImageLikelihood, rows: np.ndarray, family: int = 0, reference: int = 0):
    """Delays (days) of a family's observed images relative to one of them, per row.

    Uses the H0 of the row when delays are fitted, else the scenario's cosmology.
    """
    rows = np.atleast_2d(rows)
    pred = like.predict(rows)[family]
    scale = like.delay_scale(rows)[:, None] if like.use_delays else 1.0
    days = np.reshape(like.family_days(family, rows), (-1, 1))
    return fermat_difference_to_days(
        pred["fermat"] - pred["fermat"][:, reference : reference + 1], days, scale
    )


def delay_errors(like: ImageLikelihood, result: FitResult, family: int = 0, reference: int = 0):
    """Delays at the best fit and their 1-σ errors by linear propagation of the covariance."""
    best = observed_delays(like, result.values, family, reference)[0]
    cov = result.covariance
    if cov is None or result.dof < 0 or not np.all(np.isfinite(result.errors[: cov.shape[0]])):
        # a singular covariance (fewer constraints than parameters) has no linear errors
        return best, np.full_like(best, np.nan)
    steps = np.where(np.isfinite(result.errors) & (result.errors > 0), 1e-3 * result.errors, 1e-7)
    jac = np.empty((len(best), len(result.values)))
    for i, h in enumerate(steps):
        # one-sided at a bound: a best fit may sit on q = 1 or γ = 0
        up, down = result.values.copy(), result.values.copy()
        up[i] = min(up[i] + h, like.upper[i])
        down[i] = max(down[i] - h, like.lower[i])
        if up[i] == down[i]:
            jac[:, i] = 0.0
            continue
        jac[:, i] = (
            observed_delays(like, up, family, reference)[0]
            - observed_delays(like, down, family, reference)[0]
        ) / (up[i] - down[i])
    n = cov.shape[0]
    var = np.einsum("ij,jk,ik->i", jac[:, :n], cov, jac[:, :n])
    return best, np.sqrt(np.maximum(var, 0.0))
