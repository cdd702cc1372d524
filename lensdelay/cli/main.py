"""The ``lensdelay`` command line. Thin: parse arguments, call the library, print.

Every :class:`~lensdelay.errors.LensdelayError` becomes one line on stderr and exit
status 2; nothing is written when input is bad.
"""
from __future__ import annotations

import argparse
import json
import math
import sys
import warnings

from lensdelay.version import __version__
from lensdelay.errors import LensdelayError, LensdelayWarning


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line and exit 2."""

    def error(self, message):  # noqa: D401 - argparse hook
        self.exit(2, f"lensdelay: argument error: {message}\n")


def _finite(text: str) -> float:
    try:
        value = float(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(f"must be a number, got {text!r}") from err
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be finite, got {text!r}")
    return value


def _cmd_images(args) -> int:
    from lensdelay.cli.commands import images_command

    result = images_command(args.model, args.source[0], args.source[1],
                            source_redshift=args.source_redshift,
                            lens_redshift=args.lens_redshift)
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        from lensdelay.report.text import images_text

        print(images_text(result))
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="lensdelay", description=(
        "Forecast when, where and how bright a strongly lensed transient reappears."))
    parser.add_argument("--version", action="version", version=f"lensdelay {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    p = sub.add_parser("images", help="all images of a point source behind a mass model")
    p.add_argument("model", help="model TOML file with [[mass]] entries")
    p.add_argument("--source", nargs=2, type=_finite, metavar=("X", "Y"), required=True,
                   help="source position, arcsec (x East, y North)")
    p.add_argument("--source-redshift", type=_finite, default=None,
                   help="source redshift (default: the model's reference_source_redshift)")
    p.add_argument("--lens-redshift", type=_finite, default=None,
                   help="lens redshift (default: the model's [lens] redshift)")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=_cmd_images)

    from lensdelay.cli.commands import register_more

    register_more(sub, _finite)
    return parser


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """A warning as one clean line on stderr, each text once: no library path, no source line."""
    text = " ".join(str(message).split())
    if text in _show_warning.shown:
        return
    _show_warning.shown.add(text)
    print(f"lensdelay: warning: {text}", file=sys.stderr)


_show_warning.shown = set()


def _terminate(signum, frame):
    """SIGINT/SIGTERM: while sampling, stop at the next checkpoint; otherwise unwind now."""
    from lensdelay.inference.sampling import STOP

    if STOP.active:
        STOP.requested = True
        return
    raise KeyboardInterrupt


def main(argv=None) -> int:
    import signal

    if threading_main():
        signal.signal(signal.SIGTERM, _terminate)
        signal.signal(signal.SIGINT, _terminate)
    from astropy.utils import iers
    from erfa import ErfaWarning

    # no network here: astropy must never try to download Earth-orientation tables
    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    # Forecast dates years ahead lie beyond the leap-second table; ERFA then calls the
    # year "dubious". UTC there may be off by a leap second, far below any forecast's
    # uncertainty, so the command line does not show that warning.
    warnings.filterwarnings("ignore", category=ErfaWarning, message=".*dubious year.*")
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default", LensdelayWarning)
            warnings.showwarning = _show_warning
            _show_warning.shown = set()
            return int(args.func(args) or 0)
    except LensdelayError as err:
        print(f"lensdelay: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("lensdelay: interrupted; no output was written (a sampler checkpoint, if any, "
              "is kept in --out for --resume)", file=sys.stderr)
        return 130


def threading_main() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
