"""Unseen perturbers: dark subhaloes and satellites below detection, drawn per forecast sample.

A galaxy lens carries small haloes nobody sees: dark subhaloes, and satellites too faint
to pick out against the lens galaxy's light. Each moves the images by milliarcseconds and
changes the delays by per cents — most for the short delays of cross and cusp quads,
which are differences of nearly equal Fermat potentials. A fitted smooth model knows
nothing of them, so its windows are too narrow unless they are marginalised. This module
draws a population of such perturbers for every forecast sample and adds the delay
change they cause, given that the team has *fitted* the image positions:

1. **Population** (:class:`PerturberPopulation`). Their projected mass is a fraction
   f_sub of the lens's convergence, κ_sub(r) = f_sub κ(r), with κ(r) = θE/(2r) of an
   isothermal lens (common practice), between ``radius_range`` × θE. Masses follow
   dN/dM ∝ M^(−α) between ``mass_range`` (the upper end is the detection limit: a
   heavier one would be seen and belongs in ``[members]``). Since κ_sub ∝ 1/r, the
   number per unit radius is flat: radii are uniform in the annulus, angles uniform, and
   the expected number is N̄ = f_sub θE (r₂ − r₁) / ⟨θ_p²⟩, with θ_p the Einstein radius
   of a point of mass M, θ_p² = (4GM/c²) D_ls/(D_l D_s) (Schneider, Ehlers & Falco 1992,
   eq. 2.6a [1]_). Each perturber is a point mass softened over its own Einstein radius
   (ψ = ½ θ_p² ln(r² + θ_p²), the Plummer potential), a stand-in for a truncated halo.
   Defaults: f_sub = 0.01 (Vegetti et al. 2014 [2]_ infer f_sub = 0.0076, +0.0208/−0.0052,
   for 4×10⁶–4×10⁹ M☉ in SLACS lenses; Dalal & Kochanek 2002 [3]_ 0.006–0.07; both from
   memory), α = 1.9 (subhalo mass function of the Aquarius simulations, Springel et al.
   2008 [4]_, from memory), masses 10⁷–10¹⁰ M☉ (below 10⁷ M☉ the delay change is
   negligible: its variance grows as M_max^(3 − α); 10¹⁰ M☉, a satellite of about 1/10 of
   the lens's Einstein mass, is the detection limit assumed, common practice), radii
   0.5–3 θE.

2. **The fit absorbs what it can** (linear response at the best fit). The perturbers
   deflect the observed images' light by δα; with the smooth model held the images would
   move by δθ = A⁻¹ s δα (A the magnification matrix). The team's fit instead moves the
   model's parameters by the least-squares response δp = −J⁺ δr to the position residuals
   δr = δθ/σ (J the Jacobian of the normalised residuals, priors included, J⁺ its
   pseudo-inverse), which absorbs a uniform deflection (the source moves), a tidal field
   (the shear) and whatever else the recipe's freedom (multipoles) mimics. By Fermat's
   principle the arrival time of an image changes to first order by
   δτ_i = −s δψ(θ_i) + (∂τ_i/∂p)|_θ δp, the image's own shift entering only at second
   order; the delays change by the differences of δτ (in days, × D_dt/c).

What is left out, and said so: the astrometric anomalies the fit cannot absorb are not
used to down-weight perturber configurations (conservative: wider windows); the population
is that of galaxy lenses and is not applied to cluster lenses (their galaxies are
modelled as ``[members]``); line-of-sight haloes are not counted separately (they roughly
double the number for high source redshifts, Despali et al. 2018 [5]_, from memory —
raise f_sub to include them).

References
----------
.. [1] Schneider, P., Ehlers, J. & Falco, E. E. 1992, *Gravitational Lenses*, Springer.
.. [2] Vegetti, S. et al. 2014, MNRAS 442, 2017.
.. [3] Dalal, N. & Kochanek, C. S. 2002, ApJ 572, 25.
.. [4] Springel, V. et al. 2008, MNRAS 391, 1685.
.. [5] Despali, G. et al. 2018, MNRAS 475, 5424.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from astropy import constants as const
from astropy import units as u

from lensdelay.errors import InputError
from lensdelay.lensing import compiled, threads

__all__ = [
    "CHUNK_SAMPLES",
    "PerturberPopulation",
    "einstein_radius2_per_mass",
    "PerturberDraws",
    "draw_perturbers",
    "PerturberResponse",
    "lens_scale_and_centre",
    "perturber_response",
    "perturber_delays",
    "delays_for",
    "perturber_notes",
]


#: Samples handled at once when the perturbers' field is summed (memory ~ 100 MB).
CHUNK_SAMPLES = 20_000
#: Relative parameter step of the Fermat-potential derivatives (central differences).
_STEP = 1e-6


@dataclass(frozen=True)
class PerturberPopulation:
    """The unseen perturbers a forecast marginalises over (module docstring, item 1).

    Parameters
    ----------
    mass_fraction : float
        f_sub: their share of the lens's convergence (0 turns the term off).
    slope : float
        α of dN/dM ∝ M^(−α).
    mass_range : (float, float)
        Smallest and largest mass, solar masses; the largest is the detection limit.
    radius_range : (float, float)
        Inner and outer radius of the annulus they lie in, in units of θE.
    """

    mass_fraction: float = 0.01
    slope: float = 1.9
    mass_range: tuple[float, float] = (1e7, 1e10)
    radius_range: tuple[float, float] = (0.5, 3.0)

    def __post_init__(self) -> None:
        f = self.mass_fraction
        if not (isinstance(f, (int, float)) and math.isfinite(f) and 0.0 <= f <= 0.5):
            raise InputError(f"unseen mass fraction must be between 0 and 0.5, got {f!r}")
        lo, hi = self.mass_range
        if not (math.isfinite(lo) and math.isfinite(hi) and 0.0 < lo < hi):
            raise InputError(
                f"unseen mass range must be two masses 0 < low < high (solar masses), got "
                f"{self.mass_range!r}"
            )
        r1, r2 = self.radius_range
        if not 0.0 <= r1 < r2:
            raise InputError(
                f"unseen radius range must be 0 <= inner < outer (units of θE), got "
                f"{self.radius_range!r}"
            )
        if not 1.0 < self.slope < 3.0:
            raise InputError(f"unseen mass-function slope must be in (1, 3), got {self.slope!r}")

    def as_dict(self) -> dict:
        """The population as written into the output files."""
        return {
            "mass_fraction": self.mass_fraction,
            "mass_function_slope": self.slope,
            "mass_range_msun": list(self.mass_range),
            "radius_range_einstein_radii": list(self.radius_range),
        }

    @property
    def active(self) -> bool:
        """Whether there is anything to draw."""
        return self.mass_fraction > 0.0

    def mean_mass(self) -> float:
        """⟨M⟩ of dN/dM ∝ M^(−α) on the mass range (solar masses)."""
        a = self.slope
        lo, hi = self.mass_range
        first = (hi ** (2.0 - a) - lo ** (2.0 - a)) / (2.0 - a) if a != 2.0 else math.log(hi / lo)
        zeroth = (lo ** (1.0 - a) - hi ** (1.0 - a)) / (a - 1.0)
        return first / zeroth

    def expected_number(self, theta_e: float, arcsec2_per_msun: float) -> float:
        """N̄ = f_sub θE (r₂ − r₁) / ⟨θ_p²⟩ per lens (θE in arcsec)."""
        r1, r2 = self.radius_range
        return self.mass_fraction * theta_e * (r2 - r1) / (arcsec2_per_msun * self.mean_mass())

    def draw_masses(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """Draw n masses from the truncated power law (inverse of its distribution function)."""
        a = self.slope
        lo, hi = self.mass_range
        e = 1.0 - a
        return (lo**e + rng.random(n) * (hi**e - lo**e)) ** (1.0 / e)


def einstein_radius2_per_mass(distances) -> float:
    """θ_p² per solar mass, arcsec², at the lens's reference source redshift.

    θ_p² = (4GM/c²) D_ls/(D_l D_s) (Schneider, Ehlers & Falco 1992, eq. 2.6a).
    """
    z_ref = distances.reference_source_redshift
    d_l = distances.lens_distance
    d_s = distances.source_distance(z_ref)
    d_ls = distances.lens_source_distance(z_ref)
    theta2 = 4 * const.G * const.M_sun / const.c**2 * d_ls / (d_l * d_s)
    return float((theta2.decompose() * u.rad**2).to_value(u.arcsec**2))


@dataclass(frozen=True)
class PerturberDraws:
    """Perturbers of many samples, flattened: each row belongs to sample ``owner``."""

    owner: np.ndarray
    x: np.ndarray
    y: np.ndarray
    theta2: np.ndarray  # θ_p², arcsec²

    def field(self, n: int, x: np.ndarray, y: np.ndarray):
        """(ψ, α_x, α_y) of each sample's perturbers at its points (n, I).

        Softened point masses: ψ = ½ θ_p² ln(r² + θ_p²), α = θ_p² Δθ/(r² + θ_p²).
        Rows of ``x``, ``y`` are samples; NaN points give NaN.
        """
        x = np.ascontiguousarray(x, dtype=float)
        y = np.ascontiguousarray(y, dtype=float)
        psi = np.zeros(x.shape)
        ax = np.zeros(x.shape)
        ay = np.zeros(x.shape)
        if len(self.owner) == 0:
            return psi + 0.0 * x, ax + 0.0 * x, ay + 0.0 * y
        if compiled.enabled() and x.ndim == 2:
            # one pass over perturbers × points, no (T, I) temporaries (same formulas)
            self._compiled_field(x, y, psi, ax, ay)
        else:
            dx = x[self.owner] - self.x[:, None]  # (T, I)
            dy = y[self.owner] - self.y[:, None]
            t2 = self.theta2[:, None]
            soft = dx * dx + dy * dy + t2
            for out, part in (
                (psi, 0.5 * t2 * np.log(soft)),
                (ax, t2 * dx / soft),
                (ay, t2 * dy / soft),
            ):
                for i in range(x.shape[1]):
                    out[:, i] = np.bincount(self.owner, weights=part[:, i], minlength=n)
        nan = ~np.isfinite(x) | ~np.isfinite(y)
        return np.where(nan, np.nan, psi), np.where(nan, np.nan, ax), np.where(nan, np.nan, ay)

    def _compiled_field(self, x, y, psi, ax, ay) -> None:
        """:meth:`field`'s sums by the kernel, in place; ranges of whole samples on threads.

        Each sample's perturbers are added in their own order whatever the split, so
        the sums are those of one call bit for bit (a range never splits a sample).
        """
        owner = np.ascontiguousarray(self.owner, dtype=np.int64)
        args = (
            owner,
            np.ascontiguousarray(self.x, dtype=float),
            np.ascontiguousarray(self.y, dtype=float),
            np.ascontiguousarray(self.theta2, dtype=float),
            x if x.flags.writeable else x.copy(),
            y if y.flags.writeable else y.copy(),
            psi,
            ax,
            ay,
        )
        kernel = compiled.kernel_module().softened_points_field
        parts = threads.parts_for(owner.size * x.shape[1], owner.size)
        if parts > 1 and np.all(owner[1:] >= owner[:-1]):
            # cut where a new sample starts, so no two threads add into one row
            cuts = threads.even_bounds(owner.size, parts)
            bounds = [int(np.searchsorted(owner, owner[c])) if c < owner.size else c for c in cuts]
        else:
            bounds = [0, owner.size]
        threads.run_ranges(lambda lo, hi: kernel(*args, lo, hi), bounds)


def draw_perturbers(
    population: PerturberPopulation,
    n: int,
    theta_e: float,
    centre: tuple[float, float],
    arcsec2_per_msun: float,
    rng: np.random.Generator,
) -> PerturberDraws:
    """Each of n samples' perturbers: a Poisson number, uniform radius and angle, masses."""
    mean = population.expected_number(theta_e, arcsec2_per_msun)
    counts = rng.poisson(mean, n)
    owner = np.repeat(np.arange(n), counts)
    total = len(owner)
    r1, r2 = population.radius_range
    radius = theta_e * (r1 + (r2 - r1) * rng.random(total))
    angle = 2.0 * np.pi * rng.random(total)
    theta2 = arcsec2_per_msun * population.draw_masses(total, rng)
    return PerturberDraws(
        owner,
        centre[0] + radius * np.cos(angle),
        centre[1] + radius * np.sin(angle),
        theta2,
    )


