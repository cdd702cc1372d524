"""The one exception family of lensdelay.

Every error that a user can cause derives from :class:`LensdelayError`. The command
line turns it into a single line on stderr and exit status 2. Messages follow the
pattern ``"<name> <rule>, got <value>"`` and list the allowed choices where there are
any.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

__all__ = [
    "LensdelayError",
    "InputError",
    "FitError",
    "LensdelayWarning",
    "suggest",
    "choices_text",
    "is_real",
    "pair_of_numbers",
    "path_of",
]


class LensdelayError(Exception):
    """Base class of every error lensdelay raises on purpose."""


class InputError(LensdelayError, ValueError):
    """A scenario, model or argument breaks a rule.

    Parameters
    ----------
    message : str
        ``"<name> <rule>, got <value>"``.
    source : str, optional
        The file (or ``"argument"``) the offending value came from; prefixed to the
        message so that the one line names the file.
    """

    def __init__(self, message: str, source: str | None = None):
        self.source = source
        self.bare_message = message
        super().__init__(f"{source}: {message}" if source else message)

    def with_source(self, source: str) -> "InputError":
        """Return the same error, now naming the file it came from."""
        if self.source:
            return self
        err = InputError(self.bare_message, source)
        err.__cause__ = self.__cause__
        return err


class FitError(LensdelayError):
    """A fit or a sampler could not produce a usable answer."""


class LensdelayWarning(UserWarning):
    """Legal but suspicious input or a result that deserves a second look."""


def suggest(name: str, choices: Iterable[str]) -> str:
    """Return ``" (did you mean 'x'?)"`` for the nearest valid name, or ``""``."""
    close = difflib.get_close_matches(name, list(choices), n=1, cutoff=0.5)
    return f" (did you mean '{close[0]}'?)" if close else ""


def choices_text(choices: Iterable[str]) -> str:
    """Format allowed names as ``'a', 'b' or 'c'``."""
    items = [f"'{c}'" for c in choices]
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " or " + items[-1]


def is_real(value) -> bool:
    """Whether ``value`` is one real number (not a bool, a string or an array)."""
    import numbers

    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def pair_of_numbers(value, name: str, one_allowed: bool = False):
    """``value`` as ``(mean, sigma)``, two floats; with ``one_allowed`` also one number.

    Raises
    ------
    InputError
        Anything else (a string, one number where two are needed, three numbers, ...):
        ``"<name> must be two numbers (mean, sigma), got <value>"``.
    """
    if one_allowed and is_real(value):
        return float(value)
    rule = "a number or two numbers" if one_allowed else "two numbers"
    try:
        if isinstance(value, (str, bytes)) or len(value) != 2:
            raise TypeError
        mean, sigma = (float(v) for v in value)
    except (TypeError, ValueError) as err:
        raise InputError(f"{name} must be {rule} (mean, sigma), got {value!r}") from err
    return mean, sigma


def path_of(value, name: str = "path"):
    """``value`` as a :class:`pathlib.Path`: a string or an ``os.PathLike``, nothing else.

    Raises
    ------
    InputError
        ``"<name> must be a path (a string or os.PathLike), got <value>"`` for anything
        else (a number, None, an open file), instead of Python's TypeError from deep inside.
    """
    import os
    from pathlib import Path

    if isinstance(value, (str, os.PathLike)):
        return Path(value)
    raise InputError(f"{name} must be a path (a string or os.PathLike), got {value!r}")
