"""Light curves of the images of one lensed source, as the estimators use them.

Magnitudes (with 1-σ errors) per image and band, times in days (MJD, UTC), sorted within
each image and band. Flux data are converted to magnitudes on reading only where needed:
the supernova model works in flux, the quasar model in magnitudes, and both views are here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["FLUX_ZERO_POINT", "LightCurves"]


#: Zero point of the relative fluxes the supernova model uses: F = 10^(−0.4 (m − ZP)).
FLUX_ZERO_POINT = 25.0


@dataclass(frozen=True)
class LightCurves:
    """Per-row arrays of one family's light curves.

    Attributes
    ----------
    image : ndarray of str
        Image label of each row.
    time : ndarray
        MJD (UTC), days.
    mag, mag_err : ndarray
        Magnitude and its 1-σ error.
    band : ndarray of str
        Band of each row ("" when the file has one band).
    upper_limit : ndarray of bool
        Rows whose ``mag`` is a limiting magnitude (a non-detection).
    source : str
        Where the rows came from, for messages.
    instrument : ndarray of str, optional
        The telescope/camera of each row (CONVENTIONS.md, "Light curves"): zero points
        differ between instruments, so each image's magnitude offset is fitted per
        instrument. None: one instrument.
    """

    image: np.ndarray
    time: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    band: np.ndarray
    upper_limit: np.ndarray
    source: str = ""
    instrument: np.ndarray | None = None

    @property
    def instruments(self) -> np.ndarray:
        """The instrument of each row ("" when the curves name none)."""
        if self.instrument is None:
            return np.full(len(self.image), "")
        return np.asarray(self.instrument)

    @property
    def labels(self) -> list[str]:
        """Image labels in order of first appearance."""
        return list(dict.fromkeys(self.image.tolist()))

    @property
    def bands(self) -> list[str]:
        """Bands in order of first appearance."""
        return list(dict.fromkeys(self.band.tolist()))

    @property
    def span(self) -> float:
        """Days from the first to the last detection."""
        t = self.time[~self.upper_limit]
        return float(t.max() - t.min()) if t.size else 0.0

    def subset(self, keep: np.ndarray) -> "LightCurves":
        """The rows where ``keep`` is true."""
        return LightCurves(
            self.image[keep],
            self.time[keep],
            self.mag[keep],
            self.mag_err[keep],
            self.band[keep],
            self.upper_limit[keep],
            self.source,
            None if self.instrument is None else np.asarray(self.instrument)[keep],
        )

    def detections(self) -> "LightCurves":
        """The rows that are detections (limits dropped)."""
        return self.subset(~self.upper_limit)

    def select(self, image: str, band: str | None = None) -> np.ndarray:
        """Boolean mask of one image's rows (and one band's)."""
        mask = self.image == image
        return mask if band is None else mask & (self.band == band)

    def flux(self) -> tuple[np.ndarray, np.ndarray]:
        """Relative flux and its 1-σ error (first-order propagation of the mag error)."""
        f = 10 ** (-0.4 * (self.mag - FLUX_ZERO_POINT))
        return f, f * 0.4 * np.log(10) * self.mag_err

    def cadence(self) -> float:
        """Median spacing of one image's epochs, days (the first image's), band by band.

        Each band's epochs are spaced on their own and the median over bands is taken:
        several bands taken minutes apart on each night are one visit, not a cadence
        of minutes.
        """
        spacings = []
        first = self.image == self.labels[0]
        for b in self.bands:
            t = np.unique(self.time[first & (self.band == b)])
            if t.size > 1:
                spacings.append(float(np.median(np.diff(t))))
        return float(np.median(spacings)) if spacings else 1.0
