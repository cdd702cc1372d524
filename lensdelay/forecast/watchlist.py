"""Which watched lens, and which of its images, an alert belongs to.

A watched lens is a prepared lens seen from the sky: its origin (``[sky]``), its observed
images (positions and errors) and the images its best fit predicts but nobody has seen,
named as the forecast names them (X1, X2, …), each with the error ellipse its posterior
chain gives (the spread of the image over up to :data:`SPREAD_DRAWS` of the chain's
samples, about the best fit's position).
Its footprint is a disc around the origin reaching ``margin`` beyond the farthest image.

Matching has two steps. :class:`WatchIndex` finds every (alert, lens) pair whose
separation is within the lens's footprint — a k-d tree over unit vectors, through
astropy's ``search_around_sky`` (no extra dependency; a HEALPix index would serve as well,
but the tree already meets the throughput goal: ``benchmarks/bench_watch.py``). Then
:func:`assign` weighs the hypotheses for one pair: the alert is image k (equal prior
shares, a 2-D Gaussian whose covariance is the image's (its error ellipse) plus the
alert's position error), or none of them — an unknown image or a foreground transient, uniform over
the footprint with prior ``P_NONE``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lensdelay.errors import InputError

__all__ = [
    "PREDICTED_SIGMA",
    "SPREAD_DRAWS",
    "SPREAD_MIN",
    "P_NONE",
    "FOOTPRINT_MARGIN",
    "WatchedImage",
    "WatchedLens",
    "Assignment",
    "watched_lens",
    "WatchIndex",
    "assign",
]

#: 1-σ position error (arcsec) taken for a predicted, unseen image when its chain gives too
#: few draws of it (fewer than :data:`SPREAD_MIN`): a quad's predicted images miss by
#: 59 mas (median) with 95% ellipses of 0.35" (docs/benchmarks.md, "Where, and something
#: to share"), so 0.15" per axis.
PREDICTED_SIGMA = 0.15
#: Chain samples (evenly spaced) whose images give a predicted image's error ellipse.
SPREAD_DRAWS = 400
#: Fewest draws in which a predicted image exists for its spread to be used.
SPREAD_MIN = 50
#: Prior probability that an alert inside a footprint is none of the lens's images.
P_NONE = 0.1
#: How far beyond its farthest image a lens's footprint reaches (arcsec).
FOOTPRINT_MARGIN = 1.0


@dataclass(frozen=True)
class WatchedImage:
    """One image: offsets from the lens's origin (arcsec, x East, y North) and its error.

    ``sigma`` is a 1-σ error per axis (arcsec); ``covariance`` (xx, xy, yy in arcsec²),
    when given, is the full error ellipse and takes its place.
    """

    family: str
    label: str
    x: float
    y: float
    sigma: float
    observed: bool
    covariance: tuple[float, float, float] | None = None

    def error_matrix(self) -> np.ndarray:
        """The 2×2 position covariance (arcsec²)."""
        if self.covariance is None:
            return np.eye(2) * self.sigma**2
        xx, xy, yy = self.covariance
        return np.array([[xx, xy], [xy, yy]])


@dataclass(frozen=True)
class WatchedLens:
    """A lens on the watch list: where it is, its images and its footprint (arcsec)."""

    name: str
    ra: float
    dec: float
    images: tuple[WatchedImage, ...]
    radius: float


@dataclass(frozen=True)
class Assignment:
    """What an alert inside a lens's footprint most probably is.

    ``image`` is ``family/label`` of the most probable image, or None when "none of its
    images" is the most probable; ``probabilities`` gives every hypothesis (``none`` too).
    """

    lens: str
    image: str | None
    probability: float
    probabilities: dict
    offset: tuple[float, float]


def watched_lens(name: str, prepared, margin: float = FOOTPRINT_MARGIN) -> WatchedLens:
    """The watch-list entry of a prepared lens (it must have a ``[sky]`` origin)."""
    sc = prepared.scenario
    if sc.sky is None:
        raise InputError(
            f"sky is required to watch lens {name!r} (its [sky] ra, dec), got nothing", sc.source
        )
    from lensdelay.forecast.samples import image_tracks

    images = [
        WatchedImage(f.label, im.label, im.x, im.y, im.sigma, True)
        for f in sc.families
        for im in f.images
    ]
    like = prepared.likelihood()
    samples = prepared.chain.samples()
    rows = samples[np.unique(np.linspace(0, len(samples) - 1, SPREAD_DRAWS).astype(int))]
    for family in sc.families:
        # the predicted images at the best fit, named as a forecast names them (X1, X2, ...)
        tracks, _ = image_tracks(like, prepared.fit.values, family.label)
        if all(t.observed for t in tracks):
            continue
        spread = _image_spread(like, rows, tracks)
        for j, t in enumerate(tracks):
            if t.observed:
                continue
            cov = spread.get(j)
            sigma = PREDICTED_SIGMA if cov is None else float(np.sqrt(max(cov[0], cov[2])))
            images.append(WatchedImage(family.label, t.label, t.x, t.y, sigma, False, cov))
    reach = max(np.hypot(im.x, im.y) for im in images)
    return WatchedLens(
        name, float(sc.sky.ra.deg), float(sc.sky.dec.deg), tuple(images), float(reach + margin)
    )


def _image_spread(like, rows, tracks) -> dict:
    """Each track's position covariance over the chain ``rows``, about the best fit's image.

    Returns {track index: (xx, xy, yy)} for the tracks that exist in at least
    :data:`SPREAD_MIN` rows (the second moment about the best fit's position, so an
    offset of the posterior's images from it widens the ellipse rather than being lost).
    """
    from lensdelay.forecast.samples import solve_samples

    n = len(rows)
    h0, kappa = np.full(n, like.h0_ref), np.zeros(n)  # positions depend on neither
    solved = solve_samples(like, rows, tracks, tracks[0].label, h0, kappa)
    out = {}
    for j, t in enumerate(tracks):
        ok = solved.exists[:, j]
        if np.sum(ok) < SPREAD_MIN:
            continue
        dx, dy = solved.x[ok, j] - t.x, solved.y[ok, j] - t.y
        out[j] = (float(np.mean(dx * dx)), float(np.mean(dx * dy)), float(np.mean(dy * dy)))
    return out


class WatchIndex:
    """Every lens's footprint, searchable for many alerts at once."""

    def __init__(self, lenses):
        from astropy import units as u
        from astropy.coordinates import SkyCoord

        self.lenses = tuple(lenses)
        if not self.lenses:
            raise InputError("a watch list needs at least one lens, got none")
        self.coords = SkyCoord(
            np.array([lens.ra for lens in self.lenses]) * u.deg,
            np.array([lens.dec for lens in self.lenses]) * u.deg,
        )
        self.radius = np.array([lens.radius for lens in self.lenses])

    def candidates(self, ra, dec) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(alert index, lens index, separation in arcsec) of every alert inside a footprint."""
        from astropy import units as u
        from astropy.coordinates import SkyCoord, search_around_sky

        alerts = SkyCoord(np.asarray(ra, float) * u.deg, np.asarray(dec, float) * u.deg)
        i_alert, i_lens, sep, _ = search_around_sky(
            alerts, self.coords, self.radius.max() * u.arcsec
        )
        sep = sep.to_value(u.arcsec)
        inside = sep <= self.radius[i_lens]
        return i_alert[inside], i_lens[inside], sep[inside]


def assign(lens: WatchedLens, ra: float, dec: float, alert_sigma: float) -> Assignment:
    """The hypotheses for an alert at (ra, dec) with a 1-σ position error (arcsec)."""
    from astropy import units as u
    from astropy.coordinates import SkyCoord

    origin = SkyCoord(lens.ra * u.deg, lens.dec * u.deg)
    east, north = origin.spherical_offsets_to(SkyCoord(ra * u.deg, dec * u.deg))
    x, y = east.to_value(u.arcsec), north.to_value(u.arcsec)
    n = len(lens.images)
    weights = {}
    for im in lens.images:
        cov = im.error_matrix() + np.eye(2) * alert_sigma**2
        d = np.array([x - im.x, y - im.y])
        quad = float(d @ np.linalg.solve(cov, d))
        density = np.exp(-0.5 * quad) / (2 * np.pi * np.sqrt(np.linalg.det(cov)))
        weights[f"{im.family}/{im.label}"] = (1.0 - P_NONE) / n * density
    weights["none"] = P_NONE / (np.pi * lens.radius**2)
    total = sum(weights.values())
    probabilities = {k: float(v / total) for k, v in weights.items()}
    best = max(probabilities, key=probabilities.get)
    return Assignment(
        lens=lens.name,
        image=None if best == "none" else best,
        probability=probabilities[best],
        probabilities=probabilities,
        offset=(float(x), float(y)),
    )
