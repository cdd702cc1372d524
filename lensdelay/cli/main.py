"""The ``lensdelay`` command line. Thin: parse arguments, call :mod:`lensdelay.api`, print.

Every :class:`~lensdelay.errors.LensdelayError` becomes one line on stderr and exit
status 2; nothing is written when input is bad. The command line, not the library,
sets process-wide state: astropy never downloads, warnings print as one clean line.
"""

from __future__ import annotations

import argparse
import signal
import sys
import threading
import warnings

from lensdelay.cli import (
    batch,
    check,
    cosmography,
    delays,
    fit,
    forecast,
    hubble,
    images,
    maps,
    prepare,
    report,
    watch,
)
from lensdelay.cli.libraries import configure_libraries
from lensdelay.cli.options import with_flags
from lensdelay.errors import InputError, LensdelayError, LensdelayWarning
from lensdelay.inference.stop import StopRequest
from lensdelay.io.storage import PartialOutputError
from lensdelay.version import __version__

__all__ = ["SUBCOMMANDS", "build_parser", "main"]


SUBCOMMANDS = (
    images,
    check,
    fit,
    delays,
    prepare,
    forecast,
    batch,
    hubble,
    cosmography,
    watch,
    maps,
    report,
)


class _Parser(argparse.ArgumentParser):
    """Argparse, but a usage error is one line and exit 2, and options are never abbreviated.

    ``--sample 100`` must not silently mean ``--samples 100``.
    """

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("allow_abbrev", False)
        super().__init__(*args, **kwargs)

    def error(self, message):  # noqa: D401 - argparse hook
        self.exit(2, f"lensdelay: argument error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command."""
    parser = _Parser(
        prog="lensdelay",
        description=("Forecast when, where and how bright a strongly lensed transient reappears."),
    )
    parser.add_argument("--version", action="version", version=f"lensdelay {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    for module in SUBCOMMANDS:
        module.register(sub)
    return parser


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """A warning as one clean line on stderr, each text once: no library path, no source line."""
    text = " ".join(str(message).split())
    if text in _show_warning.shown:
        return
    _show_warning.shown.add(text)
    print(f"lensdelay: warning: {text}", file=sys.stderr)


_show_warning.shown = set()


def _stop_handler(stop: StopRequest):
    """SIGINT/SIGTERM: while sampling, stop at the next checkpoint; otherwise unwind now."""

    def terminate(signum, frame):
        if stop.active:
            stop.requested = True
            return
        raise KeyboardInterrupt

    return terminate


def main(argv=None) -> int:
    """Run the command line; return the exit status (2 for bad input)."""
    stop = StopRequest()
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _stop_handler(stop))
        signal.signal(signal.SIGINT, _stop_handler(stop))
    parser = build_parser()
    args = parser.parse_args(argv)
    args.stop = stop
    try:
        with warnings.catch_warnings():
            configure_libraries()
            # a bad LENSDELAY_THREADS is refused before any work, not deep inside a job
            from lensdelay.lensing.threads import thread_count

            thread_count()
            warnings.simplefilter("default", LensdelayWarning)
            warnings.showwarning = _show_warning
            _show_warning.shown = set()
            return int(args.func(args) or 0)
    except InputError as err:
        where = f"{err.source}: " if err.source else ""
        print(f"lensdelay: {where}{with_flags(err.bare_message)}", file=sys.stderr)
        return 2
    except LensdelayError as err:
        print(f"lensdelay: {err}", file=sys.stderr)
        return 2
    except PartialOutputError as err:
        print(
            f"lensdelay: interrupted while replacing the outputs in {err.folder}: "
            f"{len(err.replaced)} of {err.total} files are new ({', '.join(err.replaced)}); "
            "the others are from the previous run",
            file=sys.stderr,
        )
        return 130
    except KeyboardInterrupt:
        # only a command with --resume (fit) continues a checkpoint; the others start again
        tail = (
            " (the sampler's checkpoint, if any, is kept in --out: run again with --resume)"
            if hasattr(args, "resume")
            else "; run the command again"
        )
        print(f"lensdelay: interrupted; no output was written{tail}", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
