"""``lensdelay delays``: measure the images' delays from their light curves."""

from __future__ import annotations

import sys
from pathlib import Path

import argparse

from lensdelay.cli.options import number, output_folder, written_line

__all__ = ["run", "delay_range", "register"]


def run(args) -> int:
    """Measure, print, write delays.json and the figure."""
    from lensdelay.api import measure_delays
    from lensdelay.io.lightcurve_files import delays_json
    from lensdelay.io.storage import write_output_set
    from lensdelay.report.figures import light_curves_figure
    from lensdelay.report.text import delays_text

    out = output_folder(args.out)
    target = Path(args.input)
    is_scenario = target.suffix.lower() == ".toml"
    res = measure_delays(
        args.input if is_scenario else None,
        curves=args.curves if is_scenario else args.input,
        reference=args.reference,
        kind=args.kind,
        order=args.order,
        max_delay=args.max_delay,
        walkers=args.walkers,
        steps=args.steps,
        simulations=args.simulations,
        seed=args.seed,
        delay_ranges=dict(args.delay_range) if args.delay_range else None,
        delay_prior=args.delay_prior,
    )
    text = delays_text(res)
    if out is not None:
        written = write_output_set(
            out,
            json_name="delays.json",
            doc=delays_json(res, res.provenance),
            figures={"light_curves": light_curves_figure(res)},
            inputs=res.provenance["inputs"],
        )
    print(text)
    if out is not None:
        look = [("light_curves.png", "the curves laid onto each other")]
        then = f"forecast --delays {out}/delays.json or hubble --delays use them"
        print(written_line(out, written, look, then), file=sys.stderr)
    return 0


def delay_range(text: str) -> tuple[str, tuple[float, float]]:
    """Argparse type of --delay-range: ``LABEL=LOW:HIGH`` (days, LOW < HIGH)."""
    try:
        label, span = text.split("=", 1)
        low, high = (float(v) for v in span.split(":"))
    except ValueError as err:
        raise argparse.ArgumentTypeError(
            f"must be LABEL=LOW:HIGH (days, e.g. B=-20:80), got {text!r}"
        ) from err
    if not (label and low < high and abs(low) < 1e6 and abs(high) < 1e6):
        raise argparse.ArgumentTypeError(
            f"must name an image and LOW < HIGH (finite days), got {text!r}"
        )
    return label, (low, high)


def register(sub) -> None:
    """Add the ``delays`` sub-command to the parser."""
    p = sub.add_parser("delays", help="measure the delays from the images' light curves")
    p.add_argument(
        "input",
        help="a scenario TOML whose [transient] names light_curves, or a light-curve file",
    )
    p.add_argument("--curves", help="a light-curve file overriding the scenario's")
    p.add_argument("--reference", help="the image whose delay is 0 (default: seen_in)")
    p.add_argument(
        "--kind",
        default="auto",
        choices=("auto", "quasar", "supernova"),
        help="source model (default: judged from the reference's curve)",
    )
    p.add_argument(
        "--order",
        type=int,
        default=2,
        help="quasars: order of the polynomial among the microlensing models (default 2)",
    )
    p.add_argument("--max-delay", type=number, help="search delays within ± this many days")
    p.add_argument(
        "--delay-range",
        action="append",
        type=delay_range,
        metavar="LABEL=LOW:HIGH",
        help="quasars: a range (days after the reference) the image's delay lies in (a prior)",
    )
    p.add_argument(
        "--delay-prior",
        metavar="FORECAST_JSON",
        help="quasars: bound each delay by a forecast's predicted one (its 95%% interval "
        "widened by its width on both sides; use a forecast made without these curves' "
        "delays); default: the curves' overlap alone",
    )
    p.add_argument(
        "--walkers", type=int, default=32, help="supernovae: sampler walkers (default 32)"
    )
    p.add_argument(
        "--steps",
        type=int,
        default=1500,
        help="supernovae: sampler steps (default 1500; runs on to 4x until converged)",
    )
    p.add_argument(
        "--simulations",
        type=int,
        default=10,
        help="simulated data sets for the bias and spread (default 10; 0: none)",
    )
    p.add_argument("--seed", type=int, default=1, help="seed of every random draw (default 1)")
    p.add_argument("--out", help="folder for delays.json and the figure")
    p.set_defaults(func=run)
