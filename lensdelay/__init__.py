"""lensdelay: forecasts for strongly lensed transients.

Fit parametric mass models to measured image positions, turn Fermat potentials and
angular-diameter distances into relative arrival times, and schedule when each image
of a lensed supernova or quasar flare should (re)appear.
"""
from lensdelay.errors import InputError, LensdelayError
from lensdelay.version import __version__

__all__ = ["__version__", "LensdelayError", "InputError"]
