"""Where an image appears: its position posterior as error ellipses, and its place on the sky.

An image's per-sample positions (x, y in arcsec, CONVENTIONS.md "Sky coordinates") come
from the forecast's samples, all models pooled with their weights. The summary is the
weighted median of each coordinate and, for each level p, the ellipse of the samples'
weighted covariance about that centre scaled so that it holds the share p of the weighted
samples (an empirical Mahalanobis-distance quantile, so heavy tails widen it rather than
being assumed Gaussian). Sky positions are the scenario's ``[sky]`` origin moved by the
offsets with astropy (:meth:`astropy.coordinates.SkyCoord.spherical_offsets_by`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from astropy import units as u
from astropy.coordinates import SkyCoord

from lensdelay.inference.summaries import weighted_quantiles

__all__ = [
    "ELLIPSE_LEVELS",
    "PositionEllipse",
    "position_ellipses",
    "sky_position",
    "sky_offsets",
]


#: The error-ellipse levels every image gets (percent).
ELLIPSE_LEVELS = (68, 95)


@dataclass(frozen=True)
class PositionEllipse:
    """An error ellipse of a sky position.

    Attributes
    ----------
    level : int
        The share of the posterior inside, percent.
    semi_major, semi_minor : float
        Semi-axes, arcsec.
    position_angle : float
        Of the major axis, degrees East of North in [0, 180).
    """

    level: int
    semi_major: float
    semi_minor: float
    position_angle: float

    def as_dict(self) -> dict:
        """JSON-ready, with the units in the keys."""
        return {
            "level": self.level,
            "semi_major_arcsec": self.semi_major,
            "semi_minor_arcsec": self.semi_minor,
            "position_angle_deg": self.position_angle,
        }

    def contains(self, centre_x: float, centre_y: float, x, y) -> np.ndarray:
        """Whether points (x, y) (arcsec) lie inside the ellipse centred on the given centre."""
        pa = np.deg2rad(self.position_angle)
        dx, dy = np.asarray(x) - centre_x, np.asarray(y) - centre_y
        # coordinates along the major axis (toward the position angle) and across it
        along = dx * np.sin(pa) + dy * np.cos(pa)
        across = dx * np.cos(pa) - dy * np.sin(pa)
        return (along / self.semi_major) ** 2 + (across / self.semi_minor) ** 2 <= 1.0


def position_ellipses(
    x: np.ndarray, y: np.ndarray, weights: np.ndarray, levels=ELLIPSE_LEVELS
) -> tuple[float, float, tuple[PositionEllipse, ...]]:
    """The weighted-median position and its error ellipses.

    Parameters
    ----------
    x, y : ndarray
        Per-sample positions, arcsec (NaN where the image does not exist).
    weights : ndarray
        Sample weights (need not be normalised).
    levels : sequence of int
        Percent of the weighted samples each ellipse holds.

    Returns
    -------
    centre_x, centre_y : float
        Weighted medians, arcsec.
    ellipses : tuple of PositionEllipse
        One per level (zero-sized when the samples do not spread).
    """
    x, y, w = (np.asarray(a, dtype=float) for a in (x, y, weights))
    ok = np.isfinite(x) & np.isfinite(y) & (w > 0)
    x, y, w = x[ok], y[ok], w[ok] / np.sum(w[ok])
    cx = float(weighted_quantiles(x, w, [50])[0])
    cy = float(weighted_quantiles(y, w, [50])[0])
    dx, dy = x - cx, y - cy
    cov = np.array(
        [[np.sum(w * dx * dx), np.sum(w * dx * dy)], [np.sum(w * dx * dy), np.sum(w * dy * dy)]]
    )
    values, vectors = np.linalg.eigh(cov)
    values = np.clip(values, 0.0, None)
    major = vectors[:, 1]  # eigh sorts ascending: the last is the major axis
    pa = float(np.rad2deg(np.arctan2(major[0], major[1])) % 180.0)
    if values[1] <= 0.0:
        return cx, cy, tuple(PositionEllipse(int(p), 0.0, 0.0, pa) for p in levels)
    # Mahalanobis distances; a degenerate (line-like) spread keeps a floor across it
    floor = max(values[1] * 1e-8, 1e-16)
    inverse = vectors @ np.diag(1.0 / np.maximum(values, floor)) @ vectors.T
    d2 = inverse[0, 0] * dx * dx + 2 * inverse[0, 1] * dx * dy + inverse[1, 1] * dy * dy
    scales = np.sqrt(weighted_quantiles(d2, w, list(levels)))
    ellipses = tuple(
        PositionEllipse(
            int(p),
            float(k * np.sqrt(values[1])),
            float(k * np.sqrt(max(values[0], floor))),
            pa,
        )
        for p, k in zip(levels, scales)
    )
    return cx, cy, ellipses


def sky_position(origin: SkyCoord, x, y) -> SkyCoord:
    """The ICRS position of offsets (x East, y North, arcsec) from ``origin``.

    The offsets are spherical (along great circles), as astropy defines them: a point
    1″ East of an origin at declination δ lies 1″/cos δ of right ascension away.
    """
    return origin.spherical_offsets_by(np.asarray(x) * u.arcsec, np.asarray(y) * u.arcsec)


def sky_offsets(origin: SkyCoord, where: SkyCoord) -> tuple[np.ndarray, np.ndarray]:
    """The offsets (x East, y North, arcsec) of ``where`` from ``origin``."""
    east, north = origin.spherical_offsets_to(where)
    return east.to_value(u.arcsec), north.to_value(u.arcsec)
