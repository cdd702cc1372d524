"""The one pattern every mass profile follows.

A profile is a frozen dataclass whose fields are its parameters (floats, or numpy
arrays that broadcast against the coordinates so that many parameter sets -- e.g. all
walkers of a sampler -- are evaluated in one call). It answers four questions at
image-plane positions ``(x, y)`` in arcsec, in the sky frame of CONVENTIONS.md
(x East, y North):

* :meth:`MassProfile.convergence` -- κ, in units of the critical density at the
  reference source redshift;
* :meth:`MassProfile.deflection` -- (α_x, α_y) = ∇ψ, arcsec;
* :meth:`MassProfile.potential` -- ψ, arcsec²;
* :meth:`MassProfile.hessian` -- (ψ_xx, ψ_xy, ψ_yy).

Subclasses write only their formulas, in the frame centred on the profile (and, for
:class:`EllipticalProfile`, rotated so that x' lies along the major axis). The base
classes do the shifting and rotating.
"""

from __future__ import annotations

import contextlib
from abc import ABC, abstractmethod
from dataclasses import dataclass, field, fields
from typing import ClassVar

import numpy as np

from lensdelay.errors import InputError

__all__ = [
    "RADIUS_FLOOR",
    "PROFILES",
    "rules_trusted",
    "rule_holds_between",
    "param",
    "MassProfile",
    "EllipticalProfile",
    "AxisymmetricProfile",
]


#: Radii below this (arcsec) are treated as this, so that singular profiles give
#: large but finite numbers at their centre instead of NaN.
RADIUS_FLOOR = 1e-12

#: name -> class, filled in as profile classes are defined.
PROFILES: dict[str, type["MassProfile"]] = {}

# Parameter rules: name -> (test on a float array, wording of the rule)
_RULES = {
    "any": (lambda v: np.ones_like(v, dtype=bool), "must be finite"),
    "positive": (lambda v: v > 0, "must be > 0"),
    "nonnegative": (lambda v: v >= 0, "must be >= 0"),
    "axis_ratio": (lambda v: (v > 0) & (v <= 1), "must be in (0, 1]"),
    "slope": (lambda v: (v > 1) & (v < 3), "must be in (1, 3)"),
    "shear": (lambda v: (v >= 0) & (v < 1), "must be in [0, 1)"),
    "sheet": (lambda v: v < 1, "must be < 1"),
    "order": (
        lambda v: (v == np.round(v)) & (v >= 2) & (v <= 10),
        "must be an integer from 2 to 10",
    ),
}


#: Interval form of each rule: does every value in [low, high] obey it? (The domains are
#: intervals, so both ends obeying it is enough; an integer order must be fixed.)
_INTERVAL_RULES = {
    "any": lambda lo, hi: True,
    "positive": lambda lo, hi: lo > 0,
    "nonnegative": lambda lo, hi: lo >= 0,
    "axis_ratio": lambda lo, hi: lo > 0 and hi <= 1,
    "slope": lambda lo, hi: lo > 1 and hi < 3,
    "shear": lambda lo, hi: lo >= 0 and hi < 1,
    "sheet": lambda lo, hi: hi < 1,
    "order": lambda lo, hi: lo == hi and lo == round(lo) and 2 <= lo <= 10,
}

_TRUSTED = {"on": False}


@contextlib.contextmanager
def rules_trusted():
    """Build profiles inside the block without checking their parameters' rules.

    For a sampler's every step: its parameters lie within bounds that were checked
    against the rules once (:func:`rule_holds_between`), and checking thousands of
    arrays again each step cost as much as evaluating the lens.
    """
    before = _TRUSTED["on"]
    _TRUSTED["on"] = True
    try:
        yield
    finally:
        _TRUSTED["on"] = before


def rule_holds_between(profile_class, name: str, low: float, high: float) -> bool:
    """Whether every value of parameter ``name`` (TOML name) in [low, high] obeys its rule."""
    field_name = profile_class.toml_aliases.get(name, name)
    for f in fields(profile_class):
        if f.name == field_name:
            return bool(_INTERVAL_RULES[f.metadata.get("rule", "any")](low, high))
    return False


def param(default=None, rule: str = "any", doc: str = ""):
    """Declare a profile parameter with a validation rule (see ``_RULES``)."""
    meta = {"rule": rule, "doc": doc}
    if default is None:
        return field(metadata=meta)
    return field(default=default, metadata=meta)


