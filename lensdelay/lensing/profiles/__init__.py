"""Mass profiles: one file a profile, all following :mod:`lensdelay.lensing.profiles.base`."""

from lensdelay.lensing.profiles.base import (
    PROFILES,
    AxisymmetricProfile,
    EllipticalProfile,
    MassProfile,
)
from lensdelay.lensing.profiles.multipole import IsothermalMultipole
from lensdelay.lensing.profiles.nfw import NFWHalo
from lensdelay.lensing.profiles.point import PointMass
from lensdelay.lensing.profiles.power_law import EllipticalPowerLaw
from lensdelay.lensing.profiles.shear import ExternalShear
from lensdelay.lensing.profiles.sheet import MassSheet
from lensdelay.lensing.profiles.sie import IsothermalEllipsoid
from lensdelay.lensing.profiles.sis import SingularIsothermalSphere
from lensdelay.lensing.profiles.truncated import TruncatedIsothermal

__all__ = [
    "PROFILES",
    "MassProfile",
    "EllipticalProfile",
    "AxisymmetricProfile",
    "PointMass",
    "SingularIsothermalSphere",
    "IsothermalEllipsoid",
    "EllipticalPowerLaw",
    "NFWHalo",
    "IsothermalMultipole",
    "ExternalShear",
    "MassSheet",
    "TruncatedIsothermal",
]
