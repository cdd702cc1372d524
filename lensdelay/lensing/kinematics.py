"""Stellar kinematics of a lens galaxy: the velocity dispersion a lens model predicts.

The luminosity-weighted line-of-sight velocity dispersion inside a slit or circular
aperture, blurred by Gaussian seeing, for stars of a Hernquist [8]_ or Jaffe [9]_ light
profile orbiting in a spherical power-law mass of the fitted slope γ and Einstein radius
θE.

The spherical Jeans equation with anisotropy β(r) = 1 − σ_t²/σ_r² is solved with its
integrating factor f(r) = exp ∫ 2β/r dr ([1]_, [2]_):

    ρ*(r) σ_r²(r) = (1/f(r)) ∫_r^∞ f(s) ρ*(s) G M(s) / s² ds,

and projected along the line of sight [3]_:

    Σ*(R) σ_los²(R) = 2 ∫_R^∞ (1 − β(r) R²/r²) ρ*(r) σ_r²(r) r dr / √(r² − R²).

The aperture average weighs both by the light the aperture receives through the seeing
[4]_: σ_ap² = ∫ W(R) Σ*σ_los²(R) dR / ∫ W(R) Σ*(R) dR, where W(R) dR is the fraction of
a thin ring of radius R that the seeing-blurred aperture collects, times its length 2πR.

Anisotropy models: isotropic (β = 0, f = 1); constant β (f = r^{2β}); Osipkov–Merritt
([5]_, [6]_) (β = r²/(r² + r_a²), f = r² + r_a²), with r_a given in units of the effective radius.

Units and scaling. A spherical power law of 3-D slope γ with the convergence
κ = (3 − γ)/2 · (θE/θ)^{γ−1} (CONVENTIONS.md) holds the 3-D mass

    G M(r) / D_l = F(γ) c² (D_s/D_ls) θE² (r/θE)^{3−γ},  F(γ) = Γ(γ/2) / (2√π Γ((γ−1)/2)),

(the projected mass inside θE is π θE² Σ_cr; the 3-D to 2-D mass ratio of a power law is
2Γ(γ/2)/(√π Γ((γ−1)/2)) — for γ = 2, 2/π); so with every angle in arcsec

    σ_ap² = c² (D_s/D_ls) θE^{γ−1} F(γ) J(γ, anisotropy) · (1 arcsec in radians),

where J is the dimensionless aperture average computed with G M(s)/s² → s^{1−γ}. For
γ = 2 and an isothermal tracer J = 1/2, which gives the singular isothermal sphere's
σ² = c² θE D_s / (4π D_ls) [7]_. The internal mass sheet scales the prediction as
σ² → λ_int (1 − κ_ext) σ² (docs/statistics.md, "Joint H0").

References
----------
.. [1] Binney, J. & Tremaine, S. 2008, *Galactic Dynamics*, 2nd ed., Princeton, Sect. 4.8
   (the spherical Jeans equation; equation numbers not quoted: from memory).
.. [2] Mamon, G. A. & Łokas, E. L. 2005, MNRAS 363, 705, Appendix A (the integrating
   factor and its forms for constant β and Osipkov–Merritt; from memory).
.. [3] Binney, J. & Mamon, G. A. 1982, MNRAS 200, 361 (the projection with anisotropy).
.. [4] Suyu, S. H. et al. 2010, ApJ 711, 201, Sect. 4 (aperture and seeing weighting of a
   lens galaxy's dispersion; from memory).
.. [5] Osipkov, L. P. 1979, Soviet Astron. Lett. 5, 42.
.. [6] Merritt, D. 1985, AJ 90, 1027.
.. [7] Schneider, P., Ehlers, J. & Falco, E. E. 1992, *Gravitational Lenses*, Sect. 8.1.4.
.. [8] Hernquist, L. 1990, ApJ 356, 359, eqs. (2), (32)–(33), (38): R_e = 1.8153 a.
.. [9] Jaffe, W. 1983, MNRAS 202, 995: R_e = 0.7447 a.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import erf, gammaln

__all__ = [
    "LIGHT_PROFILES",
    "ANISOTROPY_MODELS",
    "ARCSEC",
    "SPEED_OF_LIGHT_KMS",
    "LightProfile",
    "Aperture",
    "power_law_mass_factor",
    "jeans_radial",
    "projected_dispersion",
    "aperture_weights",
    "aperture_dispersion",
    "aperture_dispersion_of_mass",
    "power_law_mass_term",
    "cored_sheet_mass_term",
    "DispersionTable",
    "dispersion_tables",
]

#: 1 arcsec in radians.
ARCSEC = np.pi / 648000.0
#: The speed of light in km/s (exact, SI definition).
SPEED_OF_LIGHT_KMS = 299792.458
#: Light profiles and their scale radius per effective (projected half-light) radius.
LIGHT_PROFILES = {
    "hernquist": 1.0 / 1.8153,  # Hernquist 1990 eq. (38)
    "jaffe": 1.0 / 0.7447,  # Jaffe 1983
}
#: Anisotropy models: the parameter each takes (None: none).
ANISOTROPY_MODELS = {"isotropic": None, "constant": "beta", "osipkov_merritt": "r_ani"}

# the radial grid of the Jeans integrals: from a tenth of the smallest projected radius
# to R_MAX_FACTOR times the problem's largest scale, N_RADII points even in ln r
_R_MAX_FACTOR, _N_RADII = 1e4, 1200
# points along each line of sight (Simpson's rule in t, r = R cosh t)
_N_SIGHT = 401
# projected radii of the aperture integral
_N_PROJECTED = 241


@dataclass(frozen=True)
class LightProfile:
    """A spherical tracer density ρ*(r) (arbitrary normalisation).

    ``kind`` is ``hernquist`` or ``jaffe`` with ``scale`` a (arcsec), or ``power_law``
    with ``slope`` δ (ρ* ∝ r^−δ; for the closed-form checks).
    """

    kind: str
    scale: float = 1.0
    slope: float = 2.0

    @classmethod
    def from_effective_radius(cls, kind: str, effective_radius: float) -> "LightProfile":
        """The profile whose projected half-light radius is ``effective_radius`` (arcsec)."""
        if kind not in LIGHT_PROFILES:
            raise ValueError(f"light profile must be one of {sorted(LIGHT_PROFILES)}, got {kind!r}")
        return cls(kind, scale=LIGHT_PROFILES[kind] * effective_radius)

    def density(self, r: np.ndarray) -> np.ndarray:
        """ρ*(r) at 3-D radius r (arcsec)."""
        x = np.asarray(r, dtype=float) / self.scale
        if self.kind == "hernquist":
            return 1.0 / (x * (1.0 + x) ** 3)  # Hernquist 1990 eq. (2)
        if self.kind == "jaffe":
            return 1.0 / (x**2 * (1.0 + x) ** 2)  # Jaffe 1983
        if self.kind == "power_law":
            return x ** (-self.slope)
        raise ValueError(f"light profile kind {self.kind!r} is unknown")


def power_law_mass_factor(gamma) -> np.ndarray:
    """F(γ) = Γ(γ/2) / (2√π Γ((γ−1)/2)): G M(r)/D_l = F c² (D_s/D_ls) θE² (r/θE)^{3−γ}."""
    gamma = np.asarray(gamma, dtype=float)
    return np.exp(gammaln(gamma / 2.0) - gammaln((gamma - 1.0) / 2.0)) / (2.0 * np.sqrt(np.pi))


def _anisotropy(kind: str, parameter: float, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """β(r) and ln f(r) of an anisotropy model (f the Jeans integrating factor)."""
    if kind == "isotropic":
        return np.zeros_like(r), np.zeros_like(r)
    if kind == "constant":
        return np.full_like(r, parameter), 2.0 * parameter * np.log(r)
    if kind == "osipkov_merritt":
        ra2 = parameter**2
        return r**2 / (r**2 + ra2), np.log(r**2 + ra2)
    raise ValueError(f"anisotropy must be one of {sorted(ANISOTROPY_MODELS)}, got {kind!r}")


def _radii(inner: float, outer: float) -> np.ndarray:
    """The 3-D radii of the Jeans integrals: even in ln r from ``inner``/10 to 1e4 ``outer``."""
    return np.geomspace(inner / 10.0, _R_MAX_FACTOR * outer, _N_RADII)


def jeans_radial(r, light: LightProfile, mass_term, anisotropy="isotropic", parameter=0.0):
    """ρ*(r) σ_r²(r) on the grid ``r`` (ascending, evenly spaced in ln r).

    ``mass_term(s)`` is G M(s)/s² in the caller's units. The integral beyond the last
    radius is added as the power law the last two points define (exact for power laws).
    """
    _, ln_f = _anisotropy(anisotropy, parameter, r)
    # integrate f ρ m in ln s, from the top down; f is scaled by its value at the top so
    # that large exponents (constant β) never overflow
    f = np.exp(ln_f - ln_f[-1])
    g = f * light.density(r) * mass_term(r) * r
    step = np.log(r[1] / r[0])
    upper = np.concatenate([np.cumsum(0.5 * step * (g[1:] + g[:-1])[::-1])[::-1], [0.0]])
    slope = np.log(g[-1] / g[-2]) / step
    tail = g[-1] / -slope if slope < 0 else np.inf
    return (upper + tail) / f


def projected_dispersion(
    radii_projected, light: LightProfile, mass_term, anisotropy="isotropic", parameter=0.0
):
    """Σ*(R) σ_los²(R) and Σ*(R) at projected radii R (arcsec), two arrays like R."""
    big_r = np.atleast_1d(np.asarray(radii_projected, dtype=float))
    r = _radii(big_r.min(), max(light.scale, big_r.max()))
    pressure = jeans_radial(r, light, mass_term, anisotropy, parameter)
    sight = _Sightlines(big_r, r)
    return sight.project(pressure, anisotropy, parameter), sight.project(light.density(r))


class _Sightlines:
    """Lines of sight at projected radii R through a radial grid r (Simpson in t, r = R cosh t).

    ``project(v)`` is 2 ∫_R^∞ (1 − β R²/r²) v(r) r dr / √(r² − R²); beyond the grid's last
    radius v is continued as the power law its last two points define (r ≫ R there, so
    the tail is 2 ∫ v dr).
    """

    def __init__(self, big_r: np.ndarray, r: np.ndarray):
        self.big_r, self.r, self.ln_r = big_r, r, np.log(r)
        t_top = np.arccosh(np.maximum(r[-1] / big_r, 1.0))
        t = np.linspace(0.0, 1.0, _N_SIGHT)[None, :] * t_top[:, None]
        self.rr = big_r[:, None] * np.cosh(t)
        self.ln_rr = np.log(self.rr)
        w = np.ones(_N_SIGHT)
        w[1:-1:2], w[2:-1:2] = 4.0, 2.0
        self.weights = w * (t_top / (_N_SIGHT - 1) / 3.0)[:, None]
        self._beta_cache = {}

    def project(self, values, anisotropy="isotropic", parameter=0.0) -> np.ndarray:
        ln_v = np.log(values)
        v = np.exp(np.interp(self.ln_rr, self.ln_r, ln_v))
        integrand = v * self.rr
        if anisotropy != "isotropic":
            beta, _ = _anisotropy(anisotropy, parameter, self.rr)
            integrand *= 1.0 - beta * (self.big_r[:, None] / self.rr) ** 2
        body = 2.0 * np.sum(integrand * self.weights, axis=1)
        q = (ln_v[-1] - ln_v[-2]) / (self.ln_r[-1] - self.ln_r[-2])
        tail = 2.0 * values[-1] * self.r[-1] / (-q - 1.0) if q < -1 else np.inf
        return body + tail


@dataclass(frozen=True)
class Aperture:
    """An aperture seen through Gaussian seeing of ``seeing_fwhm`` arcsec.

    A slit (``width`` × ``length``, centred), a circle (``radius``) or a ring between
    ``inner`` and ``radius`` (``annulus``: one bin of spatially resolved kinematics),
    in arcsec.
    """

    kind: str
    seeing_fwhm: float
    width: float = 0.0
    length: float = 0.0
    radius: float = 0.0
    inner: float = 0.0

    @property
    def extent(self) -> float:
        """The largest radius the blurred aperture collects light from (arcsec)."""
        half = np.hypot(self.width, self.length) / 2.0 if self.kind == "slit" else self.radius
        return float(half + 4.0 * self.seeing_fwhm)

    def collected(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """The fraction of a point source at (x, y) the blurred aperture collects."""
        s = self.seeing_fwhm / (2.0 * np.sqrt(2.0 * np.log(2.0)))
        if self.kind == "slit":
            root2s = np.sqrt(2.0) * s
            fx = 0.5 * (erf((self.width / 2 - x) / root2s) + erf((self.width / 2 + x) / root2s))
            fy = 0.5 * (erf((self.length / 2 - y) / root2s) + erf((self.length / 2 + y) / root2s))
            return fx * fy
        if self.kind in ("circle", "annulus"):
            from scipy.stats import ncx2

            # |position + noise|² / s² is non-central χ² with 2 degrees of freedom
            shift = (x**2 + y**2) / s**2
            inside = ncx2.cdf((self.radius / s) ** 2, 2, shift)
            if self.kind == "annulus" and self.inner > 0:
                inside = inside - ncx2.cdf((self.inner / s) ** 2, 2, shift)
            return inside
        raise ValueError(f"aperture must be 'slit', 'circle' or 'annulus', got {self.kind!r}")


def aperture_weights(aperture: Aperture, big_r: np.ndarray, n_angles: int = 256) -> np.ndarray:
    """W(R): the length 2πR of a ring times the mean fraction of it the aperture collects."""
    phi = (np.arange(n_angles) + 0.5) * (np.pi / 2.0) / n_angles  # a quadrant: both are symmetric
    x = big_r[:, None] * np.cos(phi)[None, :]
    y = big_r[:, None] * np.sin(phi)[None, :]
    return 2.0 * np.pi * big_r * aperture.collected(x, y).mean(axis=1)


def _projected_grid(extent: float) -> np.ndarray:
    """Projected radii of the aperture integral, even in ln R up to the apertures' extent."""
    return extent * np.geomspace(1e-5, 1.0, _N_PROJECTED)


