"""``lensdelay fit``: fit a mass model to the image positions (and sample its posterior)."""

from __future__ import annotations

import sys


from lensdelay.cli.options import Once, add_prior_argument, number, output_folder, written_line

__all__ = ["run", "register"]


def run(args) -> int:
    """Fit (and sample), print the report, write fit.json and figures to --out."""
    from lensdelay.api import fit_scenario
    from lensdelay.io.fit_files import fit_json
    from lensdelay.io.storage import write_output_set
    from lensdelay.report.figures import corner_figure
    from lensdelay.report.figures import residual_figure
    from lensdelay.report.figures import sky_figure
    import numpy as np

    out = output_folder(args.out)
    res = fit_scenario(
        args.scenario,
        args.model,
        use_delays=args.use_delays,
        use_fluxes=args.use_fluxes,
        flux_floor=args.flux_floor,
        sample=args.sample,
        walkers=args.walkers,
        steps=args.steps,
        seed=args.seed,
        resume=args.resume,
        checkpoint_dir=out,
        progress=not args.quiet,
        prior=args.prior,
        stop=args.stop,
    )
    print(res.report())
    if out is not None:
        doc = fit_json(res)
        fr = res.fit
        figs = {
            "fit_sky": sky_figure(
                res.sky_view(), title=f"{res.scenario.name}: {fr.model_label} (North up, East left)"
            ),
            "fit_residuals": residual_figure(fr),
        }
        arrays = {}
        ch = res.chain
        if ch is not None:
            figs["corner"] = corner_figure(ch.samples(), ch.names)
            arrays["samples.npz"] = {
                "samples": ch.samples(),
                "names": np.array(ch.names),
                "log_prob": ch.log_prob[ch.burn :: ch.thin].ravel(),
                "seed": ch.seed,
            }
        written = write_output_set(
            out,
            json_name="fit.json",
            doc=doc,
            figures=figs,
            arrays=arrays,
            inputs=res.provenance["inputs"],
        )
        look = [("fit_sky.png", "the fit on the sky"), ("fit_residuals.png", "the residuals")]
        then = f"lensdelay report {out} makes one page of it"
        print(written_line(out, written, look, then), file=sys.stderr)
    return 0


def register(sub) -> None:
    """Add the ``fit`` sub-command to the parser."""
    p = sub.add_parser("fit", help="fit a mass model to the image positions")
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--model", action=Once, help="model TOML replacing the scenario's mass model")
    p.add_argument("--out", help="folder for fit.json, figures, samples and checkpoints")
    p.add_argument("--use-delays", action="store_true", help="fit measured delays too (H0 free)")
    p.add_argument(
        "--use-fluxes", action="store_true", help="fit flux ratios from image magnitudes/fluxes too"
    )
    p.add_argument(
        "--flux-floor",
        type=number,
        default=0.2,
        help="1-sigma floor on magnitude differences for microlensing (default 0.2 mag)",
    )
    p.add_argument("--sample", action="store_true", help="sample the posterior with emcee")
    p.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    p.add_argument("--steps", type=int, default=2000, help="sampler steps (default 2000)")
    p.add_argument(
        "--seed", type=int, default=1, help="seed of the fit's starts and the sampler (default 1)"
    )
    p.add_argument("--resume", action="store_true", help="continue the chain checkpointed in --out")
    add_prior_argument(p)
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)
