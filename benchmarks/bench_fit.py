"""Fitting benchmark (issue 3): quad fit time, posterior time, vectorised log-likelihood
speed-up, and the calibration of delay intervals over noise realisations.

Run: python benchmarks/bench_fit.py [--realisations N]   (calibration: N=100 takes ~10 min)
"""
from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from lensdelay.errors import LensdelayWarning
from lensdelay.fit import fit, observed_delays
from lensdelay.images import find_images
from lensdelay.lens import Lens
from lensdelay.likelihood import ImageLikelihood
from lensdelay.posterior import sample
from lensdelay.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.scenario import parse_scenario
from lensdelay.simulate import simulate_family

TRUTH = Lens((IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),
              ExternalShear(strength=0.05, position_angle=-40.0)))
SOURCE = (0.03, 0.02)
MASS = [
    {"profile": "SIE", "einstein_radius": {"value": 1.0, "min": 0.2, "max": 3.0},
     "axis_ratio": {"value": 0.8, "min": 0.2, "max": 1.0}, "position_angle": {"value": 0.0},
     "x": {"value": 0.0, "min": -0.5, "max": 0.5}, "y": {"value": 0.0, "min": -0.5, "max": 0.5}},
    {"profile": "shear", "strength": {"value": 0.03, "min": 0.0, "max": 0.3}, "position_angle": {"value": 0.0}},
]


def system(rng):
    fam = simulate_family(TRUTH, *SOURCE, label="s", redshift=1.5, sigma=0.003, rng=rng)
    # the lens-light centre is a measurement too: it scatters about the true centre
    doc = {"lens": {"redshift": 0.4}, "family": [fam], "mass": MASS,
           "lens_light": {"x": float(rng.normal(0, 0.01)), "y": float(rng.normal(0, 0.01)), "sigma": 0.01}}
    sc = parse_scenario(doc, "calibration.toml")
    return ImageLikelihood(sc, sc.model)


def two_family_system(rng):
    """The same lens with a second source at z = 3: 16 position constraints for 11 parameters."""
    from lensdelay.cosmology import DEFAULT_COSMOLOGY, LensDistances

    scale2 = LensDistances(DEFAULT_COSMOLOGY, 0.4, 1.5).deflection_scale(3.0)
    f1 = simulate_family(TRUTH, *SOURCE, label="s", redshift=1.5, sigma=0.003, rng=rng)
    f2 = simulate_family(TRUTH, -0.06, 0.05, label="t", redshift=3.0, scale=scale2, sigma=0.003, rng=rng,
                         labels="PQRS")
    doc = {"lens": {"redshift": 0.4}, "family": [f1, f2], "mass": MASS,
           "lens_light": {"x": float(rng.normal(0, 0.01)), "y": float(rng.normal(0, 0.01)), "sigma": 0.01}}
    sc = parse_scenario(doc, "calibration-two-families.toml")
    return ImageLikelihood(sc, sc.model)


SYSTEMS = {"quad": system, "two-family": two_family_system}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--realisations", type=int, default=100)
    ap.add_argument("--steps", type=int, default=1500)
    ap.add_argument("--system", choices=list(SYSTEMS) + ["both"], default="both")
    args = ap.parse_args()
    warnings.simplefilter("ignore", LensdelayWarning)
    rng = np.random.default_rng(123)
    like = system(rng)
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        res = fit(like)
        times.append(time.perf_counter() - t0)
    print(f"image-plane fit of a quad: median {np.median(times):.2f} s over 5 runs")
    t0 = time.perf_counter()
    sample(like, res.values, walkers=32, steps=2000, progress=False, scales=res.errors)
    print(f"posterior 32 walkers x 2000 steps: {time.perf_counter() - t0:.1f} s (goal < 20 s)")
    rows = res.values + 1e-3 * res.errors * rng.standard_normal((32, len(res.values)))
    t0 = time.perf_counter()
    for _ in range(20):
        like.log_probability(rows)
    t_vec = (time.perf_counter() - t0) / 20
    t0 = time.perf_counter()
    for _ in range(5):
        for r in rows:
            like.log_probability(r[None, :])
    t_loop = (time.perf_counter() - t0) / 5
    print(f"log-likelihood, 32 walkers: vectorised {t_vec * 1e3:.2f} ms, per-walker loop {t_loop * 1e3:.1f} ms: "
          f"ratio {t_loop / t_vec:.1f}x (goal >= 20x)")

    for name in (SYSTEMS if args.system == "both" else [args.system]):
        f68, f95, total, seconds = calibration(args.realisations, args.steps, name)
        print(f"calibration, {name}, over {args.realisations} realisations ({total} delays, {seconds:.0f} s): "
              f"68% intervals contain the truth {100 * f68:.1f}% of the time (goal 68 ± 7), "
              f"95% intervals {100 * f95:.1f}% (goal 95 ± 4)")


def calibration(realisations: int = 100, steps: int = 1500, which: str = "quad"):
    """Fraction of 68% and 95% posterior delay intervals that contain the true delays."""
    warnings.simplefilter("ignore", LensdelayWarning)
    make = SYSTEMS[which]
    like = make(np.random.default_rng(0))
    t = find_images(TRUTH, [SOURCE[0]], [SOURCE[1]])
    t = t.select(np.abs(t.magnification) >= 0.05)
    true_days = (t.fermat - t.fermat[0]) * like.families[0].days_per_arcsec2
    hits68 = hits95 = total = 0
    t0 = time.perf_counter()
    for k in range(realisations):
        like_k = make(np.random.default_rng(1000 + k))
        res_k = fit(like_k)
        ch = sample(like_k, res_k.values, walkers=32, steps=steps, seed=k, progress=False,
                    scales=res_k.errors)
        days = observed_delays(like_k, ch.samples())
        for i in range(1, days.shape[1]):
            lo68, hi68, lo95, hi95 = np.nanpercentile(days[:, i], [16, 84, 2.5, 97.5])
            hits68 += lo68 <= true_days[i] <= hi68
            hits95 += lo95 <= true_days[i] <= hi95
            total += 1
    return hits68 / total, hits95 / total, total, time.perf_counter() - t0


if __name__ == "__main__":
    main()