def _simpson_ln(values: np.ndarray, big_r: np.ndarray) -> float:
    """∫ v dR over the ln-even grid as ∫ v R d ln R (Simpson)."""
    h = np.log(big_r[1] / big_r[0])
    w = np.ones(len(big_r))
    w[1:-1:2], w[2:-1:2] = 4.0, 2.0
    return float(np.sum(w * values * big_r) * h / 3.0)


class _ApertureAverage:
    """The aperture-and-seeing average of Σ*σ_los² over Σ* for one light profile.

    Several apertures (the rings of resolved kinematics) share one Jeans solution and its
    projection on the grid of the widest; each only weighs them with its own W(R).
    """

    def __init__(self, light: LightProfile, apertures):
        apertures = [apertures] if isinstance(apertures, Aperture) else list(apertures)
        self.light = light
        self.big_r = _projected_grid(max(a.extent for a in apertures))
        self.weights = [aperture_weights(a, self.big_r) for a in apertures]
        self.r = _radii(self.big_r.min(), max(light.scale, self.big_r.max()))
        self.sight = _Sightlines(self.big_r, self.r)
        lum = self.sight.project(light.density(self.r))
        self.luminosity = [_simpson_ln(w * lum, self.big_r) for w in self.weights]

    def averages(self, mass_term, anisotropy="isotropic", parameter=0.0) -> np.ndarray:
        """σ_ap² (per the mass term's units) in each aperture: (apertures,)."""
        pressure = jeans_radial(self.r, self.light, mass_term, anisotropy, parameter)
        sig = self.sight.project(pressure, anisotropy, parameter)
        return np.array(
            [
                _simpson_ln(w * sig, self.big_r) / lum
                for w, lum in zip(self.weights, self.luminosity)
            ]
        )

    def __call__(self, mass_term, anisotropy="isotropic", parameter=0.0) -> float:
        """σ_ap² in the first (or only) aperture."""
        return float(self.averages(mass_term, anisotropy, parameter)[0])


