"""H0 from many lenses at once, the mass-sheet degeneracy broken by stellar kinematics.

A hierarchical model with the internal mass sheet and the orbital anisotropy as
population quantities.

The probability model (docs/statistics.md, "Joint H0") for lenses i = 1..L, each with
measured delays Δt_i (covariance C_i) and/or a measured dispersion σ_i ± e_i:

* hyper-parameters θ: H0, optionally Ωm and the other parameters of an astropy
  cosmology (flat or curved ΛCDM, constant w, or w0–wa), the mean λ̄ and scatter s_λ of the
  internal mass sheet λ_int, and the anisotropy population (mean and scatter of β or of
  r_a/R_eff; none for isotropic orbits);
* per lens, latent λ_int,i ~ N(λ̄, s_λ), κ_ext,i from the lens's own prior, its
  anisotropy from the population, and its lens-model parameters from its own
  positions-only posterior;
* the mass-sheet transform: delays Δt = (D_Δt(θ)/D_Δt,ref) · Δt_model · λ_int (1 − κ_ext)
  (D_Δt ∝ 1/λ at fixed observables: Falco, Gorenstein & Shapiro 1985), and the
  dispersion σ² = c² (D_s/D_ls) θE^(γ−1) F(γ) J(γ, anisotropy) · λ_int (1 − κ_ext)
  (:mod:`lensdelay.lensing.kinematics`; σ² ∝ λ: CONVENTIONS.md);
* Gaussian likelihoods of the delays and the dispersion (one per aperture: a slit or
  circle, or each ring of spatially resolved kinematics, independent errors).

Each lens's likelihood is its latent variables integrated by Monte Carlo over a fixed set
of draws (its posterior samples, κ_ext from its prior, standard normals for λ_int and the
anisotropy, scaled by the hyper-parameters: common random numbers, so the likelihood is
a smooth function of θ); the hyper-parameters are sampled with emcee (all walkers in one
vectorised call). Nested sampling's evidence is not needed: the joint stage compares no
models, and emcee already carries the project's checked diagnostics.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import logsumexp

from lensdelay.errors import InputError, pair_of_numbers
from lensdelay.inference.sampling import integrated_time
from lensdelay.inference.summaries import quantile_summary, weighted_quantiles
from lensdelay.lensing.kinematics import ARCSEC, SPEED_OF_LIGHT_KMS

__all__ = [
    "ANISOTROPY_POPULATIONS",
    "COSMOLOGIES",
    "COSMOLOGY_DEFAULTS",
    "HyperParameter",
    "Population",
    "JointLikelihood",
    "JointChain",
    "sample_joint",
    "lens_h0_curve",
]

#: The anisotropy population's parameters per orbit model.
ANISOTROPY_POPULATIONS = {
    "isotropic": (),
    "constant": ("beta_mean", "beta_scatter"),
    "osipkov_merritt": ("r_ani_mean", "r_ani_scatter"),
}
#: Ωm range of the distance tables when Ωm is free.
OM0_RANGE = (0.05, 0.95)
#: The astropy cosmologies the joint stage can infer H0 in, and each one's parameters
#: besides H0 and Ωm with the range they may take (radiation off, Tcmb0 = 0, as
#: astropy's default: D ∝ 1/H0 exactly).
COSMOLOGIES = {
    "FlatLambdaCDM": {},
    "LambdaCDM": {"Ode0": (0.0, 1.5)},
    "FlatwCDM": {"w0": (-3.0, 0.0)},
    "wCDM": {"Ode0": (0.0, 1.5), "w0": (-3.0, 0.0)},
    "Flatw0waCDM": {"w0": (-3.0, 0.0), "wa": (-3.0, 3.0)},
    "w0waCDM": {"Ode0": (0.0, 1.5), "w0": (-3.0, 0.0), "wa": (-3.0, 3.0)},
}
#: Their values when a run neither fixes nor frees them (flat ΛCDM's).
COSMOLOGY_DEFAULTS = {"Ode0": 0.7, "w0": -1.0, "wa": 0.0}
#: Nodes per free cosmological parameter of the distance tables, by how many are free
#: (the tables grow as nodes^k; a cubic interpolation's error stays below 1e-4 at these).
GRID_NODES = {1: 13, 2: 11, 3: 9}
#: The H0 (km/s/Mpc) distances are computed at; D_Δt ∝ 1/H0 scales them to any other.
_H_TABLE = 70.0


@dataclass(frozen=True)
class HyperParameter:
    """A population parameter: uniform within [lower, upper], or a Gaussian truncated there."""

    name: str
    lower: float
    upper: float
    gaussian: tuple[float, float] | None = None

    def log_prior(self, x: np.ndarray) -> np.ndarray:
        """Log prior density (up to a constant) at the values ``x``."""
        inside = (x >= self.lower) & (x <= self.upper)
        if self.gaussian is None:
            return np.where(inside, 0.0, -np.inf)
        mean, sigma = self.gaussian
        return np.where(inside, -0.5 * ((x - mean) / sigma) ** 2, -np.inf)


@dataclass(frozen=True)
class Population:
    """What the joint stage infers besides H0.

    Parameters
    ----------
    anisotropy : str
        ``isotropic``, ``constant`` (β) or ``osipkov_merritt`` (r_a/R_eff).
    lambda_int : bool
        True: λ_int is a population N(λ̄, s_λ) inferred with the rest; False: fixed at 1
        (the mass profile assumed, as in analyses that break the degeneracy by assumption).
    om0 : float or (mean, sigma)
        Ωm fixed, or free with a Gaussian prior.
    cosmology : str
        The astropy cosmology's class, one of :data:`COSMOLOGIES`.
    cosmology_parameters : dict
        Its other parameters (``Ode0``, ``w0``, ``wa``): a value (fixed) or (mean, sigma)
        (free with a Gaussian prior); those not given take :data:`COSMOLOGY_DEFAULTS`.
        At most three parameters besides H0 are free, Ωm included.
    """

    anisotropy: str = "osipkov_merritt"
    lambda_int: bool = True
    om0: float | tuple[float, float] = 0.3
    cosmology: str = "FlatLambdaCDM"
    cosmology_parameters: dict = field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "om0", pair_of_numbers(self.om0, "om0", one_allowed=True))
        self._check_cosmology()
        if self.anisotropy not in ANISOTROPY_POPULATIONS:
            raise InputError(
                f"anisotropy must be one of {sorted(ANISOTROPY_POPULATIONS)}, "
                f"got {self.anisotropy!r}"
            )
        if np.ndim(self.om0) == 0:
            if not OM0_RANGE[0] <= float(self.om0) <= OM0_RANGE[1]:
                raise InputError(f"om0 must lie in {list(OM0_RANGE)}, got {self.om0}")
        elif not (OM0_RANGE[0] < self.om0[0] < OM0_RANGE[1] and self.om0[1] > 0):
            raise InputError(f"om0 must be MEAN in {list(OM0_RANGE)} and SIGMA > 0, got {self.om0}")

    def _check_cosmology(self) -> None:
        if self.cosmology not in COSMOLOGIES:
            raise InputError(
                f"cosmology must be one of {sorted(COSMOLOGIES)}, got {self.cosmology!r}"
            )
        allowed = COSMOLOGIES[self.cosmology]
        for name, value in self.cosmology_parameters.items():
            if name not in allowed:
                takes = ", ".join(allowed) if allowed else "none besides H0 and Om0"
                raise InputError(
                    f"cosmology parameter must be one of {self.cosmology}'s ({takes}), got {name!r}"
                )
            lo, hi = allowed[name]
            if np.ndim(value) == 0:
                if not lo <= float(value) <= hi:
                    raise InputError(f"{name} must lie in [{lo:g}, {hi:g}], got {value}")
            elif not (len(value) == 2 and lo < value[0] < hi and value[1] > 0):
                raise InputError(
                    f"{name} must be MEAN in ({lo:g}, {hi:g}) and SIGMA > 0, got {value}"
                )
        if len(self.free_cosmology()) > max(GRID_NODES):
            raise InputError(
                f"free cosmological parameters must be at most {max(GRID_NODES)} "
                f"(Om0 included), got {len(self.free_cosmology())}"
            )

    @property
    def om0_free(self) -> bool:
        """Whether Ωm is inferred."""
        return np.ndim(self.om0) != 0

    def free_cosmology(self) -> tuple[tuple[str, float, float, float, float], ...]:
        """(name, prior mean, prior sigma, lowest, highest) of each free parameter.

        The cosmology's free parameters besides H0: Ωm first, then the class's others in
        their order.
        """
        out = []
        if self.om0_free:
            out.append(("Om0", *map(float, self.om0), *OM0_RANGE))
        for name, (lo, hi) in COSMOLOGIES[self.cosmology].items():
            value = self.cosmology_parameters.get(name)
            if value is not None and np.ndim(value) != 0:
                out.append((name, float(value[0]), float(value[1]), lo, hi))
        return tuple(out)

    def cosmology_grid(self) -> list[np.ndarray]:
        """Nodes of the distance tables per free parameter: its prior's ±6σ (in range)."""
        free = self.free_cosmology()
        nodes = GRID_NODES.get(len(free), 0)
        return [
            np.linspace(max(lo, mean - 6 * sigma), min(hi, mean + 6 * sigma), nodes)
            for _, mean, sigma, lo, hi in free
        ]

    def cosmology_at(self, free_values: dict):
        """The astropy cosmology at H0 = 70 with the free parameters at ``free_values``."""
        import astropy.cosmology as cosmologies

        kwargs = {"H0": _H_TABLE, "Om0": 0.3 if self.om0_free else float(self.om0)}
        for name in COSMOLOGIES[self.cosmology]:
            value = self.cosmology_parameters.get(name, COSMOLOGY_DEFAULTS[name])
            kwargs[name] = float(value) if np.ndim(value) == 0 else float(value[0])
        kwargs.update({k: float(v) for k, v in free_values.items()})
        return getattr(cosmologies, self.cosmology)(**kwargs)

    def describe_cosmology(self) -> dict:
        """The cosmology for the outputs: class, and each parameter's value or prior."""
        out = {"class": self.cosmology, "H0": "inferred"}
        out["Om0"] = list(self.om0) if self.om0_free else float(self.om0)
        for name in COSMOLOGIES[self.cosmology]:
            value = self.cosmology_parameters.get(name, COSMOLOGY_DEFAULTS[name])
            out[name] = float(value) if np.ndim(value) == 0 else list(map(float, value))
        return out

    def parameters(self) -> tuple[HyperParameter, ...]:
        """The hyper-parameters in their order, with their priors."""
        out = [HyperParameter("H0", 20.0, 150.0)]
        for (name, mean, sigma, _, _), grid in zip(self.free_cosmology(), self.cosmology_grid()):
            out.append(HyperParameter(name, grid[0], grid[-1], gaussian=(mean, sigma)))
        if self.lambda_int:
            out += [
                HyperParameter("lambda_mean", 0.5, 1.5),
                HyperParameter("lambda_scatter", 0.0, 0.3),
            ]
        if self.anisotropy == "constant":
            out += [
                HyperParameter("beta_mean", -0.4, 0.8),
                HyperParameter("beta_scatter", 0.0, 0.3),
            ]
        elif self.anisotropy == "osipkov_merritt":
            out += [
                HyperParameter("r_ani_mean", 0.5, 5.0),
                HyperParameter("r_ani_scatter", 0.0, 1.0),
            ]
        return tuple(out)

    @property
    def names(self) -> tuple[str, ...]:
        """The hyper-parameters' names, in order."""
        return tuple(p.name for p in self.parameters())


