"""Mass profiles: one file a profile, all following :mod:`lensdelay.profiles.base`."""
from .base import PROFILES, AxisymmetricProfile, EllipticalProfile, MassProfile
from .nfw import NFWHalo
from .point import PointMass
from .power_law import EllipticalPowerLaw
from .shear import ExternalShear
from .sheet import MassSheet
from .sie import IsothermalEllipsoid
from .sis import SingularIsothermalSphere

__all__ = [
    "PROFILES", "MassProfile", "EllipticalProfile", "AxisymmetricProfile",
    "PointMass", "SingularIsothermalSphere", "IsothermalEllipsoid",
    "EllipticalPowerLaw", "NFWHalo", "ExternalShear", "MassSheet",
]
