"""``lensdelay hubble``: delay-vs-H0 curves and, with measured delays, the H0 posterior."""

from __future__ import annotations

import sys

from lensdelay.cli.options import (
    Once,
    add_gaussian_prior,
    add_prior_argument,
    output_folder,
    written_line,
)
from lensdelay.errors import InputError

__all__ = ["run", "HUBBLE_FIGURES", "register"]


def run(args) -> int:
    """Infer H0 (or the delay curves), print the report, write the outputs."""
    from lensdelay.api import infer_h0
    from lensdelay.io.hubble_files import curves_table_text
    from lensdelay.io.hubble_files import hubble_json
    from lensdelay.io.storage import write_output_set
    from lensdelay.report.figures import h0_figure
    from lensdelay.report.figures import hubble_curves_figure

    out = output_folder(args.out)
    params = {}
    for item in args.param or []:
        key, sep, value = item.partition("=")
        try:
            params[key] = float(value)
        except ValueError as err:
            raise InputError(f"--param must be NAME=NUMBER, got {item!r}") from err
        if not sep:
            raise InputError(f"--param must be NAME=NUMBER, got {item!r}")
    res = infer_h0(
        args.scenario,
        args.model,
        delays=args.delays,
        kappa_ext=tuple(args.kappa_ext),
        om0=args.om0,
        curves=tuple(args.curves.split(",")) if args.curves else (),
        walkers=args.walkers,
        steps=args.steps,
        seed=args.seed,
        progress=not args.quiet,
        cosmology_name=args.cosmology,
        cosmology_class=args.cosmology_class,
        class_params=params,
        prior=args.prior,
        stop=args.stop,
    )
    doc = hubble_json(res)
    text = res.report()
    if out is not None:
        figs = {"hubble_curves": hubble_curves_figure(res)}
        if res.h0 is not None:
            figs["hubble_posterior"] = h0_figure(res)
        written = write_output_set(
            out,
            json_name="hubble.json",
            doc=doc,
            figures=figs,
            texts={"hubble_curves.ecsv": curves_table_text(res)},
            inputs=res.provenance["inputs"],
        )
    print(text)
    if out is not None:
        look = [(f"{stem}.png", what) for stem, what in HUBBLE_FIGURES.items() if stem in figs]
        then = f"lensdelay report {out} makes one page of it"
        print(written_line(out, written, look, then), file=sys.stderr)
    return 0


#: The H0 job's figures, in the order a reader opens them, with what each shows.
HUBBLE_FIGURES = {
    "hubble_posterior": "the H0 posterior under each kappa_ext prior",
    "hubble_curves": "the predicted delays against H0",
}


def register(sub) -> None:
    """Add the ``hubble`` sub-command to the parser."""
    p = sub.add_parser(
        "hubble", help="delays vs H0; H0 from measured delays; mass-sheet comparison"
    )
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--model", action=Once, help="model TOML replacing the scenario's mass model")
    p.add_argument(
        "--delays",
        metavar="DELAYS_JSON",
        help="delays measured from light curves (delays.json of lensdelay delays), used with "
        "their covariance beside the scenario's own [[delay]] entries",
    )
    p.add_argument("--out", help="folder for hubble.json and the figures")
    add_gaussian_prior(
        p, "--kappa-ext", "external convergence prior (default 0 0.05)", default=[0.0, 0.05]
    )
    add_gaussian_prior(p, "--om0", "Omega_m prior (flat LCDM; default the scenario's value ± 0.02)")
    p.add_argument("--curves", help="also show delays along 'om0' and/or 'w' (comma separated)")
    p.add_argument("--cosmology", help="an astropy realisation, e.g. Planck18")
    p.add_argument(
        "--cosmology-class",
        help="an astropy cosmology class, e.g. FlatwCDM (H0 and Om0 "
        "from the scenario; the Om0 prior then applies only to FlatLambdaCDM)",
    )
    p.add_argument(
        "--param",
        action="append",
        metavar="NAME=VALUE",
        help="a parameter of --cosmology-class, e.g. w0=-0.9",
    )
    p.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    add_prior_argument(p)
    p.add_argument("--steps", type=int, default=2000, help="sampler steps (default 2000)")
    p.add_argument("--seed", type=int, default=1, help="seed of every random draw (default 1)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)
