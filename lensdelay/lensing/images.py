"""Find every image of point sources: a refined image-plane mesh, then Newton.

Method (common practice in lensing codes, written here from scratch):

1. Cover the image plane with square cells, refined by quadtree splitting where
   det A changes sign (near critical curves) and around centres that do not swallow
   the central image (cored or shallow profiles), so that faint central images and
   close pairs near folds get cells of their own.
2. Split each cell into two triangles and map their corners to the source plane with
   the lens equation. A source inside a mapped triangle has (to first order) an image
   inside the image-plane triangle. Candidates for *many* sources at once come from a
   sort-and-search on the mapped triangles' bounding boxes.
3. Polish every candidate with Newton's method on β(θ) = β_s, using the analytic
   Jacobian A = I − ∂α/∂θ, vectorised over all candidates; keep converged roots and
   merge duplicates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from astropy import units as u

from lensdelay.errors import InputError
from lensdelay.lensing import compiled
from lensdelay.lensing.lens import Lens

__all__ = [
    "SOURCE_TOLERANCE",
    "SINGULAR_EXCLUSION",
    "NONLINEAR",
    "MERGE_TOLERANCE",
    "UNRESOLVED",
    "CRITICAL",
    "ImageTable",
    "newton_polish",
    "ImageFinder",
    "keep_distinct_tracks",
    "as_arcsec",
    "find_images",
    "find_images_at_scales",
]


#: An image is accepted when it maps back to its source within this (arcsec).
SOURCE_TOLERANCE = 1e-10
#: Roots closer than this (arcsec) to a singular centre are dropped.
SINGULAR_EXCLUSION = 1e-6
#: Largest departure from an affine map, as a fraction of a cell, left unsplit.
NONLINEAR = 0.05
#: Roots closer than this (arcsec) are the same image.
MERGE_TOLERANCE = 1e-7
#: Roots of one source closer than this (arcsec) cannot be told apart. Near a critical
#: curve the map is flat in one direction, so a root accepted at SOURCE_TOLERANCE is
#: only pinned to about sqrt(SOURCE_TOLERANCE) ~ 1e-5 arcsec along it; 1e-4 arcsec
#: (0.1 milliarcsec) is far below any telescope's resolution.
UNRESOLVED = 1e-4
#: Parity code of an image on a critical curve (merging images of both parities).
CRITICAL = 3


@dataclass(frozen=True)
class ImageTable:
    """Images of many sources, one row an image, sorted by source then arrival.

    Attributes
    ----------
    source_index : ndarray of int
        Which source (index into the inputs) the image belongs to.
    x, y : ndarray
        Image positions, arcsec.
    magnification : ndarray
        Signed magnification 1/det A.
    parity : ndarray of int
        0 minimum, 1 saddle, 2 maximum, 3 critical: images of both parities merging on a
        critical curve, closer than :data:`UNRESOLVED` (their magnification is infinite
        for a point source). Names in :data:`lensdelay.lensing.lens.PARITIES`.
    fermat : ndarray
        Fermat potential τ, arcsec²; arrival time = τ · D_dt / c.
    source_error : ndarray
        The length of β(θ) − β_s, arcsec.
    """

    source_index: np.ndarray
    x: np.ndarray
    y: np.ndarray
    magnification: np.ndarray
    parity: np.ndarray
    fermat: np.ndarray
    source_error: np.ndarray

    def __len__(self) -> int:
        return len(self.x)

    def select(self, mask) -> "ImageTable":
        """Rows where ``mask`` is true."""
        return ImageTable(*(getattr(self, f)[mask] for f in self.__dataclass_fields__))

    def of_source(self, i: int) -> "ImageTable":
        """The images of source ``i``."""
        return self.select(self.source_index == i)

    def counts(self, n_sources: int) -> np.ndarray:
        """Number of images of each source."""
        return np.bincount(self.source_index, minlength=n_sources)


def newton_polish(
    lens: Lens,
    x,
    y,
    beta_x,
    beta_y,
    scale=1.0,
    *,
    iterations: int = 40,
    max_step=None,
    tolerance: float = 1e-13,
    at_roots: bool = False,
):
    """Solve β(θ) = β_s by Newton's method from starting points (x, y).

    Vectorised over any broadcastable shapes (e.g. all candidates, or all posterior
    samples at once). ``max_step`` (arcsec, scalar or array) limits each step so a
    start cannot jump to a distant root. A point stops moving once it has converged, so
    its result does not depend on which other points share the call (a resumed sampler
    repeats an uninterrupted one bit for bit).

    Returns
    -------
    x, y, error : ndarray
        Final positions and the length of β(θ) − β_s.
    psi, psi_xx, psi_xy, psi_yy : ndarray
        With ``at_roots``: ``lens.potential_and_hessian`` at the final positions (the
        kernel gives them from its last evaluation, which it makes anyway).
    """
    solved = compiled.newton_solve(
        lens, x, y, beta_x, beta_y, scale, iterations, max_step, tolerance, at_roots
    )
    if solved is not None:  # the same steps in the compiled kernel, all points in one call
        return solved
    x, y, err = _newton_numpy(lens, x, y, beta_x, beta_y, scale, iterations, max_step, tolerance)
    if not at_roots:
        return x, y, err
    with np.errstate(all="ignore"):
        return (x, y, err, *lens.potential_and_hessian(x, y, scale))


def _newton_numpy(lens, x, y, beta_x, beta_y, scale, iterations, max_step, tolerance):
    """:func:`newton_polish`'s steps on the numpy path: (x, y, error)."""
    x = np.array(x, dtype=float)
    y = np.array(y, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for _ in range(iterations):
            bx, by = lens.source_position(x, y, scale)
            rx, ry = beta_x - bx, beta_y - by
            converged = np.abs(rx) + np.abs(ry) < tolerance
            if np.all(converged):  # all converged: stop early
                break
            a11, a12, a22 = lens.jacobian(x, y, scale)
            det = a11 * a22 - a12 * a12
            det = np.where(np.abs(det) < 1e-14, np.copysign(1e-14, det), det)
            dx = (a22 * rx - a12 * ry) / det
            dy = (a11 * ry - a12 * rx) / det
            if max_step is not None:
                step = np.hypot(dx, dy)
                shrink = np.minimum(1.0, max_step / np.maximum(step, 1e-300))
                dx, dy = dx * shrink, dy * shrink
            x = x + np.where(np.isfinite(dx) & ~converged, dx, 0.0)
            y = y + np.where(np.isfinite(dy) & ~converged, dy, 0.0)
        bx, by = lens.source_position(x, y, scale)
        err = np.hypot(beta_x - bx, beta_y - by)
    # all three with the broadcast shape, also when the starts were converged already
    shape = np.broadcast_shapes(x.shape, err.shape)
    x, y = np.broadcast_to(x, shape).copy(), np.broadcast_to(y, shape).copy()
    return x, y, np.where(np.isfinite(err), err, np.inf)


def _once_per_point(method, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, ...]:
    """``method(x, y)``'s outputs, evaluated once at each distinct point.

    Neighbouring cells of the mesh share corners (most leaves' four corners are also
    their neighbours'): the lens is evaluated at each distinct (x, y) once and the values
    are put back at every copy. Distinct means not equal bit for bit, so each copy gets
    the value its own evaluation would have given.
    """
    points = np.ascontiguousarray(np.stack([np.ravel(x), np.ravel(y)], axis=1), dtype=float)
    # the two coordinates' 16 bytes as one key: equal keys are equal bit for bit
    keys = points.view(np.dtype((np.void, points.itemsize * 2))).ravel()
    _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    out = method(points[first, 0], points[first, 1])
    return tuple(np.asarray(o)[inverse.reshape(-1)].reshape(np.shape(x)) for o in out)


class ImageFinder:
    """Finds all images of point sources behind one lens, at one or more deflection scales.

    The mesh serves every scale given: the lens's deflection and Hessian at its points
    do not depend on the scale (β = θ − s α), so they are evaluated once and the cells
    are split where any scale needs it. On a cluster field, where evaluating hundreds
    of member galaxies is the cost, the families of one lens share one mesh.

    Parameters
    ----------
    lens : Lens
    scale : float or sequence of float
        Deflection scale of the source family (1 at the reference redshift), or the
        scales of several families; :meth:`solve` then takes the one to use.
    source_radius : float
        Largest source offset β (arcsec) that will be asked for; sets the searched area.
    base_cells : int
        Cells along each side of the coarse mesh.
    critical_levels, centre_levels : int
        Quadtree splits near critical curves and near non-singular centres.
    """

    def __init__(
        self,
        lens: Lens,
        scale: float = 1.0,
        *,
        source_radius: float = 1.0,
        base_cells: int = 48,
        critical_levels: int = 6,
        centre_levels: int = 12,
    ):
        self.lens = lens
        self.scales = tuple(float(v) for v in np.atleast_1d(scale))
        self.scale = self.scales[0]
        self.source_radius = float(source_radius)
        self._mapped_cache: dict[float, tuple[np.ndarray, np.ndarray]] = {}
        self.extent = self._search_radius()
        self._build_mesh(base_cells, critical_levels, centre_levels)

    # -- mesh -----------------------------------------------------------------------
    def _search_radius(self) -> float:
        """Half-width of the square outside which no image of a source within source_radius lies."""
        angles = np.linspace(0.0, 2 * np.pi, 73)[:-1]
        # far enough out for any source: with a bounded deflection an image lies within a
        # few |β| of the centre (every source has at least one image)
        radii = np.geomspace(1e-3, max(1e3, 3.0 * self.source_radius + 10.0), 600)
        xx = np.outer(radii, np.sin(angles))
        yy = np.outer(radii, np.cos(angles))
        with np.errstate(all="ignore"):
            ax, ay = self.lens.deflection(xx, yy)
        # A thin ring of solutions (e.g. |β| ≪ θE behind a round lens) can fall between
        # two sampled radii; |β(θ)| changes by about the radial step between them, so the
        # step is part of the tolerance.
        step = np.gradient(radii)[:, None]
        inside = np.zeros(xx.shape, dtype=bool)
        for s in self.scales:
            bx, by = xx - s * ax, yy - s * ay
            inside |= np.hypot(bx, by) <= 1.05 * self.source_radius + 1e-3 + 2.0 * step
        reach = (
            radii[np.any(inside, axis=1)].max()
            if np.any(inside)
            else 2.0 * self.source_radius + 10.0
        )
        centres = self.lens.centres()
        offset = max((np.hypot(*c) for c in centres), default=0.0)
        return float(1.2 * max(reach, offset + 0.5, 0.5))

    def _split_for_scale(self, px, py, ax, ay, hxx, hxy, hyy, s) -> np.ndarray:
        """Cells (5 points each: corners, centre) to split for the family at scale ``s``."""
        with np.errstate(all="ignore"):
            det = (1.0 - s * hxx) * (1.0 - s * hyy) - (s * hxy) ** 2
        sign = np.sign(det)
        split = np.any(sign != sign[:, :1], axis=1)
        mx, my = px - s * ax, py - s * ay
        # Split where the map is far from affine over the cell: the mapped
        # centre strays from the mean of the mapped corners by more than
        # NONLINEAR of the cell, measured in the cell's own mapped axes
        # (so thin cells next to a critical curve, whose corners all share
        # one sign, are caught too).
        dx = mx[:, 4] - mx[:, :4].mean(axis=1)
        dy = my[:, 4] - my[:, :4].mean(axis=1)
        e1x, e1y = mx[:, 1] - mx[:, 0], my[:, 1] - my[:, 0]
        e2x, e2y = mx[:, 2] - mx[:, 0], my[:, 2] - my[:, 0]
        with np.errstate(all="ignore"):
            det = e1x * e2y - e1y * e2x
            a = (dx * e2y - dy * e2x) / det
            b = (e1x * dy - e1y * dx) / det
            split |= ~(np.maximum(np.abs(a), np.abs(b)) <= NONLINEAR)
        # A cell whose mapped points lie far from every source asked for holds
        # none of their images, however curved its map: left whole. "Far" is
        # beyond the mapped cell's own extent (its bounding box, doubled), so a
        # fold or a curved map inside it cannot reach the sources. On a
        # cluster field this spares the fine splits around every member galaxy
        # away from the sources' caustics (tests/test_images.py checks the
        # result against a dense grid).
        split &= self._maps_near_sources(mx, my)
        return split

    def _maps_near_sources(self, mx, my) -> np.ndarray:
        """Cells (mapped points ``mx, my``, (n, k)) that may hold an image of the sources."""
        with np.errstate(invalid="ignore"):
            lo_x, hi_x = np.min(mx, axis=1), np.max(mx, axis=1)
            lo_y, hi_y = np.min(my, axis=1), np.max(my, axis=1)
            span = np.maximum(hi_x - lo_x, hi_y - lo_y)
            # distance from the origin (the sources' disc centre) to the bounding box
            gap = np.hypot(
                np.maximum(0.0, np.maximum(lo_x, -hi_x)), np.maximum(0.0, np.maximum(lo_y, -hi_y))
            )
            near = gap <= 1.05 * self.source_radius + 1e-3 + span
        return near | ~np.isfinite(gap)

    def _build_mesh(self, base_cells, critical_levels, centre_levels):
        size0 = 2 * self.extent / base_cells
        edges = -self.extent + size0 * np.arange(base_cells)
        gx, gy = np.meshgrid(edges, edges)
        x0, y0 = gx.ravel(), gy.ravel()
        size = size0
        # all centres: soft ones hide faint central images, singular ones faint
        # images squeezed against the singularity
        soft_centres = np.array(self.lens.centres()).reshape(-1, 2)
        leaves_x, leaves_y, leaves_h = [], [], []
        offsets = np.array([[0, 0], [1, 0], [0, 1], [1, 1], [0.5, 0.5]])
        for level in range(max(critical_levels, centre_levels) + 1):
            split = np.zeros(len(x0), dtype=bool)
            if level < max(critical_levels, centre_levels):
                if level < critical_levels:
                    px = x0[:, None] + size * offsets[:, 0]
                    py = y0[:, None] + size * offsets[:, 1]
                    with np.errstate(all="ignore"):
                        ax, ay, hxx, hxy, hyy = _once_per_point(
                            self.lens.deflection_and_hessian, px, py
                        )
                    for s in self.scales:
                        split |= self._split_for_scale(px, py, ax, ay, hxx, hxy, hyy, s)
                if level < centre_levels and len(soft_centres):
                    cx, cy = x0 + 0.5 * size, y0 + 0.5 * size
                    d = np.hypot(cx[:, None] - soft_centres[:, 0], cy[:, None] - soft_centres[:, 1])
                    split |= np.any(d < 1.5 * size, axis=1)
            leaves_x.append(x0[~split])
            leaves_y.append(y0[~split])
            leaves_h.append(np.full((~split).sum(), size))
            x0, y0 = x0[split], y0[split]
            size = 0.5 * size
            x0, y0 = (
                np.concatenate([x0, x0 + size, x0, x0 + size]),
                np.concatenate([y0, y0, y0 + size, y0 + size]),
            )
            if len(x0) == 0:
                break
        x0 = np.concatenate(leaves_x)
        y0 = np.concatenate(leaves_y)
        h = np.concatenate(leaves_h)
        corners_x = np.stack([x0, x0 + h, x0 + h, x0], axis=1)  # 00, 10, 11, 01
        corners_y = np.stack([y0, y0, y0 + h, y0 + h], axis=1)
        with np.errstate(all="ignore"):
            ax, ay = _once_per_point(self.lens.deflection, corners_x, corners_y)
        tri = np.array([[0, 1, 2], [0, 2, 3]])
        self.tri_x = corners_x[:, tri].reshape(-1, 3)
        self.tri_y = corners_y[:, tri].reshape(-1, 3)
        self.tri_ax = ax[:, tri].reshape(-1, 3)
        self.tri_ay = ay[:, tri].reshape(-1, 3)
        self.tri_size = np.repeat(h, 2)
        good = np.all(np.isfinite(self.tri_ax) & np.isfinite(self.tri_ay), axis=1)
        for name in ("tri_x", "tri_y", "tri_ax", "tri_ay", "tri_size"):
            setattr(self, name, getattr(self, name)[good])
        self.n_triangles = len(self.tri_size)

    def _mapped(self, scale: float) -> tuple[np.ndarray, np.ndarray]:
        """The triangles' corners mapped to the source plane at ``scale`` (cached)."""
        if scale not in self._mapped_cache:
            self._mapped_cache[scale] = (
                self.tri_x - scale * self.tri_ax,
                self.tri_y - scale * self.tri_ay,
            )
        return self._mapped_cache[scale]

    # -- search ---------------------------------------------------------------------
    def _candidates(self, beta_x, beta_y, scale, tolerance=0.15):
        tri_bx, tri_by = self._mapped(scale)
        order = np.argsort(beta_x, kind="stable")
        sx = beta_x[order]
        lo = np.searchsorted(sx, tri_bx.min(axis=1) - 1e-12, side="left")
        hi = np.searchsorted(sx, tri_bx.max(axis=1) + 1e-12, side="right")
        counts = hi - lo
        total = int(counts.sum())
        tri = np.repeat(np.arange(self.n_triangles), counts)
        start = np.repeat(lo - np.concatenate([[0], np.cumsum(counts)[:-1]]), counts)
        src = order[start + np.arange(total)]
        px, py = beta_x[src], beta_y[src]
        ymin, ymax = tri_by.min(axis=1)[tri], tri_by.max(axis=1)[tri]
        keep = (py >= ymin - 1e-12) & (py <= ymax + 1e-12)
        tri, src, px, py = tri[keep], src[keep], px[keep], py[keep]
        ax, ay = tri_bx[tri, 0], tri_by[tri, 0]
        v0x, v0y = tri_bx[tri, 1] - ax, tri_by[tri, 1] - ay
        v1x, v1y = tri_bx[tri, 2] - ax, tri_by[tri, 2] - ay
        v2x, v2y = px - ax, py - ay
        d = v0x * v1y - v0y * v1x
        with np.errstate(divide="ignore", invalid="ignore"):
            l1 = (v2x * v1y - v2y * v1x) / d
            l2 = (v0x * v2y - v0y * v2x) / d
        l0 = 1.0 - l1 - l2
        inside = (np.abs(d) > 0) & (l0 >= -tolerance) & (l1 >= -tolerance) & (l2 >= -tolerance)
        tri, src = tri[inside], src[inside]
        w = np.clip(np.stack([l0[inside], l1[inside], l2[inside]], axis=1), 0.0, 1.0)
        w /= w.sum(axis=1, keepdims=True)
        gx = np.sum(w * self.tri_x[tri], axis=1)
        gy = np.sum(w * self.tri_y[tri], axis=1)
        return src, gx, gy, self.tri_size[tri]

    def solve(self, beta_x, beta_y, chunk: int = 20000, scale: float | None = None) -> ImageTable:
        """All images of the sources at (beta_x, beta_y) (arcsec, arrays).

        ``scale``: the deflection scale of these sources, one of those the finder was
        built for (default: the first).
        """
        scale = self.scale if scale is None else float(scale)
        if scale not in self.scales:
            raise InputError(
                f"scale must be one the image finder was built for "
                f"({', '.join(f'{v:g}' for v in self.scales)}), got {scale:g}"
            )
        beta_x = np.atleast_1d(np.asarray(beta_x, dtype=float))
        beta_y = np.atleast_1d(np.asarray(beta_y, dtype=float))
        parts = []
        for s0 in range(0, len(beta_x), chunk):
            sl = slice(s0, s0 + chunk)
            src, gx, gy, h = self._candidates(beta_x[sl], beta_y[sl], scale)
            src = src + s0
            x, y, err = newton_polish(
                self.lens, gx, gy, beta_x[src], beta_y[src], scale, max_step=2.0 * h
            )
            ok = err < SOURCE_TOLERANCE
            parts.append((src[ok], x[ok], y[ok], err[ok]))
        src = np.concatenate([p[0] for p in parts])
        x = np.concatenate([p[1] for p in parts])
        y = np.concatenate([p[2] for p in parts])
        err = np.concatenate([p[3] for p in parts])
        # Roots pinned to a singular centre are the swallowed central image (|μ| → 0)
        # that the radius floor makes look like a solution: not an image.
        for cx, cy in self.lens.centres(singular=True):
            away = np.hypot(x - cx, y - cy) > SINGULAR_EXCLUSION
            src, x, y, err = src[away], x[away], y[away], err[away]
        src, x, y, err = _merge_duplicates(src, x, y, err)
        bx, by = beta_x[src], beta_y[src]
        with np.errstate(divide="ignore"):
            mu = self.lens.magnification(x, y, scale)
        par = self.lens.parity_code(x, y, scale)
        tau = self.lens.fermat_potential(x, y, bx, by, scale)
        src, x, y, mu, par, tau, err = _merge_unresolved(src, x, y, mu, par, tau, err)
        order = np.lexsort((tau, src))
        return ImageTable(
            src[order], x[order], y[order], mu[order], par[order], tau[order], err[order]
        )


def _merge_duplicates(src, x, y, err):
    """Drop roots of the same source closer than MERGE_TOLERANCE to a kept one.

    Quantise to a MERGE_TOLERANCE grid and keep one per cell, then, sorted along x
    and along y in turn, drop neighbours that still coincide (two converged copies of
    one root split only by a cell boundary).
    """
    key = np.stack([src, np.round(x / MERGE_TOLERANCE), np.round(y / MERGE_TOLERANCE)], axis=1)
    _, first = np.unique(key, axis=0, return_index=True)
    first = np.sort(first)
    src, x, y, err = src[first], x[first], y[first], err[first]
    for along_x in (True, False):
        order = np.lexsort((x if along_x else y, src))
        src, x, y, err = src[order], x[order], y[order], err[order]
        same = np.zeros(len(src), dtype=bool)
        same[1:] = (
            (src[1:] == src[:-1])
            & (np.abs(np.diff(x)) < MERGE_TOLERANCE)
            & (np.abs(np.diff(y)) < MERGE_TOLERANCE)
        )
        src, x, y, err = src[~same], x[~same], y[~same], err[~same]
    return src, x, y, err


def _unresolved_groups(x, y) -> list[list[int]]:
    """Groups (single linkage) of the points closer than UNRESOLVED to one another."""
    parent = list(range(len(x)))

    def root(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for i in range(len(x)):
        close = np.hypot(x[i + 1 :] - x[i], y[i + 1 :] - y[i]) < UNRESOLVED
        for j in np.flatnonzero(close) + i + 1:
            parent[root(int(j))] = root(i)
    groups: dict[int, list[int]] = {}
    for i in range(len(x)):
        groups.setdefault(root(i), []).append(i)
    return [g for g in groups.values() if len(g) > 1]


def _merge_unresolved(src, x, y, mu, par, tau, err):
    """One row for each cluster of roots of a source closer than :data:`UNRESOLVED`.

    Roots of one parity are the same image found twice (Newton stops anywhere in the
    flat direction near a critical curve): the one that maps back best is kept. Roots of
    both parities are images merging on a critical curve (a source on a fold or cusp):
    they are one image there, of parity :data:`CRITICAL` and infinite magnification,
    not several points with contradictory parities.
    """
    # cheap screen: only sources with two roots close in x need a closer look
    order = np.lexsort((x, src))
    near = (np.diff(src[order]) == 0) & (np.diff(x[order]) < UNRESOLVED)
    suspects = np.unique(src[order][1:][near])
    if len(suspects) == 0:
        return src, x, y, mu, par, tau, err
    keep = np.ones(len(src), dtype=bool)
    x, y, mu, par, tau, err = (np.array(a) for a in (x, y, mu, par, tau, err))
    for s in suspects:
        rows = np.flatnonzero(src == s)
        for group in _unresolved_groups(x[rows], y[rows]):
            members = rows[group]
            best = members[np.argmin(err[members])]
            keep[members] = False
            keep[best] = True
            if len(np.unique(par[members] == 1)) > 1:  # both signs of det A
                x[best], y[best] = x[members].mean(), y[members].mean()
                mu[best], par[best] = np.inf, CRITICAL
                tau[best], err[best] = tau[members].mean(), err[members].max()
    return src[keep], x[keep], y[keep], mu[keep], par[keep], tau[keep], err[keep]


def keep_distinct_tracks(x, y, exists, tolerance: float, taken=None):
    """Images followed from several starts, one column each (rows: parameter sets).

    A column that lands on an earlier column's image (closer than ``tolerance`` arcsec)
    has lost its own image: it is marked as not existing, so each image is counted
    once. ``taken`` = (x, y, ok) of images already claimed elsewhere (e.g. the observed
    ones) rules those out too. Returns the new ``exists`` mask.
    """
    exists = np.array(exists, dtype=bool)
    if taken is not None:
        tx, ty, tok = taken
        for i in range(tx.shape[1]):
            exists &= ~(
                tok[:, i : i + 1]
                & (np.hypot(x - tx[:, i : i + 1], y - ty[:, i : i + 1]) < tolerance)
            )
    for i in range(x.shape[1]):
        for j in range(i + 1, x.shape[1]):
            exists[:, j] &= ~(np.hypot(x[:, i] - x[:, j], y[:, i] - y[:, j]) < tolerance)
    return exists


def as_arcsec(value, name: str = "angle") -> np.ndarray:
    """An angle in arcsec: an astropy Quantity is converted, a plain number is taken as arcsec.

    Raises InputError for a Quantity that is not an angle.
    """
    if isinstance(value, u.Quantity):
        try:
            return np.asarray(value.to_value(u.arcsec), dtype=float)
        except u.UnitConversionError as err:
            raise InputError(
                f"{name} must be an angle (or a number of arcsec), got {value}"
            ) from err
    return np.asarray(value, dtype=float)


def find_images(lens: Lens, beta_x, beta_y, scale: float = 1.0, **options) -> ImageTable:
    """All images of point sources at (beta_x, beta_y).

    A convenience wrapper: builds an :class:`ImageFinder` big enough for the sources
    given and solves for all of them at once.

    Parameters
    ----------
    lens : Lens
    beta_x, beta_y : float, array or astropy Quantity
        Source positions; angles are converted, plain numbers are arcsec.
    scale : float
        Deflection scaling of the source redshift (1 at the reference redshift).

    Returns
    -------
    ImageTable
        Positions in arcsec.
    """
    bx = np.atleast_1d(as_arcsec(beta_x, "beta_x"))
    by = np.atleast_1d(as_arcsec(beta_y, "beta_y"))
    radius = float(np.max(np.hypot(bx, by))) if len(bx) else 1.0
    finder = ImageFinder(lens, scale, source_radius=max(radius, 1e-3), **options)
    return finder.solve(bx, by)


def find_images_at_scales(lens: Lens, sources, **options) -> list[ImageTable]:
    """All images of several families' sources behind one lens, with one shared mesh.

    Parameters
    ----------
    lens : Lens
    sources : sequence of (beta_x, beta_y, scale)
        Each family's source position(s) (arcsec) and deflection scale.

    Returns
    -------
    list of ImageTable, one per entry of ``sources``. Equal to calling
    :func:`find_images` per family, at a fraction of the cost when evaluating the
    lens dominates (a cluster's member galaxies).
    """
    sources = [
        (np.atleast_1d(as_arcsec(bx, "beta_x")), np.atleast_1d(as_arcsec(by, "beta_y")), float(s))
        for bx, by, s in sources
    ]
    if not sources:
        return []
    radius = max(float(np.max(np.hypot(bx, by))) if len(bx) else 1e-3 for bx, by, _ in sources)
    scales = sorted({s for _, _, s in sources})
    finder = ImageFinder(lens, scales, source_radius=max(radius, 1e-3), **options)
    return [finder.solve(bx, by, scale=s) for bx, by, s in sources]
