"""Process-wide settings of the libraries, made by the command line (never on import)."""

from __future__ import annotations

import warnings

__all__ = ["configure_libraries"]


def configure_libraries() -> None:
    """Process-wide settings the command line (not the library) makes."""
    import logging

    # our own warning says a chain is short; emcee's logger would say it again
    logging.getLogger("emcee").setLevel(logging.ERROR)
    _configure_astropy()


def _configure_astropy() -> None:
    from astropy.utils import iers
    from erfa import ErfaWarning

    # no network here: astropy must never try to download Earth-orientation tables
    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    # Forecast dates years ahead lie beyond the leap-second table; ERFA then calls the
    # year "dubious". UTC there may be off by a leap second, far below any forecast's
    # uncertainty, so the command line does not show that warning.
    warnings.filterwarnings("ignore", category=ErfaWarning, message=".*dubious year.*")
