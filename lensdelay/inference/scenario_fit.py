"""A scenario's fit with what people look at: the report, the sky view, the arrival surface."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from lensdelay.lensing.critical import critical_lines_at_scales
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.fit import FitResult

__all__ = ["ScenarioFit"]


@dataclass(frozen=True)
class ScenarioFit:
    """A scenario's fit, its posterior sample if one was drawn, and the delays at the best fit.

    ``linear_delays`` lists each observed image's delay after its family's first image,
    with linearised 1-σ errors; ``provenance`` is added by :func:`lensdelay.api.fit_scenario`.
    """

    scenario: object
    likelihood: ImageLikelihood = field(repr=False)
    fit: FitResult
    chain: object = field(default=None, repr=False)
    linear_delays: tuple = ()
    provenance: dict | None = None

    def __repr__(self) -> str:
        sampled = "" if self.chain is None else f", {len(self.chain.samples())} samples"
        return (
            f"<ScenarioFit of {self.scenario.name!r} with {self.fit.model_label}: "
            f"chi2 {self.fit.chi2:.1f} for {self.fit.dof} dof{sampled}>"
        )

    def report(self) -> str:
        """The text ``lensdelay fit`` prints."""
        from lensdelay.report.text import fit_text

        return fit_text(self)

    def sky_view(self, resolution: int = 300) -> dict:
        """What a sky figure of the best fit draws, computed once.

        Returns ``extent`` (arcsec) and per family its label, observed positions, errors
        and labels, the model images, the source, and the critical curves with their
        caustics (:func:`lensdelay.lensing.critical.critical_lines`); plus the
        predicted images nobody observed.
        """
        like, values = self.likelihood, self.fit.values
        pts = np.concatenate([np.hypot(f.x, f.y) for f in like.families])
        extent = 1.4 * float(pts.max()) + 0.3
        members = like.model.members
        if members is not None:
            # widen the view to the member galaxies near the images (up to twice as far)
            far = np.maximum(np.abs(members.x), np.abs(members.y))
            near = far[far <= 2 * extent]
            if len(near):
                extent = max(extent, 1.15 * float(near.max()))
        lens = like.model.lens(values[: like.n_model])
        families = []
        families_now = like.families_at(values)
        # one grid of the lens for every family's critical curves (a cluster's members)
        lines = critical_lines_at_scales(
            lens, [fam.scale for fam in families_now], extent=extent, resolution=resolution
        )
        for k, (fam, pred) in enumerate(zip(families_now, like.predict(values[None, :]))):
            ok = pred["ok"][0]
            families.append(
                {
                    "label": fam.label,
                    "x": fam.x,
                    "y": fam.y,
                    "sigma": fam.sigma,
                    "labels": fam.labels,
                    "model_x": pred["x"][0, ok],
                    "model_y": pred["y"][0, ok],
                    "source": values[like.source_slice(k)],
                    "critical_lines": lines[k],
                }
            )
        return {
            "extent": extent,
            "families": families,
            "unobserved": self.fit.unobserved_images,
            "members": None if members is None else {"x": members.x, "y": members.y},
        }

    def arrival_surface(
        self, family: str, reference: tuple[float, float], extent: float, resolution: int = 200
    ) -> dict:
        """The arrival-time surface of ``family``'s source at the best fit, on a square grid.

        Days after a point ``reference`` (x, y in arcsec; the reference image), at the
        scenario's cosmology and κ_ext = 0: t(θ) − t(θ_ref) = (D_Δt/c)(τ(θ) − τ(θ_ref))
        (CONVENTIONS.md, "Arrival time and delays").

        Returns ``x``, ``y`` (1-D grid axes, arcsec) and ``days`` (resolution × resolution,
        indexed [y, x]).
        """
        like, values = self.likelihood, self.fit.values
        k = [f.label for f in like.families].index(family)
        fam = like.families_at(values)[k]
        lens = like.model.lens(values[: like.n_model])
        bx, by = values[like.source_slice(k)]
        axis = np.linspace(-extent, extent, resolution)
        gx, gy = np.meshgrid(axis, axis)
        with np.errstate(all="ignore"):
            tau = lens.fermat_potential(gx, gy, bx, by, fam.scale)
            tau_ref = lens.fermat_potential(
                np.array([reference[0]]), np.array([reference[1]]), bx, by, fam.scale
            )[0]
        return {"x": axis, "y": axis, "days": (tau - tau_ref) * fam.days_per_arcsec2}