class _CosmologyTable:
    """Distance factors of many (z_l, z_s) pairs as functions of the free cosmology.

    At every node of :meth:`Population.cosmology_grid` one astropy cosmology (H0 = 70)
    gives, for all pairs at once, D_Δt = (1 + z_l) D_l D_s / D_ls (Mpc; Schneider, Ehlers
    & Falco 1992, eq. 5.45) and D_s/D_ls. The call takes (P, k) parameter sets and
    returns (P, pairs, 2): a cubic spline for one free parameter, cubic interpolation on
    the grid for more, the values themselves for none.
    """

    def __init__(self, population: Population, z_l, z_s):
        from scipy.interpolate import RegularGridInterpolator

        z_l, z_s = np.asarray(z_l, dtype=float), np.asarray(z_s, dtype=float)
        self.pairs = len(z_l)
        free = [f[0] for f in population.free_cosmology()]
        if not free or not self.pairs:
            fixed = _distance_factors(population.cosmology_at({}), z_l, z_s)
            self._call = lambda v: np.broadcast_to(fixed, (len(v), *fixed.shape))
            return
        grids = population.cosmology_grid()
        table = np.empty([len(g) for g in grids] + [self.pairs, 2])
        for idx in np.ndindex(*table.shape[:-2]):
            at = {name: grids[k][idx[k]] for k, name in enumerate(free)}
            table[idx] = _distance_factors(population.cosmology_at(at), z_l, z_s)
        if len(grids) == 1:
            spline = CubicSpline(grids[0], table, axis=0)
            self._call = lambda v: spline(v[:, 0])
        else:
            flat = table.reshape(table.shape[:-2] + (-1,))
            grid = RegularGridInterpolator(grids, flat, method="cubic")
            lows = np.array([g[0] for g in grids])
            highs = np.array([g[-1] for g in grids])
            self._call = lambda v: grid(np.clip(v, lows, highs)).reshape(len(v), self.pairs, 2)

    def __call__(self, values: np.ndarray) -> np.ndarray:
        return self._call(np.atleast_2d(values))


