"""``lensdelay forecast``: the main job, from arguments to files and text."""

from __future__ import annotations

import importlib
import sys

from lensdelay.errors import InputError
from lensdelay.cli.options import (
    add_request_arguments,
    output_folder,
    request_options,
    written_line,
)

__all__ = ["run", "write_forecast", "register"]


def run(args) -> int:
    """Forecast, print the report, write every output to --out at once."""
    from lensdelay.io.prepared_files import is_prepared
    from lensdelay.model.scenario import parse_date

    if args.report and args.out is None:
        raise InputError("--report needs --out DIR (the page goes beside the outputs), got none")
    out = output_folder(args.out)
    now = parse_date(args.now, "--now") if args.now is not None else None
    if is_prepared(args.scenario):
        res = _from_prepared(args, now)
    else:
        if args.transient is not None:
            raise InputError(
                "--transient needs a prepared lens (a folder from lensdelay prepare), got "
                f"the scenario file {args.scenario}; give the alert in its [transient]"
            )
        res = _from_scratch(args, now)
    return _write(args, out, res)


def _from_prepared(args, now):
    """The forecast from a prepared lens: no fitting, the alert from --transient."""
    from lensdelay.api import forecast_prepared

    for flag, value in (("--model", args.model), ("--delays", args.delays)):
        if value:
            raise InputError(
                f"{flag} cannot be used with a prepared lens (it was fitted with its model "
                f"and data when prepared), got {value!r}"
            )
    # a prepared lens keeps the sampler settings and prior it was drawn with
    options = {
        k: v
        for k, v in request_options(args, now).items()
        if k not in ("walkers", "steps", "prior")
    }
    return forecast_prepared(
        args.scenario,
        args.transient,
        budget=args.budget,
        seen=args.seen,
        progress=not args.quiet,
        stop=args.stop,
        **options,
    )


def _from_scratch(args, now):
    """Fit, sample and forecast."""
    from lensdelay.api import forecast_scenario

    return forecast_scenario(
        args.scenario,
        args.model,
        delays=args.delays,
        budget=args.budget,
        seen=args.seen,
        progress=not args.quiet,
        stop=args.stop,
        **request_options(args, now),
    )


def write_forecast(out, res, report: bool = False) -> tuple[dict, list[str]]:
    """Build every output of forecast ``res`` first, then write them into ``out`` as one set.

    Returns the forecast's JSON document (as written) and the names of the files written.
    """
    from lensdelay.io.forecast_files import forecast_ics
    from lensdelay.io.forecast_files import forecast_json
    from lensdelay.io.forecast_files import forecast_table
    from lensdelay.io.forecast_files import table_text
    from lensdelay.io.storage import figure_bytes
    from lensdelay.io.storage import json_ready
    from lensdelay.io.storage import write_output_set
    from lensdelay.io.sky_regions import region_text

    doc = forecast_json(res)
    texts = {"forecast.ecsv": table_text(forecast_table(res)), "forecast.ics": forecast_ics(res)}
    # builders, not figures: each is drawn (matplotlib imported) by the process that
    # renders it (io.storage.save_figures), the finder chart beside the other two
    figs = {
        "timeline": _figure_builder("figures", "timeline_figure", res),
        "sky": _figure_builder("finder", "finder_chart", res),
    }
    if res.budget is not None:
        figs["budget"] = _figure_builder("figures", "budget_figure", res.budget)
    regions = region_text(res)
    if regions is not None:
        texts["sky.reg"] = regions
    rendered = {}
    if report:
        from lensdelay.report.html import report_html

        figs = {stem: build() for stem, build in figs.items()}
        pngs = {stem: figure_bytes(fig) for stem, fig in figs.items()}
        texts["report.html"] = report_html(forecast=json_ready(doc), figures=pngs)
        # the page's PNGs are the files' PNGs: rendered once
        rendered = {stem: {"png": png} for stem, png in pngs.items()}
    written = write_output_set(
        out,
        json_name="forecast.json",
        doc=doc,
        figures=figs,
        texts=texts,
        rendered=rendered,
        inputs=res.provenance["inputs"],
    )
    return doc, written


def _figure_builder(module: str, name: str, argument):
    """A builder of the figure ``lensdelay.report.<module>.<name>(argument)``.

    matplotlib is imported when it runs, in the process that renders the figure.
    """

    def build():
        return getattr(importlib.import_module(f"lensdelay.report.{module}"), name)(argument)

    return build


def _write(args, out, res) -> int:
    """Print the forecast and write every output as one set."""
    from lensdelay.io.forecast_files import forecast_json

    text = res.report()
    if out is not None:
        _, written = write_forecast(out, res, report=args.report)
    else:
        forecast_json(res)  # the same checks as with files, even when none are written
    print(text)
    if out is not None:
        look = [("timeline.png", "the dates"), ("sky.png", "the finder chart")]
        if args.report:
            look.insert(0, ("report.html", "everything on one page"))
        then = "" if args.report else "--report adds report.html, everything on one page"
        print(written_line(out, written, look, then), file=sys.stderr)
    return 0


def register(sub) -> None:
    """Add the ``forecast`` sub-command to the parser."""
    p = sub.add_parser("forecast", help="when, where and how bright the event reappears")
    p.add_argument(
        "scenario", help="scenario TOML file, or a prepared lens's folder (lensdelay prepare)"
    )
    p.add_argument(
        "--transient",
        metavar="[FAMILY/]LABEL=DATE[±SIGMA]",
        help="with a prepared lens: the alert, seen in that image on DATE (ISO 8601, UTC), "
        "SIGMA days (default 1; +- also accepted)",
    )
    p.add_argument("--model", action="append", help="model TOML (repeat for several models)")
    p.add_argument(
        "--delays",
        metavar="DELAYS_JSON",
        help="delays measured from light curves (delays.json of lensdelay delays), used with "
        "their covariance beside the scenario's own [[delay]] entries",
    )
    p.add_argument("--out", help="folder for forecast.json, .ecsv, .ics and the figures")
    add_request_arguments(p)
    p.add_argument(
        "--seen",
        action="append",
        metavar="[FAMILY/]LABEL=DATE[±SIGMA]",
        help="another image (observed or predicted, e.g. sn/X1) showed the event on DATE "
        "(ISO 8601, UTC), SIGMA days (+- also accepted); default SIGMA: the "
        "detection's date_sigma_days, or 1 day; repeat for several",
    )
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument(
        "--report",
        action="store_true",
        help="also write report.html (one self-contained page; needs --out)",
    )
    p.add_argument(
        "--no-budget",
        dest="budget",
        action="store_false",
        help="skip the uncertainty budget table and figure",
    )
    p.set_defaults(func=run, budget=True)
