"""The image-position likelihood: model parameters → predicted images → residuals.

One parameter vector holds the free mass-model parameters, then a source position
(β_x, β_y) per family, then -- when measured delays are used -- H0. Everything is
vectorised over rows, so that the same code serves a least-squares fit (one row) and
all walkers of an ensemble sampler in one call.

Predicted images are found by Newton's method started at the *observed* positions:
each observed image is matched to the predicted image it falls into. Two observed
images falling into the same predicted image (an image the model lacks) and a start
that does not converge are penalised with the magnification-weighted source-plane
offset, so the fit never silently ignores a missing image.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .cosmology import LensDistances
from .images import newton_polish
from .modelspec import MassModel
from .scenario import Scenario

#: Residual (in σ) added per coordinate when the model lacks an observed image.
MISSING_IMAGE_PENALTY = 1e3


@dataclass
class FamilyData:
    label: str
    scale: float
    days_per_arcsec2: float
    x: np.ndarray
    y: np.ndarray
    sigma: np.ndarray
    labels: list[str]


class ImageLikelihood:
    """χ² of observed image positions (plus priors, lens light and delays).

    Parameters
    ----------
    scenario : Scenario
    model : MassModel
    use_delays : bool
        Fit the scenario's measured delays too; H0 becomes the last parameter.
    use_fluxes : bool
        Fit flux ratios (from image ``magnitude`` or ``flux``) too, as magnitude
        differences to each family's first image with a 1-σ floor of ``flux_floor_mag``
        for microlensing and differential extinction (default 0.2 mag, common practice).
    """

    def __init__(self, scenario: Scenario, model: MassModel, *, use_delays: bool = False,
                 use_fluxes: bool = False, flux_floor_mag: float = 0.2):
        self.scenario = scenario
        self.model = model
        self.distances = LensDistances(scenario.cosmology, scenario.lens_redshift,
                                       scenario.reference_source_redshift)
        self.families = []
        for fam in scenario.families:
            self.families.append(FamilyData(
                fam.label, self.distances.deflection_scale(fam.redshift),
                self.distances.days_per_arcsec2(fam.redshift),
                np.array([im.x for im in fam.images]), np.array([im.y for im in fam.images]),
                np.array([im.sigma for im in fam.images]), fam.labels))
        self.use_delays = bool(use_delays and scenario.delays)
        self.flux_floor_mag = float(flux_floor_mag)
        # observed magnitude differences to the first image, per family (None: not used)
        self.flux_data = []
        for fam in scenario.families:
            mags = []
            for im in fam.images:
                if im.magnitude is not None:
                    mags.append(im.magnitude)
                elif im.flux is not None:
                    mags.append(-2.5 * np.log10(im.flux))
                else:
                    mags.append(None)
            usable = use_fluxes and len(mags) > 1 and all(m is not None for m in mags)
            self.flux_data.append(np.array(mags, dtype=float) - mags[0] if usable else None)
        self.use_fluxes = any(d is not None for d in self.flux_data)
        self.h0_ref = float(scenario.cosmology.H0.value)
        free = model.free
        self.names = [p.name for p in free]
        for fam in self.families:
            self.names += [f"source[{fam.label}].x", f"source[{fam.label}].y"]
        if self.use_delays:
            self.names.append("H0")
        self.n_model = len(free)
        lo = [p.min for p in free]
        hi = [p.max for p in free]
        for fam in self.families:
            reach = 2.0 * float(np.max(np.hypot(fam.x, fam.y))) + 1.0
            lo += [-reach, -reach]
            hi += [reach, reach]
        if self.use_delays:
            lo.append(10.0)
            hi.append(200.0)
        self.lower, self.upper = np.array(lo), np.array(hi)
        self.periods = [p.period for p in free] + [None] * (len(self.names) - self.n_model)
        # Gaussian priors: parameter index -> (mean, sigma)
        self.priors = {i: p.prior for i, p in enumerate(free) if p.prior is not None}
        self.centre_prior = self._lens_light_prior()

    def _lens_light_prior(self):
        """The lens-light centre constrains the free x, y of the first luminous component.

        Luminous means a galaxy-like profile (not a dark NFW halo, not shear or sheet);
        dark halos may sit away from the light.
        """
        ll = self.scenario.lens_light
        if ll is None:
            return {}
        out = {}
        for comp in self.model.components:
            if comp.profile_class.centred and comp.kind != "NFW":
                for axis, value in (("x", ll.x), ("y", ll.y)):
                    p = comp.parameters.get(axis)
                    if p is not None and p.vary and p.prior is None:
                        out[self.names.index(p.name)] = (value, ll.sigma)
                break
        return out

    # -- bookkeeping ---------------------------------------------------------------
    @property
    def n_parameters(self) -> int:
        return len(self.names)

    @property
    def n_constraints(self) -> int:
        n = 2 * sum(len(f.x) for f in self.families) + len(self.priors) + len(self.centre_prior)
        n += sum(len(d) - 1 for d in self.flux_data if d is not None)
        return n + (len(self.scenario.delays) if self.use_delays else 0)

    @property
    def dof(self) -> int:
        return self.n_constraints - self.n_parameters

    def source_slice(self, k: int) -> slice:
        return slice(self.n_model + 2 * k, self.n_model + 2 * k + 2)

    def lens_for(self, params: np.ndarray):
        """Lens for parameter rows of shape (P, n) (profile parameters become (P, 1))."""
        cols = params[:, :self.n_model].T[:, :, None]
        return self.model.lens(list(cols))

    # -- predictions ----------------------------------------------------------------
    def predict(self, params: np.ndarray):
        """Predicted images matched to the observed ones, for parameter rows (P, n).

        Returns
        -------
        list of dict, one per family: ``x, y`` (P, n_img), ``ok`` (P, n_img) bool,
        ``fermat`` (P, n_img), ``mu`` (P, n_img), ``beta`` (P, 2).
        """
        params = np.atleast_2d(params)
        lens = self.lens_for(params)
        out = []
        for k, fam in enumerate(self.families):
            bx = params[:, self.source_slice(k)][:, :1]
            by = params[:, self.source_slice(k)][:, 1:]
            x, y, err = newton_polish(lens, fam.x[None, :], fam.y[None, :], bx, by, fam.scale,
                                      iterations=15, max_step=np.maximum(0.5 * fam.sigma, 0.05),
                                      tolerance=1e-11)
            ok = err < 1e-8
            # close but not converged within the budget: not a missing image
            near = (err < 1e-3) & ~ok
            # two observed images in one predicted image: the model lacks an image
            n = len(fam.x)
            for i in range(n):
                for j in range(i + 1, n):
                    same = np.hypot(x[:, i] - x[:, j], y[:, i] - y[:, j]) < 1e-6
                    ok[:, j] &= ~same
                    near[:, j] &= ~same
            with np.errstate(all="ignore"):
                tau = lens.fermat_potential(x, y, bx, by, fam.scale)
                mu = lens.magnification(x, y, fam.scale)
            out.append({"x": x, "y": y, "ok": ok, "near": near, "fermat": tau, "mu": mu,
                        "beta": np.hstack([bx, by]), "lens": lens})
        return out

    def residuals(self, params: np.ndarray) -> np.ndarray:
        """Normalised residuals, shape (P, n_constraints)."""
        params = np.atleast_2d(np.asarray(params, dtype=float))
        preds = self.predict(params)
        parts = []
        for fam, pred in zip(self.families, preds):
            dx = (pred["x"] - fam.x) / fam.sigma
            dy = (pred["y"] - fam.y) / fam.sigma
            # where no image was found: the magnification-weighted source-plane offset,
            # plus a large constant so that a missing image always costs more than any fit
            lens = pred["lens"]
            with np.errstate(all="ignore"):
                sbx, sby = lens.source_position(fam.x[None, :], fam.y[None, :], fam.scale)
                a11, a12, a22 = lens.jacobian(fam.x[None, :], fam.y[None, :], fam.scale)
                det = a11 * a22 - a12 * a12
                rx, ry = sbx - pred["beta"][:, :1], sby - pred["beta"][:, 1:]
                fx = (a22 * rx - a12 * ry) / det / fam.sigma
                fy = (a11 * ry - a12 * rx) / det / fam.sigma
            near = pred["near"]
            bad = ~pred["ok"] & ~near
            dx = np.where(near, fx, dx)
            dy = np.where(near, fy, dy)
            dx = np.where(bad, MISSING_IMAGE_PENALTY + np.nan_to_num(np.abs(fx), posinf=1e6), dx)
            dy = np.where(bad, MISSING_IMAGE_PENALTY + np.nan_to_num(np.abs(fy), posinf=1e6), dy)
            parts += [dx, dy]
        for i, (mean, sig) in {**self.priors, **self.centre_prior}.items():
            parts.append(((params[:, i] - mean) / sig)[:, None])
        if self.use_delays:
            parts.append(self._delay_residuals(params, preds))
        for data, pred in zip(self.flux_data, preds):
            if data is not None:
                with np.errstate(all="ignore"):
                    rel = -2.5 * np.log10(np.abs(pred["mu"][:, 1:]) / np.abs(pred["mu"][:, :1]))
                parts.append((rel - data[1:]) / self.flux_floor_mag)
        res = np.hstack(parts)
        return np.where(np.isfinite(res), res, 1e6)

    def _delay_residuals(self, params, preds):
        h0 = params[:, -1:]
        cols = []
        fam_index = {f.label: k for k, f in enumerate(self.families)}
        for d in self.scenario.delays:
            k = fam_index[d.family]
            fam, pred = self.families[k], preds[k]
            i, j = fam.labels.index(d.image), fam.labels.index(d.relative_to)
            days = (pred["fermat"][:, i] - pred["fermat"][:, j]) * fam.days_per_arcsec2
            days = days * self.h0_ref / h0[:, 0]
            cols.append(((days - d.days) / d.sigma)[:, None])
        return np.hstack(cols)

    def log_probability(self, params: np.ndarray) -> np.ndarray:
        """log posterior (up to a constant) for walker rows (P, n); −inf outside bounds."""
        params = np.atleast_2d(params)
        inside = np.all((params >= self.lower) & (params <= self.upper), axis=1)
        out = np.full(len(params), -np.inf)
        if np.any(inside):
            r = self.residuals(params[inside])
            out[inside] = -0.5 * np.sum(r * r, axis=1)
        return out