def power_law_mass_term(gamma: float, einstein_radius: float):
    """G M(s)/(D_l s²) of a power law per c² (D_s/D_ls) (angles in arcsec): F θE^(γ−1) s^(1−γ)."""
    factor = float(power_law_mass_factor(gamma)) * einstein_radius ** (gamma - 1.0)
    return lambda s: factor * s ** (1.0 - gamma)


def cored_sheet_mass_term(core: float):
    """The same for the cored sheet κ(θ) = θc²/(θ² + θc²) (the physical mass-sheet transform).

    Its 3-D density ρ ∝ (r² + θc²)^(−3/2) projects to that convergence, and holds
    M(r) ∝ asinh(r/θc) − r/√(r² + θc²); per c² (D_s/D_ls) and in arcsec,
    G M(s)/(D_l s²) = (θc²/2) [asinh(s/θc) − s/√(s² + θc²)] / s². For θc far outside the
    aperture it adds almost nothing there, so κ → λκ + (1 − λ)κ_c gives σ² ≈ λσ².
    """
    return lambda s: 0.5 * core**2 * (np.arcsinh(s / core) - s / np.hypot(s, core)) / s**2


def aperture_dispersion_of_mass(
    light: LightProfile, aperture: Aperture, mass_term, anisotropy="isotropic", parameter=0.0
) -> float:
    """σ_ap² per c² (D_s/D_ls) · 1 arcsec, for any mass (``mass_term`` as above)."""
    return _ApertureAverage(light, aperture)(mass_term, anisotropy, parameter)


