"""Options and checks shared by the sub-commands, and the map from library parameters to flags.

Library messages name parameters (``h0 sigma must be > 0``); the command line shows
them with its own flags (``--h0 sigma must be > 0``).
"""

from __future__ import annotations

import argparse
import math
import tempfile
from pathlib import Path

from typing import TYPE_CHECKING

from lensdelay.errors import InputError
from lensdelay.inference.parameters import PRIOR_CHOICES

if TYPE_CHECKING:  # annotations only: the command line loads the models when used
    from lensdelay.model.scenario import Site

__all__ = [
    "FLAGS",
    "with_flags",
    "Once",
    "number",
    "output_folder",
    "output_file",
    "add_prior_argument",
    "add_unseen_argument",
    "add_site_arguments",
    "site_from_args",
    "written_line",
]


#: Library parameter names → command-line flags, for messages.
FLAGS = {
    "h0": "--h0",
    "kappa_ext": "--kappa-ext",
    "microlensing": "--microlensing",
    "unseen": "--unseen",
    "n_samples": "--samples",
    "weighting": "--weights",
    "seen": "--seen",
    "now": "--now",
    "flux_floor": "--flux-floor",
    "om0": "--om0",
    "cosmology_class": "--cosmology-class",
    "class_params": "--param",
    "prior": "--prior",
    "move": "--move",
    "resume": "--resume",
    "out": "--out",
    "steps": "--steps",
    "walkers": "--walkers",
    "seed": "--seed",
}


def with_flags(message: str) -> str:
    """Replace a leading library parameter name by its command-line flag."""
    for name, flag in FLAGS.items():
        if message.startswith(name + " "):
            return flag + message[len(name) :]
    return message


class Once(argparse.Action):
    """An option that may be given once: a repeat is an error, never silently the last."""

    def __call__(self, parser, namespace, values, option_string=None):
        """Store the value, or stop with a usage error if the option was given before."""
        if getattr(namespace, self.dest, None) is not None:
            parser.error(f"{option_string} may be given once")
        setattr(namespace, self.dest, values)


