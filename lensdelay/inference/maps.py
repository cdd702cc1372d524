"""A scenario's lens as maps on a square grid, at the best fit and over the posterior.

Each map is a quantity of :data:`lensdelay.lensing.maps.LENS_QUANTITIES`, at the
transient's source redshift (or the first family's), plus the arrival-time surface of
that family's source: days after the arrival at the reference image's observed position,
t(θ) − t(θ_ref) = (D_Δt/c)·(τ(θ) − τ(θ_ref)) at the scenario's cosmology and κ_ext = 0
(CONVENTIONS.md, "Arrival time and delays"). Over posterior rows the maps are summarised
pixel by pixel by their median and their spread (half the 16–84% range).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from lensdelay.lensing.maps import LENS_QUANTITIES, lens_maps

__all__ = [
    "ARRIVAL",
    "BLOCK_VALUES",
    "LensMaps",
    "grid_axes",
    "fitted_maps",
]


#: The arrival-time map's unit and meaning.
ARRIVAL = ("d", "arrival time after the reference image's position, days")
#: Values (rows x pixels) of one quantity evaluated at once for posterior summaries: bounds
#: the memory of a block (seven quantities and the lens's temporaries, a few hundred MB).
BLOCK_VALUES = 1_000_000


@dataclass(frozen=True)
class LensMaps:
    """Maps of a fitted lens on a square grid.

    Attributes
    ----------
    x, y : ndarray
        Pixel-centre offsets along the grid's axes, arcsec; ``x`` runs from East to West
        (decreasing), as the columns of a sky image with East to the left.
    pixel : float
        Pixel size, arcsec.
    best : dict
        Quantity -> map at the best fit, indexed [row (North), column (West)].
    median, spread : dict or None
        Pixel-wise posterior median and half the 16–84% range (None without samples).
    units, meanings : dict
        Quantity -> FITS unit string and description.
    family, source_redshift, reference : str, float, str
        The family the maps are for, its redshift, the arrival time's reference image.
    model_label : str
    parameters : dict
        The best-fit parameter values by name.
    n_samples : int
        Posterior rows behind ``median`` and ``spread`` (0 without).
    """

    x: np.ndarray
    y: np.ndarray
    pixel: float
    best: dict = field(repr=False)
    median: dict | None = field(repr=False)
    spread: dict | None = field(repr=False)
    units: dict
    meanings: dict
    family: str
    source_redshift: float
    reference: str
    model_label: str
    parameters: dict
    n_samples: int = 0
    scenario: object = field(default=None, repr=False)
    provenance: dict | None = None


def _redshift_at(like, k: int, values) -> float:
    """Family k's redshift: measured, or (free) its value in ``values``."""
    fam = like.scenario.families[k]
    if not fam.redshift_free:
        return float(fam.redshift)
    return float(values[like.names.index(f"redshift[{fam.label}]")])


def grid_axes(size: float, pixel: float) -> tuple[np.ndarray, np.ndarray]:
    """Pixel-centre offsets of a square grid of side about ``size`` centred on the origin.

    An odd number of pixels puts the origin on a pixel centre. ``x`` decreases along the
    columns (East on the left).
    """
    n = int(np.round(size / pixel))
    n += 1 - n % 2
    half = (n - 1) / 2
    offsets = (np.arange(n) - half) * pixel
    return -offsets, offsets


def _maps_for(like, rows, family: int, reference_xy, gx, gy) -> dict:
    """Every map for parameter rows (P, n_par): arrays (P, ny, nx)."""
    flat = _values_at(like, rows, family, reference_xy, gx.ravel(), gy.ravel())
    shape = (len(rows), *gx.shape)
    return {k: v.reshape(shape) for k, v in flat.items()}


