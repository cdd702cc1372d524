"""Sampling coordinates: where the posterior valley of a lens model is nearly straight.

Lens recipes are written in the parameters observers think in -- axis ratio and
position angle, shear strength and angle -- but in those polar coordinates the
likelihood valley of a quad fitted with an ellipsoid and shear is strongly curved, and
the angle is undefined at a round lens or zero shear. The sampler therefore works in
Cartesian components (common practice in lens modelling):

* an ellipsoid's free (``axis_ratio`` q, ``position_angle`` φ) become
  e = (1 − q)/(1 + q), (e₁, e₂) = e (cos 2φ, sin 2φ);
* a shear's free (``strength`` γ, ``position_angle`` φγ) become
  (γ₁, γ₂) = γ (cos 2φγ, sin 2φγ).

φ is measured East of North (CONVENTIONS.md); the components here are only sampling
coordinates and are never reported. A pair is converted only when both members are
free and the angle has no finite bounds of its own (it is then defined modulo 180°).
Every other parameter is sampled as it is.

The posterior density is kept the same: the target in the new coordinates is the
original one times abs(det ∂p/∂u) (change of variables). For that factor: with
e = (1 − q)/(1 + q), abs(∂q/∂e) = 2/(1 + e)²; going from polar (e, 2φ) to (e₁, e₂)
divides by e; φ in degrees multiplies by 180/(2π). So
abs(det ∂(q, φ)/∂(e₁, e₂)) = (2/(1 + e)²) · (90/π) / e, and
abs(det ∂(γ, φγ)/∂(γ₁, γ₂)) = (90/π) / γ.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "SamplingCoordinates",
    "ORIGIN_CLEARANCE",
    "polar_pairs",
    "SampledTarget",
]


_HALF_TURN = 90.0 / math.pi  # degrees per radian of 2φ, i.e. dφ/d(2φ_rad)


class SamplingCoordinates:
    """Map between model parameters p and sampling coordinates u, for rows (P, n).

    Parameters
    ----------
    names : list of str
        Parameter names of the likelihood (``"mass[i].name"``, sources, H0).
    lower, upper : ndarray
        The likelihood's bounds (used to decide whether an angle is unbounded).
    enabled : bool
        False: convert nothing (u = p).
    polar : collection of int, optional
        Indices of radius parameters (an ``axis_ratio`` or a ``strength``) whose pair is
        kept in its own polar parameters. The component density of a prior that is
        finite at zero shear (or at a round lens) carries the change-of-variables factor
        1/γ (1/e): an integrable spike at the origin which walkers that reach it hardly
        ever leave. A pair whose posterior reaches the origin is therefore better sampled
        as it is written (see :func:`polar_pairs`).
    """

    def __init__(self, names, lower, upper, enabled: bool = True, polar=()):
        self.names = list(names)
        self.ellipse_pairs: list[tuple[int, int]] = []
        self.shear_pairs: list[tuple[int, int]] = []
        index = {n: i for i, n in enumerate(self.names)} if enabled else {}
        polar = set(polar)
        for name, i in index.items():
            prefix, _, field = name.rpartition(".")
            if field != "position_angle" or not prefix.startswith("mass["):
                continue
            if np.isfinite(lower[i]) or np.isfinite(upper[i]):
                continue
            radius = index.get(f"{prefix}.axis_ratio", index.get(f"{prefix}.strength"))
            if radius is None or radius in polar:
                continue
            if names[radius].endswith(".axis_ratio"):
                self.ellipse_pairs.append((radius, i))
            else:
                self.shear_pairs.append((radius, i))

    @property
    def identity(self) -> bool:
        """True when no pair is converted (u = p)."""
        return not (self.ellipse_pairs or self.shear_pairs)

    def prior_scales(self, lower, upper, periods=None) -> np.ndarray:
        """Width of each sampling coordinate's flat prior (its standard deviation), or 0.

        A parameter with finite bounds has a flat prior of standard deviation
        (max − min)/√12, and so has an angle over its period (``periods``); a converted
        pair's components range over ±e_max (ellipticity, from the smallest axis ratio)
        or ±γ_max, i.e. a standard deviation of about e_max/√3 each. Other unbounded
        coordinates get 0 (no prior width to lean on).
        """
        width = np.where(
            np.isfinite(lower) & np.isfinite(upper), (upper - lower) / np.sqrt(12.0), 0.0
        )
        for i, period in enumerate(periods or []):
            if period:
                width[i] = period / np.sqrt(12.0)
        for iq, ia in self.ellipse_pairs:
            e_max = (1.0 - max(lower[iq], 0.0)) / (1.0 + max(lower[iq], 0.0))
            width[iq] = width[ia] = e_max / np.sqrt(3.0)
        for ig, ia in self.shear_pairs:
            g_max = upper[ig] if np.isfinite(upper[ig]) else 0.0
            width[ig] = width[ia] = g_max / np.sqrt(3.0)
        return width

    # -- the maps -----------------------------------------------------------------
    def to_sampling(self, params: np.ndarray) -> np.ndarray:
        """P → u."""
        p = np.atleast_2d(np.asarray(params, dtype=float))
        u = p.copy()
        for iq, ia in self.ellipse_pairs:
            e = (1.0 - p[:, iq]) / (1.0 + p[:, iq])
            u[:, iq], u[:, ia] = (
                e * np.cos(np.radians(2 * p[:, ia])),
                e * np.sin(np.radians(2 * p[:, ia])),
            )
        for ig, ia in self.shear_pairs:
            g = p[:, ig]
            u[:, ig], u[:, ia] = (
                g * np.cos(np.radians(2 * p[:, ia])),
                g * np.sin(np.radians(2 * p[:, ia])),
            )
        return u

    def to_model(self, coords: np.ndarray) -> np.ndarray:
        """U → p; angles come back in (−90°, 90°]."""
        u = np.atleast_2d(np.asarray(coords, dtype=float))
        p = u.copy()
        for iq, ia in self.ellipse_pairs:
            e = np.hypot(u[:, iq], u[:, ia])
            p[:, iq] = (1.0 - e) / (1.0 + e)
            p[:, ia] = _HALF_TURN * np.arctan2(u[:, ia], u[:, iq])
        for ig, ia in self.shear_pairs:
            p[:, ig] = np.hypot(u[:, ig], u[:, ia])
            p[:, ia] = _HALF_TURN * np.arctan2(u[:, ia], u[:, ig])
        return p

    def log_volume(self, coords: np.ndarray) -> np.ndarray:
        """Log abs(det ∂p/∂u) per row (−inf where an angle is undefined: e = 0 or γ = 0)."""
        u = np.atleast_2d(coords)
        out = np.zeros(len(u))
        with np.errstate(divide="ignore", invalid="ignore"):
            for iq, ia in self.ellipse_pairs:
                e = np.hypot(u[:, iq], u[:, ia])
                out += np.log(2.0 / (1.0 + e) ** 2 * _HALF_TURN / e)
            for ig, ia in self.shear_pairs:
                out += np.log(_HALF_TURN / np.hypot(u[:, ig], u[:, ia]))
        return np.where(np.isfinite(out), out, -np.inf)

    def model_jacobian(self, coords: np.ndarray) -> np.ndarray:
        """∂p/∂u per row, (P, n, n): identity except 2×2 blocks for converted pairs."""
        u = np.atleast_2d(coords)
        rows, n = u.shape
        jac = np.broadcast_to(np.eye(n), (rows, n, n)).copy()
        pairs = [(pr, True) for pr in self.ellipse_pairs] + [(pr, False) for pr in self.shear_pairs]
        with np.errstate(divide="ignore", invalid="ignore"):
            for (ia_, ib_), is_ellipse in pairs:
                c1, c2 = u[:, ia_], u[:, ib_]
                r2 = c1 * c1 + c2 * c2
                r = np.sqrt(r2)
                # radius: ∂r/∂c = c/r; for the ellipse the recipe's q = (1 - r)/(1 + r)
                factor = -2.0 / (1.0 + r) ** 2 if is_ellipse else 1.0
                jac[:, ia_, ia_] = factor * c1 / r
                jac[:, ia_, ib_] = factor * c2 / r
                # angle: φ = (90/π) atan2(c2, c1)
                jac[:, ib_, ia_] = -_HALF_TURN * c2 / r2
                jac[:, ib_, ib_] = _HALF_TURN * c1 / r2
        return np.where(np.isfinite(jac), jac, 0.0)


#: A pair is sampled in components only when its best-fit radius lies this many standard
#: errors away from the origin (zero shear, a round lens).
ORIGIN_CLEARANCE = 3.0


def polar_pairs(names, start, errors, priors) -> set[int]:
    """Radius parameters whose posterior may reach the origin, to be sampled as written.

    Only a radius with a Gaussian prior of its own (``priors``) is considered: such a
    prior states a finite density at zero shear or a round lens, which components turn
    into the 1/γ spike. (A flat-prior radius keeps its components: there the valley of
    an under-constrained fit is straight in components and curved in polar parameters,
    and walkers no longer start at the origin, see :mod:`lensdelay.inference.starts`.)
    A shear strength γ (or an ellipticity 1 − q) counts as clear of the origin when it
    exceeds :data:`ORIGIN_CLEARANCE` times its standard error at the best fit; without
    a finite error (an under-constrained fit) it does not. With no errors at all
    (``errors=None``) only a pair that starts at the origin is kept polar.

    Parameters
    ----------
    names : list of str
        The likelihood's parameter names.
    start, errors : ndarray
        Best fit and its standard errors (NaN where unknown).
    priors : dict
        Parameter index -> Gaussian prior (mean, sigma).
    """
    out = set()
    for i, name in enumerate(names):
        if not name.startswith("mass[") or i not in priors:
            continue
        if name.endswith(".strength"):
            distance = start[i]
        elif name.endswith(".axis_ratio"):
            distance = 1.0 - start[i]
        else:
            continue
        if errors is None:
            clear = distance > 0
        else:
            clear = np.isfinite(errors[i]) and distance > ORIGIN_CLEARANCE * errors[i]
        if not clear:
            out.add(i)
    return out


class SampledTarget:
    """A likelihood seen in sampling coordinates: what the sampler and its moves call.

    ``log_probability(u) = like.log_probability(p(u)) + log abs(det ∂p/∂u)``, and
    ``evaluate`` returns the residual Jacobian with respect to u (chain rule).
    """

    def __init__(self, like, coordinates: SamplingCoordinates):
        self.like = like
        self.coordinates = coordinates
        self.names = like.names
        self.periods = like.periods
        self.lower = np.full(len(like.names), -np.inf)
        self.upper = np.full(len(like.names), np.inf)
        converted = {
            i for pair in coordinates.ellipse_pairs + coordinates.shear_pairs for i in pair
        }
        for i in range(len(like.names)):
            if i not in converted:
                self.lower[i], self.upper[i] = like.lower[i], like.upper[i]

    def log_probability(self, coords: np.ndarray) -> np.ndarray:
        """Log density in sampling coordinates, for rows (P, n)."""
        u = np.atleast_2d(coords)
        if self.coordinates.identity:
            return self.like.log_probability(u)
        return self.like.log_probability(
            self.coordinates.to_model(u)
        ) + self.coordinates.log_volume(u)

    def evaluate(self, coords: np.ndarray):
        """Log density, residuals and Jacobian in sampling coordinates (for the Langevin move)."""
        u = np.atleast_2d(coords)
        if self.coordinates.identity:
            return self.like.evaluate(u)
        logp, res, jac = self.like.evaluate(self.coordinates.to_model(u))
        jac = jac @ self.coordinates.model_jacobian(u)
        return logp + self.coordinates.log_volume(u), res, jac