def _distance_factors(cosmology, z_l: np.ndarray, z_s: np.ndarray) -> np.ndarray:
    """(D_Δt in Mpc, D_s/D_ls) of each (z_l, z_s) pair: (pairs, 2), astropy's distances."""
    d_l = cosmology.angular_diameter_distance(z_l).to_value("Mpc")
    d_s = cosmology.angular_diameter_distance(z_s).to_value("Mpc")
    d_ls = cosmology.angular_diameter_distance(z_l, z_s).to_value("Mpc")
    return np.column_stack([(1.0 + z_l) * d_l * d_s / d_ls, d_s / d_ls])


class _LensTerms:
    """One lens's fixed Monte Carlo draws and precomputed arrays.

    ``delay_pairs`` and ``kinematics_pair`` are its rows of the likelihood's
    :class:`_CosmologyTable` (one per measured delay's source, one for the kinematics).
    """

    def __init__(self, lens, rng: np.random.Generator, delay_pairs, kinematics_pair):
        n = len(lens.model_days)
        self.lens = lens
        mean, sigma = lens.kappa_prior
        self.kappa = mean + sigma * rng.standard_normal(n)
        self.z_lambda = rng.standard_normal(n)
        self.z_ani = rng.standard_normal(n)
        self.delays = lens.has_delays
        self.delay_pairs, self.kinematics_pair = list(delay_pairs), kinematics_pair
        if self.delays:
            self.model_days = lens.model_days
            self.measured = lens.measured_days
            self.cov_inv = np.linalg.inv(lens.delay_covariance)
            sign, logdet = np.linalg.slogdet(2.0 * np.pi * lens.delay_covariance)
            self.norm = -0.5 * logdet
            self.reference_ddt = np.asarray(lens.reference_ddt_mpc, dtype=float)
        self.kinematics = lens.has_kinematics
        if self.kinematics:
            kin, tables = lens.kinematics, lens.dispersion_tables
            # one measurement per aperture: the slit or circle, or each ring
            self.observed, self.error = kin.dispersions(), kin.errors()
            self.base = lens.dispersion_base()
            # ln J per sample, aperture and parameter node: (n, B, k)
            self.rows = np.stack([tb.along_parameter(lens.slope) for tb in tables], axis=1)
            self.tables = tables
            self.table = tables[0]  # every aperture's table has the same parameter axis

    def ddt_ratio(self, factors: np.ndarray) -> np.ndarray:
        """D_Δt(H_ref, cosmology) / D_Δt,ref per measured delay: (P, m)."""
        return factors[:, self.delay_pairs, 0] / self.reference_ddt[None, :]

    def dispersion_ratio(self, factors: np.ndarray) -> np.ndarray:
        """c² (D_s/D_ls) · 1 arcsec in (km/s)²: (P, 1)."""
        return SPEED_OF_LIGHT_KMS**2 * ARCSEC * factors[:, self.kinematics_pair, 1][:, None]

    def ln_j(self, parameter: np.ndarray) -> np.ndarray:
        """The log of J of every draw and aperture at the anisotropy ``parameter`` (P, n).

        Returns (P, n, B).
        """
        return np.stack(
            [tb.ln_j(self.rows[:, b, :], parameter) for b, tb in enumerate(self.tables)],
            axis=-1,
        )