def aperture_dispersion(
    light: LightProfile, aperture: Aperture, gamma: float, anisotropy="isotropic", parameter=0.0
) -> float:
    """J(γ, anisotropy): the dimensionless σ_ap² of a power-law mass (module docstring).

    ``parameter`` is β (constant) or r_a in arcsec (Osipkov–Merritt).
    """
    average = _ApertureAverage(light, aperture)
    return average(lambda s: s ** (1.0 - gamma), anisotropy, parameter)


class DispersionTable:
    """J(γ, a) of one lens tabulated once, then interpolated for posterior samples.

    Parameters
    ----------
    light : LightProfile
    aperture : Aperture
    anisotropy : str
        ``isotropic``, ``constant`` (a = β) or ``osipkov_merritt`` (a = r_a / R_eff).
    effective_radius : float
        R_eff in arcsec (the unit of r_a).
    gammas, parameters : array_like, optional
        The grids (defaults: γ in [1.2, 2.8], β in [−0.5, 0.8], r_a/R_eff in [0.2, 20]).

    See :func:`dispersion_tables` for several apertures at once.
    """

    def __init__(
        self,
        light: LightProfile,
        aperture: Aperture,
        anisotropy: str = "osipkov_merritt",
        effective_radius: float = 1.0,
        gammas=None,
        parameters=None,
        *,
        _values=None,
    ):
        if anisotropy not in ANISOTROPY_MODELS:
            raise ValueError(
                f"anisotropy must be one of {sorted(ANISOTROPY_MODELS)}, got {anisotropy!r}"
            )
        self.anisotropy = anisotropy
        self.gammas, self.parameters = _table_grids(anisotropy, gammas, parameters)
        self.effective_radius = float(effective_radius)
        if _values is None:
            _values = _tabulate(
                light, [aperture], anisotropy, self.effective_radius, self.gammas, self.parameters
            )[0]
        self.values = _values
        #: the parameter axis interpolation runs along: ln(r_a/R_eff), or β (and ln J)
        self.axis = np.log(self.parameters) if anisotropy == "osipkov_merritt" else self.parameters

    def along_parameter(self, gamma) -> np.ndarray:
        """The log of J at each sample's γ, for every grid parameter: (n_samples, n_parameters).

        Linear in γ between grid nodes; the caller then interpolates along the parameter.
        """
        gamma = np.clip(np.asarray(gamma, dtype=float), self.gammas[0], self.gammas[-1])
        pos = np.interp(gamma, self.gammas, np.arange(len(self.gammas)))
        i = np.minimum(pos.astype(int), len(self.gammas) - 2)
        frac = (pos - i)[:, None]
        ln_j = np.log(self.values)
        return ln_j[i] * (1.0 - frac) + ln_j[i + 1] * frac

    def parameter_axis(self, values) -> np.ndarray:
        """Where ``values`` (β or r_a/R_eff) lie on the table's parameter axis (clipped)."""
        v = np.asarray(values, dtype=float)
        axis = np.log(np.maximum(v, 1e-300)) if self.anisotropy == "osipkov_merritt" else v
        return np.clip(axis, self.axis[0], self.axis[-1])

    def ln_j(self, rows: np.ndarray, parameter) -> np.ndarray:
        """The log of J of each sample at its anisotropy parameter (linear along that axis).

        ``rows`` is :meth:`along_parameter` of the samples' slopes, (n, n_parameters);
        ``parameter`` broadcasts against (n,) — e.g. (P, n) for P population draws — and
        the result has its shape.
        """
        if rows.shape[1] == 1:
            return np.broadcast_to(
                rows[:, 0], np.broadcast_shapes(np.shape(parameter), (len(rows),))
            )
        where = self.parameter_axis(parameter)
        idx = np.clip(np.searchsorted(self.axis, where) - 1, 0, len(self.axis) - 2)
        frac = (where - self.axis[idx]) / (self.axis[idx + 1] - self.axis[idx])
        samples = np.arange(len(rows))
        return rows[samples, idx] * (1.0 - frac) + rows[samples, idx + 1] * frac

    def __call__(self, gamma, parameter=0.0) -> np.ndarray:
        """J at arrays (broadcast) of γ and the anisotropy parameter."""
        gamma, parameter = np.broadcast_arrays(
            np.asarray(gamma, dtype=float), np.asarray(parameter, dtype=float)
        )
        rows = self.along_parameter(gamma.ravel())
        return np.exp(self.ln_j(rows, parameter.ravel())).reshape(gamma.shape)