@dataclass(frozen=True, kw_only=True)
class MassProfile(ABC):
    """Base of every mass component.

    Subclasses set the class attribute ``kind`` (the ``profile`` name in TOML files),
    declare their parameters with :func:`param`, and implement the ``_local_*``
    methods in coordinates centred on the profile.
    """

    kind: ClassVar[str] = ""
    #: False for components defined about the origin (shear, sheet).
    centred: ClassVar[bool] = True
    #: True if the centre is a singularity that swallows the central image.
    singular_centre: ClassVar[bool] = False
    #: TOML key -> field name, where a trade name would clash with a method.
    toml_aliases: ClassVar[dict[str, str]] = {}

    x: float = param(0.0, doc="centre, arcsec East")
    y: float = param(0.0, doc="centre, arcsec North")

    def __init_subclass__(cls, **kwargs):
        super().__init_subclass__(**kwargs)
        if cls.kind:
            PROFILES[cls.kind] = cls

    def __post_init__(self) -> None:
        if _TRUSTED["on"]:  # inside rules_trusted(): values known to obey the rules
            return
        for field_name, name, test, wording in self._checks():
            value = np.asarray(getattr(self, field_name), dtype=float)
            # one pass for the common case (all good); the error path says which rule
            with np.errstate(invalid="ignore"):
                if np.all(test(value) & np.isfinite(value)):
                    continue
            if not np.all(np.isfinite(value)):
                raise InputError(f"{name} must be finite, got {getattr(self, field_name)}")
            bad = value[~test(value)] if value.ndim else value
            raise InputError(f"{name} {wording}, got {np.ravel(bad)[0]:g}")

    @classmethod
    def _checks(cls) -> list:
        """(field, TOML-named parameter, test, wording) per field, built once per class.

        Profiles are built at every likelihood call (a sampler's every step), so the
        field list and rules are not looked up again each time.
        """
        cached = cls.__dict__.get("_check_list")
        if cached is None:
            back = {v: k for k, v in cls.toml_aliases.items()}
            cached = [
                (
                    f.name,
                    f"{cls.kind}.{back.get(f.name, f.name)}",
                    *_RULES[f.metadata.get("rule", "any")],
                )
                for f in fields(cls)
            ]
            cls._check_list = cached
        return cached

    # -- public API: sky frame ----------------------------------------------------
    @classmethod
    def parameter_names(cls) -> tuple[str, ...]:
        """Names of the parameters a TOML ``[[mass]]`` entry may give."""
        return tuple(toml for toml, _ in cls._value_fields())

    @classmethod
    def _value_fields(cls) -> tuple[tuple[str, str], ...]:
        """(TOML name, field name) of each parameter, worked out once per class.

        A lens is packed for the compiled kernels at every sampler step, so its values
        are read often: the field list is cached on the class (fields never change).
        """
        cached = cls.__dict__.get("_value_field_list")
        if cached is None:
            back = {v: k for k, v in cls.toml_aliases.items()}
            pairs = tuple((back.get(f.name, f.name), f.name) for f in fields(cls))
            if not cls.centred:
                pairs = tuple(p for p in pairs if p[0] not in ("x", "y"))
            cached = pairs
            cls._value_field_list = cached
        return cached

    @classmethod
    def required_names(cls) -> tuple[str, ...]:
        """Parameters without a default, by their TOML names."""
        from dataclasses import MISSING

        back = {v: k for k, v in cls.toml_aliases.items()}
        return tuple(
            back.get(f.name, f.name)
            for f in fields(cls)
            if f.default is MISSING and f.default_factory is MISSING
        )

    @classmethod
    def from_values(cls, values: dict) -> "MassProfile":
        """Build from TOML-named values (floats or arrays)."""
        return cls(**{cls.toml_aliases.get(k, k): v for k, v in values.items()})

    def values(self) -> dict:
        """TOML-named parameter values of this component."""
        return {toml: getattr(self, name) for toml, name in self._value_fields()}

    def _shift(self, x, y):
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        if np.ndim(self.x) == 0 and np.ndim(self.y) == 0 and self.x == 0 and self.y == 0:
            return x, y  # centred on the origin: no array pass needed
        return x - self.x, y - self.y

    def convergence(self, x, y) -> np.ndarray:
        """Convergence κ at ``(x, y)`` (arcsec)."""
        return self._frame_convergence(*self._shift(x, y))

    def deflection(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Deflection (α_x, α_y) in arcsec at ``(x, y)``."""
        return self._frame_deflection(*self._shift(x, y))

    def potential(self, x, y) -> np.ndarray:
        """Lensing potential ψ in arcsec² at ``(x, y)``."""
        return self._frame_potential(*self._shift(x, y))

    def deflection_and_potential(self, x, y):
        """(α_x, α_y, ψ) in one pass (shares the work where a profile can)."""
        return self._frame_deflection_potential(*self._shift(x, y))

    def hessian(self, x, y) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Second derivatives (ψ_xx, ψ_xy, ψ_yy) of the potential at ``(x, y)``.

        At the centre itself (r below :data:`RADIUS_FLOOR`) the formulas written in
        terms of direction (x/r, y/r) have no direction to use; there the Hessian is its
        average over directions, (κ, 0, κ), which keeps ψ_xx + ψ_yy = 2κ (a profile whose
        κ diverges at the centre then gives a maximum of τ with μ → 0 there, as it should,
        instead of the μ = 1 of an empty Hessian).
        """
        dx, dy = self._shift(x, y)
        hxx, hxy, hyy = self._frame_hessian(dx, dy)
        if not self.centred:  # a shear or sheet has no centre: its Hessian is uniform
            return hxx, hxy, hyy
        at_centre = dx * dx + dy * dy < RADIUS_FLOOR * RADIUS_FLOOR
        if np.any(at_centre):
            kappa = self._frame_convergence(dx, dy)
            hxx = np.where(at_centre, kappa, hxx)
            hxy = np.where(at_centre, 0.0, hxy)
            hyy = np.where(at_centre, kappa, hyy)
        return hxx, hxy, hyy

    # -- frame hooks: overridden by EllipticalProfile to rotate ---------------------
    def _frame_convergence(self, dx, dy):
        return self._local_convergence(dx, dy)

    def _frame_deflection(self, dx, dy):
        return self._local_deflection(dx, dy)

    def _frame_potential(self, dx, dy):
        return self._local_potential(dx, dy)

    def _frame_hessian(self, dx, dy):
        return self._local_hessian(dx, dy)

    def _frame_deflection_potential(self, dx, dy):
        return self._local_deflection_potential(dx, dy)

    def _local_deflection_potential(self, x, y):
        """Override when deflection and potential share work."""
        return (*self._local_deflection(x, y), self._local_potential(x, y))

    # -- formulas, written by each profile -----------------------------------------
    @abstractmethod
    def _local_convergence(self, x, y): ...

    @abstractmethod
    def _local_deflection(self, x, y): ...

    @abstractmethod
    def _local_potential(self, x, y): ...

    @abstractmethod
    def _local_hessian(self, x, y): ...


@dataclass(frozen=True, kw_only=True)
class EllipticalProfile(MassProfile):
    """A profile with elliptical symmetry about its centre.

    The local frame has x' along the major axis at ``position_angle`` (degrees East
    of North): x' = sin φ·x + cos φ·y, y' = −cos φ·x + sin φ·y.
    """

    axis_ratio: float = param(1.0, rule="axis_ratio", doc="minor/major axis ratio q")
    position_angle: float = param(0.0, doc="major axis, degrees East of North")

    def _rotation(self):
        phi = np.deg2rad(self.position_angle)
        return np.sin(phi), np.cos(phi)

    def _to_local(self, dx, dy):
        s, c = self._rotation()
        return s * dx + c * dy, -c * dx + s * dy

    def _frame_convergence(self, dx, dy):
        return self._local_convergence(*self._to_local(dx, dy))

    def _frame_deflection(self, dx, dy):
        s, c = self._rotation()
        ax, ay = self._local_deflection(*self._to_local(dx, dy))
        return s * ax - c * ay, c * ax + s * ay

    def _frame_potential(self, dx, dy):
        return self._local_potential(*self._to_local(dx, dy))

    def _frame_deflection_potential(self, dx, dy):
        s, c = self._rotation()
        ax, ay, pot = self._local_deflection_potential(*self._to_local(dx, dy))
        return s * ax - c * ay, c * ax + s * ay, pot

    def _frame_hessian(self, dx, dy):
        s, c = self._rotation()
        h11, h12, h22 = self._local_hessian(*self._to_local(dx, dy))
        return (
            s * s * h11 - 2 * s * c * h12 + c * c * h22,
            s * c * (h11 - h22) + (s * s - c * c) * h12,
            c * c * h11 + 2 * s * c * h12 + s * s * h22,
        )


@dataclass(frozen=True, kw_only=True)
class AxisymmetricProfile(MassProfile):
    """A circularly symmetric profile, defined by three radial functions.

    Subclasses give κ(r), the deflection magnitude α(r) = r·κ̄(<r) and ψ(r); the
    vector deflection and the Hessian follow from ψ_rr = 2κ − α/r and ψ_φφ/r² = α/r
    (Schneider, Ehlers & Falco 1992, Sect. 8.1).
    """

    @abstractmethod
    def _kappa_r(self, r): ...

    @abstractmethod
    def _alpha_r(self, r): ...

    @abstractmethod
    def _psi_r(self, r): ...

    @staticmethod
    def _radius(x, y):
        return np.maximum(np.hypot(x, y), RADIUS_FLOOR)

    def _local_convergence(self, x, y):
        return self._kappa_r(self._radius(x, y))

    def _local_deflection(self, x, y):
        r = self._radius(x, y)
        a_over_r = self._alpha_r(r) / r
        return a_over_r * x, a_over_r * y

    def _local_potential(self, x, y):
        return self._psi_r(self._radius(x, y))

    def _local_hessian(self, x, y):
        r = self._radius(x, y)
        tangential = self._alpha_r(r) / r
        radial = 2.0 * self._kappa_r(r) - tangential
        nx, ny = x / r, y / r
        return (
            radial * nx * nx + tangential * ny * ny,
            (radial - tangential) * nx * ny,
            radial * ny * ny + tangential * nx * nx,
        )
