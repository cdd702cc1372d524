"""An independent, brute-force image search: a uniform grid, no refinement.

The reference for the image finder's completeness checks (tests/test_images.py,
benchmarks/bench_image_finder.py). Every square of a uniform grid of spacing ``h`` is
split into two triangles and mapped to the source plane; a triangle that contains the
source (to first order) holds an image, polished by Newton's method. It finds every
image whose neighbourhood the lens map keeps close to affine at the scale ``h`` (common
practice: the "brute-force" search of lensing textbooks, e.g. Schneider, Kochanek &
Wambsganss 2006, Saas-Fee 33, Part 2, sec. 3 -- reference from memory). It is slow:
its cost grows as (extent / h)², which is why the package refines adaptively instead.
"""

from __future__ import annotations

import numpy as np

from lensdelay.lensing.images import newton_polish


def dense_grid_images(lens, beta_x, beta_y, scale, extent, spacing, strip_rows=200):
    """Images (x, y, |μ|) of each source found on a uniform grid of ``spacing`` (arcsec).

    ``beta_x``, ``beta_y``: one source or arrays of several (one lens evaluation serves
    them all). The grid covers [-extent, extent]², processed a strip of ``strip_rows``
    rows at a time to bound memory. Returns a list with one (x, y, |μ|) per source.
    """
    beta_x, beta_y = np.atleast_1d(beta_x), np.atleast_1d(beta_y)
    axis = np.arange(-extent, extent + spacing, spacing)
    starts = [([], []) for _ in beta_x]
    for r0 in range(0, len(axis) - 1, strip_rows):
        ys = axis[r0 : r0 + strip_rows + 1]
        gx, gy = np.meshgrid(axis, ys)
        with np.errstate(all="ignore"):
            bx, by = lens.source_position(gx, gy, scale)
        ny, nx = len(ys) - 1, len(axis) - 1
        for tri in (((0, 0), (0, 1), (1, 1)), ((0, 0), (1, 1), (1, 0))):
            p = [(bx[a : a + ny, b : b + nx], by[a : a + ny, b : b + nx]) for a, b in tri]
            v0x, v0y = p[1][0] - p[0][0], p[1][1] - p[0][1]
            v1x, v1y = p[2][0] - p[0][0], p[2][1] - p[0][1]
            with np.errstate(all="ignore"):
                d = v0x * v1y - v0y * v1x
            for k, (sx, sy) in enumerate(zip(beta_x, beta_y)):
                wx, wy = sx - p[0][0], sy - p[0][1]
                with np.errstate(all="ignore"):
                    l1 = (wx * v1y - wy * v1x) / d
                    l2 = (v0x * wy - v0y * wx) / d
                inside = (l1 >= -0.05) & (l2 >= -0.05) & (l1 + l2 <= 1.05) & np.isfinite(d)
                rows, cols = np.nonzero(inside)
                # start Newton at the cell's centre
                starts[k][0].append(axis[cols] + 0.5 * spacing)
                starts[k][1].append(ys[rows] + 0.5 * spacing)
    out = []
    for (sx, sy), bx0, by0 in zip(starts, beta_x, beta_y):
        sx, sy = np.concatenate(sx), np.concatenate(sy)
        if len(sx) == 0:
            out.append((np.empty(0), np.empty(0), np.empty(0)))
            continue
        x, y, err = newton_polish(lens, sx, sy, bx0, by0, scale, max_step=spacing)
        ok = err < 1e-9
        # merge the copies of one root found from neighbouring cells
        key = np.unique(np.round(np.stack([x[ok], y[ok]], axis=1) / 1e-6), axis=0) * 1e-6
        with np.errstate(divide="ignore"):
            mu = lens.magnification(key[:, 0], key[:, 1], scale)
        out.append((key[:, 0], key[:, 1], np.abs(mu)))
    return out


def missed_images(table, grid_x, grid_y, grid_mu, min_abs_mu=0.1, match=1e-4):
    """Grid images with |μ| > ``min_abs_mu`` that ``table`` has no image within ``match`` of."""
    missed = []
    for x, y, mu in zip(grid_x, grid_y, grid_mu):
        if mu <= min_abs_mu:
            continue
        if len(table) == 0 or np.min(np.hypot(table.x - x, table.y - y)) > match:
            missed.append((float(x), float(y), float(mu)))
    return missed
