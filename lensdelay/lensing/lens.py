"""A lens: the sum of its mass components, seen by a family at one source redshift.

All mass parameters are defined at the reference source redshift. A family whose
source sits elsewhere sees deflection, potential and Hessian multiplied by its
``scale`` = (D_ls/D_s)(z_s) / (D_ls/D_s)(z_ref) (see
:meth:`lensdelay.lensing.distances.LensDistances.deflection_scale`).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from lensdelay.lensing import compiled
from lensdelay.lensing.profiles import MassProfile

__all__ = ["PARITIES", "BLOCK_POINTS", "Lens"]


PARITIES = ("minimum", "saddle", "maximum", "critical")
#: Points per block when a large evaluation with scalar parameters is split up: numpy makes
#: a temporary array per operation, and blocks this size keep them in the CPU cache
#: (measured in benchmarks/bench_core.py: about twice as fast for 10^6 points).
BLOCK_POINTS = 16384


#: Which of the compiled kernel's outputs (α_x, α_y, ψ, ψ_xx, ψ_xy, ψ_yy, κ) each method is.
_FUSED = {
    "convergence": (6,),
    "deflection": (0, 1),
    "deflection_and_potential": (0, 1, 2),
    "potential": (2,),
    "hessian": (3, 4, 5),
    "potential_and_hessian": (2, 3, 4, 5),
    "deflection_and_hessian": (0, 1, 3, 4, 5),
}


def _blockwise(method):
    """Evaluate ``method(self, x, y, scale)`` block by block over large coordinate arrays.

    Only when every parameter of every component is a scalar (one model) and the
    coordinates hold more than two blocks; otherwise (e.g. many walkers' parameters
    broadcast against the coordinates) the method runs on the whole arrays at once.
    The results agree either way: the formulas act point by point (the power law's
    series takes as many terms as the block's slowest point needs for 1e-16).

    Before either, the compiled kernels (:mod:`lensdelay.lensing.compiled`) answer when
    they can: all components have kernels and the parameters are one model or one per row.
    """
    picks = _FUSED[method.__name__]

    @functools.wraps(method)
    def wrapper(self, x, y, scale=1.0):
        # None: the numpy path below; ψ only for the methods that return it
        fused = compiled.evaluate(self, x, y, scale, potential=2 in picks)
        if fused is not None:
            return fused[picks[0]] if len(picks) == 1 else tuple(fused[k] for k in picks)
        if np.size(x) <= 2 * BLOCK_POINTS and np.size(y) <= 2 * BLOCK_POINTS:
            return method(self, x, y, scale)
        if np.ndim(scale) or not self._scalar_parameters():
            return method(self, x, y, scale)
        x, y = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        fx, fy = x.ravel(), y.ravel()
        outputs = None
        for start in range(0, fx.size, BLOCK_POINTS):
            part = method(
                self, fx[start : start + BLOCK_POINTS], fy[start : start + BLOCK_POINTS], scale
            )
            single = not isinstance(part, tuple)
            part = (part,) if single else part
            if outputs is None:
                outputs = [np.empty(fx.size, dtype=np.result_type(p)) for p in part]
            for out, p in zip(outputs, part):
                out[start : start + BLOCK_POINTS] = p
        shaped = tuple(out.reshape(x.shape) for out in outputs)
        return shaped[0] if single else shaped

    return wrapper


@dataclass(frozen=True)
class Lens:
    """A composite lens: the sum of its components.

    Parameters
    ----------
    components : tuple of MassProfile
        Each with its own centre; shear and sheet are about the origin.
    """

    components: tuple[MassProfile, ...]

    def __post_init__(self) -> None:
        object.__setattr__(self, "components", tuple(self.components))

    @classmethod
    def deferred(cls, build, packed) -> "Lens":
        """A lens whose components ``build()`` makes only when something first asks for them.

        The compiled kernels read ``packed`` (a
        :class:`~lensdelay.lensing.compiled.RowPacker`'s table of the same lens) and no
        component, so a sampler's many lenses a step skip building their profiles (about
        a tenth of a likelihood call) unless the numpy path or a caller needs them.
        """
        lens = object.__new__(cls)
        object.__setattr__(lens, "_build_components", build)
        compiled.attach_pack(lens, packed)
        return lens

    def __getattr__(self, name):
        # reached only where normal lookup fails: a deferred lens's components, built once
        build = self.__dict__.get("_build_components")
        if name == "components" and build is not None:
            components = tuple(build())
            object.__setattr__(self, "components", components)
            return components
        raise AttributeError(f"{type(self).__name__!r} object has no attribute {name!r}")

    def __getstate__(self) -> dict:
        # a deferred lens pickles as a built one (its builder may be a closure)
        state = {k: v for k, v in self.__dict__.items() if k != "_build_components"}
        state["components"] = self.components
        return state

    def _scalar_parameters(self) -> bool:
        """True when every component parameter is a single number (one model)."""
        return all(np.ndim(v) == 0 for c in self.components for v in c.values().values())

    # -- sums over components -----------------------------------------------------
    @_blockwise
    def convergence(self, x, y, scale=1.0) -> np.ndarray:
        """κ at (x, y) for a family with deflection ``scale``."""
        return scale * sum(c.convergence(x, y) for c in self.components)

    @_blockwise
    def deflection(self, x, y, scale=1.0) -> tuple[np.ndarray, np.ndarray]:
        """(α_x, α_y) in arcsec."""
        ax = ay = 0.0
        for c in self.components:
            dx, dy = c.deflection(x, y)
            ax = ax + dx
            ay = ay + dy
        return scale * ax, scale * ay

    @_blockwise
    def deflection_and_potential(self, x, y, scale=1.0):
        """(α_x, α_y, ψ) in one pass over the components."""
        ax = ay = pot = None
        for c in self.components:
            dx, dy, p = c.deflection_and_potential(x, y)
            if ax is None:
                ax, ay, pot = dx, dy, p
            else:
                ax, ay, pot = ax + dx, ay + dy, pot + p
        if np.ndim(scale) == 0 and scale == 1.0:
            return ax, ay, pot
        return scale * ax, scale * ay, scale * pot

    @_blockwise
    def potential(self, x, y, scale=1.0) -> np.ndarray:
        """ψ in arcsec²."""
        return scale * sum(c.potential(x, y) for c in self.components)

    @_blockwise
    def hessian(self, x, y, scale=1.0):
        """(ψ_xx, ψ_xy, ψ_yy)."""
        hxx = hxy = hyy = 0.0
        for c in self.components:
            a, b, d = c.hessian(x, y)
            hxx, hxy, hyy = hxx + a, hxy + b, hyy + d
        return scale * hxx, scale * hxy, scale * hyy

    @_blockwise
    def potential_and_hessian(self, x, y, scale=1.0):
        """(ψ, ψ_xx, ψ_xy, ψ_yy) in one pass (Fermat potential and magnification together)."""
        return (self.potential(x, y, scale), *self.hessian(x, y, scale))

    @_blockwise
    def deflection_and_hessian(self, x, y, scale=1.0):
        """(α_x, α_y, ψ_xx, ψ_xy, ψ_yy): one pass of the kernels where two calls make two."""
        return (*self.deflection(x, y, scale), *self.hessian(x, y, scale))

    # -- derived quantities -------------------------------------------------------
    def source_position(self, x, y, scale=1.0):
        """β = θ − α(θ): the lens equation."""
        ax, ay = self.deflection(x, y, scale)
        return np.asarray(x) - ax, np.asarray(y) - ay

    def fermat_potential(self, x, y, beta_x, beta_y, scale=1.0) -> np.ndarray:
        """τ(θ) = (θ − β)²/2 − ψ(θ), arcsec²."""
        return 0.5 * (
            (np.asarray(x) - beta_x) ** 2 + (np.asarray(y) - beta_y) ** 2
        ) - self.potential(x, y, scale)

    def jacobian(self, x, y, scale=1.0):
        """Entries (a11, a12, a22) of A = I − ∂α/∂θ."""
        hxx, hxy, hyy = self.hessian(x, y, scale)
        return 1.0 - hxx, -hxy, 1.0 - hyy

    def jacobian_determinant(self, x, y, scale=1.0) -> np.ndarray:
        """Det A; zero on the critical curves."""
        a11, a12, a22 = self.jacobian(x, y, scale)
        return a11 * a22 - a12 * a12

    def magnification(self, x, y, scale=1.0) -> np.ndarray:
        """Signed magnification 1/det A (negative for saddle points)."""
        return 1.0 / self.jacobian_determinant(x, y, scale)

    def parity(self, x, y, scale=1.0) -> np.ndarray:
        """'minimum', 'saddle' or 'maximum' of the Fermat potential at each point."""
        return np.asarray(PARITIES)[self.parity_code(x, y, scale)]

    def parity_code(self, x, y, scale=1.0) -> np.ndarray:
        """0 = minimum, 1 = saddle, 2 = maximum (det A and trace A of the Hessian of τ)."""
        a11, a12, a22 = self.jacobian(x, y, scale)
        det = a11 * a22 - a12 * a12
        return np.where(det < 0, 1, np.where(a11 + a22 > 0, 0, 2))

    def centres(self, singular: bool | None = None) -> list[tuple[float, float]]:
        """Centres of the centred components (optionally only (non-)singular ones)."""
        out = []
        for c in self.components:
            if hasattr(c, "centre_points"):  # a stack of member galaxies: each its own
                out += c.centre_points(singular)
                continue
            if not c.centred:
                continue
            if singular is None or bool(c.singular_centre) == singular:
                out.append((float(np.mean(c.x)), float(np.mean(c.y))))
        return out