@dataclass(frozen=True)
class PerturberResponse:
    """What one model's fit makes of perturbers (module docstring, item 2), at its best fit.

    ``absorb`` (n_par, n_position_rows) is J⁺ restricted to the position residuals;
    ``fermat_gradient`` (I, n_par) is ∂τ_i/∂p at the tracks' fixed positions; ``observed``
    per family (x, y, scale, σ, A⁻¹ entries) at the observed images.
    """

    population: PerturberPopulation
    theta_e: float
    centre: tuple[float, float]
    arcsec2_per_msun: float
    absorb: np.ndarray
    fermat_gradient: np.ndarray
    observed: tuple
    family_scale: float

    @property
    def expected_number(self) -> float:
        """Mean number of perturbers per sample."""
        return self.population.expected_number(self.theta_e, self.arcsec2_per_msun)


def lens_scale_and_centre(like, values: np.ndarray) -> tuple[float, tuple[float, float]]:
    """θE (arcsec) and centre of the model at ``values``, from its observed images.

    The centre is the first centred component's; θE the median distance of every family's
    observed images from it (an isothermal lens's images straddle θE).
    """
    lens = like.model.lens(np.asarray(values, dtype=float)[: like.n_model])
    centres = lens.centres()
    cx, cy = centres[0] if centres else (0.0, 0.0)
    radii = np.concatenate([np.hypot(f.x - cx, f.y - cy) for f in like.families])
    return float(np.median(radii)), (float(cx), float(cy))


