"""``lensdelay cosmography``: H0 from a catalogue of lenses, with kinematics, blinded."""

from __future__ import annotations

import argparse
import sys

from lensdelay.cli.options import add_gaussian_prior, number, output_folder, written_line
from lensdelay.errors import InputError

__all__ = ["run", "COSMOGRAPHY_FIGURES", "register"]

#: The figures, in the order a reader opens them, with what each shows.
COSMOGRAPHY_FIGURES = {
    "joint_h0": "each lens's H0 against the joint band",
    "population": "the mass sheet's and the orbits' population",
}


#: The cosmologies --cosmology offers (lensdelay.hubble.joint.COSMOLOGIES, without importing it).
COSMOLOGY_CHOICES = ("FlatLambdaCDM", "LambdaCDM", "FlatwCDM", "wCDM", "Flatw0waCDM", "w0waCDM")


def _cosmology_parameters(given) -> dict:
    """``--cosmology-parameter NAME VALUE [SIGMA]`` (repeated) as {name: value or (mean, sigma)}."""
    out = {}
    for words in given or []:
        if len(words) not in (2, 3):
            raise InputError(
                "--cosmology-parameter must be NAME VALUE (fixed) or NAME MEAN SIGMA (inferred), "
                f"got {' '.join(words)!r}"
            )
        name, *values = words
        try:
            numbers = [number(v) for v in values]
        except argparse.ArgumentTypeError as err:
            raise InputError(
                f"--cosmology-parameter {name} must be given numbers, got {' '.join(values)!r}"
            ) from err
        if name in out:
            raise InputError(
                f"--cosmology-parameter must name each parameter once, got {name!r} twice"
            )
        out[name] = numbers[0] if len(numbers) == 1 else tuple(numbers)
    return out


def run(args) -> int:
    """Combine the catalogue's lenses into one H0, print the report, write the outputs."""
    from lensdelay.api import infer_joint_h0
    from lensdelay.io.cosmography_files import (
        BLINDING_KEY,
        cosmography_json,
        dispersions_table,
        lenses_table,
        read_or_new_blinding_key,
        samples_table,
    )
    from lensdelay.io.forecast_files import table_text
    from lensdelay.io.storage import write_output_set
    from lensdelay.report.joint_figures import joint_h0_figure, population_figure

    out = output_folder(args.out)
    if out is None and not args.unblind:
        raise InputError(
            "--out is required for a blinded run (the blinding key is kept there), got "
            "nothing; give --out, or --unblind to see the values now"
        )
    if args.draws < 50:
        raise InputError(f"--draws must be at least 50, got {args.draws}")
    key = read_or_new_blinding_key(out)
    res = infer_joint_h0(
        args.catalogue,
        anisotropy=args.anisotropy,
        lambda_int=args.lambda_int == "free",
        om0=tuple(args.om0) if args.om0 else 0.3,
        cosmology=args.cosmology,
        cosmology_parameters=_cosmology_parameters(args.cosmology_parameter),
        kappa_ext=tuple(args.kappa_ext),
        draws_per_lens=args.draws,
        walkers=args.walkers,
        steps=args.steps,
        joint_steps=args.joint_steps,
        seed=args.seed,
        blinding_key=None if args.unblind else key,
        orbits_side_by_side=args.orbits_side_by_side,
        progress=not args.quiet,
    )
    print(res.report())
    if out is not None:
        written = write_output_set(
            out,
            json_name="cosmography.json",
            doc=cosmography_json(res, res.provenance),
            figures={"joint_h0": joint_h0_figure(res), "population": population_figure(res)},
            texts={
                "cosmography_lenses.ecsv": table_text(lenses_table(res)),
                "cosmography_dispersions.ecsv": table_text(dispersions_table(res)),
                "cosmography_samples.ecsv": table_text(samples_table(res)),
                BLINDING_KEY: key.hex() + "\n",
            },
            inputs=res.provenance["inputs"],
        )
        look = [(f"{stem}.png", what) for stem, what in COSMOGRAPHY_FIGURES.items()]
        then = f"lensdelay report {out} makes one page of it"
        if res.blinded:
            then += "; --unblind shows the true values once the analysis is frozen"
        print(written_line(out, written, look, then), file=sys.stderr)
    return 0


def register(sub) -> None:
    """Add the ``cosmography`` sub-command to the parser."""
    p = sub.add_parser(
        "cosmography",
        help="H0 from many lenses: delays, kinematics, the mass sheet as a population (blinded)",
    )
    p.add_argument("catalogue", help="folder of scenario files and/or prepared lenses")
    p.add_argument("--out", help="folder for cosmography.json, the tables, the figures and the key")
    p.add_argument(
        "--anisotropy",
        choices=("isotropic", "constant", "osipkov_merritt"),
        default="osipkov_merritt",
        help="the stars' orbits (default osipkov_merritt; its r_ani/R_eff is a population)",
    )
    p.add_argument(
        "--lambda-int",
        choices=("free", "fixed"),
        default="free",
        help="the internal mass sheet: a population inferred with H0 (default), or fixed at 1 "
        "(the mass profile assumed)",
    )
    add_gaussian_prior(p, "--om0", "Omega_m prior (default fixed at 0.3)")
    p.add_argument(
        "--cosmology",
        choices=COSMOLOGY_CHOICES,
        default="FlatLambdaCDM",
        help="the astropy cosmology H0 is inferred in (default FlatLambdaCDM)",
    )
    p.add_argument(
        "--cosmology-parameter",
        nargs="+",
        action="append",
        metavar=("NAME", "VALUE"),
        help="another parameter of it (Ode0, w0, wa): NAME VALUE fixes it, NAME MEAN SIGMA "
        "infers it with a Gaussian prior (repeat for each; default LCDM's 0.7, -1, 0)",
    )
    add_gaussian_prior(
        p,
        "--kappa-ext",
        "external convergence prior of lenses without [line_of_sight] (default 0 0.05)",
        default=[0.0, 0.05],
    )
    p.add_argument(
        "--orbits-side-by-side",
        action="store_true",
        help="also infer H0 under the other orbit models (isotropic, constant beta, "
        "Osipkov-Merritt), all else the same: how far the answer leans on the orbits",
    )
    p.add_argument(
        "--draws", type=int, default=600, help="posterior draws per lens in the joint stage (600)"
    )
    p.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    p.add_argument(
        "--steps", type=int, default=2000, help="steps of each lens's sampler (default 2000)"
    )
    p.add_argument(
        "--joint-steps", type=int, default=3000, help="steps of the joint sampler (default 3000)"
    )
    p.add_argument("--seed", type=int, default=1, help="seed of every random draw (default 1)")
    p.add_argument(
        "--unblind",
        action="store_true",
        help="show the true H0 and distances (only once the analysis is frozen)",
    )
    p.add_argument("--quiet", action="store_true", help="no progress lines")
    p.set_defaults(func=run)
