"""``lensdelay prepare``: fit and sample a lens once, so an alert's forecast takes seconds."""

from __future__ import annotations

import sys

from lensdelay.cli.options import add_prior_argument, output_folder
from lensdelay.errors import InputError

__all__ = ["run", "register"]


def run(args) -> int:
    """Prepare the lens and store it in --out (one set of files, written at the end)."""
    from lensdelay.api import prepare_lens

    out = output_folder(args.out)
    if out is None:
        raise InputError("--out DIR is required (the folder the prepared lens is kept in)")
    prepared = prepare_lens(
        args.scenario,
        args.model,
        walkers=args.walkers,
        steps=args.steps,
        seed=args.seed,
        prior=args.prior,
        out=out,
        progress=not args.quiet,
        stop=args.stop,
    )
    fit, chain = prepared.fit, prepared.chain
    print(
        f"prepared {prepared.scenario.name} ({fit.model_label}): chi2 = {fit.chi2:.1f} for "
        f"{fit.dof} dof; {len(chain.samples())} posterior samples ({chain.move})"
    )
    for note in list(fit.notes) + list(chain.warnings):
        print(f"NOTE: {note}")
    print(
        f"wrote {out}/lens.json, chain.npz and scenario.toml; forecast an alert with "
        f"lensdelay forecast {out} --transient FAMILY/LABEL=DATE±SIGMA",
        file=sys.stderr,
    )
    return 0


def register(sub) -> None:
    """Add the ``prepare`` sub-command to the parser."""
    p = sub.add_parser("prepare", help="fit and sample a lens once, ahead of any alert")
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--model", help="model TOML replacing the scenario's mass model")
    p.add_argument("--out", help="folder to keep the prepared lens in")
    p.add_argument("--seed", type=int, default=1, help="seed of the fit and sampler (default 1)")
    p.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    p.add_argument("--steps", type=int, default=2000, help="sampler steps (default 2000)")
    add_prior_argument(p)
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)
