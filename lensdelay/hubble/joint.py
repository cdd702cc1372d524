"""H0 from many lenses at once, the mass-sheet degeneracy broken by stellar kinematics.

A hierarchical model with the internal mass sheet and the orbital anisotropy as
population quantities.

The probability model (docs/statistics.md, "Joint H0") for lenses i = 1..L, each with
measured delays Δt_i (covariance C_i) and/or a measured dispersion σ_i ± e_i:

* hyper-parameters θ: H0, optionally Ωm (flat ΛCDM), the mean λ̄ and scatter s_λ of the
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
from astropy.cosmology import FlatLambdaCDM
from scipy.interpolate import CubicSpline
from scipy.special import logsumexp

from lensdelay.errors import InputError
from lensdelay.inference.sampling import integrated_time
from lensdelay.inference.summaries import quantile_summary, weighted_quantiles
from lensdelay.lensing.distances import DelayDistanceTable, LensDistances

__all__ = [
    "ANISOTROPY_POPULATIONS",
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
    """

    anisotropy: str = "osipkov_merritt"
    lambda_int: bool = True
    om0: float | tuple[float, float] = 0.3

    def __post_init__(self):
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

    @property
    def om0_free(self) -> bool:
        """Whether Ωm is inferred."""
        return np.ndim(self.om0) != 0

    def parameters(self) -> tuple[HyperParameter, ...]:
        """The hyper-parameters in their order, with their priors."""
        out = [HyperParameter("H0", 20.0, 150.0)]
        if self.om0_free:
            grid = self.om0_grid()
            out.append(HyperParameter("Om0", grid[0], grid[-1], gaussian=tuple(self.om0)))
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

    def om0_grid(self) -> np.ndarray:
        """Ωm nodes of the distance splines: the prior's ±6σ (within OM0_RANGE).

        Distances vary slowly with Ωm: 13 nodes keep a cubic spline's error below 1e-4
        (:class:`~lensdelay.lensing.distances.DelayDistanceTable` measures it).
        """
        if not self.om0_free:
            return np.array([float(self.om0)])
        mean, sigma = self.om0
        lo, hi = max(OM0_RANGE[0], mean - 6 * sigma), min(OM0_RANGE[1], mean + 6 * sigma)
        return np.linspace(lo, hi, 13)

    @property
    def names(self) -> tuple[str, ...]:
        """The hyper-parameters' names, in order."""
        return tuple(p.name for p in self.parameters())


class _LensTerms:
    """One lens's fixed Monte Carlo draws and precomputed arrays."""

    def __init__(self, lens, population: Population, om_grid, rng: np.random.Generator):
        n = len(lens.model_days)
        self.lens = lens
        mean, sigma = lens.kappa_prior
        self.kappa = mean + sigma * rng.standard_normal(n)
        self.z_lambda = rng.standard_normal(n)
        self.z_ani = rng.standard_normal(n)
        self.delays = lens.has_delays
        if self.delays:
            self.model_days = lens.model_days
            self.measured = lens.measured_days
            self.cov_inv = np.linalg.inv(lens.delay_covariance)
            sign, logdet = np.linalg.slogdet(2.0 * np.pi * lens.delay_covariance)
            self.norm = -0.5 * logdet
            # D_Δt(H_ref, Ωm) / D_Δt(H_ref, Ωm_ref) per measured delay, as a function of Ωm
            self.distance = [
                self._ddt_ratio(z, d, population, om_grid)
                for z, d in zip(lens.delay_source_redshifts, lens.reference_ddt_mpc)
            ]
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
            if population.om0_free:
                ratios = [lens.dispersion_ratio(FlatLambdaCDM(H0=70.0, Om0=om)) for om in om_grid]
                self.dispersion_ratio = CubicSpline(om_grid, ratios)
            else:
                fixed = lens.dispersion_ratio(FlatLambdaCDM(H0=70.0, Om0=population.om0))
                self.dispersion_ratio = lambda om0, fixed=fixed: np.full(np.shape(om0), fixed)

    def _ddt_ratio(self, z_s, reference_mpc, population, om_grid):
        """D_Δt(70, Ωm) / D_Δt,ref as a function of Ωm (flat ΛCDM without radiation)."""
        if not population.om0_free:
            cosmo = FlatLambdaCDM(H0=_H_TABLE, Om0=float(population.om0))
            ddt = LensDistances(cosmo, self.lens.lens_redshift, z_s).time_delay_distance(z_s)
            return lambda om0, r=float(ddt.value) / reference_mpc: np.full(np.shape(om0), r)
        table = DelayDistanceTable(
            self.lens.lens_redshift, z_s, om0_range=(om_grid[0], om_grid[-1]), nodes=len(om_grid)
        )
        return CubicSpline(om_grid, table(_H_TABLE, om_grid) / reference_mpc)

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
        om_grid = population.om0_grid()
        self.terms = [_LensTerms(lens, population, om_grid, rng) for lens in lenses]
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

    def om0_of(self, theta) -> np.ndarray:
        """Ωm at each parameter set (its column, or the fixed value): (P, 1)."""
        fixed = 0.3 if self.population.om0_free else float(self.population.om0)
        return self._column(theta, "Om0", fixed)

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
        scale = t.dispersion_ratio(self.om0_of(theta)) * t.base[None, :] * sheet
        return np.sqrt(scale[:, :, None] * j)

    def lens_log_likelihood(self, index: int, theta: np.ndarray) -> np.ndarray:
        """The log likelihood of lens ``index`` at each parameter set: (P,) (numpy path)."""
        t = self.terms[index]
        theta = np.atleast_2d(theta)
        h0 = self._column(theta, "H0", 70.0)
        om0 = self.om0_of(theta)
        sheet = self._sheet(t, theta)  # the total mass-sheet factor λ_int (1 − κ_ext)
        log_l = np.zeros(sheet.shape)
        if t.delays:
            scale = (_H_TABLE / h0)[:, :, None] * np.stack([d(om0) for d in t.distance], axis=-1)
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
        om0 = self.om0_of(theta)
        ddt = [(_H_TABLE / h0) * d(om0) for t in self.terms if t.delays for d in t.distance]
        ddt_scale = np.hstack(ddt) if ddt else np.zeros((len(theta), 0))
        kin_ratio = np.hstack(
            [t.dispersion_ratio(om0) if t.kinematics else np.zeros_like(om0) for t in self.terms]
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
        "Om0": (0.25, 0.35),
        "lambda_mean": (0.9, 1.1),
        "lambda_scatter": (0.01, 0.1),
        "beta_mean": (-0.1, 0.3),
        "beta_scatter": (0.01, 0.1),
        "r_ani_mean": (1.0, 3.0),
        "r_ani_scatter": (0.05, 0.3),
    }
    p0 = np.column_stack([rng.uniform(*starts[name], walkers) for name in like.names])
    if "Om0" in like.names and like.population.om0_free:
        mean, sigma = like.population.om0
        p0[:, like.names.index("Om0")] = np.clip(
            mean + 0.3 * sigma * rng.standard_normal(walkers), *OM0_RANGE
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
