"""Quasar delays: one intrinsic light curve seen by every image, shifted and dimmed.

The model (magnitudes): image i at its own observed time t shows

    m_i(t) = s(t − Δ_i) + p_i(t) + noise,

where s is the source's intrinsic variability, a Gaussian process with the damped-random-
walk kernel k(Δt) = σ² exp(−|Δt|/τ) (Kelly, Bechtold & Siemiginowska 2009, ApJ 698, 895,
eq. 1-3), Δ_i is the delay of image i after the reference image (Δ_ref = 0), and p_i is a
polynomial of order ``order`` in the image's own time: its magnitude offset (the
magnification) and slow microlensing by stars in the lens, which acts in the image's
frame. Where the curves name several instruments, an image's offset is one per instrument
(their zero points differ; CONVENTIONS.md, "Light curves"). The noise is Gaussian with
the stated errors.

The polynomial coefficients enter linearly with Gaussian priors N(0, Λ) and are
marginalised in closed form: y ~ N(0, K + X Λ Xᵀ), evaluated with the Woodbury identity
and celerite2's O(N) solver for K (Foreman-Mackey et al. 2017, AJ 154, 220), so the
likelihood of a 1200-point data set costs about half a millisecond. The delays and the
kernel's σ and τ are sampled with emcee (differential-evolution moves, which jump
between the separate modes that seasonal gaps make), from walkers drawn out of a grid
scan of each image's delay against the reference.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, optimize

from lensdelay.errors import InputError

#: Prior 1-σ of each image's magnitude offset and of its higher polynomial coefficients
#: (mag over half the data span): broad, so the data decide.
OFFSET_PRIOR_MAG = 10.0
TREND_PRIOR_MAG = 1.0


def _celerite():
    """celerite2, imported when a quasar model is built (it is a compiled extension)."""
    import celerite2
    from celerite2 import terms

    return celerite2, terms


class QuasarDelayModel:
    """The marginal likelihood of the delays and the damped random walk, given the curves.

    Parameters
    ----------
    curves : LightCurves
        Detections of one band.
    reference : str
        The image whose delay is 0.
    order : int
        Polynomial order of each image's offset and microlensing trend (0 = offset only).
    max_delay : float, optional
        Delays are searched within ±max_delay days (default 0.8 × the data span).
    """

    def __init__(self, curves, reference: str, order: int = 2, max_delay: float | None = None):
        if order < 0 or order > 5:
            raise InputError(f"polynomial order must be 0 to 5, got {order}")
        self.labels = [reference] + [lab for lab in curves.labels if lab != reference]
        index = {lab: k for k, lab in enumerate(self.labels)}
        self.t = np.asarray(curves.time, dtype=float)
        self.y = np.asarray(curves.mag, dtype=float)
        self.err = np.asarray(curves.mag_err, dtype=float)
        self.which = np.array([index[lab] for lab in curves.image])
        self.n_images = len(self.labels)
        self.span = float(self.t.max() - self.t.min())
        self.cadence = curves.cadence()
        self.max_delay = 0.8 * self.span if max_delay is None else float(max_delay)
        self.order = order
        mid = 0.5 * (self.t.max() + self.t.min())
        u = (self.t - mid) / max(0.5 * self.span, 1e-9)
        cols, variances = [], []
        for k in range(self.n_images):
            on = (self.which == k).astype(float)
            for p in range(order + 1):
                cols.append(on * u**p)
                variances.append((OFFSET_PRIOR_MAG if p == 0 else TREND_PRIOR_MAG) ** 2)
        # several instruments: each image's offset differs per instrument (zero points);
        # one more offset column for every instrument of an image after its first
        self.instrument = curves.instruments
        self.instrument_columns = []
        for k in range(self.n_images):
            mine = self.which == k
            for name in list(dict.fromkeys(self.instrument[mine].tolist()))[1:]:
                cols.append((mine & (self.instrument == name)).astype(float))
                variances.append(OFFSET_PRIOR_MAG**2)
                self.instrument_columns.append((self.labels[k], name))
        self.design = np.column_stack(cols)
        self.prior_variances = np.array(variances)
        self._log_det_prior = float(np.sum(np.log(self.prior_variances)))
        self.ln_sigma_range = (np.log(0.003), np.log(5.0))
        self.ln_tau_range = (np.log(max(self.cadence, 0.1)), np.log(10 * max(self.span, 1.0)))
        self._celerite2, self._terms = _celerite()

    # -- the likelihood ------------------------------------------------------------
    def _solve(self, delays, ln_sigma, ln_tau, rows=None):
        """GP quantities for one parameter set: (log N(y|0,K), b, A) on ``rows``."""
        rows = slice(None) if rows is None else rows
        shift = np.concatenate([[0.0], np.asarray(delays, dtype=float)])[self.which[rows]]
        ts = self.t[rows] - shift
        order = np.argsort(ts, kind="stable")
        kernel = self._terms.RealTerm(a=np.exp(2 * ln_sigma), c=np.exp(-ln_tau))
        gp = self._celerite2.GaussianProcess(kernel, mean=0.0)
        gp.compute(ts[order], yerr=self.err[rows][order], check_sorted=False)
        y = self.y[rows][order]
        x = self.design[rows][order]
        used = np.any(x != 0, axis=0)
        x = x[:, used]
        ll = gp.log_likelihood(y)
        k_inv = gp.apply_inverse(np.column_stack([y, x]))
        b = x.T @ k_inv[:, 0]
        a = np.diag(1.0 / self.prior_variances[used]) + x.T @ k_inv[:, 1:]
        return ll, b, a, used, (gp, order, y, x)

    def log_likelihood(self, delays, ln_sigma: float, ln_tau: float, rows=None) -> float:
        """The log-likelihood p(curves | delays, σ, τ) with the polynomials marginalised."""
        ll, b, a, used, _ = self._solve(delays, ln_sigma, ln_tau, rows)
        if not np.isfinite(ll):
            return -np.inf
        try:
            cho = linalg.cho_factor(a, lower=True)
        except linalg.LinAlgError:
            return -np.inf
        return float(
            ll
            - 0.5 * float(np.sum(np.log(self.prior_variances[used])))
            - np.sum(np.log(np.diag(cho[0])))
            + 0.5 * b @ linalg.cho_solve(cho, b)
        )

    def linear_coefficients(self, delays, ln_sigma, ln_tau) -> np.ndarray:
        """The polynomial coefficients' posterior mean, all images (0 where unused)."""
        _, b, a, used, _ = self._solve(delays, ln_sigma, ln_tau)
        out = np.zeros(len(self.prior_variances))
        out[used] = linalg.solve(a, b, assume_a="pos")
        return out

    def draw_linear(self, delays, ln_sigma, ln_tau, rng) -> np.ndarray:
        """One draw of the polynomial coefficients from their conditional posterior.

        That is N(A⁻¹b, A⁻¹) given the delays and the variability (0 where unused).
        """
        _, b, a, used, _ = self._solve(delays, ln_sigma, ln_tau)
        cov = linalg.inv(a)
        out = np.zeros(len(self.prior_variances))
        out[used] = rng.multivariate_normal(linalg.solve(a, b, assume_a="pos"), 0.5 * (cov + cov.T))
        return out

    def flux_ratio_columns(self) -> list[int]:
        """Column of each image's constant term (its magnitude offset) in the design."""
        return [k * (self.order + 1) for k in range(self.n_images)]

    def whitened_chi2(self, delays, ln_sigma, ln_tau) -> float:
        """(y − Xβ̂)ᵀ K⁻¹ (y − Xβ̂): under the model a χ² with about N − p degrees."""
        _, b, a, used, (gp, order, y, x) = self._solve(delays, ln_sigma, ln_tau)
        beta = linalg.solve(a, b, assume_a="pos")
        r = y - x @ beta
        return float(r @ gp.apply_inverse(r[:, None])[:, 0])

    def log_posterior(self, theta: np.ndarray) -> float:
        """Flat priors: delays within ±max_delay, ln σ and ln τ within their ranges."""
        theta = np.asarray(theta, dtype=float)
        delays, ln_sigma, ln_tau = theta[:-2], theta[-2], theta[-1]
        if np.any(np.abs(delays) > self.max_delay):
            return -np.inf
        if not (self.ln_sigma_range[0] <= ln_sigma <= self.ln_sigma_range[1]):
            return -np.inf
        if not (self.ln_tau_range[0] <= ln_tau <= self.ln_tau_range[1]):
            return -np.inf
        return self.log_likelihood(delays, ln_sigma, ln_tau)

    # -- starting points -----------------------------------------------------------
    def fit_variability(self) -> tuple[float, float]:
        """σ and τ (logs) of the reference image's curve alone, by maximum likelihood."""
        rows = self.which == 0

        def cost(p):
            if not (self.ln_sigma_range[0] <= p[0] <= self.ln_sigma_range[1]):
                return 1e30
            if not (self.ln_tau_range[0] <= p[1] <= self.ln_tau_range[1]):
                return 1e30
            return -self.log_likelihood(np.zeros(self.n_images - 1), p[0], p[1], rows)

        start = np.array([np.log(max(np.std(self.y[rows]), 0.01)), np.log(max(self.span / 5, 2.0))])
        res = optimize.minimize(cost, start, method="Nelder-Mead", options={"xatol": 1e-3})
        return float(res.x[0]), float(res.x[1])

    def delay_grid(self) -> np.ndarray:
        """The trial delays of the scan: a quarter of the cadence apart, at most 2001."""
        step = max(self.cadence / 4.0, 2 * self.max_delay / 2000.0)
        n = int(np.floor(self.max_delay / step))
        return np.arange(-n, n + 1) * step

    def scan(self, image: int, ln_sigma: float, ln_tau: float) -> tuple[np.ndarray, np.ndarray]:
        """The log-likelihood of image ``image``'s delay on :meth:`delay_grid`.

        Only the reference and that image enter (the other images are left out).
        """
        rows = (self.which == 0) | (self.which == image)
        grid = self.delay_grid()
        ll = np.empty(len(grid))
        delays = np.zeros(self.n_images - 1)
        for k, d in enumerate(grid):
            delays[image - 1] = d
            ll[k] = self.log_likelihood(delays, ln_sigma, ln_tau, rows)
        return grid, ll
