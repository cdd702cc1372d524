"""Simulated light curves: quasars (a damped random walk) and supernovae (a Bazin shape).

Used by the tests, the benchmarks and the measurement's error budget (curves that mimic
the data's sampling and errors). The damped random walk is drawn exactly at any times by
its Markov recursion (an Ornstein-Uhlenbeck process: Gillespie 1996, Phys. Rev. E 54,
2084, eq. 1.3), independently of the Gaussian-process code that fits it.
"""

from __future__ import annotations

import numpy as np

from lensdelay.lightcurves.curves import FLUX_ZERO_POINT, LightCurves

__all__ = [
    "damped_random_walk",
    "seasonal_epochs",
    "simulate_quasar",
    "bazin_flux",
    "simulate_supernova",
    "matern32_process",
    "smooth_drift",
]


def damped_random_walk(times, sigma: float, tau: float, rng) -> np.ndarray:
    """One realisation at ``times`` (any order) of a zero-mean DRW of rms σ and time τ."""
    times = np.asarray(times, dtype=float)
    order = np.argsort(times, kind="stable")
    ts = times[order]
    out = np.empty(len(ts))
    out[0] = sigma * rng.standard_normal()
    decay = np.exp(-np.diff(ts) / tau)
    kicks = sigma * np.sqrt(1.0 - decay**2) * rng.standard_normal(len(ts) - 1)
    for k in range(1, len(ts)):
        out[k] = out[k - 1] * decay[k - 1] + kicks[k - 1]
    result = np.empty_like(out)
    result[order] = out
    return result


def seasonal_epochs(
    start: float, seasons: int, season_days: float, cadence: float, rng
) -> np.ndarray:
    """Monitoring epochs: seasons of ``season_days`` each year.

    One visit every ``cadence`` days, give or take a day (weather).
    """
    out = []
    for s in range(seasons):
        t = start + 365.25 * s
        end = t + season_days
        while t < end:
            out.append(t)
            t += max(cadence + rng.uniform(-1.0, 1.0), 0.5)
    return np.array(out)


def simulate_quasar(
    epochs: dict,
    delays: dict,
    sigma: float,
    tau: float,
    errors: dict,
    trends: dict,
    rng,
    offsets: dict | None = None,
) -> LightCurves:
    """Light curves of a lensed quasar.

    Parameters
    ----------
    epochs : dict label -> ndarray
        Observation times (MJD) of each image.
    delays : dict label -> float
        Δ of each image after the reference (the reference's is 0).
    sigma, tau : float
        Intrinsic variability: DRW rms (mag) and time scale (days).
    errors : dict label -> float or ndarray
        1-σ photometric errors (mag); the data are scattered by them.
    trends : dict label -> sequence
        Polynomial coefficients of each image's microlensing in its own time,
        c0 + c1 u + c2 u² with u = (t − mid)/(span/2) over all epochs.
    offsets : dict label -> float, optional
        Magnitude offsets (default 0; the trends' c0 adds to them).
    """
    labels = list(epochs)
    shifted = np.concatenate([epochs[lab] - delays[lab] for lab in labels])
    intrinsic = damped_random_walk(shifted, sigma, tau, rng)
    all_t = np.concatenate([epochs[lab] for lab in labels])
    mid, half = 0.5 * (all_t.max() + all_t.min()), 0.5 * (all_t.max() - all_t.min())
    rows = {"image": [], "time": [], "mag": [], "err": []}
    k = 0
    for lab in labels:
        t = np.asarray(epochs[lab], dtype=float)
        n = len(t)
        u = (t - mid) / half
        trend = sum(c * u**p for p, c in enumerate(trends.get(lab, ())))
        err = np.broadcast_to(np.asarray(errors[lab], dtype=float), (n,))
        mag = 19.0 + (offsets or {}).get(lab, 0.0) + intrinsic[k : k + n] + trend
        rows["image"].append(np.full(n, lab))
        rows["time"].append(t)
        rows["mag"].append(mag + err * rng.standard_normal(n))
        rows["err"].append(err)
        k += n
    n_all = len(all_t)
    return LightCurves(
        np.concatenate(rows["image"]),
        np.concatenate(rows["time"]),
        np.concatenate(rows["mag"]),
        np.concatenate(rows["err"]),
        np.full(n_all, ""),
        np.zeros(n_all, dtype=bool),
        "simulated quasar",
    )