class JointLikelihood:
    """The joint posterior of the hyper-parameters, vectorised over parameter sets.

    ``self(theta)`` takes (P, d) parameter sets (the order of :attr:`names`) and returns
    the log posterior of each, up to a constant.
    """

    def __init__(
        self, lenses, population: Population, rng: np.random.Generator, compiled: bool = True
    ):
        if not lenses:
            raise InputError("a joint H0 needs at least one lens, got none")
        if not any(lens.has_delays for lens in lenses):
            raise InputError(
                "a joint H0 needs at least one lens with measured delays (kinematics alone "
                "do not measure H0), got none"
            )
        for lens in lenses:
            if not lens.has_kinematics:
                continue
            table = lens.dispersion_tables[0]
            if table.anisotropy != population.anisotropy:
                raise InputError(
                    f"lens {lens.name!r} must have its dispersion tabulated for the "
                    f"population's {population.anisotropy} orbits, got {table.anisotropy}"
                )
        self.population = population
        self.parameters = population.parameters()
        self.names = population.names
        # every (z_l, z_s) pair whose distances enter: each delay's source, each kinematics'
        z_l, z_s, pairs = [], [], []
        for lens in lenses:
            delays = []
            for z in lens.delay_source_redshifts if lens.has_delays else []:
                delays.append(len(z_l))
                z_l.append(lens.lens_redshift)
                z_s.append(z)
            kin = None
            if lens.has_kinematics:
                kin = len(z_l)
                z_l.append(lens.lens_redshift)
                z_s.append(lens.kinematics_source_redshift)
            pairs.append((delays, kin))
        self.cosmic = _CosmologyTable(population, z_l, z_s)
        self.terms = [_LensTerms(lens, rng, *p) for lens, p in zip(lenses, pairs)]
        self.lenses = tuple(lenses)
        self.compiled = compiled
        self._pack = None

    def _column(self, theta, name, default):
        if name in self.names:
            return theta[:, self.names.index(name)][:, None]
        return np.full((len(theta), 1), default)

    def log_prior(self, theta: np.ndarray) -> np.ndarray:
        """The hyper-priors' log density at each parameter set: (P,)."""
        theta = np.atleast_2d(theta)
        return sum(p.log_prior(theta[:, k]) for k, p in enumerate(self.parameters))

    def cosmology_values(self, theta) -> np.ndarray:
        """The free cosmological parameters at each parameter set: (P, k), k ≥ 0."""
        theta = np.atleast_2d(theta)
        columns = [self.names.index(f[0]) for f in self.population.free_cosmology()]
        return theta[:, columns]

    def _sheet(self, t, theta) -> np.ndarray:
        """λ_int (1 − κ_ext) of every draw: (P, n)."""
        lam = (
            self._column(theta, "lambda_mean", 1.0)
            + self._column(theta, "lambda_scatter", 0.0) * t.z_lambda[None, :]
        )
        return lam * (1.0 - t.kappa[None, :])

    def _anisotropy(self, t, theta) -> np.ndarray:
        """Every draw's anisotropy parameter (r_a/R_eff or β; 0 when isotropic): (P, n)."""
        kind = self.population.anisotropy
        if kind == "osipkov_merritt":
            return self._column(theta, "r_ani_mean", 1.0) * np.exp(
                self._column(theta, "r_ani_scatter", 0.0) * t.z_ani[None, :]
            )
        if kind == "constant":
            return (
                self._column(theta, "beta_mean", 0.0)
                + self._column(theta, "beta_scatter", 0.0) * t.z_ani[None, :]
            )
        return np.zeros((len(theta), len(t.z_ani)))

    def predicted_dispersion(self, index: int, theta: np.ndarray) -> np.ndarray:
        """The dispersion (km/s) of every draw and aperture of lens ``index``: (P, n, B)."""
        t = self.terms[index]
        theta = np.atleast_2d(theta)
        j = np.exp(t.ln_j(self._anisotropy(t, theta)))
        sheet = np.maximum(self._sheet(t, theta), 0.0)
        factors = self.cosmic(self.cosmology_values(theta))
        scale = t.dispersion_ratio(factors) * t.base[None, :] * sheet
        return np.sqrt(scale[:, :, None] * j)

    def lens_log_likelihood(self, index: int, theta: np.ndarray) -> np.ndarray:
        """The log likelihood of lens ``index`` at each parameter set: (P,) (numpy path)."""
        t = self.terms[index]
        theta = np.atleast_2d(theta)
        h0 = self._column(theta, "H0", 70.0)
        factors = self.cosmic(self.cosmology_values(theta))
        sheet = self._sheet(t, theta)  # the total mass-sheet factor λ_int (1 − κ_ext)
        log_l = np.zeros(sheet.shape)
        if t.delays:
            scale = (_H_TABLE / h0)[:, :, None] * t.ddt_ratio(factors)[:, None, :]
            predicted = scale * t.model_days[None, :, :] * sheet[:, :, None]
            resid = t.measured[None, None, :] - predicted
            log_l += -0.5 * np.einsum("pni,ij,pnj->pn", resid, t.cov_inv, resid) + t.norm
        if t.kinematics:
            z = (t.observed - self.predicted_dispersion(index, theta)) / t.error
            log_l += np.sum(-0.5 * z**2 - np.log(t.error * np.sqrt(2.0 * np.pi)), axis=-1)
        log_l = np.where(sheet > 0, log_l, -np.inf)
        return logsumexp(log_l, axis=1) - np.log(log_l.shape[1])

    def lens_log_likelihoods(self, theta: np.ndarray) -> np.ndarray:
        """Every lens's log likelihood at each parameter set: (P, L).

        The compiled kernel (:mod:`lensdelay.hubble._joint_kernel`) when ``compiled``,
        else the numpy path lens by lens (the reference the tests hold it to).
        """
        theta = np.atleast_2d(theta)
        if not self.compiled:
            return np.column_stack(
                [self.lens_log_likelihood(k, theta) for k in range(len(self.terms))]
            )
        from lensdelay.hubble._joint_kernel import lens_log_likelihoods

        pk = self._packed()
        h0 = self._column(theta, "H0", 70.0)
        factors = self.cosmic(self.cosmology_values(theta))
        ddt = [(_H_TABLE / h0) * t.ddt_ratio(factors) for t in self.terms if t.delays]
        ddt_scale = np.hstack(ddt) if ddt else np.zeros((len(theta), 0))
        none = np.zeros((len(theta), 1))
        kin_ratio = np.hstack(
            [t.dispersion_ratio(factors) if t.kinematics else none for t in self.terms]
        )
        ani = ANISOTROPY_POPULATIONS[self.population.anisotropy]
        hyper = np.hstack(
            [
                self._column(theta, "lambda_mean", 1.0),
                self._column(theta, "lambda_scatter", 0.0),
                self._column(theta, ani[0], 1.0) if ani else np.ones((len(theta), 1)),
                self._column(theta, ani[1], 0.0) if ani else np.zeros((len(theta), 1)),
            ]
        )
        return lens_log_likelihoods(
            hyper, pk["kind"], *pk["arrays"][:11], ddt_scale, *pk["arrays"][11:], kin_ratio
        )

    def _packed(self) -> dict:
        """Every lens's draws and arrays in flat form for the kernel (built once)."""
        if self._pack is not None:
            return self._pack
        terms = self.terms
        draws = np.cumsum([0] + [len(t.kappa) for t in terms])
        m = [len(t.measured) if t.delays else 0 for t in terms]
        n_par = [t.rows.shape[2] if t.kinematics else 1 for t in terms]
        n_bins = [len(t.observed) if t.kinematics else 0 for t in terms]

        def flat(parts, dtype=float):
            return np.ascontiguousarray(
                np.concatenate([np.ravel(x) for x in parts]) if parts else np.zeros(0), dtype
            )

        def starts(sizes):
            return np.cumsum([0] + list(sizes)).astype(np.int64)

        days = [t.model_days if t.delays else np.zeros(0) for t in terms]
        rows = [t.rows if t.kinematics else np.zeros(len(t.kappa)) for t in terms]
        axes = [t.table.axis if t.kinematics else np.zeros(1) for t in terms]
        arrays = (
            draws.astype(np.int64),
            flat([t.kappa for t in terms]),
            flat([t.z_lambda for t in terms]),
            flat([t.z_ani for t in terms]),
            starts(m),
            flat(days),
            starts([np.size(x) for x in days]),
            flat([t.measured for t in terms if t.delays]),
            flat([t.cov_inv if t.delays else np.zeros(0) for t in terms]),
            starts([k * k for k in m]),
            flat([t.norm if t.delays else 0.0 for t in terms]),
            np.array(n_bins, dtype=np.int64),
            starts(n_bins),
            flat([t.observed for t in terms if t.kinematics]),
            flat([t.error for t in terms if t.kinematics]),
            flat([t.base if t.kinematics else np.zeros(len(t.kappa)) for t in terms]),
            flat(rows),
            starts([np.size(x) for x in rows]),
            np.array(n_par, dtype=np.int64),
            flat(axes),
            starts([np.size(x) for x in axes]),
        )
        kind = {"isotropic": 0, "constant": 1, "osipkov_merritt": 2}[self.population.anisotropy]
        self._pack = {"arrays": arrays, "kind": kind}
        return self._pack

    def __call__(self, theta: np.ndarray) -> np.ndarray:
        """The log posterior (up to a constant) at each parameter set: (P,)."""
        theta = np.atleast_2d(theta)
        out = self.log_prior(theta)
        ok = np.isfinite(out)
        if np.any(ok):
            out[ok] += self.lens_log_likelihoods(theta[ok]).sum(axis=1)
        return out


