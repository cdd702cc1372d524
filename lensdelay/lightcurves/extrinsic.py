"""Each image's own, extrinsic variability (microlensing by stars in the lens) as linear terms.

Every model here writes an image's extrinsic magnitude curve as ``μ(t) = Φ(t) c`` with
coefficients ``c ~ N(0, a² I)``: columns Φ evaluated at the image's own epochs and a prior
amplitude ``a`` (mag). The delay model (:mod:`.quasar`) then integrates ``c`` out in closed
form, whichever family it is, so the families compare by their evidence.

Three families:

``polynomial``
    1, u, u², … of ``u = (t − mid)/(span/2)`` (``scale`` = the order). A slow trend.
``spline``
    Cubic B-splines with knots every ``scale`` days (de Boor 1978, *A Practical Guide to
    Splines*, ch. IX): a curve that bends once per knot spacing.
``slow-gp``
    A Gaussian process of Matérn-3/2 covariance ``a² (1 + √3 r/ℓ) exp(−√3 r/ℓ)``
    (Rasmussen & Williams 2006, *Gaussian Processes for Machine Learning*, eq. 4.17) with
    time scale ℓ = ``scale`` days, represented on inducing times every ℓ/4 (the
    subset-of-regressors approximation, Quiñonero-Candela & Rasmussen 2005, JMLR 6, 1939,
    eq. 16): Φ = K(t, u) L⁻ᵀ with L Lᵀ = K(u, u) / a². For ℓ much longer than the knot
    spacing the approximation is exact to well below the photometric errors. Over a
    campaign longer than MAX_COLUMNS × ℓ/4 the inducing times are spread to MAX_COLUMNS:
    a smoother process of the same covariance at the inducing times.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg

from lensdelay.errors import InputError

__all__ = ["FAMILIES", "MAX_COLUMNS", "Extrinsic"]


FAMILIES = ("polynomial", "spline", "slow-gp")
#: At most this many columns per image and band: a finer spline or inducing grid over a
#: long campaign would make each likelihood cost grow as its square for little gain (the
#: curve then bends at most once per span/MAX_COLUMNS days).
MAX_COLUMNS = 48


@dataclass(frozen=True)
class Extrinsic:
    """One family of extrinsic variability with its scale and prior amplitude.

    Attributes
    ----------
    family : {"polynomial", "spline", "slow-gp"}
    scale : float
        Polynomial order, spline knot spacing (days) or the process's time scale (days).
    amplitude : float
        Prior 1-σ of the coefficients, mag (the polynomial's constant term is the image's
        offset, fitted separately with a broad prior).
    """

    family: str = "polynomial"
    scale: float = 2.0
    amplitude: float = 1.0

    def __post_init__(self):
        if self.family not in FAMILIES:
            raise InputError(
                f"extrinsic family must be one of {', '.join(FAMILIES)}, got {self.family!r}"
            )
        if not (np.isfinite(self.scale) and self.scale >= 0):
            raise InputError(f"extrinsic scale must be a number >= 0, got {self.scale!r}")
        if self.family == "polynomial" and (self.scale != int(self.scale) or self.scale > 5):
            raise InputError(f"polynomial order must be 0 to 5, got {self.scale:g}")
        if self.family != "polynomial" and self.scale <= 0:
            raise InputError(f"{self.family} scale must be > 0 days, got {self.scale!r}")
        if not (np.isfinite(self.amplitude) and self.amplitude > 0):
            raise InputError(f"extrinsic amplitude must be > 0 mag, got {self.amplitude!r}")

    @property
    def name(self) -> str:
        """A short description for notes and tables."""
        if self.family == "polynomial":
            return f"polynomial of order {int(self.scale)}"
        if self.family == "spline":
            return f"spline, knots every {self.scale:.0f} d (±{self.amplitude:.2g} mag)"
        return f"slow Gaussian process, {self.scale:.0f} d (±{self.amplitude:.2g} mag)"

    def columns(self, t: np.ndarray, start: float, end: float) -> np.ndarray:
        """Φ at times ``t`` for a curve spanning ``start``..``end`` (the constant excluded).

        Columns whose prior is ``amplitude`` each; (len(t), p), p possibly 0.
        """
        t = np.asarray(t, dtype=float)
        span = max(end - start, 1e-9)
        if self.family == "polynomial":
            u = (t - 0.5 * (start + end)) / (0.5 * span)
            if not self.scale:
                return np.zeros((len(t), 0))
            return np.column_stack([u**p for p in range(1, int(self.scale) + 1)])
        if self.family == "spline":
            return _spline_columns(t, start, end, self.scale)
        return _matern_columns(t, start, end, self.scale)


def _spline_columns(t, start, end, spacing):
    """Cubic B-splines with interior knots every ``spacing`` days (partition of unity)."""
    from scipy.interpolate import BSpline

    n_int = min(max(int(np.ceil((end - start) / spacing)), 1), MAX_COLUMNS - 2)
    inner = np.linspace(start, end, n_int + 1)
    knots = np.concatenate([[start] * 3, inner, [end] * 3])
    x = np.clip(t, start, end)
    basis = BSpline.design_matrix(x, knots, 3).toarray()
    # the B-splines sum to one: the constant is the image's offset, so one combination is
    # dropped by centring (each column minus the mean column keeps the span of the rest)
    return basis - basis.mean(axis=1, keepdims=True)


def _matern_columns(t, start, end, scale):
    """Subset-of-regressors columns of a unit Matérn-3/2 process on inducing times."""
    step = max(scale / 4.0, (end - start) / (MAX_COLUMNS - 1))
    n = max(int(np.ceil((end - start) / step)), 1) + 1
    u = np.linspace(start, start + (n - 1) * step, n) - 0.5 * ((n - 1) * step - (end - start))

    def k(a, b):
        r = np.sqrt(3.0) * np.abs(a[:, None] - b[None, :]) / scale
        return (1.0 + r) * np.exp(-r)

    kuu = k(u, u) + 1e-8 * np.eye(n)
    chol = linalg.cholesky(kuu, lower=True)
    return linalg.solve_triangular(chol, k(t, u).T, lower=True).T