def perturber_response(
    like, values: np.ndarray, tracks, population: PerturberPopulation
) -> PerturberResponse | None:
    """The linear response of the fit at ``values`` (None when the term is off or n/a).

    Not applied to a lens with ``[members]`` (a cluster, or a group whose galaxies are
    modelled): the population is that of single galaxy lenses.
    """
    if population is None or not population.active or like.model.members is not None:
        return None
    values = np.asarray(values, dtype=float)
    theta_e, centre = lens_scale_and_centre(like, values)
    jac = like.information_jacobian(values[None, :])[0]  # (m, n), central differences
    n_position = sum(2 * len(f.x) for f in like.families)
    with np.errstate(all="ignore"):
        absorb = np.linalg.pinv(np.where(np.isfinite(jac), jac, 0.0))[:, :n_position]
    lens = like.lens_for(values[None, :])
    observed = []
    for k, fam in enumerate(like.families):
        s = float(np.ravel(like.family_scale(k, values[None, :]))[0])
        a11, a12, a22 = lens.jacobian(fam.x[None, :], fam.y[None, :], s)
        det = a11 * a22 - a12 * a12
        # A⁻¹ = [[a22, −a12], [−a12, a11]] / det
        observed.append(
            (fam.x, fam.y, s, fam.sigma, (a22 / det)[0], (-a12 / det)[0], (a11 / det)[0])
        )
    k_fam = [f.label for f in like.families].index(tracks[0].family)
    tx = np.array([t.x for t in tracks])
    ty = np.array([t.y for t in tracks])
    n_par = len(values)
    step = _STEP * np.maximum(1.0, np.abs(values))
    up = np.minimum(step, like.upper - values)
    down = np.minimum(step, values - like.lower)
    rows = np.concatenate([values + np.diag(up), values - np.diag(down)])
    shifted = like.lens_for(rows)
    src = rows[:, like.source_slice(k_fam)]
    with np.errstate(all="ignore"):
        tau = shifted.fermat_potential(
            tx[None, :], ty[None, :], src[:, :1], src[:, 1:], like.family_scale(k_fam, rows)
        )
        gradient = ((tau[:n_par] - tau[n_par:]) / (up + down)[:, None]).T  # (I, n)
    gradient = np.where(np.isfinite(gradient), gradient, 0.0)
    return PerturberResponse(
        population,
        theta_e,
        centre,
        einstein_radius2_per_mass(like.distances),
        absorb,
        gradient,
        tuple(observed),
        float(np.ravel(like.family_scale(k_fam, values[None, :]))[0]),
    )


