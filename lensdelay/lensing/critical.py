"""Critical curves (det A = 0) and their caustics, as polylines."""

from __future__ import annotations

from dataclasses import dataclass

import contourpy
import numpy as np

from lensdelay.lensing.lens import Lens

__all__ = ["CriticalLine", "critical_lines"]


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
    g = np.linspace(-extent, extent, resolution)
    gx, gy = np.meshgrid(g, g)
    with np.errstate(all="ignore"):
        det = lens.jacobian_determinant(gx, gy, scale)
    det = np.where(np.isfinite(det), det, np.nan)
    gen = contourpy.contour_generator(gx, gy, det, line_type=contourpy.LineType.Separate)
    out = []
    h = 1e-6
    for line in gen.lines(0.0):
        x, y = line[:, 0].copy(), line[:, 1].copy()
        if len(x) < 3:
            continue
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
        out.append(CriticalLine(x, y, np.asarray(bx), np.asarray(by)))
    return out