def _table_grids(anisotropy: str, gammas, parameters) -> tuple[np.ndarray, np.ndarray]:
    """The γ and anisotropy-parameter grids of a dispersion table (defaults where None)."""
    # a recipe's widest slope bounds (lensdelay.model.recipe.DEFAULT_BOUNDS), so no
    # posterior sample falls off the table
    gammas = np.linspace(1.2, 2.8, 49) if gammas is None else np.asarray(gammas, float)
    default = {
        "isotropic": np.array([0.0]),
        "constant": np.linspace(-0.5, 0.8, 14),
        "osipkov_merritt": np.geomspace(0.2, 20.0, 41),
    }[anisotropy]
    return gammas, default if parameters is None else np.asarray(parameters, float)


def _tabulate(light, apertures, anisotropy, effective_radius, gammas, parameters) -> np.ndarray:
    """J(γ, a) of every aperture: (apertures, len(gammas), len(parameters))."""
    average = _ApertureAverage(light, apertures)
    table = np.empty((len(apertures), len(gammas), len(parameters)))
    for i, g in enumerate(gammas):
        for j, a in enumerate(parameters):
            par = a * effective_radius if anisotropy == "osipkov_merritt" else a
            table[:, i, j] = average.averages(lambda s, g=g: s ** (1.0 - g), anisotropy, par)
    return table


def dispersion_tables(
    light: LightProfile,
    apertures,
    anisotropy: str = "osipkov_merritt",
    effective_radius: float = 1.0,
    gammas=None,
    parameters=None,
) -> tuple[DispersionTable, ...]:
    """One :class:`DispersionTable` per aperture, tabulated together.

    The rings of resolved kinematics share the Jeans solution and its projection (the
    costly part) on the grid of the widest aperture; each table is then what
    ``DispersionTable(light, aperture, ...)`` on that grid would hold.
    """
    if anisotropy not in ANISOTROPY_MODELS:
        raise ValueError(
            f"anisotropy must be one of {sorted(ANISOTROPY_MODELS)}, got {anisotropy!r}"
        )
    apertures = list(apertures)
    gammas, parameters = _table_grids(anisotropy, gammas, parameters)
    values = _tabulate(light, apertures, anisotropy, float(effective_radius), gammas, parameters)
    return tuple(
        DispersionTable(
            light, a, anisotropy, effective_radius, gammas, parameters, _values=values[k]
        )
        for k, a in enumerate(apertures)
    )
