"""lensdelay: forecasts for strongly lensed transients.

Fit parametric mass models to measured image positions, turn Fermat potentials and
angular-diameter distances into relative arrival times, forecast when, where and how
bright each image of a lensed supernova or quasar flare appears, and infer H0 from
measured delays. Every job of the command line is a function here (docs/python.md, "Using
lensdelay from Python"); importing the package changes no global state.
"""

from lensdelay.version import __version__

#: Where each public name lives. Imported on first use (PEP 562): ``import lensdelay`` alone
#: loads nothing heavy, so a command of the command line imports only what it needs.
_LOCATIONS = {
    "check_scenario": "lensdelay.api",
    "fit_scenario": "lensdelay.api",
    "forecast_scenario": "lensdelay.api",
    "images_of_source": "lensdelay.api",
    "infer_h0": "lensdelay.api",
    "infer_joint_h0": "lensdelay.api",
    "load_model": "lensdelay.api",
    "load_scenario": "lensdelay.api",
    "map_scenario": "lensdelay.api",
    "measure_delays": "lensdelay.api",
    "InputError": "lensdelay.errors",
    "LensdelayError": "lensdelay.errors",
    "LensdelayWarning": "lensdelay.errors",
    "ImageLikelihood": "lensdelay.inference.likelihood",
    "sample": "lensdelay.inference.sampling",
    "profiles": "lensdelay.lensing",
    "LensDistances": "lensdelay.lensing.distances",
    "find_images": "lensdelay.lensing.images",
    "Lens": "lensdelay.lensing.lens",
    "MassModel": "lensdelay.model.recipe",
    "Scenario": "lensdelay.model.scenario",
}


def __getattr__(name: str):
    """The public names of ``__all__``, imported from their modules on first use."""
    if name not in _LOCATIONS:
        raise AttributeError(f"module 'lensdelay' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(_LOCATIONS[name]), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__():
    return sorted(set(globals()) | set(_LOCATIONS))


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
    "infer_joint_h0",
    "map_scenario",
    "measure_delays",
    # errors
    "LensdelayError",
    "InputError",
    "LensdelayWarning",
]
