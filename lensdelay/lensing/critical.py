"""Critical curves (det A = 0) and their caustics, as polylines."""

from __future__ import annotations

from dataclasses import dataclass

import contourpy
import numpy as np

from lensdelay.lensing.lens import Lens

__all__ = ["CriticalLine", "critical_lines", "critical_lines_at_scales"]


@dataclass(frozen=True)
class CriticalLine:
    """One closed (or clipped) critical curve and its caustic, arcsec."""

    x: np.ndarray
    y: np.ndarray
    caustic_x: np.ndarray
    caustic_y: np.ndarray


def critical_lines(
    lens: Lens,
    scale: float = 1.0,
    *,
    extent: float = 3.0,
    resolution: int = 400,
    polish_steps: int = 3,
) -> list[CriticalLine]:
    """Critical curves of ``lens`` for a family with deflection ``scale``.

    The zero contour of det A on a ``resolution``² grid over ±``extent`` arcsec
    (marching squares, via contourpy, a matplotlib dependency), then each vertex is
    moved onto det A = 0 by Newton steps along the finite-difference gradient.
    Caustics are the critical points mapped through the lens equation.
    """
    return critical_lines_at_scales(
        lens, [scale], extent=extent, resolution=resolution, polish_steps=polish_steps
    )[0]


def critical_lines_at_scales(
    lens: Lens,
    scales,
    *,
    extent: float = 3.0,
    resolution: int = 400,
    polish_steps: int = 3,
) -> list[list[CriticalLine]]:
    """:func:`critical_lines` for each deflection scale (families at several redshifts).

    The grid's Hessian is evaluated once: the lens's Hessian at a scale s is s times its
    Hessian at 1 (the same product the lens forms itself, so det A is the one
    ``lens.jacobian_determinant`` gives at each scale, bit for bit). On a cluster field of
    many member galaxies that grid is most of the cost.
    """
    g = np.linspace(-extent, extent, resolution)
    gx, gy = np.meshgrid(g, g)
    with np.errstate(all="ignore"):
        hxx, hxy, hyy = lens.hessian(gx, gy)
    out = []
    for scale in scales:
        with np.errstate(all="ignore"):
            # Lens.jacobian and Lens.jacobian_determinant, from the shared grid
            a11, a12, a22 = 1.0 - scale * hxx, -(scale * hxy), 1.0 - scale * hyy
            det = a11 * a22 - a12 * a12
        det = np.where(np.isfinite(det), det, np.nan)
        out.append(_zero_lines(lens, scale, gx, gy, det, extent, resolution, polish_steps))
    return out


def _zero_lines(lens, scale, gx, gy, det, extent, resolution, polish_steps) -> list[CriticalLine]:
    """The zero contours of ``det`` on the grid, polished onto det A = 0, with caustics.

    Every line's vertices are polished together (one lens evaluation per step for all
    of them: a cluster field has hundreds of small curves, one per member galaxy); each
    vertex's steps are its own, so the result is that of polishing line by line.
    """
    gen = contourpy.contour_generator(gx, gy, det, line_type=contourpy.LineType.Separate)
    lines = [line for line in gen.lines(0.0) if len(line) >= 3]
    if not lines:
        return []
    x = np.concatenate([line[:, 0] for line in lines])
    y = np.concatenate([line[:, 1] for line in lines])
    h = 1e-6
    with np.errstate(all="ignore"):
        for _ in range(polish_steps):
            d0 = lens.jacobian_determinant(x, y, scale)
            ddx = (
                lens.jacobian_determinant(x + h, y, scale)
                - lens.jacobian_determinant(x - h, y, scale)
            ) / (2 * h)
            ddy = (
                lens.jacobian_determinant(x, y + h, scale)
                - lens.jacobian_determinant(x, y - h, scale)
            ) / (2 * h)
            g2 = ddx * ddx + ddy * ddy
            step_x, step_y = -d0 * ddx / g2, -d0 * ddy / g2
            # only small corrections: never let a vertex leave its grid cell
            cell = 2 * extent / resolution
            fine = np.isfinite(step_x) & (np.hypot(step_x, step_y) < cell)
            x = np.where(fine, x + step_x, x)
            y = np.where(fine, y + step_y, y)
    bx, by = lens.source_position(x, y, scale)
    cuts = np.cumsum([len(line) for line in lines])[:-1]
    parts = (np.split(np.asarray(a), cuts) for a in (x, y, bx, by))
    return [CriticalLine(*line) for line in zip(*parts)]