@dataclass(frozen=True)
class JointChain:
    """The hyper-parameters' samples (after burn-in) and the sampler's diagnostics."""

    names: tuple[str, ...]
    samples: np.ndarray = field(repr=False)  # (n, d)
    autocorrelation: np.ndarray = field(repr=False)  # per parameter, steps
    acceptance: float
    steps: int
    walkers: int
    burn: int

    def column(self, name: str) -> np.ndarray:
        """The samples of one hyper-parameter."""
        return self.samples[:, self.names.index(name)]

    def summary(self, name: str) -> dict:
        """Its five quantiles (median, p16, p84, p2.5, p97.5)."""
        return quantile_summary(self.column(name))


def _start(like: JointLikelihood, walkers: int, rng) -> np.ndarray:
    """Walkers spread over the priors' middle, where the likelihood is finite."""
    starts = {
        "H0": (60.0, 80.0),
        "lambda_mean": (0.9, 1.1),
        "lambda_scatter": (0.01, 0.1),
        "beta_mean": (-0.1, 0.3),
        "beta_scatter": (0.01, 0.1),
        "r_ani_mean": (1.0, 3.0),
        "r_ani_scatter": (0.05, 0.3),
    }
    free = {f[0]: f for f in like.population.free_cosmology()}
    p0 = np.column_stack(
        [
            np.zeros(walkers) if name in free else rng.uniform(*starts[name], walkers)
            for name in like.names
        ]
    )
    for name, (_, mean, sigma, _, _) in free.items():
        # near the prior's mean, inside the distance tables
        p = like.parameters[like.names.index(name)]
        p0[:, like.names.index(name)] = np.clip(
            mean + 0.3 * sigma * rng.standard_normal(walkers), p.lower, p.upper
        )
    # the best of a broad H0 scan in the middle of the others, so walkers start near the mode
    scan = np.repeat(np.median(p0, axis=0)[None, :], 141, axis=0)
    scan[:, 0] = np.linspace(30.0, 140.0, 141)
    best = scan[int(np.argmax(like(scan))), 0]
    p0[:, 0] = best * (1.0 + 0.01 * rng.standard_normal(walkers))
    return p0


