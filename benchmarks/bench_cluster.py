"""Cluster-scale likelihood speed (issue 16): ms per sampler step against the number of
member galaxies. Prints the figures.

An invented cluster: an NFW halo (κs 0.25, rs 40″) and a cored SIE (θE 12″, core 3″, q 0.7)
plus N truncated isothermal members (magnitudes 18-22, the [members] scaling with θE* =
0.8″, a* = 15″ at m* = 19) scattered over a 2′ field; image families found with the
complete image finder for sources behind the core; 40 observed images in all (as many
families as needed). For each N the vectorised log-likelihood of 64 walkers is timed
(the median of 7 calls), and the growth with N is fitted with a line.

Run:  python benchmarks/bench_cluster.py [--members 50,100,200,400] [--walkers 64]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from lensdelay.errors import LensdelayWarning
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.lensing.images import find_images
from lensdelay.model.scenario import parse_scenario

MASS = [
    {
        "profile": "NFW",
        "kappa_s": {"value": 0.25, "min": 0.05, "max": 1.0},
        "scale_radius": {"value": 40.0, "min": 10.0, "max": 120.0},
        "x": {"value": 0.0, "min": -5.0, "max": 5.0},
        "y": {"value": 0.0, "min": -5.0, "max": 5.0},
    },
    {
        "profile": "SIE",
        "einstein_radius": {"value": 12.0, "min": 2.0, "max": 30.0},
        "axis_ratio": {"value": 0.7, "min": 0.3, "max": 1.0},
        "position_angle": {"value": 30.0},
        "core": {"value": 3.0, "min": 0.5, "max": 10.0},
    },
]
MEMBERS = {
    "catalogue": "members.ecsv",
    "reference_mag": 19.0,
    "einstein_radius": {"value": 0.8, "min": 0.1, "max": 3.0},
    "cut": {"value": 15.0, "min": 2.0, "max": 60.0},
}


def scenario(n_members: int, rng, n_images: int = 40):
    """A cluster scenario with ``n_members`` members and ~``n_images`` observed images."""
    table = {
        "id": np.array([f"m{k}" for k in range(n_members)]),
        "x": rng.uniform(-60, 60, n_members),
        "y": rng.uniform(-60, 60, n_members),
        "mag": rng.uniform(18.0, 22.0, n_members),
    }
    base = {
        "name": "bench cluster",
        "lens": {"redshift": 0.4},
        "family": [
            {
                "label": "f0",
                "redshift": 2.0,
                "image": [{"label": "A", "x": 10.0, "y": 0.0, "sigma": 0.3}],
            }
        ],
        "mass": MASS,
        "members": MEMBERS,
    }
    sc = parse_scenario(base, "bench.toml", load_table=lambda ref: table)
    truth = sc.model.lens()
    # every trial source in one call: the finder's mesh depends on the lens only, and
    # building it is most of the cost on a cluster field
    bx, by = rng.uniform(-4, 4, (2, 80))
    found_all = find_images(truth, bx, by)
    families = []
    total = 0
    for k in range(len(bx)):
        if total >= n_images:
            break
        found = found_all.of_source(k)
        found = found.select(np.abs(found.magnification) > 0.5)
        if len(found) < 2:
            continue
        images = [
            {"label": f"i{j}", "x": float(found.x[j]), "y": float(found.y[j]), "sigma": 0.3}
            for j in range(min(len(found), n_images - total))
        ]
        if len(images) < 2:
            break
        families.append({"label": f"f{len(families)}", "redshift": 2.0, "image": images})
        total += len(images)
    doc = dict(base, family=families)
    return parse_scenario(doc, "bench.toml", load_table=lambda ref: table), total


def main() -> None:
    warnings.simplefilter("ignore", LensdelayWarning)
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--members", default="50,100,200,400")
    parser.add_argument("--walkers", type=int, default=64)
    args = parser.parse_args()
    rng = np.random.default_rng(16)
    counts, times = [], []
    for n in [int(v) for v in args.members.split(",")]:
        sc, n_img = scenario(n, rng)
        like = ImageLikelihood(sc, sc.model)
        start = like.start_vector() if hasattr(like, "start_vector") else None
        if start is None:
            from lensdelay.inference.fit import initial_vector

            start = initial_vector(like)
        rows = start + 1e-3 * rng.standard_normal((args.walkers, len(start)))
        like.log_probability(rows)  # warm-up
        samples = []
        for _ in range(7):
            t0 = time.perf_counter()
            like.log_probability(rows)
            samples.append(time.perf_counter() - t0)
        ms = 1e3 * float(np.median(samples))
        counts.append(n)
        times.append(ms)
        print(
            f"{n:4d} members, {n_img} images in {len(sc.families)} families, "
            f"{like.n_parameters} parameters, {args.walkers} walkers: {ms:.1f} ms per step",
            flush=True,
        )
    slope, intercept = np.polyfit(counts, times, 1)
    resid = np.array(times) - (slope * np.array(counts) + intercept)
    print(
        f"growth: {slope:.3f} ms per member per step + {intercept:.1f} ms; largest departure "
        f"from the line {np.max(np.abs(resid)) / max(times) * 100:.0f}% of the largest time"
    )


if __name__ == "__main__":
    main()