def perturber_delays(
    response: PerturberResponse,
    x: np.ndarray,
    y: np.ndarray,
    reference: int,
    days,
    rng: np.random.Generator,
) -> np.ndarray:
    """Delay changes (days, reference image 0) of every sample from its drawn perturbers.

    Parameters
    ----------
    response : PerturberResponse
    x, y : ndarray, (n, I)
        Each sample's image positions (NaN where an image does not exist).
    reference : int
        Column of the reference image.
    days : float or ndarray (n,)
        D_dt/c in days per arcsec² per sample.
    rng : numpy.random.Generator
    """
    n = len(x)
    out = np.zeros(x.shape)
    days = np.broadcast_to(np.asarray(days, dtype=float), (n,))
    for start in range(0, n, CHUNK_SAMPLES):
        stop = min(start + CHUNK_SAMPLES, n)
        draws = draw_perturbers(
            response.population,
            stop - start,
            response.theta_e,
            response.centre,
            response.arcsec2_per_msun,
            rng,
        )
        out[start:stop] = delays_for(
            response, draws, x[start:stop], y[start:stop], reference, days[start:stop]
        )
    return out


def delays_for(
    response: PerturberResponse,
    draws: PerturberDraws,
    x: np.ndarray,
    y: np.ndarray,
    reference: int,
    days: np.ndarray,
) -> np.ndarray:
    """Delay changes (days) of m samples with the given perturbers (module docstring, 2)."""
    m = len(x)
    # position residuals the perturbers would leave with the model held: δr = A⁻¹ s δα / σ
    residual_columns = []
    for ox, oy, s, sigma, b11, b12, b22 in response.observed:
        _, dax, day = draws.field(
            m, np.broadcast_to(ox, (m, len(ox))), np.broadcast_to(oy, (m, len(oy)))
        )
        residual_columns += [
            s * (b11 * dax + b12 * day) / sigma,
            s * (b12 * dax + b22 * day) / sigma,
        ]
    residual = np.hstack(residual_columns)  # (m, position rows), the likelihood's order
    shift = -residual @ response.absorb.T  # the fit's response δp, (m, n_par)
    psi, _, _ = draws.field(m, x, y)
    tau = -response.family_scale * psi + shift @ response.fermat_gradient.T
    return (tau - tau[:, reference : reference + 1]) * np.reshape(days, (-1, 1))


def perturber_notes(response: PerturberResponse | None, population) -> list[str]:
    """What the forecast did about unseen perturbers, for the model's notes."""
    if population is None or not population.active:
        return ["unseen perturbers (subhaloes, faint satellites) not marginalised: switched off"]
    if response is None:
        return [
            "unseen perturbers not marginalised: the model has [members] (a group or cluster "
            "whose galaxies are modelled; the galaxy-lens population does not apply)"
        ]
    lo, hi = population.mass_range
    r1, r2 = population.radius_range
    return [
        f"unseen perturbers marginalised: about {response.expected_number:.0f} per sample "
        f"(f_sub {population.mass_fraction:g} of the convergence, {lo:.0e}-{hi:.0e} Msun, "
        f"{r1:g}-{r2:g} x thetaE = {response.theta_e:.2f} arcsec), their delay change after "
        "the fit absorbs what it can"
    ]
