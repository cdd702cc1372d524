"""lensdelay: forecasts for strongly lensed transients.

Fit parametric mass models to measured image positions, turn Fermat potentials and
angular-diameter distances into relative arrival times, and schedule when each image
of a lensed supernova or quasar flare should (re)appear.
"""
from importlib.metadata import PackageNotFoundError, version as _version

from astropy.utils import iers as _iers

# The machines this tool runs on have no internet: astropy must never try to
# download Earth-orientation tables; the bundled ones are good enough for
# rise/set and Sun positions at the minute level.
_iers.conf.auto_download = False
_iers.conf.auto_max_age = None

# Forecast dates years ahead lie beyond the leap-second table; ERFA then calls the
# year "dubious". UTC there may be off by a leap second, which is far below any
# forecast's uncertainty, so the warning is not shown.
import warnings as _warnings

from erfa import ErfaWarning as _ErfaWarning

_warnings.filterwarnings("ignore", category=_ErfaWarning, message=".*dubious year.*")

try:
    __version__ = _version("lensdelay")
except PackageNotFoundError:  # running from a source tree without installing
    __version__ = "0.0.0+unknown"

from .errors import LensdelayError, InputError  # noqa: E402

__all__ = ["__version__", "LensdelayError", "InputError"]
