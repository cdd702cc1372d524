"""``lensdelay maps``: FITS maps of the fitted lens with a celestial WCS."""

from __future__ import annotations

import sys

from lensdelay.cli.options import add_prior_argument, number, output_folder, written_line

__all__ = ["run", "register"]


def run(args) -> int:
    """Fit, map, write the FITS files and maps.json to --out at once."""
    from lensdelay.api import map_scenario
    from lensdelay.io.maps_files import maps_fits
    from lensdelay.io.maps_files import maps_json
    from lensdelay.io.storage import write_output_set

    out = output_folder(args.out or "maps")
    maps = map_scenario(
        args.scenario,
        args.model,
        size=args.size,
        pixel=args.pixel,
        samples=args.samples,
        walkers=args.walkers,
        steps=args.steps,
        seed=args.seed,
        progress=not args.quiet,
        prior=args.prior,
    )
    sc = maps.scenario
    files = maps_fits(sc, maps, sc.cosmology)
    doc = maps_json(sc, maps, files, maps.provenance)
    written = write_output_set(
        out, json_name="maps.json", doc=doc, binaries=files, inputs=maps.provenance["inputs"]
    )
    n = len(maps.x)
    summary = " (best fit, posterior median and spread)" if maps.n_samples else " (best fit)"
    print(
        f"Maps of {sc.name} ({maps.model_label}) for family {maps.family} at z = "
        f"{maps.source_redshift:g}: {n} x {n} pixels of {maps.pixel:g} arcsec{summary}.\n"
        "Model-dependent: line-of-sight mass and the mass-sheet degeneracy rescale "
        "the convergence and every delay."
    )
    then = "open the FITS files in an image viewer (each carries a celestial WCS)"
    print(written_line(out, written, (), then), file=sys.stderr)
    return 0


def register(sub) -> None:
    """Add the ``maps`` sub-command to the parser."""
    p = sub.add_parser("maps", help="FITS maps of the fitted lens (convergence, shear, ...)")
    p.add_argument("scenario", help="scenario TOML file (needs [sky])")
    p.add_argument("--model", help="model TOML replacing the scenario's own")
    p.add_argument("--out", help="folder for the FITS files and maps.json (default: maps)")
    p.add_argument(
        "--size", type=number, help="side of the square field, arcsec (default: covers the images)"
    )
    p.add_argument("--pixel", type=number, help="pixel size, arcsec (default: size / 200)")
    p.add_argument(
        "--samples",
        type=int,
        default=0,
        help="also sample the posterior and write median and spread maps from this many draws",
    )
    p.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    p.add_argument("--steps", type=int, default=2000, help="sampler steps (default 2000)")
    p.add_argument("--seed", type=int, default=1, help="seed of every random draw (default 1)")
    add_prior_argument(p)
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)
