"""Sub-commands check and fit: argument wiring; registers forecast and hubble too."""
from __future__ import annotations

import sys
from pathlib import Path

from lensdelay.errors import InputError


def output_folder(path: str | None) -> Path | None:
    """The ``--out`` folder (created only when results are written); refuses a file."""
    if path is None:
        return None
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise InputError(f"--out must be a folder, got the file {path!r}")
    return out


def add_prior_argument(parser) -> None:
    """``--prior``, shared by fit, forecast and hubble."""
    from lensdelay.inference.likelihood import PRIOR_CHOICES

    parser.add_argument("--prior", choices=PRIOR_CHOICES, default="flat",
                        help="prior of the mass-model posterior within the bounds: flat in the "
                             "recipe's parameters (default) or Jeffreys' (Fisher information)")


def cmd_check(args) -> int:
    from lensdelay.cli.commands import check_command

    res = check_command(args.scenario, args.model)
    sc, like = res["scenario"], res["likelihood"]
    print(f"{args.scenario}: ok — scenario {sc.name!r}, {len(sc.families)} famil"
          f"{'y' if len(sc.families) == 1 else 'ies'}, {sc.n_images} images, model "
          f"{sc.model.label!r} with {like.n_parameters} free parameters for {like.n_constraints} "
          f"constraints (dof = {like.dof})")
    return 0


def cmd_fit(args) -> int:
    from lensdelay.cli.commands import fit_command, fit_json
    from lensdelay.report.text import fit_text

    out = output_folder(args.out)
    res = fit_command(args.scenario, args.model, use_delays=args.use_delays,
                      use_fluxes=args.use_fluxes, flux_floor=args.flux_floor, sample=args.sample,
                      walkers=args.walkers, steps=args.steps, seed=args.seed, resume=args.resume,
                      out_dir=out, progress=not args.quiet, prior=args.prior)
    print(fit_text(res))
    if out is not None:
        from lensdelay.report.figures import corner_figure, residual_figure, sky_figure
        from lensdelay.io.storage import write_output_set

        doc = fit_json(res)
        like, fr = res["likelihood"], res["fit"]
        figs = {"fit_sky": sky_figure(like, fr.values, fr, title=f"{res['scenario'].name}: "
                                      f"{fr.model_label} (North up, East left)"),
                "fit_residuals": residual_figure(fr)}
        arrays = {}
        ch = res["chain"]
        if ch is not None:
            import numpy as np

            figs["corner"] = corner_figure(ch.samples(), ch.names)
            arrays["samples.npz"] = {"samples": ch.samples(), "names": np.array(ch.names),
                                     "log_prob": ch.log_prob[ch.burn::ch.thin].ravel(), "seed": ch.seed}
        write_output_set(out, json_name="fit.json", doc=doc, figures=figs, arrays=arrays,
                         inputs=res["provenance"]["inputs"])
        print(f"wrote {out}/fit.json and figures", file=sys.stderr)
    return 0


def register(sub, number) -> None:
    p = sub.add_parser("check", help="validate a scenario without running anything")
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--model", action="append", help="model TOML replacing the scenario's mass model")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("fit", help="fit a mass model to the image positions")
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--model", action="append", help="model TOML replacing the scenario's mass model")
    p.add_argument("--out", help="folder for fit.json, figures, samples and checkpoints")
    p.add_argument("--use-delays", action="store_true", help="fit measured delays too (H0 free)")
    p.add_argument("--use-fluxes", action="store_true",
                   help="fit flux ratios from image magnitudes/fluxes too")
    p.add_argument("--flux-floor", type=number, default=0.2,
                   help="1-sigma floor on magnitude differences for microlensing (default 0.2 mag)")
    p.add_argument("--sample", action="store_true", help="sample the posterior with emcee")
    p.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    p.add_argument("--steps", type=int, default=2000, help="sampler steps (default 2000)")
    p.add_argument("--seed", type=int, default=1, help="seed of the fit's starts and the sampler (default 1)")
    p.add_argument("--resume", action="store_true", help="continue the chain checkpointed in --out")
    add_prior_argument(p)
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_fit)
    from lensdelay.cli import forecast as forecast_cli

    forecast_cli.register(sub, number)
    from lensdelay.cli import hubble as hubble_cli

    hubble_cli.register(sub, number)
