"""Supernova delays: one parametric light-curve shape per band, shared by every image.

Image i in band b shows, in flux,

    F_ib(t) = μ_i · exp(ε_ib) · B_b(t − Δ_i),

where B_b is the Bazin et al. (2009, A&A 499, 653, eq. 1) shape of band b (amplitude,
peak-time parameter t0, rise and fall times; no constant: the host is subtracted), Δ_i the
delay after the reference image, μ_i the image's flux ratio to the reference (its
magnification ratio, with achromatic microlensing) and ε_ib a chromatic microlensing
term per band (band 0 has none; prior N(0, 0.1²) in ln flux, about 0.1 mag). The
reference has Δ = 0, μ = 1, ε = 0. The shape is not exact, so a fractional model error
f (free) is added to every point's variance: σ² = σ_phot² + (f F)². All parameters are
sampled with emcee, every walker in one vectorised call.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from lensdelay.lightcurves.simulate import bazin_flux

__all__ = ["CHROMATIC_PRIOR", "MODEL_ERROR_RANGE", "SupernovaDelayModel"]


#: Prior 1-σ of a chromatic microlensing term, ln flux (≈ 0.1 mag).
CHROMATIC_PRIOR = 0.1
#: Range of the fractional model error f.
MODEL_ERROR_RANGE = (1e-3, 0.5)


class SupernovaDelayModel:
    """Posterior of delays, flux ratios and shapes given multi-band supernova photometry.

    Parameters
    ----------
    curves : LightCurves
        Detections (all bands).
    reference : str
    max_delay : float, optional
        Delays within ±max_delay days (default: the data span).
    """

    def __init__(self, curves, reference: str, max_delay: float | None = None):
        self.labels = [reference] + [lab for lab in curves.labels if lab != reference]
        self.bands = curves.bands
        self.n_images, self.n_bands = len(self.labels), len(self.bands)
        index = {lab: k for k, lab in enumerate(self.labels)}
        bindex = {b: k for k, b in enumerate(self.bands)}
        self.t = np.asarray(curves.time, dtype=float)
        self.flux, self.flux_err = curves.flux()
        self.which = np.array([index[lab] for lab in curves.image])
        self.band = np.array([bindex[b] for b in curves.band])
        self.span = float(self.t.max() - self.t.min())
        self.max_delay = self.span if max_delay is None else float(max_delay)
        ref_peak = [
            float(np.max(self.flux[(self.which == 0) & (self.band == b)], initial=0.0))
            or float(np.max(self.flux[self.band == b]))
            for b in range(self.n_bands)
        ]
        self.peak = np.array(ref_peak)
        self.n_shape = 4 * self.n_bands
        n1 = self.n_images - 1
        self.n_params = self.n_shape + n1 + n1 + n1 * (self.n_bands - 1) + 1
        names = []
        for b in self.bands:
            tag = b or "flux"
            names += [f"ln_amplitude[{tag}]", f"t0[{tag}]", f"ln_rise[{tag}]", f"ln_fall[{tag}]"]
        names += [f"delay[{lab}]" for lab in self.labels[1:]]
        names += [f"ln_flux_ratio[{lab}]" for lab in self.labels[1:]]
        names += [f"chromatic[{lab},{b}]" for lab in self.labels[1:] for b in self.bands[1:]]
        names.append("ln_model_error")
        self.names = names

    # -- unpacking -------------------------------------------------------------------
    def _split(self, theta: np.ndarray):
        """Per-walker pieces of parameter rows (W, P)."""
        n1 = self.n_images - 1
        shape = theta[:, : self.n_shape].reshape(len(theta), self.n_bands, 4)
        k = self.n_shape
        delays = theta[:, k : k + n1]
        ln_mu = theta[:, k + n1 : k + 2 * n1]
        chrom = theta[:, k + 2 * n1 : k + 2 * n1 + n1 * (self.n_bands - 1)].reshape(
            len(theta), n1, self.n_bands - 1
        )
        return shape, delays, ln_mu, chrom, theta[:, -1]

    def model_flux(self, theta: np.ndarray, t=None, which=None, band=None) -> np.ndarray:
        """Model fluxes (W, N) at the data's rows (or at given times/images/bands)."""
        theta = np.atleast_2d(theta)
        t = self.t if t is None else np.asarray(t, dtype=float)
        which = self.which if which is None else np.asarray(which)
        band = self.band if band is None else np.asarray(band)
        shape, delays, ln_mu, chrom, _ = self._split(theta)
        w = len(theta)
        zeros = np.zeros((w, 1))
        delay_all = np.concatenate([zeros, delays], axis=1)[:, which]
        ln_mu_all = np.concatenate([zeros, ln_mu], axis=1)[:, which]
        chrom_full = np.concatenate(
            [np.zeros((w, self.n_images - 1, 1)), chrom], axis=2
        )  # band 0: no chromatic term
        chrom_full = np.concatenate([np.zeros((w, 1, self.n_bands)), chrom_full], axis=1)
        ln_scale = ln_mu_all + chrom_full[:, which, band]
        amp = np.exp(shape[:, band, 0])
        t0 = shape[:, band, 1]
        rise = np.exp(shape[:, band, 2])
        fall = np.exp(shape[:, band, 3])
        return np.exp(ln_scale) * bazin_flux(t[None, :] - delay_all, amp, t0, rise, fall)

    # -- the posterior -----------------------------------------------------------------
    def log_prior(self, theta: np.ndarray) -> np.ndarray:
        """Flat within bounds, Gaussian on the chromatic terms; (W,)."""
        theta = np.atleast_2d(theta)
        shape, delays, ln_mu, chrom, ln_f = self._split(theta)
        lo_t, hi_t = self.t.min() - self.span - 60.0, self.t.max() + 60.0
        ok = (
            np.all(np.abs(delays) <= self.max_delay, axis=1)
            & np.all(np.abs(ln_mu) <= 6.0, axis=1)
            & np.all((shape[:, :, 1] >= lo_t) & (shape[:, :, 1] <= hi_t), axis=1)
            & np.all((shape[:, :, 2] >= np.log(0.3)) & (shape[:, :, 2] <= np.log(40.0)), axis=1)
            & np.all((shape[:, :, 3] >= np.log(1.0)) & (shape[:, :, 3] <= np.log(300.0)), axis=1)
            & np.all(np.abs(shape[:, :, 0] - np.log(self.peak)[None, :]) <= 8.0, axis=1)
            & (ln_f >= np.log(MODEL_ERROR_RANGE[0]))
            & (ln_f <= np.log(MODEL_ERROR_RANGE[1]))
        )
        lp = -0.5 * np.sum((chrom / CHROMATIC_PRIOR) ** 2, axis=(1, 2))
        return np.where(ok, lp, -np.inf)

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """Gaussian in flux with the photometric and the fractional model error; (W,)."""
        theta = np.atleast_2d(theta)
        model = self.model_flux(theta)
        f = np.exp(theta[:, -1])[:, None]
        var = self.flux_err[None, :] ** 2 + (f * model) ** 2
        r2 = (self.flux[None, :] - model) ** 2 / var
        return -0.5 * np.sum(r2 + np.log(2 * np.pi * var), axis=1)

    def log_posterior(self, theta: np.ndarray) -> np.ndarray:
        """Vectorised over rows of ``theta`` (W, P)."""
        theta = np.atleast_2d(theta)
        lp = self.log_prior(theta)
        out = np.full(len(theta), -np.inf)
        ok = np.isfinite(lp)
        if np.any(ok):
            with np.errstate(all="ignore"):
                ll = self.log_likelihood(theta[ok])
            out[ok] = np.where(np.isfinite(ll), lp[ok] + ll, -np.inf)
        return out

    # -- a starting point -----------------------------------------------------------------
    def _shape_start(self) -> np.ndarray:
        """Bazin parameters of each band from the reference image alone (least squares)."""
        out = []
        for b in range(self.n_bands):
            sel = (self.which == 0) & (self.band == b)
            if sel.sum() < 4:
                sel = self.band == b
            t, f, e = self.t[sel], self.flux[sel], self.flux_err[sel]
            t_peak = t[np.argmax(f)]

            def resid(p, t=t, f=f, e=e):
                return (bazin_flux(t, np.exp(p[0]), p[1], np.exp(p[2]), np.exp(p[3])) - f) / e

            best = None
            for rise, fall in ((3.0, 20.0), (5.0, 40.0), (2.0, 10.0)):
                p0 = [np.log(f.max() * 2), t_peak - rise, np.log(rise), np.log(fall)]
                res = optimize.least_squares(resid, p0, method="lm", max_nfev=400)
                if best is None or res.cost < best.cost:
                    best = res
            out.extend(best.x)
        return np.array(out)

    def point_estimate(self, delay_grid_step: float | None = None) -> np.ndarray:
        """A maximum-posterior starting point.

        The reference's shapes first, each delay from a scan against them, then every
        parameter at once.
        """
        shape = self._shape_start()
        n1 = self.n_images - 1
        theta = np.concatenate(
            [shape, np.zeros(n1), np.zeros(n1), np.zeros(n1 * (self.n_bands - 1)), [np.log(0.03)]]
        )
        step = delay_grid_step or max(0.25, self.max_delay / 400.0)
        grid = np.arange(-self.max_delay, self.max_delay + step / 2, step)
        k0 = self.n_shape
        for i in range(1, self.n_images):
            trials = np.repeat(theta[None, :], len(grid), axis=0)
            trials[:, k0 + i - 1] = grid
            # the best flux ratio for each trial delay, in closed form (linear in μ)
            model = self.model_flux(trials)
            sel = self.which == i
            w = 1.0 / self.flux_err[sel] ** 2
            num = np.sum(w * model[:, sel] * self.flux[sel], axis=1)
            den = np.sum(w * model[:, sel] ** 2, axis=1)
            mu = np.where(den > 0, num / np.maximum(den, 1e-300), 1.0)
            chi2 = np.sum(w * (self.flux[sel] - mu[:, None] * model[:, sel]) ** 2, axis=1)
            chi2 = np.where((den > 0) & (mu > 0), chi2, np.inf)
            j = int(np.argmin(chi2))
            theta[k0 + i - 1] = grid[j]
            theta[k0 + n1 + i - 1] = np.log(max(mu[j], 1e-3))

        def cost(p):
            v = self.log_posterior(p[None, :])[0]
            return 1e30 if not np.isfinite(v) else -v

        res = optimize.minimize(cost, theta, method="Powell", options={"maxiter": 20000})
        return res.x if np.isfinite(cost(res.x)) and cost(res.x) < 1e29 else theta