def number(text: str) -> float:
    """Argparse type: a finite float."""
    try:
        value = float(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(f"must be a number, got {text!r}") from err
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be finite, got {text!r}")
    return value


def output_folder(path: str | None) -> Path | None:
    """The ``--out`` folder, checked before anything is computed.

    It is created only when results are written, but it must be creatable and
    writable now: not a file, not under a file, not a dangling link, and on a
    writable file system (a probe file is written and removed).
    """
    if path is None:
        return None
    out = Path(path)
    if out.is_symlink() and not out.exists():
        raise InputError(f"--out must be a folder, got a link to nothing: {path!r}")
    if out.exists() and not out.is_dir():
        raise InputError(f"--out must be a folder, got the file {path!r}")
    existing = out
    while not existing.exists():
        if existing.is_symlink():
            raise InputError(
                f"--out must be a folder, got a path through a link to nothing: {path!r}"
            )
        existing = existing.parent
    if not existing.is_dir():
        raise InputError(f"--out must be a folder, got a path under the file {str(existing)!r}")
    _check_writable(existing, "--out", path)
    return out


def _check_writable(folder: Path, flag: str, path: str) -> None:
    """Refuse ``flag`` when ``folder`` cannot take a new file (a probe is written and removed)."""
    try:
        with tempfile.TemporaryFile(dir=folder):
            pass
    except OSError as err:
        raise InputError(f"{flag} must be writable, got {path!r} ({err.strerror})") from err


def output_file(path: str, flag: str = "--out") -> Path:
    """A file to write (``report --out``), checked before anything is computed.

    Not a folder; its folder must exist, be a folder and be writable.
    """
    target = Path(path)
    if target.is_dir():
        raise InputError(f"{flag} must be a file name, got the folder {path!r}")
    parent = target.parent if str(target.parent) else Path(".")
    if not parent.is_dir():
        what = "a file" if parent.exists() else "nothing"
        raise InputError(
            f"{flag} must be in an existing folder, got {path!r} ({str(parent)!r} is {what})"
        )
    _check_writable(parent, flag, path)
    return target


def add_prior_argument(parser) -> None:
    """``--prior``, shared by fit, forecast and hubble."""
    parser.add_argument(
        "--prior",
        choices=PRIOR_CHOICES,
        default="flat",
        help="prior of the mass-model posterior within the bounds: flat in the "
        "recipe's parameters (default) or Jeffreys' (Fisher information)",
    )


def add_unseen_argument(parser) -> None:
    """``--unseen FRACTION MASS`` (the unseen perturbers marginalised): forecast and batch."""
    parser.add_argument(
        "--unseen",
        nargs=2,
        type=number,
        metavar=("FRACTION", "MASS"),
        help="unseen perturbers marginalised per sample: their share of the convergence "
        "and the detection mass in Msun (default 0.01 1e10; 0 0 turns them off)",
    )


def add_site_arguments(parser) -> None:
    """``--site`` and ``--elongation`` (read by :func:`site_from_args`): forecast and batch."""
    parser.add_argument(
        "--site",
        nargs=3,
        type=number,
        metavar=("LAT", "LON", "HEIGHT"),
        help="ground site (degrees, degrees East, metres)",
    )
    parser.add_argument(
        "--elongation",
        nargs=2,
        type=number,
        metavar=("MIN", "MAX"),
        help="space observatory: allowed solar elongation range, degrees",
    )


def site_from_args(args) -> Site | None:
    """``--site LAT LON HEIGHT`` or ``--elongation MIN MAX`` as a Site (None if neither)."""
    from lensdelay.model.scenario import Site

    if args.site is not None and args.elongation is not None:
        raise InputError("give --site or --elongation, got both")
    if args.site is not None:
        lat, lon, height = args.site
        if not -90 <= lat <= 90:
            raise InputError(f"--site latitude must be within [-90, 90] degrees, got {lat:g}")
        if not -180 <= lon <= 360:
            raise InputError(f"--site longitude must be within [-180, 360] degrees, got {lon:g}")
        if not -500 <= height <= 9000:
            raise InputError(f"--site height must be within [-500, 9000] metres, got {height:g}")
        return Site("ground", lat, lon, height)
    if args.elongation is not None:
        lo, hi = args.elongation
        if not 0 <= lo < hi <= 180:
            raise InputError(
                f"--elongation must satisfy 0 <= min < max <= 180 degrees, got {lo:g} {hi:g}"
            )
        return Site("space", solar_elongation=(lo, hi))
    return None


def written_line(out, names, look=(), then: str = "") -> str:
    """A command's closing line: the files it wrote into ``out`` and what to open next.

    Parameters
    ----------
    out : path
        The output folder.
    names : list of str
        The files written (as :func:`lensdelay.io.storage.write_output_set` returns them);
        a figure's PNG and PDF are listed once as ``stem.png/pdf``.
    look : sequence of (str, str)
        The files to open first, each with what it shows.
    then : str
        The next step, if any (a command or an option).
    """
    shown, seen = [], set()
    for name in names:
        stem, _, ext = name.rpartition(".")
        if ext in ("png", "pdf") and f"{stem}.png" in names and f"{stem}.pdf" in names:
            if stem not in seen:
                seen.add(stem)
                shown.append(f"{stem}.png/pdf")
        else:
            shown.append(name)
    line = f"wrote {out}: {', '.join(shown)}"
    if look:
        line += "; open " + " and ".join(f"{name} ({what})" for name, what in look)
    return line + (f"; {then}" if then else "")


def add_gaussian_prior(parser, flag: str, help: str, default=None) -> None:
    """A ``--FLAG MEAN SIGMA`` Gaussian prior (numbers read by :func:`number`)."""
    parser.add_argument(
        flag, nargs=2, type=number, default=default, metavar=("MEAN", "SIGMA"), help=help
    )


def add_request_arguments(parser, *, seed_help: str = "seed of every random draw") -> None:
    """The options of a forecast request, one builder for ``forecast`` and ``batch``.

    Read back by :func:`request_options`; the defaults are the request's own
    (:class:`lensdelay.forecast.request.ForecastRequest`).
    """
    parser.add_argument(
        "--samples", type=int, default=20000, help="forecast samples (default 20000)"
    )
    parser.add_argument("--seed", type=int, default=1, help=f"{seed_help} (default 1)")
    g = parser.add_mutually_exclusive_group()
    add_gaussian_prior(g, "--h0", "Gaussian H0 prior, km/s/Mpc (default 70 5)")
    g.add_argument(
        "--cosmology", help="an astropy realisation, e.g. Planck18 (its H0 is then fixed)"
    )
    add_gaussian_prior(parser, "--kappa-ext", "external convergence prior (default 0 0.05)")
    parser.add_argument(
        "--microlensing", type=number, help="magnitude scatter per image (default 0.3)"
    )
    add_unseen_argument(parser)
    parser.add_argument(
        "--depth", type=number, help="flag images fainter than this magnitude (default 25)"
    )
    parser.add_argument(
        "--weights",
        help="how several --model recipes are combined: bic (default; exp(-BIC/2) times the "
        "timing data's likelihood), acceptable (equal among recipes whose fit is acceptable, "
        "times the timing data's likelihood) or equal",
    )
    parser.add_argument(
        "--now",
        metavar="DATE",
        help="judge past/now/future as of this ISO 8601 UTC date (default: the current time)",
    )
    add_site_arguments(parser)
    parser.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    parser.add_argument(
        "--steps",
        type=int,
        default=2000,
        help="sampler steps (default 2000; more when the measurements need a new sample)",
    )
    add_prior_argument(parser)


def request_options(args, now) -> dict:
    """The forecast request's options from the parsed arguments (only those given).

    ``now`` is the parsed ``--now`` (or the moment a batch judges every system at).
    """
    options = {
        "n_samples": args.samples,
        "seed": args.seed,
        "h0": args.h0,
        "cosmology_name": args.cosmology,
        "kappa_ext": args.kappa_ext,
        "microlensing": args.microlensing,
        "unseen": args.unseen,
        "depth": args.depth,
        "weighting": args.weights,
        "site": site_from_args(args),
        "now": now,
        "walkers": args.walkers,
        "steps": args.steps,
        "prior": args.prior,
    }
    return {k: v for k, v in options.items() if v is not None}
