"""Do predicted images' error ellipses hold their true positions? (issue 14). Prints coverages.

Quads are drawn from the recipe fitted (SIE + shear: Einstein radius, axis ratio,
position angle and shear from flat ranges; sources uniform over the tangential caustic's
neighbourhood), the faintest image is withheld, and the others are given
with 4 mas of astrometric noise, the lens light to 10 mas. Each system is forecast
(positions only), and the true position of the withheld image is compared with the
predicted image's 68% and 95% error ellipses. Goal (issue 14): the 95% ellipse holds
the truth ≥ 90% of the time.

With ``--truth richer`` the lenses come instead from the misspecified population of
bench_misspecified.py (power-law slope scatter, m = 3, 4 multipoles, a satellite in 30%,
none of which the fit contains) and are forecast with the default galaxy recipe: the
ellipses are then checked on truths from outside the model fitted.

Run:  python benchmarks/bench_positions.py [--truth recipe|richer] [--n 60]
      [--samples 4000] [--steps 1500] [--jobs 2] [--seed 14]
"""

from __future__ import annotations

import argparse
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from dataclasses import replace

import numpy as np
from astropy.time import Time

from lensdelay.errors import LensdelayError, LensdelayWarning
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.model.scenario import parse_scenario

SIGMA = 0.004
RECIPE = "models/sie_shear.toml"  # relative to the repository's root, where this runs


def draw_quad(rng, truth="recipe"):
    """A lens and a source with four images of |μ| ≥ 0.3 (and their table): SIE + shear,
    or (``truth="richer"``) a lens of bench_misspecified's population."""
    while True:
        if truth == "richer":
            from bench_misspecified import _draw_lens

            lens, _, te = _draw_lens(rng)
            r, phi = 0.25 * te * np.sqrt(rng.uniform()), rng.uniform(0, 2 * np.pi)
            table = find_images(lens, [r * np.sin(phi)], [r * np.cos(phi)])
            table = table.select(np.abs(table.magnification) >= 0.3)
            if len(table) == 4:
                return lens, table
            continue
        te = rng.uniform(0.7, 1.6)
        lens = Lens(
            (
                IsothermalEllipsoid(
                    einstein_radius=te,
                    axis_ratio=rng.uniform(0.5, 0.95),
                    position_angle=rng.uniform(-90, 90),
                ),
                ExternalShear(strength=rng.uniform(0.0, 0.1), position_angle=rng.uniform(-90, 90)),
            )
        )
        r, phi = 0.25 * te * np.sqrt(rng.uniform()), rng.uniform(0, 2 * np.pi)
        table = find_images(lens, [r * np.sin(phi)], [r * np.cos(phi)])
        table = table.select(np.abs(table.magnification) >= 0.3)
        if len(table) == 4:
            return lens, table


def one_system(args):
    """Forecast one quad with an image withheld: (inside 68%, inside 95%, miss / σ_major)."""
    import logging

    from lensdelay.api import forecast_scenario, load_model

    logging.getLogger("emcee").setLevel(logging.ERROR)
    index, seed, samples, steps, truth = args
    rng = np.random.default_rng(seed)
    lens, table = draw_quad(rng, truth)
    # the faintest image is the one a survey misses (the likelihood treats an unobserved
    # image brighter than the faintest observed one as ruled out, so withholding a bright
    # image would test a different question)
    withheld = int(np.argmin(np.abs(table.magnification)))
    keep = [k for k in range(4) if k != withheld]
    images = [
        {
            "label": "ABC"[n],
            "sigma": SIGMA,
            "x": float(table.x[k] + rng.normal(0, SIGMA)),
            "y": float(table.y[k] + rng.normal(0, SIGMA)),
        }
        for n, k in enumerate(keep)
    ]
    doc = {
        "name": f"positions-{index}",
        "lens": {"redshift": 0.5},
        "sky": {"ra": 30.0, "dec": -40.0},
        "family": [{"label": "s", "redshift": 2.0, "image": images}],
        "lens_light": {
            "x": float(rng.normal(0, 0.01)),
            "y": float(rng.normal(0, 0.01)),
            "sigma": 0.01,
        },
        "transient": {"family": "s", "seen_in": "A", "date": "2027-01-10"},
    }
    sc = parse_scenario(doc, f"positions-{index}.toml")  # the default galaxy recipe
    if truth == "recipe":
        sc = replace(sc, model=load_model(RECIPE))
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        try:
            res = forecast_scenario(
                sc,
                budget=False,
                n_samples=samples,
                steps=steps,
                walkers=32,
                seed=seed % 2**31,
                progress=False,
                now=Time("2027-01-11", scale="utc"),
            )
        except LensdelayError as err:
            return index, None, f"refused: {err}", 0.0
    predicted = [im for im in res.images if not im.observed]
    if not predicted:
        return index, None, "no image predicted", time.perf_counter() - t0
    tx, ty = table.x[withheld], table.y[withheld]
    im = min(predicted, key=lambda p: np.hypot(p.x - tx, p.y - ty))
    e68, e95 = im.ellipse(68), im.ellipse(95)
    row = (
        bool(e68.contains(im.x, im.y, tx, ty)),
        bool(e95.contains(im.x, im.y, tx, ty)),
        float(np.hypot(im.x - tx, im.y - ty)),
        e95.semi_major,
    )
    return index, row, "", time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--truth", choices=("recipe", "richer"), default="recipe")
    parser.add_argument("--n", type=int, default=60)
    parser.add_argument("--samples", type=int, default=4000)
    parser.add_argument("--steps", type=int, default=1500)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--seed", type=int, default=14)
    args = parser.parse_args()
    seeds = np.random.SeedSequence(args.seed).generate_state(args.n)
    tasks = [(i, int(s), args.samples, args.steps, args.truth) for i, s in enumerate(seeds)]
    rows, seconds = [], []
    with ProcessPoolExecutor(args.jobs) as pool:
        for index, row, note, sec in pool.map(one_system, tasks):
            if row is None:
                print(f"system {index}: {note}", flush=True)
                continue
            rows.append(row)
            seconds.append(sec)
            print(
                f"system {index:3d}: inside 68% {row[0]}, 95% {row[1]}; miss {1e3 * row[2]:.0f} "
                f"mas, 95% semi-major {1e3 * row[3]:.0f} mas; {sec:.1f} s",
                flush=True,
            )
    a = np.array(rows, dtype=float)
    print()
    print(f"{len(a)} withheld images of {args.n} quads (truths: {args.truth})")
    print(f"true position inside the 68% ellipse: {100 * a[:, 0].mean():.1f}%")
    print(f"true position inside the 95% ellipse: {100 * a[:, 1].mean():.1f}%")
    print(
        f"median miss: {1e3 * np.median(a[:, 2]):.0f} mas; median 95% semi-major: "
        f"{1e3 * np.median(a[:, 3]):.0f} mas"
    )
    print(f"median time per forecast: {np.median(seconds):.1f} s")


if __name__ == "__main__":
    main()