def sample_joint(
    like: JointLikelihood, *, walkers: int = 32, steps: int = 3000, seed: int = 1
) -> JointChain:
    """Sample the hyper-parameters with emcee, all walkers of a move in one call.

    Differential-evolution moves (ter Braak 2006, Stat. Comput. 16, 239; with the snooker
    update of ter Braak & Vrugt 2008, Stat. Comput. 18, 435): on the mock population they
    decorrelate in 27 steps against the stretch move's 67 (measured, 40 lenses).
    """
    import emcee

    rng = np.random.default_rng(seed)
    ndim = len(like.names)
    walkers = max(walkers, 2 * ndim + 2)
    p0 = _start(like, walkers, rng)
    moves = [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
    sampler = emcee.EnsembleSampler(walkers, ndim, like, vectorize=True, moves=moves)
    sampler.random_state = np.random.RandomState(int(rng.integers(2**31))).get_state()
    sampler.run_mcmc(p0, steps, progress=False)
    chain = sampler.get_chain()
    burn = steps // 3
    tau = integrated_time(chain[burn:])
    return JointChain(
        names=like.names,
        samples=chain[burn:].reshape(-1, ndim),
        autocorrelation=np.asarray(tau, dtype=float),
        acceptance=float(np.mean(sampler.acceptance_fraction)),
        steps=steps,
        walkers=walkers,
        burn=burn,
    )


def lens_h0_curve(like: JointLikelihood, index: int, at: np.ndarray, grid=None) -> dict | None:
    """One lens's H0 posterior (uniform prior) with the other hyper-parameters at ``at``.

    None for a lens without delays (its kinematics do not measure H0).
    """
    if not like.terms[index].delays:
        return None
    grid = np.linspace(20.0, 150.0, 521) if grid is None else grid
    theta = np.repeat(np.asarray(at, dtype=float)[None, :], len(grid), axis=0)
    theta[:, like.names.index("H0")] = grid
    log_l = like.lens_log_likelihood(index, theta)
    w = np.exp(log_l - np.max(log_l))
    q = weighted_quantiles(grid, w / w.sum(), [50, 16, 84, 2.5, 97.5])
    return dict(zip(("median", "p16", "p84", "p2.5", "p97.5"), map(float, q)))
