"""lensdelay: forecasts for strongly lensed transients.

Fit parametric mass models to measured image positions, turn Fermat potentials and
angular-diameter distances into relative arrival times, forecast when, where and how
bright each image of a lensed supernova or quasar flare appears, and infer H0 from
measured delays. Every job of the command line is a function here (README, "Using
lensdelay from Python"); importing the package changes no global state.
"""

from lensdelay.api import (
    check_scenario,
    fit_scenario,
    forecast_scenario,
    images_of_source,
    infer_h0,
    load_model,
    load_scenario,
    map_scenario,
    measure_delays,
)
from lensdelay.errors import InputError, LensdelayError, LensdelayWarning
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import sample
from lensdelay.lensing import profiles
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.model.recipe import MassModel
from lensdelay.model.scenario import Scenario
from lensdelay.version import __version__

__all__ = [
    "__version__",
    # files and objects
    "load_scenario",
    "load_model",
    "Scenario",
    "MassModel",
    # lensing
    "Lens",
    "profiles",
    "find_images",
    "LensDistances",
    "images_of_source",
    # inference
    "check_scenario",
    "fit_scenario",
    "ImageLikelihood",
    "sample",
    # the jobs
    "forecast_scenario",
    "infer_h0",
    "map_scenario",
    "measure_delays",
    # errors
    "LensdelayError",
    "InputError",
    "LensdelayWarning",
]
