"""Image finder on a cluster field (issue 16): completeness against a dense grid, and speed.

The lens is the invented Tarrow cluster's true mass (scenarios/generate.py: cored SIE
halo, truncated isothermal central galaxy, 140 truncated isothermal members over a 2′
field, shear). For sources at several redshifts behind the core, every image is found
twice: by the package's image finder (adaptive mesh, one mesh shared by all the
redshifts) and by a brute-force search on a uniform grid of spacing ``--spacing``
(tests/grid_search.py; 0.04″ is below the Einstein radius of the faintest members).
Prints, per redshift, the images each found, the grid's images with |μ| > 0.1 the
finder missed (the goal: none), and the time each took.

Run:  python benchmarks/bench_image_finder.py [--sources 3] [--spacing 0.04] [--seed 3]
"""

from __future__ import annotations

import argparse
import pathlib
import sys
import time

import numpy as np
from astropy.table import Table

from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.images import find_images_at_scales
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY

ROOT = pathlib.Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "scenarios"))

from grid_search import dense_grid_images, missed_images  # noqa: E402
from generate import CLUSTER_Z, CLUSTER_Z_REF, cluster_lens  # noqa: E402

REDSHIFTS = (1.2, 1.8, 3.0, 5.0)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sources", type=int, default=3, help="sources per redshift")
    ap.add_argument("--spacing", type=float, default=0.04, help="grid spacing, arcsec")
    ap.add_argument("--extent", type=float, default=75.0, help="grid half-width, arcsec")
    ap.add_argument("--seed", type=int, default=3)
    args = ap.parse_args()
    table = Table.read(ROOT / "scenarios" / "tarrow_members.ecsv")
    rows = [{c: row[c] for c in table.colnames} for row in table]
    lens = cluster_lens(rows)
    dist = LensDistances(DEFAULT_COSMOLOGY, CLUSTER_Z, CLUSTER_Z_REF)
    rng = np.random.default_rng(args.seed)
    requests = []
    for z in REDSHIFTS:
        bx, by = rng.uniform(-3.0, 3.0, (2, args.sources))
        requests.append((bx, by, dist.deflection_scale(z)))
    t0 = time.perf_counter()
    tables = find_images_at_scales(lens, requests)
    t_finder = time.perf_counter() - t0
    print(
        f"Tarrow cluster truth, {len(rows) - 1} members + central galaxy; "
        f"{args.sources} sources at each of z = {', '.join(map(str, REDSHIFTS))}"
    )
    print(f"image finder (one shared mesh, all sources): {t_finder:.1f} s")
    total_missed = total_bright = 0
    t_grid = 0.0
    for z, (bx, by, scale), found in zip(REDSHIFTS, requests, tables):
        t0 = time.perf_counter()
        grid = dense_grid_images(lens, bx, by, scale, args.extent, args.spacing)
        t_grid += time.perf_counter() - t0
        for k, (gx, gy, gmu) in enumerate(grid):
            mine = found.select(found.source_index == k)
            missed = missed_images(mine, gx, gy, gmu)
            bright = int(np.sum(gmu > 0.1))
            total_missed += len(missed)
            total_bright += bright
            print(
                f"  z = {z:<4} source {k}: finder {len(mine):2d} images, grid {len(gx):2d} "
                f"({bright} with |mu| > 0.1); missed by the finder: {len(missed)}"
                + (f" {missed}" if missed else "")
            )
    print(
        f'dense grid ({args.spacing:g}" spacing over ±{args.extent:g}"): {t_grid:.1f} s; '
        f"speed-up {t_grid / t_finder:.0f}x"
    )
    print(f"images with |mu| > 0.1 missed: {total_missed} of {total_bright}")


if __name__ == "__main__":
    main()
