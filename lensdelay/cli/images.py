"""``lensdelay images``: every image of a point source behind a mass model."""

from __future__ import annotations

import json

from lensdelay.cli.options import number

__all__ = ["run", "register"]


def run(args) -> int:
    """Print every image of the source as a table or JSON."""
    from lensdelay.api import images_of_source
    from lensdelay.report.text import images_text

    result = images_of_source(
        args.model,
        args.source[0],
        args.source[1],
        source_redshift=args.source_redshift,
        lens_redshift=args.lens_redshift,
    )
    print(json.dumps(result, indent=2) if args.json else images_text(result))
    return 0


def register(sub) -> None:
    """Add the ``images`` sub-command to the parser."""
    p = sub.add_parser("images", help="all images of a point source behind a mass model")
    p.add_argument("model", help="model TOML file with [[mass]] entries")
    p.add_argument(
        "--source",
        nargs=2,
        type=number,
        metavar=("X", "Y"),
        required=True,
        help="source position, arcsec (x East, y North)",
    )
    p.add_argument(
        "--source-redshift",
        type=number,
        default=None,
        help="source redshift (default: the model's reference_source_redshift)",
    )
    p.add_argument(
        "--lens-redshift",
        type=number,
        default=None,
        help="lens redshift (default: the model's [lens] redshift)",
    )
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=run)
