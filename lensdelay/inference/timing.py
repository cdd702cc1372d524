"""The probability model of a transient's timing: measured delays and sightings.

Unknowns (besides the mass model): the date ``t0`` at which the event reached the
image it was first seen in (the *reference image*), H0 and κ_ext. Each image's date
is ``t0 + Δt_i``, with Δt_i its delay after the reference image.

Data, all Gaussian:

* the detection is the prior on ``t0``: ``t0 ~ N(detection date, σ_det²)``;
* a measured delay between images a and b of one family:
  ``d ~ N(Δt_a − Δt_b, σ_d²)`` -- it constrains delays, never ``t0``;
* a sighting of image i (observed or predicted) on date s:
  ``s ~ N(t0 + Δt_i, σ_s²)`` -- it constrains both.

``t0`` enters linearly, so it is marginalised in closed form: the data vector y
(delays in days; sightings as days after the detection date) is Gaussian,

    y ~ N(A T, C),   C = diag(σ²) + σ_det² b bᵀ,

where T are the images' arrival times (any per-family zero: every row is a
difference within a family), A picks the differences, and b is 1 on sighting rows
(they share the one ``t0``). Given the delays, ``t0`` is Gaussian again
(:meth:`TimingData.t0_conditional`), so a forecast draws it sample by sample from
its exact conditional. Everything is vectorised over samples.

This module is pure computation: no files, no command-line flags.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from lensdelay.errors import InputError
from lensdelay.inference.summaries import quantile_summary

__all__ = [
    "SightingRow",
    "TimingData",
    "TENSION_SIGMA",
    "Tension",
    "tensions",
    "tensions_from_draws",
]


@dataclass(frozen=True)
class SightingRow:
    """Image ``image`` showed the event ``days`` after the detection date, ± ``sigma`` days."""

    family: str
    image: str
    days: float
    sigma: float


class TimingData:
    """Measured delays and sightings as one Gaussian in the images' arrival times.

    Parameters
    ----------
    columns : sequence of (family, label)
        The images whose arrival times the caller will supply, in this order.
    delays : sequence of lensdelay.model.scenario.MeasuredDelay
    sightings : sequence of SightingRow
        All of the transient's family; ``days`` counted from the detection date.
    detection_sigma_days : float
        1-σ error of the detection date (the prior width of ``t0``); may be 0.
    reference : (family, label), optional
        The image the transient was detected in; required when there are sightings.
    delay_covariance : ndarray (n_delays, n_delays), optional
        The delays' joint covariance (days²) when they were measured together (light
        curves); by default they are independent with their own sigmas.

    Notes
    -----
    Rows are whitened with the Cholesky factor of C, so :meth:`residuals` are the
    normalised residuals a least-squares fit and the Fisher metric of the sampler
    expect, and ``−½|r|²`` is the log-likelihood up to a constant.
    """

    def __init__(
        self,
        columns,
        delays=(),
        sightings=(),
        detection_sigma_days: float = 0.0,
        reference=None,
        delay_covariance=None,
    ):
        self.columns = [tuple(c) for c in columns]
        self.delays = tuple(delays)
        self.sightings = tuple(sightings)
        self.detection_sigma = float(detection_sigma_days)
        if self.detection_sigma < 0:
            raise InputError(
                f"detection date sigma must be >= 0 days, got {self.detection_sigma:g}"
            )
        self.reference = tuple(reference) if reference is not None else None
        if self.sightings and self.reference is None:
            raise InputError(
                "sightings need the reference image the transient was detected in, got none"
            )
        index = {c: i for i, c in enumerate(self.columns)}
        needed = [(d.family, d.image) for d in self.delays] + [
            (d.family, d.relative_to) for d in self.delays
        ]
        needed += [(s.family, s.image) for s in self.sightings]
        if self.sightings:
            needed.append(self.reference)
        for key in needed:
            if key not in index:
                raise InputError(
                    f"image {key[0]}/{key[1]} must be one of the forecast's images "
                    f"({', '.join(f'{f}/{lab}' for f, lab in self.columns)}), got {key[0]}/{key[1]}"
                )
        m = len(self.delays) + len(self.sightings)
        self.design = np.zeros((m, len(self.columns)))
        self.values = np.zeros(m)
        self.sigmas = np.zeros(m)
        self.on_t0 = np.zeros(m, dtype=bool)
        self.names = []
        for r, d in enumerate(self.delays):
            if not d.sigma > 0:
                raise InputError(
                    f"delay {d.family}/{d.image} sigma must be > 0 days, got {d.sigma:g}"
                )
            self.design[r, index[(d.family, d.image)]] += 1.0
            self.design[r, index[(d.family, d.relative_to)]] -= 1.0
            self.values[r], self.sigmas[r] = d.days, d.sigma
            self.names.append(f"delay {d.family}/{d.image} - {d.relative_to}")
        for s_index, s in enumerate(self.sightings):
            r = len(self.delays) + s_index
            if not s.sigma > 0:
                raise InputError(
                    f"sighting {s.family}/{s.image} sigma must be > 0 days, got {s.sigma:g}"
                )
            if (s.family, s.image) == self.reference:
                raise InputError(
                    f"sighting image must differ from the reference image "
                    f"{s.family}/{s.image} (the detection is its sighting), got {s.image!r}"
                )
            # days after the detection = (T_i − T_ref) + (t0 − detection)
            self.design[r, index[(s.family, s.image)]] += 1.0
            self.design[r, index[self.reference]] -= 1.0
            self.values[r], self.sigmas[r] = s.days, s.sigma
            self.on_t0[r] = True
            self.names.append(f"sighting {s.family}/{s.image}")
        self.covariance = self._row_covariance(delay_covariance)
        self._chol = linalg.cholesky(self.covariance, lower=True) if m else np.zeros((0, 0))

    def _row_covariance(self, delay_covariance) -> np.ndarray:
        """The rows' covariance.

        Their own errors, the detection date shared by the sightings, and a measured
        delays' covariance in place of their own errors.
        """
        b = self.on_t0.astype(float)
        covariance = np.diag(self.sigmas**2) + self.detection_sigma**2 * np.outer(b, b)
        if delay_covariance is not None:
            nd = len(self.delays)
            cov = np.asarray(delay_covariance, dtype=float)
            if cov.shape != (nd, nd) or not np.allclose(cov, cov.T, rtol=1e-9, atol=1e-12):
                raise InputError(
                    f"delay covariance must be a symmetric {nd} x {nd} matrix (one row per "
                    f"measured delay), got shape {cov.shape}"
                )
            if nd and np.min(np.linalg.eigvalsh(cov)) <= 0:
                raise InputError("delay covariance must be positive definite, got a singular one")
            covariance[:nd, :nd] = cov
        return covariance

    def with_arrival_covariance(self, covariance: np.ndarray) -> TimingData:
        """A copy whose arrival times carry extra Gaussian scatter of this covariance.

        ``covariance`` (days², one row and column per entry of :attr:`columns`) is a
        model error of the predicted arrival times (e.g. unseen perturbers): the rows'
        covariance becomes C + A Σ Aᵀ.
        """
        cov = np.asarray(covariance, dtype=float)
        k = len(self.columns)
        if cov.shape != (k, k) or not np.all(np.isfinite(cov)):
            raise InputError(
                f"arrival covariance must be a finite {k} x {k} matrix, got shape {cov.shape}"
            )
        out = copy.copy(self)
        out.covariance = self.covariance + self.design @ cov @ self.design.T
        m = len(self.values)
        out._chol = linalg.cholesky(out.covariance, lower=True) if m else np.zeros((0, 0))
        return out

    # -- sizes --------------------------------------------------------------------
    def __len__(self) -> int:
        return len(self.values)

    @property
    def has_sightings(self) -> bool:
        """Whether any row is a sighting (and so constrains t0)."""
        return bool(self.sightings)

    # -- the likelihood ---------------------------------------------------------------
    def predicted(self, arrival: np.ndarray) -> np.ndarray:
        """A T: what the rows measure, at t0 = detection date, (P, m)."""
        return np.atleast_2d(arrival) @ self.design.T

    def residuals(self, arrival: np.ndarray) -> np.ndarray:
        """Whitened residuals L⁻¹(y − A T) per sample, (P, m); NaN where T is NaN.

        A sample that lacks an image a row needs (its arrival time is NaN: the image does
        not exist under that sample's lens) cannot produce that measurement: all its
        residuals are NaN, so :meth:`log_likelihood` gives it likelihood zero.
        """
        diff = self.values[None, :] - self.predicted(arrival)
        if not len(self):
            return diff
        finite = np.all(np.isfinite(diff), axis=1)
        out = np.full(diff.shape, np.nan)
        if np.any(finite):
            out[finite] = linalg.solve_triangular(self._chol, diff[finite].T, lower=True).T
        return out

    def log_likelihood(self, arrival: np.ndarray) -> np.ndarray:
        """Log N(y; A T, C) up to a constant, per sample (P,); −inf where T is not finite."""
        r = self.residuals(arrival)
        out = -0.5 * np.sum(r * r, axis=1)
        return np.where(np.isfinite(out), out, -np.inf)

    def t0_conditional(self, arrival: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mean and 1-σ of t0 − detection date given the delays and the sightings, per sample.

        Prior N(0, σ_det²) times one Gaussian per sighting s_j − (T_j − T_ref) ~ N(t0, σ_j²):
        precision 1/σ_det² + Σ 1/σ_j², mean Σ (s_j − (T_j − T_ref))/σ_j² / precision
        (product of Gaussians). With σ_det = 0, t0 is the detection date exactly.
        """
        arrival = np.atleast_2d(arrival)
        n = len(arrival)
        if self.detection_sigma == 0.0:
            return np.zeros(n), np.zeros(n)
        if not self.has_sightings:
            return np.zeros(n), np.full(n, self.detection_sigma)
        rows = self.on_t0
        offsets = self.values[rows][None, :] - self.predicted(arrival)[:, rows]  # (P, k)
        inv = 1.0 / self.sigmas[rows] ** 2
        precision = 1.0 / self.detection_sigma**2 + np.sum(inv)
        mean = np.sum(offsets * inv, axis=1) / precision
        return mean, np.full(n, 1.0 / np.sqrt(precision))

    def draw_t0(self, arrival: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """One draw of t0 − detection date per sample from :meth:`t0_conditional`."""
        mean, sd = self.t0_conditional(arrival)
        return mean + sd * rng.standard_normal(len(mean))

    # -- checks against the prediction ---------------------------------------------------
    def predictive_draws(self, arrival: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """Simulated measurements per sample: A T + t0 offset (sightings) + noise, (P, m).

        Draws from the prior predictive of the rows given the samples' delays: t0 from
        its prior, each row's own measurement error independently.
        """
        arrival = np.atleast_2d(arrival)
        n = len(arrival)
        sim = self.predicted(arrival)
        t0 = self.detection_sigma * rng.standard_normal(n)
        sim = sim + np.where(self.on_t0[None, :], t0[:, None], 0.0)
        return sim + self.sigmas[None, :] * rng.standard_normal(sim.shape)


#: Beyond this many σ a measurement is reported prominently as in tension with the model.
TENSION_SIGMA = 3.0


@dataclass(frozen=True)
class Tension:
    """One measurement against the forecast made without any timing data.

    ``predicted`` holds quantiles (median, p16, p84, p2.5, p97.5) of the simulated
    measurement (model spread, H0, κ_ext, detection date and the measurement's own
    error); ``sigma`` is (measured − median) over half the predictive 68% width;
    ``p_value`` is two-sided, 2·min(P(ŷ ≤ y), P(ŷ ≥ y)) over the predictive draws
    (at least 1/(n + 1)).
    """

    name: str
    measured: float
    measurement_sigma: float
    predicted: dict
    sigma: float
    p_value: float

    @property
    def in_tension(self) -> bool:
        """Beyond TENSION_SIGMA, or a p-value below 0.0027."""
        return abs(self.sigma) > TENSION_SIGMA or self.p_value < 0.0027

    def as_dict(self) -> dict:
        """The record ``forecast.json`` keeps (``measurement`` is the name)."""
        return {
            "measurement": self.name,
            "measured": self.measured,
            "measurement_sigma": self.measurement_sigma,
            "predicted": self.predicted,
            "sigma": self.sigma,
            "p_value": self.p_value,
            "in_tension": self.in_tension,
        }


def tensions(
    timing: TimingData, arrival: np.ndarray, weights: np.ndarray, rng: np.random.Generator
) -> list[Tension]:
    """Predicted vs measured for every row, from weighted samples of the arrival times."""
    return tensions_from_draws(timing, timing.predictive_draws(arrival, rng), weights)


def tensions_from_draws(timing: TimingData, sims: np.ndarray, weights: np.ndarray) -> list[Tension]:
    """Predicted vs measured for every row, from simulated measurements (P, m) and weights (P,)."""
    weights = np.asarray(weights, dtype=float)
    out = []
    for r, name in enumerate(timing.names):
        col = sims[:, r]
        ok = np.isfinite(col) & (weights > 0)
        w = weights[ok] / max(weights[ok].sum(), 1e-300)
        y = timing.values[r]
        summ = quantile_summary(col[ok], w)
        half = 0.5 * (summ["p84"] - summ["p16"])
        gap = y - summ["median"]
        sigma = gap / half if half > 0 else (0.0 if gap == 0 else float(np.copysign(np.inf, gap)))
        below = float(np.sum(w[col[ok] <= y]))
        above = float(np.sum(w[col[ok] >= y]))
        floor = 1.0 / (ok.sum() + 1)
        p = max(min(1.0, 2.0 * min(below, above)), floor)
        out.append(Tension(name, float(y), float(timing.sigmas[r]), summ, float(sigma), float(p)))
    return out
