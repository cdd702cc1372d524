"""``lensdelay watch``: survey alerts in, notices out, for lenses prepared ahead."""

from __future__ import annotations

import json
import sys
import time

from lensdelay.cli.options import output_folder
from lensdelay.errors import InputError

__all__ = ["run", "register"]


def _fields(path: str | None) -> dict | None:
    """The ``--fields`` mapping: a JSON object, meaning -> the alert files' field name."""
    if path is None:
        return None
    from lensdelay.model.alerts import ALERT_FIELDS

    try:
        with open(path) as handle:
            mapping = json.load(handle)
    except (OSError, ValueError) as err:
        raise InputError(f"--fields must be a readable JSON file, got {path!r} ({err})") from err
    if not isinstance(mapping, dict) or not all(isinstance(v, str) for v in mapping.values()):
        raise InputError(f"--fields must map field meanings to names (strings), got {mapping!r}")
    unknown = sorted(set(mapping) - set(ALERT_FIELDS))
    if unknown:
        raise InputError(
            f"--fields keys must be among {', '.join(ALERT_FIELDS)}, got {unknown[0]!r}"
        )
    return mapping


def run(args) -> int:
    """Poll the alert folder (once with --once), issue notices, keep the state."""
    from lensdelay.watching import Watch

    out = output_folder(args.out)
    if args.interval <= 0:
        raise InputError(f"--interval must be > 0 seconds, got {args.interval:g}")
    fields = _fields(args.fields)
    watch = Watch(
        args.lenses,
        args.alerts,
        out,
        fields=fields,
        samples=args.samples,
        alert_sigma=args.alert_sigma,
        log=lambda line: print(f"watch: {line}", file=sys.stderr, flush=True),
    )
    stop = args.stop
    stop.active = True  # SIGTERM and Ctrl-C end the loop after the alert in hand
    try:
        while not stop.requested:
            watch.poll(stop)
            if args.once:
                break
            deadline = time.monotonic() + args.interval
            while time.monotonic() < deadline and not stop.requested:
                time.sleep(min(0.2, args.interval))
    finally:
        stop.active = False
        watch.close()
    print(f"watch: state in {out / 'watch.sqlite'}, notices in {out / 'notices'}", file=sys.stderr)
    return 0


def register(sub) -> None:
    """Add the ``watch`` sub-command to the parser."""
    p = sub.add_parser(
        "watch", help="match survey alerts to prepared lenses; forecasts and notices"
    )
    p.add_argument("lenses", help="folder of prepared lenses (lensdelay prepare), each with [sky]")
    p.add_argument("--alerts", required=True, help="folder the alert files arrive in")
    p.add_argument("--out", required=True, help="folder for notices, forecasts and the state")
    p.add_argument("--fields", help="JSON file renaming alert fields (meaning -> name)")
    p.add_argument("--once", action="store_true", help="read what is there, then stop")
    p.add_argument("--interval", type=float, default=1.0, help="seconds between polls (default 1)")
    p.add_argument(
        "--samples", type=int, default=20000, help="forecast samples per notice (default 20000)"
    )
    p.add_argument(
        "--alert-sigma",
        type=float,
        default=None,
        help="an alert's 1-sigma position error, arcsec (default 0.05)",
    )
    p.set_defaults(func=run)
