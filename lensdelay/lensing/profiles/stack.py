"""Many profiles of one kind evaluated together and summed (a cluster's member galaxies).

A :class:`ProfileStack` holds one profile kind and its parameters with a leading member
axis. It evaluates every member in one numpy pass — the coordinates get a leading axis of
length 1, the parameters one of length M — and sums over it, in chunks of members that
keep the temporaries to a few million values. Hundreds of members then cost about as
much as a handful of separate components did (benchmarks/bench_cluster.py). It offers
the interface :class:`lensdelay.lensing.lens.Lens` asks of a component.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["CHUNK_VALUES", "ProfileStack"]


#: Most values (members × points) evaluated at once.
CHUNK_VALUES = 2_000_000


@dataclass(frozen=True)
class ProfileStack:
    """M profiles of class ``profile_class`` with parameters stacked on a leading axis.

    Parameters
    ----------
    profile_class : type
        A :class:`~lensdelay.lensing.profiles.base.MassProfile` subclass.
    parameters : dict
        Field name -> array of shape (M,) + s, with s the shape the parameters of one model
        (or of many walkers, e.g. (P, 1)) broadcast to against the coordinates.
    """

    profile_class: type
    parameters: dict
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    def __post_init__(self) -> None:
        arrays = {k: np.asarray(v, dtype=float) for k, v in self.parameters.items()}
        shape = np.broadcast_shapes(*(a.shape for a in arrays.values()))
        arrays = {k: np.broadcast_to(a, shape) for k, a in arrays.items()}
        object.__setattr__(self, "parameters", arrays)
        # checked once, all members at once (the class's own rules)
        self.profile_class(**arrays)

    @property
    def size(self) -> int:
        """The number of members."""
        return int(next(iter(self.parameters.values())).shape[0])

    @property
    def centred(self) -> bool:
        """Members have centres."""
        return self.profile_class.centred

    @property
    def singular_centre(self) -> bool:
        """Whether the members' centres are singular."""
        return bool(self._profile(0, 0, self.size)[0].singular_centre)

    def values(self) -> dict:
        """The stacked parameter arrays (never scalar: a lens with members evaluates whole)."""
        return self.parameters

    def centre_points(self, singular: bool | None = None) -> list[tuple[float, float]]:
        """Each member's centre (mean over walkers), if its singularity matches."""
        if not self.centred:
            return []
        if singular is not None and self.singular_centre != singular:
            return []
        x = self.parameters["x"].reshape(self.size, -1).mean(axis=1)
        y = self.parameters["y"].reshape(self.size, -1).mean(axis=1)
        return [(float(a), float(b)) for a, b in zip(x, y)]

    # -- evaluation -----------------------------------------------------------------
    def _profile(self, ndim: int, start: int, stop: int):
        """The members start..stop as one profile (cached).

        Its parameters are shaped for ``ndim``-D coordinates with a leading member axis.
        """
        key = (ndim, start, stop)
        hit = self._cache.get(key)
        if hit is None:
            trailing = next(iter(self.parameters.values())).shape[1:]
            pad = (1,) * max(ndim - len(trailing), 0)
            shaped = {
                k: a[start:stop].reshape((stop - start,) + pad + trailing)
                for k, a in self.parameters.items()
            }
            hit = (self.profile_class(**shaped),)
            if len(self._cache) > 64:
                self._cache.clear()
            self._cache[key] = hit
        return hit

    def _chunks(self, x, y):
        x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        points = max(np.broadcast(x, y).size, 1)
        trailing = int(np.prod(next(iter(self.parameters.values())).shape[1:], dtype=int))
        step = max(1, CHUNK_VALUES // max(points, trailing, 1))
        ndim = max(x.ndim, y.ndim)
        for start in range(0, self.size, step):
            stop = min(start + step, self.size)
            yield self._profile(ndim, start, stop)[0], x[None, ...], y[None, ...]

    def _summed(self, method: str, x, y):
        total = None
        for prof, xs, ys in self._chunks(x, y):
            part = getattr(prof, method)(xs, ys)
            part = tuple(p.sum(axis=0) for p in part) if isinstance(part, tuple) else part.sum(0)
            if total is None:
                total = part
            elif isinstance(part, tuple):
                total = tuple(a + b for a, b in zip(total, part))
            else:
                total = total + part
        return total

    def convergence(self, x, y):
        """Σ κ of the members."""
        return self._summed("convergence", x, y)

    def deflection(self, x, y):
        """Σ (α_x, α_y) of the members."""
        return self._summed("deflection", x, y)

    def potential(self, x, y):
        """Σ ψ of the members."""
        return self._summed("potential", x, y)

    def deflection_and_potential(self, x, y):
        """Σ (α_x, α_y, ψ) of the members."""
        return self._summed("deflection_and_potential", x, y)

    def hessian(self, x, y):
        """Σ (ψ_xx, ψ_xy, ψ_yy) of the members."""
        return self._summed("hessian", x, y)