def bazin_flux(t, amplitude, t0, rise, fall):
    """The Bazin et al. (2009, A&A 499, 653, eq. 1) shape without its constant term.

    A exp(−(t − t0)/τ_fall) / (1 + exp(−(t − t0)/τ_rise)).
    """
    x = np.asarray(t) - t0
    with np.errstate(over="ignore"):
        return amplitude * np.exp(-x / fall) / (1.0 + np.exp(-x / rise))


def simulate_supernova(
    epochs: dict,
    delays: dict,
    shapes: dict,
    scales: dict,
    frac_error: float,
    rng,
    floor_flux: float = 0.0,
) -> LightCurves:
    """Light curves of a lensed supernova in several bands.

    Parameters
    ----------
    epochs : dict (label, band) -> ndarray
        Observation times of each image in each band.
    delays : dict label -> float
    shapes : dict band -> (amplitude, t0, rise, fall)
        The intrinsic Bazin shape of each band (flux at ``FLUX_ZERO_POINT``).
    scales : dict (label, band) -> float
        Flux scale of each image in each band (magnification × microlensing).
    frac_error : float
        Photometric error as a fraction of the peak flux of the band, per point.
    floor_flux : float
        A constant added to every error (sky noise), in flux units.
    """
    rows = {"image": [], "time": [], "mag": [], "err": [], "band": []}
    for (lab, band), t in epochs.items():
        t = np.asarray(t, dtype=float)
        amp, t0, rise, fall = shapes[band]
        flux = scales[(lab, band)] * bazin_flux(t - delays[lab], amp, t0, rise, fall)
        err = frac_error * amp * scales[(lab, band)] + floor_flux
        observed = flux + err * rng.standard_normal(len(t))
        keep = observed > 3 * err  # a survey reports magnitudes of clear detections
        f, e = observed[keep], np.full(keep.sum(), err)
        rows["image"].append(np.full(keep.sum(), lab))
        rows["time"].append(t[keep])
        rows["mag"].append(FLUX_ZERO_POINT - 2.5 * np.log10(f))
        rows["err"].append(2.5 / np.log(10) * e / f)
        rows["band"].append(np.full(keep.sum(), band))
    n = sum(len(x) for x in rows["time"])
    return LightCurves(
        np.concatenate(rows["image"]),
        np.concatenate(rows["time"]),
        np.concatenate(rows["mag"]),
        np.concatenate(rows["err"]),
        np.concatenate(rows["band"]),
        np.zeros(n, dtype=bool),
        "simulated supernova",
    )


def matern32_process(times, sigma: float, scale: float, rng) -> np.ndarray:
    """One realisation at ``times`` of a zero-mean Matérn-3/2 process (rms σ, scale days).

    Smoother than a damped random walk (its spectrum falls as f⁻⁴, not f⁻²): drawn exactly
    by a Cholesky factor of its covariance (Rasmussen & Williams 2006, eq. 4.17) at the
    unique times, for the error budget's curves of another family than the one fitted.
    """
    times = np.asarray(times, dtype=float)
    u, inverse = np.unique(times, return_inverse=True)
    r = np.sqrt(3.0) * np.abs(u[:, None] - u[None, :]) / scale
    cov = sigma**2 * (1.0 + r) * np.exp(-r) + 1e-10 * sigma**2 * np.eye(len(u))
    draw = np.linalg.cholesky(cov) @ rng.standard_normal(len(u))
    return draw[inverse]


def smooth_drift(times, amplitude: float, period: float, rng) -> np.ndarray:
    """A slow drift: a random cubic over the data plus a sinusoid of ``period`` days.

    Both parts have rms about ``amplitude`` / √2 (mag): microlensing as a deterministic
    trend, a family the Gaussian models do not draw from.
    """
    times = np.asarray(times, dtype=float)
    mid, half = 0.5 * (times.max() + times.min()), max(0.5 * np.ptp(times), 1e-9)
    u = (times - mid) / half
    cubic = np.polynomial.legendre.legval(u, rng.standard_normal(4))
    cubic *= amplitude / np.sqrt(2) / max(float(np.std(cubic)), 1e-12)
    phase = rng.uniform(0, 2 * np.pi)
    return cubic + amplitude * np.sin(2 * np.pi * times / period + phase)
