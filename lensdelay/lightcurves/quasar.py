"""Quasar delays: one intrinsic light curve seen by every image, shifted and dimmed.

The model (magnitudes): image i at its own observed time t shows

    m_i(t) = s(t − Δ_i) + p_i(t) + noise,

where s is the source's intrinsic variability, a Gaussian process with the damped-random-
walk kernel k(Δt) = σ² exp(−|Δt|/τ) (Kelly, Bechtold & Siemiginowska 2009, ApJ 698, 895,
eq. 1-3), Δ_i is the delay of image i after the reference image (Δ_ref = 0), and p_i is a
term of the image's own (extrinsic) variability in its own time: its magnitude offset (the
magnification) and slow microlensing by stars in the lens, which acts in the image's
frame. Where the curves name several instruments, an image's offset is one per instrument
(their zero points differ; CONVENTIONS.md, "Light curves"). The noise is Gaussian with
the stated errors.

The extrinsic term p_i need not be a polynomial: any family of :mod:`.extrinsic` (splines,
a slow Gaussian process) gives columns with Gaussian priors. Every linear coefficient
(offsets, instrument offsets, extrinsic terms) enters with a Gaussian prior N(0, Λ) and
is marginalised in closed form: y ~ N(0, K + X Λ Xᵀ), evaluated with the Woodbury
identity and celerite2's O(N) solver for K (Foreman-Mackey et al. 2017, AJ 154, 220), so
the likelihood of a 1200-point data set costs about a millisecond. Each band has its own
intrinsic curve (K block-diagonal over bands); each image's stated errors may be scaled
by a fitted factor (:meth:`QuasarDelayModel.fit_noise`). The delays are found by the
global search of :mod:`.search`.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, optimize

from lensdelay.errors import InputError
from lensdelay.lightcurves.extrinsic import Extrinsic

__all__ = ["OFFSET_PRIOR_MAG", "TREND_PRIOR_MAG", "QuasarDelayModel"]


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
        Detections (one band or several: each band has its own intrinsic curve, of the
        same σ and τ, independent of the others'; the delays are shared).
    reference : str
        The image whose delay is 0.
    order : int
        Polynomial order of each image's microlensing trend (used when ``extrinsic`` is
        not given; 0 = offset only).
    max_delay : float, optional
        Delays are searched within ±max_delay days (default 0.8 × the data span).
    extrinsic : Extrinsic, optional
        Each image's extrinsic variability (:mod:`.extrinsic`); one set of columns per
        image and band (microlensing is chromatic).
    """

    def __init__(
        self,
        curves,
        reference: str,
        order: int = 2,
        max_delay: float | None = None,
        extrinsic: Extrinsic | None = None,
    ):
        if extrinsic is None:
            if order < 0 or order > 5:
                raise InputError(f"polynomial order must be 0 to 5, got {order}")
            extrinsic = Extrinsic("polynomial", float(order), TREND_PRIOR_MAG)
        self.extrinsic = extrinsic
        self.labels = [reference] + [lab for lab in curves.labels if lab != reference]
        index = {lab: k for k, lab in enumerate(self.labels)}
        self.t = np.asarray(curves.time, dtype=float)
        self.y = np.asarray(curves.mag, dtype=float)
        self.err = np.asarray(curves.mag_err, dtype=float)
        self.which = np.array([index[lab] for lab in curves.image])
        self.bands = list(curves.bands)
        self.band = np.array([self.bands.index(b) for b in curves.band])
        self.n_images = len(self.labels)
        self.span = float(self.t.max() - self.t.min())
        self.cadence = curves.cadence()
        self.max_delay = 0.8 * self.span if max_delay is None else float(max_delay)
        start, end = float(self.t.min()), float(self.t.max())
        cols, variances, extrinsic_cols = [], [], []
        self.offset_columns = {}  # (image, band) -> column of its magnitude offset
        self.instrument = curves.instruments
        self.instrument_columns = []
        for k in range(self.n_images):
            for b in range(len(self.bands)):
                mine = (self.which == k) & (self.band == b)
                if not np.any(mine):
                    continue
                self.offset_columns[(k, b)] = len(cols)
                cols.append(mine.astype(float))
                variances.append(OFFSET_PRIOR_MAG**2)
                phi = extrinsic.columns(self.t, start, end)
                for j in range(phi.shape[1]):
                    cols.append(np.where(mine, phi[:, j], 0.0))
                    variances.append(extrinsic.amplitude**2)
                    extrinsic_cols.append(len(cols) - 1)
                # several instruments: each image's offset differs per instrument (zero
                # points); one more offset column for every instrument after its first
                for name in list(dict.fromkeys(self.instrument[mine].tolist()))[1:]:
                    cols.append((mine & (self.instrument == name)).astype(float))
                    variances.append(OFFSET_PRIOR_MAG**2)
                    self.instrument_columns.append((self.labels[k], name))
        self.design = np.column_stack(cols)
        self.prior_variances = np.array(variances)
        self._extrinsic_columns = np.array(extrinsic_cols, dtype=int)
        self.ln_sigma_range = (np.log(0.003), np.log(5.0))
        self.ln_tau_range = (np.log(max(self.cadence, 0.1)), np.log(10 * max(self.span, 1.0)))
        self._band_rows = [np.nonzero(self.band == b)[0] for b in range(len(self.bands))]
        #: Per image, the factor on its stated errors (1: as stated; :meth:`fit_noise`).
        self.error_scale = np.ones(self.n_images)
        #: The intrinsic kernel: "drw" (damped random walk, σ and τ) or "matern32"
        #: (Matérn-3/2, σ and length scale ℓ in the place of τ: smoother at short lags).
        self.kernel = "drw"
        self._celerite2, self._terms = _celerite()

    def set_error_scale(self, scale) -> None:
        """Set the factor on each image's stated errors (an array, one per image)."""
        self.error_scale = np.asarray(scale, dtype=float).copy()
        self.__dict__.pop("_prep_cache", None)

    def set_extrinsic_amplitude(self, amplitude: float) -> None:
        """Set the prior amplitude (mag) of every image's extrinsic terms."""
        self.prior_variances[self._extrinsic_columns] = float(amplitude) ** 2
        self.extrinsic = Extrinsic(self.extrinsic.family, self.extrinsic.scale, float(amplitude))

    # -- the likelihood ------------------------------------------------------------
    def _prepared(self, rows):
        """Per band: the rows' indices, times, magnitudes, errors and used design columns.

        Cached per selection of rows (the scans evaluate thousands of delays on one).
        """
        mask = np.ones(len(self.t), dtype=bool) if rows is None else np.asarray(rows, dtype=bool)
        key = mask.tobytes()
        cache = self.__dict__.setdefault("_prep_cache", {})
        if key not in cache:
            used = np.any(self.design[mask] != 0, axis=0)
            bands = []
            for band_rows in self._band_rows:
                sel = band_rows[mask[band_rows]]
                if sel.size:
                    err = self.err[sel] * self.error_scale[self.which[sel]]
                    bands.append(
                        (
                            sel,
                            self.t[sel],
                            self.which[sel],
                            self.y[sel],
                            err,
                            self.design[sel][:, used],
                        )
                    )
            cache[key] = (used, bands)
        return cache[key]

    def _solve(self, delays, ln_sigma, ln_tau, rows=None):
        """GP quantities for one parameter set: (log N(y|0,K), b, A, used columns, parts).

        ``rows`` (a boolean mask or None for all) selects the data; each band is its own
        Gaussian process, so K is block-diagonal over bands and the sums run over them.
        """
        used, bands = self._prepared(rows)
        shifts = np.concatenate([[0.0], np.asarray(delays, dtype=float)])
        ll = 0.0
        b = np.zeros(int(used.sum()))
        a = np.diag(1.0 / self.prior_variances[used])
        parts = []
        kernel = self._intrinsic_kernel(ln_sigma, ln_tau)
        for sel, t, which, y_all, err, x_all in bands:
            ts = t - shifts[which]
            order = np.argsort(ts, kind="stable")
            gp = self._celerite2.GaussianProcess(kernel, mean=0.0)
            gp.compute(ts[order], yerr=err[order], check_sorted=False)
            y = y_all[order]
            x = x_all[order]
            ll += gp.log_likelihood(y)
            k_inv = gp.apply_inverse(np.column_stack([y, x]))
            b += x.T @ k_inv[:, 0]
            a += x.T @ k_inv[:, 1:]
            parts.append((gp, sel[order], y, x))
        return ll, b, a, used, parts

    def _intrinsic_kernel(self, ln_sigma, ln_scale):
        """celerite2 term of :attr:`kernel`.

        Damped random walk: k(Δt) = σ² exp(−|Δt|/τ) (Kelly et al. 2009, eq. 1-3).
        Matérn-3/2: k(Δt) = σ² (1 + √3|Δt|/ℓ) exp(−√3|Δt|/ℓ) (Rasmussen & Williams 2006,
        Gaussian Processes for Machine Learning, eq. 4.17), celerite's approximation of it
        (Foreman-Mackey et al. 2017, section 4.3).
        """
        if self.kernel == "matern32":
            return self._terms.Matern32Term(sigma=np.exp(ln_sigma), rho=np.exp(ln_scale))
        return self._terms.RealTerm(a=np.exp(2 * ln_sigma), c=np.exp(-ln_scale))

    def log_likelihood(self, delays, ln_sigma: float, ln_tau: float, rows=None) -> float:
        """The log-likelihood p(curves | delays, σ, τ) with the linear terms marginalised."""
        ll, b, a, used, _ = self._solve(delays, ln_sigma, ln_tau, rows)
        if not np.isfinite(ll):
            return -np.inf
        try:
            chol = np.linalg.cholesky(a)
        except np.linalg.LinAlgError:
            return -np.inf
        z = np.linalg.solve(chol, b)  # b = L z: bᵀ A⁻¹ b = zᵀ z
        return float(
            ll
            - 0.5 * float(np.sum(np.log(self.prior_variances[used])))
            - np.sum(np.log(np.diag(chol)))
            + 0.5 * z @ z
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

    def flux_ratio_columns(self, band: int = 0) -> list[int]:
        """Column of each image's magnitude offset in the design, in one band."""
        return [self.offset_columns.get((k, band)) for k in range(self.n_images)]

    def whitened_chi2(self, delays, ln_sigma, ln_tau) -> float:
        """(y − Xβ̂)ᵀ K⁻¹ (y − Xβ̂): under the model a χ² with about N − p degrees."""
        _, b, a, used, parts = self._solve(delays, ln_sigma, ln_tau)
        beta = linalg.solve(a, b, assume_a="pos")
        total = 0.0
        for gp, _, y, x in parts:
            r = y - x @ beta
            total += float(r @ gp.apply_inverse(r[:, None])[:, 0])
        return total

    # -- the scales of the variability and of the errors ---------------------------------
    def fit_noise(self) -> tuple[float, float, np.ndarray]:
        """Fit each curve alone: ln σ, ln τ (the reference's) and every image's error factor.

        Each image's curve alone is fitted by maximum likelihood with its own damped random
        walk, its trend and a factor on its stated errors (monitoring pipelines often
        understate them; the factor keeps a misfit from being read as a delay). The
        factor is at least 1 and at most 10. Sets :attr:`error_scale`.
        """
        ln_sigma, ln_tau, scales, _ = self.fit_alone("drw")
        self.set_error_scale(scales)
        return ln_sigma, ln_tau, scales

    def fit_alone(self, kernel: str = "drw") -> tuple[float, float, np.ndarray, float]:
        """Maximum-likelihood fit of every curve alone with the intrinsic ``kernel``.

        Returns the reference's ln σ and ln scale (τ or ℓ), the error factors and the sum
        of the curves' maximum log-likelihoods (for comparing kernels: both have the same
        number of parameters). :attr:`error_scale` and :attr:`kernel` are left as found.
        """
        if kernel not in ("drw", "matern32"):
            raise InputError(f"kernel must be 'drw' or 'matern32', got {kernel!r}")
        saved_kernel, saved_scale = self.kernel, self.error_scale.copy()
        self.kernel = kernel
        scales = np.ones(self.n_images)
        ref = (0.0, 0.0)
        total = 0.0
        try:
            for k in range(self.n_images):
                rows = self.which == k

                def cost(p, rows=rows, k=k):
                    if not (self.ln_sigma_range[0] <= p[0] <= self.ln_sigma_range[1]):
                        return 1e30
                    if not (self.ln_tau_range[0] <= p[1] <= self.ln_tau_range[1]):
                        return 1e30
                    if not (0.0 <= p[2] <= np.log(10.0)):
                        return 1e30
                    trial = scales.copy()
                    trial[k] = np.exp(p[2])
                    self.set_error_scale(trial)
                    v = self.log_likelihood(np.zeros(self.n_images - 1), p[0], p[1], rows)
                    return -v if np.isfinite(v) else 1e30

                start = np.array(
                    [np.log(max(np.std(self.y[rows]), 0.01)), np.log(max(self.span / 5, 2.0)), 0.1]
                )
                res = optimize.minimize(
                    cost, start, method="Nelder-Mead", options={"xatol": 1e-3, "maxfev": 600}
                )
                scales[k] = float(np.exp(np.clip(res.x[2], 0.0, np.log(10.0))))
                total += -float(res.fun)
                if k == 0:
                    ref = (float(res.x[0]), float(res.x[1]))
        finally:
            self.kernel = saved_kernel
            self.set_error_scale(saved_scale)
        return ref[0], ref[1], scales, total
