"""``lensdelay report DIR``: one self-contained HTML page from the outputs in DIR."""

from __future__ import annotations

import sys
from pathlib import Path


__all__ = ["run", "register"]


def run(args) -> int:
    """Read DIR's outputs, write DIR/report.html (or --out) atomically."""
    from lensdelay.io.report_inputs import read_results
    from lensdelay.io.storage import atomic_write_text
    from lensdelay.report.html import report_html
    from lensdelay.cli.options import output_file
    from lensdelay.errors import InputError

    target = output_file(args.out) if args.out else Path(args.folder) / "report.html"
    docs, figures = read_results(args.folder)
    try:
        page = report_html(
            forecast=docs.get("forecast"),
            fit=docs.get("fit"),
            hubble=docs.get("hubble"),
            cosmography=docs.get("cosmography"),
            figures=figures,
        )
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as err:
        # the files passed the key checks but hold a value of the wrong kind (edited by
        # hand, or damaged): one line naming them, no page
        names = ", ".join(f"{job}.json" for job in docs)
        raise InputError(
            f"{Path(args.folder)}: {names} must hold the values lensdelay wrote, got one the "
            f"report cannot read ({type(err).__name__}: {err}); run the job again"
        ) from err
    atomic_write_text(target, page)
    print(f"wrote {target} ({', '.join(docs)}; {len(figures)} figures)", file=sys.stderr)
    return 0


def register(sub) -> None:
    """Add the ``report`` sub-command to the parser."""
    p = sub.add_parser(
        "report",
        help="one self-contained HTML page from the fit, forecast, hubble and cosmography outputs",
    )
    p.add_argument(
        "folder",
        help="folder holding forecast.json, fit.json, hubble.json and/or cosmography.json",
    )
    p.add_argument("--out", help="the HTML file to write (default: FOLDER/report.html)")
    p.set_defaults(func=run)
