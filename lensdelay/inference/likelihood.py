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

Extra images are watched too: :meth:`ImageLikelihood.watch_unobserved` (called by the
fit at its best solution) records where the model puts images that were not observed,
and each evaluation follows them by Newton's method. One that is brighter than the
faintest observed image of its family costs a residual of its magnitude excess over
that image in units of ``EXTRA_IMAGE_MAG_SCALE`` (an image that bright should have been
seen). Near a caustic the extra pair brightens without bound, so the penalty grows
smoothly to infinity there and the posterior density falls continuously to zero.

The posterior's prior within the bounds is either flat in the recipe's parameters
(``prior="flat"``, the default: what a recipe's ``min``/``max`` say) or Jeffreys' prior,
the square root of the determinant of the Fisher information of all the constraints
(Jeffreys 1946, Proc. R. Soc. A 186, 453; Kass & Wasserman 1996, JASA 91, 1343,
sec. 2), which does not depend on how the model is parametrised (axis ratio and angle,
or ellipticity components). Both give calibrated delay intervals for the benchmark
quad (``benchmarks/bench_fit.py``; docs/benchmarks.md). The Jacobian behind the Fisher information
(:meth:`ImageLikelihood.information_jacobian`) also gives the sampler its local metric
(:mod:`lensdelay.inference.moves`).
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass, replace

import numpy as np
from scipy.interpolate import CubicSpline

from lensdelay.inference.information import information_jacobian
from lensdelay.inference.parameters import H0_RANGE, PRIOR_CHOICES, ParameterSpace
from lensdelay.lensing.delays import delay_scale, fermat_difference_to_days
from lensdelay.lensing.distances import LensDistances
from lensdelay.errors import InputError, choices_text
from lensdelay.lensing import compiled
from lensdelay.lensing.images import keep_distinct_tracks, newton_polish
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles.base import rules_trusted
from lensdelay.model.recipe import MassModel
from lensdelay.model.scenario import Scenario

__all__ = [
    "MISSING_IMAGE_PENALTY",
    "EXTRA_IMAGE_MAG_SCALE",
    "PRIOR_CHOICES",
    "FamilyData",
    "REDSHIFT_NODES",
    "H0_RANGE",
    "ImageLikelihood",
]


#: Residual (in σ) added per coordinate when the model lacks an observed image.
MISSING_IMAGE_PENALTY = 1e3
#: Magnitude scale of the penalty on an unobserved image brighter than the faintest
#: observed one (the microlensing/extinction floor of the flux ratios; common practice).
EXTRA_IMAGE_MAG_SCALE = 0.2


@dataclass
class FamilyData:
    """One family as the likelihood uses it: positions, errors, scalings.

    ``scale`` and ``days_per_arcsec2`` are those at the family's redshift -- its start
    value when the redshift is free (``redshift_index`` is then its parameter column, and
    :meth:`ImageLikelihood.family_scale` / :meth:`ImageLikelihood.family_days` give them
    row by row).
    """

    label: str
    scale: float
    days_per_arcsec2: float
    x: np.ndarray
    y: np.ndarray
    sigma: np.ndarray
    labels: list[str]
    redshift_index: int | None = None
    scale_of_redshift: CubicSpline | None = None
    days_of_redshift: CubicSpline | None = None


#: Nodes of the cubic splines of deflection scale and D_dt/c over a free redshift's
#: range: both are smooth in z, and 513 nodes over Δz = 4 interpolate them to < 1e-7
#: (tests/test_free_redshift.py checks against astropy at random redshifts).
REDSHIFT_NODES = 513


def _redshift_splines(distances: LensDistances, z_min: float, z_max: float):
    """Cubic splines z -> deflection scale and z -> days per arcsec² on [z_min, z_max]."""
    z = np.linspace(z_min, z_max, REDSHIFT_NODES)
    scale, days = distances.scalings(z)
    return CubicSpline(z, scale), CubicSpline(z, days)


def _position_sigmas(family, floor: float) -> np.ndarray:
    """A family's stated position errors with a model error ``floor`` in quadrature."""
    return np.hypot([im.sigma for im in family.images], floor)


def _scenario_timing(scenario):
    """The scenario's measured delays as timing data (with their covariance, if any)."""
    from lensdelay.inference.timing import TimingData

    return TimingData(
        [(f.label, lab) for f in scenario.families for lab in f.labels],
        list(scenario.delays),
        delay_covariance=scenario.delay_covariance,
    )


def _tracked_starts(tracked: dict, label: str):
    """(labels, x, y) of the predicted images of family ``label`` to follow."""
    items = tracked.get(label, {})
    return (
        list(items),
        np.array([v[0] for v in items.values()], dtype=float),
        np.array([v[1] for v in items.values()], dtype=float),
    )


def _magnitude_differences(fam, use_fluxes: bool):
    """A family's observed magnitudes minus its first image's; None unless all are known."""
    mags = []
    for im in fam.images:
        if im.magnitude is not None:
            mags.append(im.magnitude)
        elif im.flux is not None:
            mags.append(-2.5 * np.log10(im.flux))
        else:
            mags.append(None)
    usable = use_fluxes and len(mags) > 1 and all(m is not None for m in mags)
    return np.array(mags, dtype=float) - mags[0] if usable else None


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
    prior : {"jeffreys", "flat"}
        Prior of :meth:`log_probability` within the bounds (module docstring); Gaussian
        priors of the recipe and the lens-light centre enter as constraints either way.
    timing : lensdelay.inference.timing.TimingData, optional
        Measured delays and sightings to fit (instead of the scenario's delays that
        ``use_delays`` takes). Its columns name observed images or images listed in
        ``tracked``.
    h0_prior : None, "fixed" or (mean, sigma)
        With timing data: H0 free with a flat prior on [10, 200] km/s/Mpc (None), held
        at the cosmology's value ("fixed"), or free with a Gaussian prior.
    kappa_prior : (mean, sigma), optional
        With timing data: external convergence; free with a Gaussian prior when sigma
        > 0, held at ``mean`` when sigma = 0; 0 when not given. Delays scale by
        (1 − κ_ext) (the mass-sheet transformation).
    tracked : dict, optional
        family label → {image label: (x, y)}: predicted (unobserved) images that timing
        rows refer to, followed by Newton's method from these positions.
    """

    def __init__(
        self,
        scenario: Scenario,
        model: MassModel,
        *,
        use_delays: bool = False,
        use_fluxes: bool = False,
        flux_floor_mag: float = 0.2,
        prior: str = "flat",
        timing=None,
        h0_prior=None,
        kappa_prior=None,
        tracked=None,
    ):
        if prior not in PRIOR_CHOICES:
            raise InputError(f"prior must be one of {choices_text(PRIOR_CHOICES)}, got {prior!r}")
        self.prior = prior
        self.scenario = scenario
        self.model = model
        self.distances = LensDistances(
            scenario.cosmology, scenario.lens_redshift, scenario.reference_source_redshift
        )
        self.families = [
            FamilyData(
                fam.label,
                self.distances.deflection_scale(fam.redshift),
                self.distances.days_per_arcsec2(fam.redshift),
                np.array([im.x for im in fam.images]),
                np.array([im.y for im in fam.images]),
                _position_sigmas(fam, scenario.position_floor),
                fam.labels,
            )
            for fam in scenario.families
        ]
        if timing is None and use_delays and scenario.delays:
            timing = _scenario_timing(scenario)
        self.timing = timing
        self.use_delays = timing is not None
        # predicted images followed by Newton's method, per family: (labels, x, y)
        self.tracked = [_tracked_starts(tracked or {}, fam.label) for fam in self.families]
        self.flux_floor_mag = float(flux_floor_mag)
        # observed magnitude differences to the first image, per family (None: not used)
        self.flux_data = [_magnitude_differences(fam, use_fluxes) for fam in scenario.families]
        self.use_fluxes = any(d is not None for d in self.flux_data)
        self.h0_ref = float(scenario.cosmology.H0.value)
        # the layout of a parameter row: names, bounds, priors, angles, H0 and κ_ext
        space = ParameterSpace.build(
            model,
            self.families,
            scenario.families,
            h0_ref=self.h0_ref,
            use_delays=self.use_delays,
            h0_prior=h0_prior,
            kappa_prior=kappa_prior,
        )
        self.space = space
        self.names, self.lower, self.upper = space.names, space.lower, space.upper
        self.priors, self.periods = space.priors, space.periods
        self.n_model, self.n_positional = space.n_model, space.n_positional
        self.h0_index, self.kappa_index = space.h0_index, space.kappa_index
        self.h0_fixed, self.kappa_fixed = space.h0_fixed, space.kappa_fixed
        self.scale_start = space.scale_start
        # families of unknown redshift: the deflection scale and D_dt follow their
        # parameter row by row (CONVENTIONS.md)
        for fam, obs in zip(self.families, scenario.families):
            if fam.label in space.redshift_index:
                zp = obs.redshift_parameter
                fam.redshift_index = space.redshift_index[fam.label]
                fam.scale_of_redshift, fam.days_of_redshift = _redshift_splines(
                    self.distances, zp.min, zp.max
                )
        # rows within the bounds build valid profiles: no per-step checks (lens_for)
        self._rules_hold = model.rules_hold_within_bounds()
        self.centre_prior = self._lens_light_prior()
        # unobserved images to follow, per family: (x, y) arrays (see watch_unobserved)
        self.watched = [(np.empty(0), np.empty(0)) for _ in self.families]

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

    def set_position_floor(self, floor: float) -> None:
        """Give every image position a model error ``floor`` (arcsec) in quadrature.

        The scenario the likelihood holds is replaced by one that carries the floor, so
        likelihoods built later from ``self.scenario`` (timing updates, joint fits) keep it.
        """
        self.scenario = replace(self.scenario, position_floor=float(floor))
        for k, fam in enumerate(self.scenario.families):
            self.families[k].sigma = _position_sigmas(fam, floor)

    # -- bookkeeping ---------------------------------------------------------------
    @property
    def n_parameters(self) -> int:
        """Number of free parameters."""
        return len(self.names)

    @property
    def n_constraints(self) -> int:
        """Number of constraints (positions, priors, timing rows, flux ratios)."""
        n = 2 * sum(len(f.x) for f in self.families) + len(self.priors) + len(self.centre_prior)
        n += sum(len(d) - 1 for d in self.flux_data if d is not None)
        return n + (len(self.timing) if self.use_delays else 0)

    @property
    def dof(self) -> int:
        """Degrees of freedom: constraints minus free parameters."""
        return self.n_constraints - self.n_parameters

    def prior_residual_ranges(self) -> list[tuple[int, float, float]]:
        """Where each bounded Gaussian prior's residual can go: (column, low, high).

        The residual of a Gaussian prior (mean μ, width σ) on a parameter with bounds
        [a, b] is (p − μ)/σ and lies in [(a − μ)/σ, (b − μ)/σ]; ``column`` is its index in
        :meth:`data_residuals`. Angles (periodic) are left out. Used to perturb such a
        prior by draws from the prior as it is truncated (a shear strength's half-normal),
        not from the untruncated normal whose negative half would pile the perturbed fits
        onto the bound.
        """
        first = 2 * sum(len(f.x) for f in self.families)
        out = []
        for k, (i, (mean, sig)) in enumerate({**self.priors, **self.centre_prior}.items()):
            if self.periods[i]:
                continue
            low, high = (self.lower[i] - mean) / sig, (self.upper[i] - mean) / sig
            out.append((first + k, float(low), float(high)))
        return out

    def delay_scale(self, params: np.ndarray) -> np.ndarray:
        """(H_ref/H0)(1 − κ_ext) per row, (P,): delays at the reference cosmology times this.

        D_dt ∝ 1/H0 exactly for a cosmology without radiation (and to ~1e-4 with it).
        """
        params = np.atleast_2d(params)
        h0 = params[:, self.h0_index] if self.h0_index is not None else self.h0_fixed
        kappa = params[:, self.kappa_index] if self.kappa_index is not None else self.kappa_fixed
        return np.broadcast_to(delay_scale(h0, self.h0_ref, kappa), (len(params),))

    def family_scale(self, k: int, params: np.ndarray):
        """Deflection scale of family k: a number, or (P, 1) per row for a free redshift."""
        fam = self.families[k]
        if fam.redshift_index is None:
            return fam.scale
        z = np.atleast_2d(params)[:, fam.redshift_index]
        return fam.scale_of_redshift(z)[:, None]

    def family_days(self, k: int, params: np.ndarray):
        """D_dt/c (days per arcsec²) of family k: a number, or (P,) for a free redshift."""
        fam = self.families[k]
        if fam.redshift_index is None:
            return fam.days_per_arcsec2
        return fam.days_of_redshift(np.atleast_2d(params)[:, fam.redshift_index])

    def families_at(self, values: np.ndarray) -> list[FamilyData]:
        """The families with scale and days at one parameter vector (free redshifts set)."""
        values = np.asarray(values, dtype=float)
        out = []
        for k, fam in enumerate(self.families):
            if fam.redshift_index is None:
                out.append(fam)
            else:
                out.append(
                    replace(
                        fam,
                        scale=float(np.ravel(self.family_scale(k, values[None, :]))[0]),
                        days_per_arcsec2=float(self.family_days(k, values[None, :])[0]),
                    )
                )
        return out

    def source_slice(self, k: int) -> slice:
        """Columns of family k's source position in a parameter row."""
        return slice(self.n_model + 2 * k, self.n_model + 2 * k + 2)

    def lens_for(self, params: np.ndarray):
        """Lens for rows (P, n) (profile parameters (P, 1); profiles built only if asked for)."""
        n = self.n_model
        model_rows = params[:, :n]
        trusted = self._rules_hold and np.all(
            (model_rows >= self.lower[:n]) & (model_rows <= self.upper[:n])
        )

        def build():
            with rules_trusted() if trusted else contextlib.nullcontext():
                return self.model.lens(list(model_rows.T[:, :, None]))

        packer = self._row_packer()
        if packer is not None and compiled.enabled():
            return Lens.deferred(lambda: build().components, packer(model_rows))
        return build()

    def _row_packer(self):
        """The recipe's row packer for the kernels (:meth:`MassModel.row_packer`), built once."""
        if "_packer" not in self.__dict__:
            self._packer = self.model.row_packer()
        return self._packer

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
            scale = self.family_scale(k, params)
            # ψ and the Hessian at the images (for τ and μ) from the solver's last evaluation
            x, y, err, psi, hxx, hxy, hyy = newton_polish(
                lens,
                fam.x[None, :],
                fam.y[None, :],
                bx,
                by,
                scale,
                iterations=15,
                max_step=np.maximum(0.5 * fam.sigma, 0.05),
                tolerance=1e-11,
                at_roots=True,
            )
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
                tau = 0.5 * ((x - bx) ** 2 + (y - by) ** 2) - psi
                a11, a12, a22 = 1.0 - hxx, -hxy, 1.0 - hyy
                mu = 1.0 / (a11 * a22 - a12 * a12)
            extra_mu = self._watched_magnifications(lens, k, x, y, ok, bx, by, scale)
            tx, ty, t_tau = self._tracked_images(lens, k, x, y, ok, bx, by, scale)
            out.append(
                {
                    "x": x,
                    "y": y,
                    "ok": ok,
                    "near": near,
                    "fermat": tau,
                    "mu": mu,
                    "magnification_matrix": (a11, a12, a22),
                    "beta": np.hstack([bx, by]),
                    "lens": lens,
                    "scale": scale,
                    "extra_mu": extra_mu,
                    "track_x": tx,
                    "track_y": ty,
                    "track_fermat": t_tau,
                }
            )
        return out

    def _tracked_images(self, lens, k, x, y, ok, bx, by, scale):
        """Positions and Fermat potentials of family k's tracked predicted images.

        An image that Newton's method cannot find, or that lands on an observed image or
        on another tracked one, does not exist in that row: its potential is NaN.
        """
        labels, sx, sy = self.tracked[k]
        if not labels:
            empty = np.zeros((len(x), 0))
            return empty, empty, empty
        tx, ty, err = newton_polish(
            lens,
            sx[None, :],
            sy[None, :],
            bx,
            by,
            scale,
            iterations=15,
            max_step=0.05,
            tolerance=1e-11,
        )
        exists = keep_distinct_tracks(tx, ty, err < 1e-8, 1e-4, taken=(x, y, ok))
        with np.errstate(all="ignore"):
            tau = lens.fermat_potential(tx, ty, bx, by, scale)
        return tx, ty, np.where(exists, tau, np.nan)

    def _watched_magnifications(self, lens, k, x, y, ok, bx, by, scale) -> np.ndarray:
        """abs(μ) of the watched unobserved images of family k, 0 where they do not exist."""
        wx, wy = self.watched[k]
        if len(wx) == 0:
            return np.zeros((len(x), 0))
        ex, ey, err = newton_polish(
            lens,
            wx[None, :],
            wy[None, :],
            bx,
            by,
            scale,
            iterations=15,
            max_step=0.05,
            tolerance=1e-11,
        )
        # an extra image must be none of the observed ones and none of the other extras
        exists = keep_distinct_tracks(ex, ey, err < 1e-8, 1e-4, taken=(x, y, ok))
        with np.errstate(all="ignore"):
            mu = np.abs(lens.magnification(ex, ey, scale))
        return np.where(exists & np.isfinite(mu), mu, np.where(exists, np.inf, 0.0))

    def watch_unobserved(self, values: np.ndarray) -> None:
        """Follow the images the model at ``values`` predicts but nobody observed.

        Finds every image of each family at ``values`` (complete image finder) and keeps
        those not matched to an observed one in ``self.watched``.
        """
        from lensdelay.lensing.images import find_images_at_scales

        values = np.asarray(values, dtype=float)
        preds = self.predict(values[None, :])
        single = self.model.lens(values[: self.n_model])
        families = self.families_at(values)
        # one mesh for every family (the lens is evaluated once: most of the cost)
        tables = find_images_at_scales(
            single,
            [(*values[self.source_slice(k)], fam.scale) for k, fam in enumerate(families)],
        )
        for k, (fam, pred, table) in enumerate(zip(families, preds, tables)):
            keep = np.ones(len(table), dtype=bool)
            for i in range(len(fam.x)):
                if pred["ok"][0, i]:
                    keep &= np.hypot(table.x - pred["x"][0, i], table.y - pred["y"][0, i]) >= 1e-5
            self.watched[k] = (np.asarray(table.x[keep], float), np.asarray(table.y[keep], float))

    def extra_image_residuals(self, preds) -> np.ndarray:
        """Penalty columns (P, n_watched) for watched images brighter than expected.

        Each is the magnitude excess of a watched image over the faintest observed image
        of its family, / EXTRA_IMAGE_MAG_SCALE; 0 if fainter.
        """
        cols = []
        for pred in preds:
            extra = pred["extra_mu"]
            if extra.shape[1] == 0:
                continue
            observed = np.where(pred["ok"], np.abs(pred["mu"]), np.inf)
            faintest = np.min(observed, axis=1, keepdims=True)
            with np.errstate(all="ignore"):
                excess = 2.5 * np.log10(extra / faintest)
            excess = np.where((extra > 0) & np.isfinite(faintest), excess, 0.0)
            cols.append(np.maximum(excess, 0.0) / EXTRA_IMAGE_MAG_SCALE)
        if not cols:
            return np.zeros((len(preds[0]["beta"]) if preds else 0, 0))
        out = np.hstack(cols)
        return np.where(np.isfinite(out), out, 1e6)

    def residuals(self, params: np.ndarray, preds=None) -> np.ndarray:
        """Normalised residuals of the constraints, then the extra-image penalties.

        Shape (P, n_constraints + n_watched).

        ``preds`` may pass in :meth:`predict` of the same rows to avoid solving twice.
        """
        params = np.atleast_2d(np.asarray(params, dtype=float))
        preds = self.predict(params) if preds is None else preds
        return np.hstack([self.data_residuals(params, preds), self.extra_image_residuals(preds)])

    def data_residuals(self, params: np.ndarray, preds=None) -> np.ndarray:
        """Normalised residuals of the constraints alone, (P, n_constraints)."""
        params = np.atleast_2d(np.asarray(params, dtype=float))
        preds = self.predict(params) if preds is None else preds
        parts = []
        for fam, pred in zip(self.families, preds):
            dx = (pred["x"] - fam.x) / fam.sigma
            dy = (pred["y"] - fam.y) / fam.sigma
            # where no image was found: the magnification-weighted source-plane offset,
            # plus a large constant so that a missing image always costs more than any fit
            near = pred["near"]
            bad = ~pred["ok"] & ~near
            if np.any(near | bad):
                fx, fy = self.source_plane_offsets(pred["lens"], fam, pred["scale"], pred["beta"])
            else:  # every image found: the offsets are not used (a lens pass saved)
                fx = fy = np.zeros_like(dx)
            dx = np.where(near, fx, dx)
            dy = np.where(near, fy, dy)
            dx = np.where(bad, MISSING_IMAGE_PENALTY + np.nan_to_num(np.abs(fx), posinf=1e6), dx)
            dy = np.where(bad, MISSING_IMAGE_PENALTY + np.nan_to_num(np.abs(fy), posinf=1e6), dy)
            parts += [dx, dy]
        parts += self.prior_residuals(params)
        parts += self._derived_residuals(
            params,
            [np.hstack([p["fermat"], p["track_fermat"]]) for p in preds],
            [p["mu"] for p in preds],
        )
        res = np.hstack(parts)
        return np.where(np.isfinite(res), res, 1e6)

    @staticmethod
    def source_plane_offsets(lens, fam: FamilyData, scale, beta: np.ndarray):
        """Magnification-weighted source-plane offsets A⁻¹(β(θ_obs) − β)/σ, each (P, n_img).

        The observed images mapped back with the lens equation, their offsets from the
        source positions ``beta`` (P, 2) carried to the image plane by the inverse
        magnification matrix: the image-plane misfit to first order.
        """
        x, y = fam.x[None, :], fam.y[None, :]
        with np.errstate(all="ignore"):
            # β = θ − α and A = I − ∂α/∂θ (Lens.source_position, .jacobian) in one pass
            ax, ay, hxx, hxy, hyy = lens.deflection_and_hessian(x, y, scale)
            rx, ry = x - ax - beta[:, :1], y - ay - beta[:, 1:]
            a11, a12, a22 = 1.0 - hxx, -hxy, 1.0 - hyy
            det = a11 * a22 - a12 * a12
            return (a22 * rx - a12 * ry) / det / fam.sigma, (a11 * ry - a12 * rx) / det / fam.sigma

    def prior_residuals(self, params: np.ndarray) -> list[np.ndarray]:
        """Columns (P, 1) of the Gaussian priors and the lens-light centre, in order."""
        parts = []
        for i, (mean, sig) in {**self.priors, **self.centre_prior}.items():
            diff = params[:, i] - mean
            if self.periods[i]:  # an angle: the prior is about the nearest equivalent mean
                diff = (diff + self.periods[i] / 2) % self.periods[i] - self.periods[i] / 2
            parts.append((diff / sig)[:, None])
        return parts

    def _derived_residuals(self, params, fermat, mu) -> list[np.ndarray]:
        """Residual columns of timing data and flux ratios (those in use).

        ``fermat`` is per family, (P, n_img + n_tracked): the observed images, then the
        tracked predicted ones; ``mu`` per family (P, n_img) at the observed images.
        """
        parts = []
        if self.use_delays:
            parts.append(self.timing.residuals(self.arrival_times(params, fermat)))
        for data, m in zip(self.flux_data, mu):
            if data is not None:
                with np.errstate(all="ignore"):
                    rel = -2.5 * np.log10(np.abs(m[:, 1:]) / np.abs(m[:, :1]))
                parts.append((rel - data[1:]) / self.flux_floor_mag)
        return parts

    def arrival_times(self, params: np.ndarray, fermat) -> np.ndarray:
        """Arrival times (days, per-family zero) of the timing columns, (P, n_columns).

        t = (D_dt/c) τ at the reference cosmology, times (H_ref/H0)(1 − κ_ext).
        """
        params = np.atleast_2d(params)
        scale = self.delay_scale(params)
        index = {f.label: k for k, f in enumerate(self.families)}
        cols = []
        for fam_label, label in self.timing.columns:
            k = index[fam_label]
            fam = self.families[k]
            j = (
                fam.labels.index(label)
                if label in fam.labels
                else len(fam.labels) + self.tracked[k][0].index(label)
            )
            cols.append(
                fermat_difference_to_days(fermat[k][:, j], self.family_days(k, params), scale)
            )
        return np.stack(cols, axis=1)

    def information_jacobian(
        self, params: np.ndarray, preds=None, columns=None, scheme: str = "central"
    ) -> np.ndarray:
        """∂(normalised residuals)/∂(parameters): :func:`information.information_jacobian`."""
        return information_jacobian(self, params, preds, columns, scheme)

    @staticmethod
    def _half_log_det_information(jac: np.ndarray) -> np.ndarray:
        """½ log det(Jᵀ J) per row; −inf where the information is singular."""
        with np.errstate(all="ignore"):
            sign, logdet = np.linalg.slogdet(np.swapaxes(jac, 1, 2) @ jac)
        return np.where((sign > 0) & np.isfinite(logdet), 0.5 * logdet, -np.inf)

    def log_prior(self, params: np.ndarray, preds=None) -> np.ndarray:
        """Log prior density (up to a constant) within the bounds, per row.

        ``"flat"``: 0. ``"jeffreys"``: ½ log det(Jᵀ J) with J from
        :meth:`information_jacobian`; −inf where the information is singular (a
        parameter the constraints cannot see, e.g. the angle of a round lens).
        """
        params = np.atleast_2d(np.asarray(params, dtype=float))
        if self.prior == "flat":
            return np.zeros(len(params))
        return self._half_log_det_information(self.information_jacobian(params, preds))

    def evaluate(self, params: np.ndarray, columns=None):
        """Log posterior, residuals and their Jacobian for rows (P, n) in one pass.

        The residuals are those of the constraints (the extra-image penalty enters the
        log posterior only). Rows outside the bounds get −inf and zero residuals and
        Jacobian. Used by :class:`lensdelay.inference.moves.FisherLangevinMove`, which needs the
        local geometry. ``columns``: only those columns of the Jacobian (the rest 0;
        see :meth:`information_jacobian`); the Jeffreys prior then needs them all.
        """
        params = np.atleast_2d(np.asarray(params, dtype=float))
        inside = np.all((params >= self.lower) & (params <= self.upper), axis=1)
        logp = np.full(len(params), -np.inf)
        res = np.zeros((len(params), self.n_constraints))
        jac = np.zeros((len(params), self.n_constraints, params.shape[1]))
        if np.any(inside):
            rows = params[inside]
            preds = self.predict(rows)
            r = self.data_residuals(rows, preds)
            penalty = self.extra_image_residuals(preds)
            if self.prior == "jeffreys":
                columns = None  # its log det needs every column
            # the flat prior's Jacobian only shapes proposals: forward differences suffice
            scheme = "central" if self.prior == "jeffreys" else "forward"
            j = self.information_jacobian(rows, preds, columns, scheme)
            prior = self._half_log_det_information(j) if self.prior == "jeffreys" else 0.0
            logp[inside] = -0.5 * np.sum(r * r, axis=1) - 0.5 * np.sum(penalty**2, axis=1) + prior
            res[inside], jac[inside] = r, np.where(np.isfinite(j), j, 0.0)
        return logp, res, jac

    def log_probability(self, params: np.ndarray) -> np.ndarray:
        """Log posterior (up to a constant) for walker rows (P, n); −inf outside bounds."""
        params = np.atleast_2d(params)
        inside = np.all((params >= self.lower) & (params <= self.upper), axis=1)
        out = np.full(len(params), -np.inf)
        if np.any(inside):
            rows = params[inside]
            preds = self.predict(rows)
            r = self.residuals(rows, preds)
            out[inside] = -0.5 * np.sum(r * r, axis=1) + self.log_prior(rows, preds)
        return out
