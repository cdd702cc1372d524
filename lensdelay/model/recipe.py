"""Mass-model recipes: which components, which parameters vary, within what bounds.

A recipe is a list of ``[[mass]]`` entries. Every parameter is a number (held fixed)
or a table ``{ value = , min = , max = , prior = [mean, sigma] }`` (free). This module
turns such mappings (already parsed from TOML) into :class:`ModelParameter` objects,
validates them, and builds :class:`lensdelay.lensing.lens.Lens` objects for given values --
scalars for a fit, or arrays for many posterior samples at once.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from lensdelay.errors import InputError, choices_text, suggest
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles.stack import ProfileStack
from lensdelay.lensing.profiles import PROFILES, MassProfile

__all__ = [
    "DEFAULT_BOUNDS",
    "PERIODIC",
    "ModelParameter",
    "ComponentRecipe",
    "MEMBER_SCALED",
    "MemberGroup",
    "MassModel",
    "parse_parameter",
    "parse_mass_entries",
    "SLOPE_PRIOR",
    "SLOPE_BOUNDS",
    "SHEAR_MAX",
    "SHEAR_PRIOR",
    "MULTIPOLE_PRIOR",
    "AXIS_RATIO_PRIOR",
    "default_galaxy_recipe",
    "MEMBER_KEYS",
    "parse_member_parameters",
]


#: Default search bounds for free parameters, by parameter name (arcsec, degrees).
DEFAULT_BOUNDS = {
    "einstein_radius": (1e-3, 100.0),
    "axis_ratio": (0.1, 1.0),
    "position_angle": (-math.inf, math.inf),
    "core": (0.0, 10.0),
    "slope": (1.2, 2.8),
    "kappa_s": (1e-4, 10.0),
    "scale_radius": (0.1, 500.0),
    "strength": (0.0, 0.5),
    "convergence": (-0.5, 0.9),
    # multipole terms (arcsec): far beyond the few per cent of θE real galaxies show
    "cosine": (-1.0, 1.0),
    "cut": (1e-3, 1e3),
    "einstein_exponent": (0.0, 2.0),
    "cut_exponent": (0.0, 2.0),
    "core_exponent": (0.0, 2.0),
    "sine": (-1.0, 1.0),
    "x": (-math.inf, math.inf),
    "y": (-math.inf, math.inf),
}
#: Angles defined modulo 180 degrees.
PERIODIC = {"position_angle": 180.0}


@dataclass(frozen=True)
class ModelParameter:
    """One parameter of a recipe: its value, whether it varies, bounds and prior.

    Attributes
    ----------
    name : str
        ``"mass[i].name"`` -- unique within the model.
    value : float
        Fixed value, or the starting value of a free parameter.
    vary : bool
    min, max : float
        Hard bounds (only for free parameters).
    prior : (float, float) or None
        Gaussian prior (mean, sigma).
    """

    name: str
    value: float
    vary: bool = False
    min: float = -math.inf
    max: float = math.inf
    prior: tuple[float, float] | None = None

    @property
    def period(self) -> float | None:
        """180 for position angles (defined modulo 180°), else None."""
        return PERIODIC.get(self.name.rsplit(".", 1)[-1])


@dataclass(frozen=True)
class ComponentRecipe:
    """One ``[[mass]]`` entry: the profile kind and its parameters."""

    kind: str
    parameters: dict[str, ModelParameter] = field(default_factory=dict)

    @property
    def profile_class(self) -> type[MassProfile]:
        """The profile class this component builds."""
        return PROFILES[self.kind]


#: Keys of a ``[members]`` table that scale with luminosity, and their exponents' keys.
MEMBER_SCALED = {
    "einstein_radius": "einstein_exponent",
    "cut": "cut_exponent",
    "core": "core_exponent",
}


@dataclass(frozen=True)
class MemberGroup:
    """Galaxies from a members table, each a ``truncated_isothermal`` scaled by luminosity.

    With L/L* = 10^(−0.4 (mag − reference_mag)) a member has θE = θE*·(L/L*)^einstein_exponent,
    a = a*·(L/L*)^cut_exponent and s = s*·(L/L*)^core_exponent (CONVENTIONS.md, "Cluster
    scale and galaxy environments"); θE*, a*, s* and the exponents are shared parameters
    (``members.<key>``), fixed or free.

    Attributes
    ----------
    parameters : dict
        ``reference_mag``, ``einstein_radius``, ``cut``, ``core`` and the three exponents,
        as ModelParameter.
    ids : tuple of str
    x, y, mag, axis_ratio, position_angle : ndarray
        Per member: position (arcsec), magnitude, shape (1 and 0 for round members).
    """

    parameters: dict[str, ModelParameter]
    ids: tuple[str, ...]
    x: np.ndarray
    y: np.ndarray
    mag: np.ndarray
    axis_ratio: np.ndarray
    position_angle: np.ndarray

    def profiles(self, lookup: dict) -> list[MassProfile]:
        """The members' profiles for parameter values ``lookup`` (name -> value)."""
        value = {k: lookup.get(p.name, p.value) for k, p in self.parameters.items()}
        cls = PROFILES["truncated_isothermal"]
        # every member in one stacked profile (one vectorised pass): member arrays get a
        # leading axis, in front of the shape of the (possibly per-walker) shared values
        trailing = max((np.ndim(v) for v in value.values()), default=0)
        lead = (len(self.mag),) + (1,) * trailing

        def per_member(a):
            return np.asarray(a, dtype=float).reshape(lead)

        luminosity = 10.0 ** (-0.4 * (per_member(self.mag) - value["reference_mag"]))  # L/L*
        scaled = {k: value[k] * luminosity ** value[e] for k, e in MEMBER_SCALED.items()}
        named = {
            **scaled,
            "x": per_member(self.x),
            "y": per_member(self.y),
            "axis_ratio": per_member(self.axis_ratio),
            "position_angle": per_member(self.position_angle),
        }
        fields = {cls.toml_aliases.get(k, k): v for k, v in named.items()}
        return [ProfileStack(cls, fields)]


@dataclass(frozen=True)
class MassModel:
    """A full recipe; builds lenses from parameter vectors.

    Attributes
    ----------
    components : tuple of ComponentRecipe
    label : str
        A name for reports (e.g. the model file's stem).
    members : MemberGroup or None
        Galaxies from the scenario's members table, added to the components.
    """

    components: tuple[ComponentRecipe, ...]
    label: str = "model"
    members: MemberGroup | None = None

    # -- parameters -----------------------------------------------------------------
    @property
    def parameters(self) -> list[ModelParameter]:
        """Every parameter of every component (then of the members), in order."""
        own = [p for c in self.components for p in c.parameters.values()]
        return own + (list(self.members.parameters.values()) if self.members else [])

    @property
    def free(self) -> list[ModelParameter]:
        """Free parameters, in a fixed order."""
        return [p for p in self.parameters if p.vary]

    @property
    def free_names(self) -> list[str]:
        """Names of the free parameters."""
        return [p.name for p in self.free]

    def start_vector(self) -> np.ndarray:
        """Start values of the free parameters."""
        return np.array([p.value for p in self.free])

    def _map_parameters(self, change) -> "MassModel":
        """A copy with ``change(parameter)`` applied to every parameter, members' too."""
        comps = tuple(
            ComponentRecipe(c.kind, {k: change(p) for k, p in c.parameters.items()})
            for c in self.components
        )
        members = self.members
        if members is not None:
            members = replace(
                members, parameters={k: change(p) for k, p in members.parameters.items()}
            )
        return MassModel(comps, self.label, members)

    def with_values(self, values: dict[str, float]) -> "MassModel":
        """A copy whose parameters take ``values`` (by full name) as their values."""
        return self._map_parameters(
            lambda p: replace(p, value=float(values[p.name])) if p.name in values else p
        )

    def fixed(self) -> "MassModel":
        """A copy with every parameter held at its value."""
        return self._map_parameters(lambda p: replace(p, vary=False))

    def with_members(self, members: "MemberGroup | None") -> "MassModel":
        """A copy with the members table's galaxies (None: without)."""
        return MassModel(self.components, self.label, members)

    # -- building lenses -------------------------------------------------------------
    def lens(self, free_values=None) -> Lens:
        """Build the lens for a vector of free-parameter values.

        ``free_values`` may be 1-D (one model) or have shape ``(n_free, n, 1)`` etc.
        so that every profile parameter is an array broadcasting against the
        coordinates (many models in one call).
        """
        free_values = self.start_vector() if free_values is None else free_values
        lookup = dict(zip(self.free_names, free_values))
        comps = []
        for c in self.components:
            vals = {k: lookup.get(p.name, p.value) for k, p in c.parameters.items()}
            comps.append(c.profile_class.from_values(vals))
        if self.members is not None:
            comps += self.members.profiles(lookup)
        return Lens(tuple(comps))

    def row_packer(self):
        """A packer of this recipe's lenses for rows of its free values, or None.

        A :class:`lensdelay.lensing.compiled.RowPacker` that fills the compiled kernels'
        table straight from parameter rows (P, n_free) — each component's free values by
        their columns, the rest at their values — so a sampler's lenses need not be read
        back component by component. None where the kernels cannot take the recipe so:
        cluster members, a kind without a kernel, or no free parameter.
        """
        from lensdelay.lensing import compiled

        if self.members is not None or not self.free_names:
            return None
        column = {name: i for i, name in enumerate(self.free_names)}
        parts = []
        for c, profile in zip(self.components, self.lens().components):
            kind = c.profile_class.kind
            if kind not in compiled.RAW_FIELDS:
                return None
            values = compiled.with_defaults(kind, profile.values())
            fields = {}
            for name in compiled.RAW_FIELDS[kind]:
                p = c.parameters.get(name)
                if p is not None and p.name in column:
                    fields[name] = ("column", column[p.name])
                else:
                    fields[name] = ("value", float(np.asarray(values[name])))
            parts.append((kind, fields))
        return compiled.RowPacker(parts) if parts else None

    def n_free(self) -> int:
        """Number of free parameters."""
        return len(self.free)

    def rules_hold_within_bounds(self) -> bool:
        """Whether every free component parameter obeys its profile's rule over [min, max].

        Then lenses built from values within the bounds need no checks
        (:func:`lensdelay.lensing.profiles.base.rules_trusted`). Member parameters go
        through luminosity scalings: not covered, so a model with free member parameters
        answers False.
        """
        from lensdelay.lensing.profiles.base import rule_holds_between

        if self.members is not None and any(p.vary for p in self.members.parameters.values()):
            return False
        return all(
            rule_holds_between(c.profile_class, key, p.min, p.max)
            for c in self.components
            for key, p in c.parameters.items()
            if p.vary
        )


# -- parsing -------------------------------------------------------------------------
def _number(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{where} must be a number, got {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise InputError(f"{where} must be finite, got {value}")
    return value


def parse_parameter(name: str, raw, where: str) -> ModelParameter:
    """Parse a number (fixed) or a ``{value, min, max, prior, vary}`` table (free)."""
    if not isinstance(raw, dict):
        return ModelParameter(where, _number(raw, where))
    allowed = ("value", "min", "max", "prior", "vary")
    for key in raw:
        if key not in allowed:
            raise InputError(
                f"{where}.{key} is not a parameter field{suggest(key, allowed)}; "
                f"allowed: {choices_text(allowed)}, got {key!r}"
            )
    default_lo, default_hi = DEFAULT_BOUNDS.get(name, (-math.inf, math.inf))
    lo = _number(raw["min"], f"{where}.min") if "min" in raw else default_lo
    hi = _number(raw["max"], f"{where}.max") if "max" in raw else default_hi
    if lo > hi:
        raise InputError(
            f"{where}.min must not exceed {where}.max, got min = {lo:g} > max = {hi:g}"
        )
    prior = None
    if "prior" in raw:
        pr = raw["prior"]
        if not (isinstance(pr, list) and len(pr) == 2):
            raise InputError(f"{where}.prior must be [mean, sigma], got {pr!r}")
        mean = _number(pr[0], f"{where}.prior mean")
        sigma = _number(pr[1], f"{where}.prior sigma")
        if sigma <= 0:
            raise InputError(f"{where}.prior sigma must be > 0, got {sigma:g}")
        prior = (mean, sigma)
    if "value" in raw:
        value = _number(raw["value"], f"{where}.value")
    elif prior is not None:
        value = prior[0]
    elif math.isfinite(lo) and math.isfinite(hi):
        value = 0.5 * (lo + hi)
    else:
        raise InputError(
            f"{where} needs a 'value' (or a prior, or finite min and max), got {raw!r}"
        )
    if not lo <= value <= hi:
        raise InputError(
            f"{where}.value must lie within [min, max] = [{lo:g}, {hi:g}], got {value:g}"
        )
    vary = raw.get("vary", True)
    if not isinstance(vary, bool):
        raise InputError(f"{where}.vary must be true or false, got {vary!r}")
    return ModelParameter(where, value, vary, lo, hi, prior)


def parse_mass_entries(entries, label: str = "model") -> MassModel:
    """Turn the list of ``[[mass]]`` tables into a validated :class:`MassModel`."""
    if not isinstance(entries, list) or not entries:
        raise InputError(
            f"mass must be a non-empty list of [[mass]] tables, got {type(entries).__name__}"
        )
    comps = []
    for i, entry in enumerate(entries):
        where = f"mass[{i}]"
        if not isinstance(entry, dict):
            raise InputError(f"{where} must be a table, got {entry!r}")
        kind = entry.get("profile")
        if kind is None:
            raise InputError(
                f"{where}.profile is required; allowed: {choices_text(PROFILES)}, got nothing"
            )
        if kind not in PROFILES:
            raise InputError(
                f"{where}.profile must be one of {choices_text(PROFILES)}"
                f"{suggest(str(kind), PROFILES)}, got {kind!r}"
            )
        cls = PROFILES[kind]
        names = cls.parameter_names()
        params = {}
        for key, raw in entry.items():
            if key == "profile":
                continue
            if key not in names:
                hint = suggest(key, names)
                extra = (
                    " (shear and sheet are centred on the origin)"
                    if key in ("x", "y") and not cls.centred
                    else ""
                )
                raise InputError(
                    f"{where}.{key} is not a parameter of {kind}{hint}{extra}; "
                    f"allowed: {choices_text(names)}, got {key!r}"
                )
            params[key] = parse_parameter(key, raw, f"{where}.{key}")
            if key == "order" and params[key].vary:
                raise InputError(f"{where}.order must be a fixed integer (e.g. 4), got {raw!r}")
        for req in cls.required_names():
            if req not in params:
                raise InputError(f"{where}.{req} is required for profile {kind}, got nothing")
        # check the physical rules on values and on the finite bounds (a fit may go there)
        values = {k: p.value for k, p in params.items()}
        try:
            cls.from_values(values)
        except InputError as err:
            message = err.bare_message.replace(f"{kind}.", f"{where}.", 1)
            raise InputError(message) from err
        for key, p in params.items():
            for bound in ("min", "max"):
                edge = getattr(p, bound)
                if not p.vary or not math.isfinite(edge) or p.period:
                    continue
                try:
                    cls.from_values({**values, key: edge})
                except InputError as err:
                    message = err.bare_message.replace(f"{kind}.{key}", f"{where}.{key}.{bound}", 1)
                    raise InputError(message) from err
        comps.append(ComponentRecipe(kind, params))
    return MassModel(tuple(comps), label)


# -- the default galaxy-scale recipe ----------------------------------------------------
#: Population prior on the 3-D density slope γ' of lens galaxies: mean 2.078 with an
#: intrinsic lens-to-lens scatter of 0.16 (Auger et al. 2010, ApJ 724, 511, SLACS lenses
#: with stellar dynamics; values from memory). Image positions alone barely constrain γ',
#: yet at fixed positions delays scale roughly as γ' − 1, so this prior is most of a
#: delay window's width.
SLOPE_PRIOR = (2.078, 0.16)
#: Hard range of the slope: the prior's ±3.4σ, inside the profile's (1, 3).
SLOPE_BOUNDS = (1.5, 2.65)
#: External shear of galaxy-scale lenses rarely exceeds 0.3 (common practice).
SHEAR_MAX = 0.3
#: Prior on the shear strength: a half-normal of scale 0.1 (median 0.07), the size of the
#: shears lens models of quads need and line-of-sight studies predict, a few 0.01 to ~0.1
#: (e.g. Keeton, Kochanek & Seljak 1997, ApJ 482, 604; from memory).
SHEAR_PRIOR = (0.0, 0.1)
#: Prior on each multipole term (m = 3, 4) relative to θE: lens galaxies' isophotes deviate
#: from ellipses by a_m of about 0.01 in size (Hao et al. 2006, MNRAS 370, 1339, for a4; from
#: memory). At the per-cent level such terms move images by tens of mas and shift quads'
#: delays by tens of per cent, so the default recipe carries them.
MULTIPOLE_PRIOR = 0.01
#: Prior on the axis ratio of the mass: lens galaxies' isodensity contours have q ≈ 0.75
#: with a scatter of ~0.2 (SLACS, Koopmans et al. 2006, ApJ 649, 599; from memory).
AXIS_RATIO_PRIOR = (0.75, 0.2)


def default_galaxy_recipe(
    image_x,
    image_y,
    centre: tuple[float, float] = (0.0, 0.0),
    shear_prior: tuple[float, float] = SHEAR_PRIOR,
    shear_max: float = SHEAR_MAX,
) -> MassModel:
    """The recipe used when a scenario names no mass model: power law + external shear.

    An elliptical power law whose slope has the population prior :data:`SLOPE_PRIOR`,
    axis ratio with :data:`AXIS_RATIO_PRIOR` in [0.2, 1], free position angle, centre
    within 1″ of ``centre`` (the lens light when given), Einstein radius started at the
    images' mean distance from the centre (bounds 0.05–10″), plus a shear whose strength
    has :data:`SHEAR_PRIOR` in [0, :data:`SHEAR_MAX`], plus m = 3 and m = 4 isothermal
    multipoles about ``centre`` whose cosine and sine terms have priors
    N(0, :data:`MULTIPOLE_PRIOR`·θE).

    Parameters
    ----------
    image_x, image_y : array
        Observed image positions (arcsec), for the starting Einstein radius.
    centre : (float, float)
        Where the lens galaxy is thought to be (arcsec).
    shear_prior, shear_max : (float, float), float
        The shear strength's half-normal prior and upper bound: wider for a lens inside a
        group or cluster whose tidal field the model takes as its shear.
    """
    cx, cy = float(centre[0]), float(centre[1])
    theta_e = float(
        np.clip(np.mean(np.hypot(np.subtract(image_x, cx), np.subtract(image_y, cy))), 0.1, 9.0)
    )
    entries = [
        {
            "profile": "power_law",
            "einstein_radius": {"value": theta_e, "min": 0.05, "max": 10.0},
            "slope": {
                "value": SLOPE_PRIOR[0],
                "min": SLOPE_BOUNDS[0],
                "max": SLOPE_BOUNDS[1],
                "prior": list(SLOPE_PRIOR),
            },
            "axis_ratio": {
                "value": 0.8,
                "min": 0.2,
                "max": 1.0,
                "prior": list(AXIS_RATIO_PRIOR),
            },
            "position_angle": {"value": 0.0},
            "x": {"value": cx, "min": cx - 1.0, "max": cx + 1.0},
            "y": {"value": cy, "min": cy - 1.0, "max": cy + 1.0},
        },
        {
            "profile": "shear",
            "strength": {
                "value": 0.05,
                "min": 0.0,
                "max": float(shear_max),
                "prior": list(shear_prior),
            },
            "position_angle": {"value": 0.0},
        },
    ]
    width = MULTIPOLE_PRIOR * theta_e
    for order in (3, 4):
        term = {"value": 0.0, "min": -10 * width, "max": 10 * width, "prior": [0.0, width]}
        entries.append(
            {
                "profile": "multipole",
                "order": order,
                "cosine": dict(term),
                "sine": dict(term),
                "x": cx,
                "y": cy,
            }
        )
    return parse_mass_entries(entries, label="default_galaxy")


#: ``[members]`` keys: name -> default (None: required). Exponents default to 0.5
#: (θE ∝ L^0.5 from σ ∝ L^(1/4), Faber & Jackson 1976, and θE ∝ σ²; a and s ∝ L^0.5 for a
#: constant mass-to-light ratio: common practice).
MEMBER_KEYS = {
    "reference_mag": None,
    "einstein_radius": None,
    "cut": None,
    "core": 0.0,
    "einstein_exponent": 0.5,
    "cut_exponent": 0.5,
    "core_exponent": 0.5,
}


def parse_member_parameters(table: dict) -> dict[str, ModelParameter]:
    """The shared parameters of a ``[members]`` table (numbers or free-parameter tables)."""
    out = {}
    for key, default in MEMBER_KEYS.items():
        if key not in table:
            if default is None:
                raise InputError(f"members.{key} is required, got nothing")
            out[key] = ModelParameter(f"members.{key}", float(default))
            continue
        out[key] = parse_parameter(key, table[key], f"members.{key}")
    for key in ("einstein_radius", "cut"):
        p = out[key]
        low = p.min if p.vary else p.value
        if not low > 0:
            raise InputError(f"members.{key} must be > 0 (and so its min), got {low:g}")
    if out["core"].value < 0 or (out["core"].vary and out["core"].min < 0):
        raise InputError(f"members.core must be >= 0, got {out['core'].value:g}")
    cut, core = out["cut"], out["core"]
    smallest_cut = cut.min if cut.vary else cut.value
    largest_core = core.max if core.vary else core.value
    if not smallest_cut > largest_core:
        # a member whose cut is inside its core has no mass (CONVENTIONS.md: a > s)
        raise InputError(
            "members.cut must be greater than members.core over both their ranges, "
            f"got cut from {smallest_cut:g} and core up to {largest_core:g}"
        )
    return out