def _values_at(like, rows, family: int, reference_xy, x, y) -> dict:
    """Every quantity for parameter rows (P, n_par) at pixels ``x``, ``y``: arrays (P, n)."""
    lens = like.lens_for(rows)
    px, py = np.asarray(x)[None, :], np.asarray(y)[None, :]
    fam_scale = like.family_scale(family, rows)  # per row when the redshift is free
    maps = lens_maps(lens, px, py, fam_scale)
    src = rows[:, like.source_slice(family)]
    bx, by = src[:, :1], src[:, 1:]
    with np.errstate(all="ignore"):
        tau = lens.fermat_potential(px, py, bx, by, fam_scale)
        ref = lens.fermat_potential(
            np.full((1, 1), reference_xy[0]), np.full((1, 1), reference_xy[1]), bx, by, fam_scale
        )
    # the delay scale: 1 at the fitted cosmology unless H0 or κ_ext are parameters
    scale = like.delay_scale(rows)[:, None]
    days = np.reshape(like.family_days(family, rows), (-1, 1))
    maps["arrival_time"] = (tau - ref) * days * scale
    return {k: np.broadcast_to(v, (len(rows), px.shape[1])) for k, v in maps.items()}


def fitted_maps(
    like, best: np.ndarray, *, size: float, pixel: float, family: str, reference: str, rows=None
) -> LensMaps:
    """The maps of a fitted scenario (and their posterior summaries over ``rows``).

    Parameters
    ----------
    like : ImageLikelihood
        The fitted likelihood (its parameter layout).
    best : ndarray
        Best-fit parameter vector.
    size, pixel : float
        Side of the square field and pixel size, arcsec.
    family, reference : str
        The family (source redshift) of the maps and the image whose observed position is
        the arrival time's zero.
    rows : ndarray (P, n_par), optional
        Posterior samples: median and spread maps.
    """
    k = [f.label for f in like.families].index(family)
    fam = like.families[k]
    i = fam.labels.index(reference)
    ref_xy = (float(fam.x[i]), float(fam.y[i]))
    ax_x, ax_y = grid_axes(size, pixel)
    gx, gy = np.meshgrid(ax_x, ax_y)
    best_maps = {m: v[0] for m, v in _maps_for(like, best[None, :], k, ref_xy, gx, gy).items()}
    median = spread = None
    n = 0
    if rows is not None and len(rows):
        # pixel-wise quantiles need every row of a pixel at once: the grid is taken in
        # blocks of pixels holding at most BLOCK_VALUES values per quantity, so memory
        # stays bounded whatever the number of rows (only the summaries are kept)
        n = len(rows)
        per_block = max(1, BLOCK_VALUES // n)
        xs, ys = gx.ravel(), gy.ravel()
        median = {m: np.empty(gx.size) for m in best_maps}
        spread = {m: np.empty(gx.size) for m in best_maps}
        for s in range(0, gx.size, per_block):
            block = _values_at(like, rows, k, ref_xy, xs[s : s + per_block], ys[s : s + per_block])
            for m, v in block.items():
                with np.errstate(all="ignore"), warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN pixels
                    q16, q50, q84 = np.nanpercentile(v, [16, 50, 84], axis=0)
                median[m][s : s + per_block] = q50
                spread[m][s : s + per_block] = 0.5 * (q84 - q16)
        median = {m: v.reshape(gx.shape) for m, v in median.items()}
        spread = {m: v.reshape(gx.shape) for m, v in spread.items()}
    units = {m: u for m, (u, _) in LENS_QUANTITIES.items()} | {"arrival_time": ARRIVAL[0]}
    meanings = {m: d for m, (_, d) in LENS_QUANTITIES.items()} | {"arrival_time": ARRIVAL[1]}
    return LensMaps(
        x=ax_x,
        y=ax_y,
        pixel=float(pixel),
        best=best_maps,
        median=median,
        spread=spread,
        units=units,
        meanings=meanings,
        family=family,
        source_redshift=_redshift_at(like, k, best),
        reference=reference,
        model_label=like.model.label,
        parameters={n_: float(v) for n_, v in zip(like.names, best)},
        n_samples=n,
        scenario=like.scenario,
    )
