"""Fitting benchmark (issue 3): quad fit time, posterior time, vectorised log-likelihood
speed-up, sampler mixing, and the calibration of delay intervals over noise realisations.

Run: python benchmarks/bench_fit.py [--realisations N] [--system quad|two-family|both]
     [--prior flat|jeffreys|both] [--move langevin|stretch]
(calibration: N = 100 takes ~10 min per system and prior on 2 cores)
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from lensdelay.errors import LensdelayWarning
from lensdelay.inference.fit import fit, observed_delays
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.sampling import sample
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.model.scenario import parse_scenario
from lensdelay.model.simulate import simulate_family

TRUTH = Lens(
    (
        IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),
        ExternalShear(strength=0.05, position_angle=-40.0),
    )
)
SOURCE = (0.03, 0.02)
MASS = [
    {
        "profile": "SIE",
        "einstein_radius": {"value": 1.0, "min": 0.2, "max": 3.0},
        "axis_ratio": {"value": 0.8, "min": 0.2, "max": 1.0},
        "position_angle": {"value": 0.0},
        "x": {"value": 0.0, "min": -0.5, "max": 0.5},
        "y": {"value": 0.0, "min": -0.5, "max": 0.5},
    },
    {
        "profile": "shear",
        "strength": {"value": 0.03, "min": 0.0, "max": 0.3},
        "position_angle": {"value": 0.0},
    },
]


def system(rng):
    fam = simulate_family(TRUTH, *SOURCE, label="s", redshift=1.5, sigma=0.003, rng=rng)
    # the lens-light centre is a measurement too: it scatters about the true centre
    doc = {
        "lens": {"redshift": 0.4},
        "family": [fam],
        "mass": MASS,
        "lens_light": {
            "x": float(rng.normal(0, 0.01)),
            "y": float(rng.normal(0, 0.01)),
            "sigma": 0.01,
        },
    }
    sc = parse_scenario(doc, "calibration.toml")
    return ImageLikelihood(sc, sc.model)


def two_family_system(rng):
    """The same lens with a second source at z = 3: 16 position constraints for 11 parameters."""
    from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
    from lensdelay.lensing.distances import LensDistances

    scale2 = LensDistances(DEFAULT_COSMOLOGY, 0.4, 1.5).deflection_scale(3.0)
    f1 = simulate_family(TRUTH, *SOURCE, label="s", redshift=1.5, sigma=0.003, rng=rng)
    f2 = simulate_family(
        TRUTH,
        -0.06,
        0.05,
        label="t",
        redshift=3.0,
        scale=scale2,
        sigma=0.003,
        rng=rng,
        labels="PQRS",
    )
    doc = {
        "lens": {"redshift": 0.4},
        "family": [f1, f2],
        "mass": MASS,
        "lens_light": {
            "x": float(rng.normal(0, 0.01)),
            "y": float(rng.normal(0, 0.01)),
            "sigma": 0.01,
        },
    }
    sc = parse_scenario(doc, "calibration-two-families.toml")
    return ImageLikelihood(sc, sc.model)


SYSTEMS = {"quad": system, "two-family": two_family_system}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--realisations", type=int, default=100)
    ap.add_argument("--steps", type=int, default=1500)
    ap.add_argument("--system", choices=list(SYSTEMS) + ["both"], default="both")
    ap.add_argument("--prior", choices=["flat", "jeffreys", "both"], default="flat")
    ap.add_argument("--move", choices=["langevin", "stretch"], default="langevin")
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
    print(
        f"log-likelihood, 32 walkers: vectorised {t_vec * 1e3:.2f} ms, per-walker loop "
        f"{t_loop * 1e3:.1f} ms: "
        f"ratio {t_loop / t_vec:.1f}x (goal >= 20x)"
    )

    mixing(like)
    for name in SYSTEMS if args.system == "both" else [args.system]:
        for prior in ("flat", "jeffreys") if args.prior == "both" else (args.prior,):
            f68, f95, total, seconds = calibration(
                args.realisations, args.steps, name, prior, args.move
            )
            print(
                f"calibration, {name}, prior {prior}, move {args.move}, over {args.realisations} "
                f"realisations ({total} delays, {seconds:.0f} s): 68% intervals contain the truth "
                f"{100 * f68:.1f}% of the time (goal 68 ± 7), 95% intervals {100 * f95:.1f}% "
                f"(goal 95 ± 4)"
            )


def valley_end(like, best, delay_days):
    """The best fit constrained to a given delay of the second image: a point along the valley."""
    from scipy.optimize import least_squares

    lo = np.where(np.isfinite(like.lower), like.lower, -1e3)
    hi = np.where(np.isfinite(like.upper), like.upper, 1e3)

    def resid(v):
        return np.append(like.residuals(v)[0], (observed_delays(like, v)[0, 1] - delay_days) / 1e-3)

    return least_squares(resid, best.values, bounds=(lo, hi), x_scale=best.errors).x


def mixing(like, steps: int = 1000):
    """Walkers started at two ends of the quad's curved valley, for each move: do they meet?"""
    best = fit(like)
    d0 = observed_delays(like, best.values)[0, 1]
    ends = {d: valley_end(like, best, d) for d in (0.65 * d0, 1.4 * d0)}
    for move, components in (("stretch", False), ("stretch", True), ("langevin", True)):
        t0 = time.perf_counter()
        medians, taus = [], []
        for seed, (d, start) in enumerate(ends.items()):
            # different seeds: with shared random numbers two chains can couple exactly
            ch = sample(
                like,
                start,
                walkers=32,
                steps=steps,
                seed=seed + 1,
                progress=False,
                scales=0.05 * best.errors,
                move=move,
                components=components,
            )
            days = observed_delays(like, ch.chain[steps // 2 :].reshape(-1, ch.chain.shape[-1]))[
                :, 1
            ]
            medians.append(np.median(days))
            taus.append(np.max(ch.autocorr))
        where = "components" if components else "recipe parameters"
        print(
            f"mixing, move {move} in {where}: walkers started at delays "
            f"{', '.join(f'{d:.2f}' for d in ends)} d "
            f"(best fit {d0:.2f} d) have second-half medians {medians[0]:.2f} and "
            f"{medians[1]:.2f} d "
            f"after {steps} steps; max tau {max(taus):.0f} steps; {time.perf_counter() - t0:.1f} s"
        )


def calibration(
    realisations: int = 100,
    steps: int = 1500,
    which: str = "quad",
    prior: str = "flat",
    move: str = "langevin",
):
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
        made = make(np.random.default_rng(1000 + k))
        like_k = ImageLikelihood(made.scenario, made.model, prior=prior)
        res_k = fit(like_k)
        ch = sample(
            like_k,
            res_k.values,
            walkers=32,
            steps=steps,
            seed=k,
            progress=False,
            scales=res_k.errors,
            move=move,
        )
        days = observed_delays(like_k, ch.samples())
        for i in range(1, days.shape[1]):
            lo68, hi68, lo95, hi95 = np.nanpercentile(days[:, i], [16, 84, 2.5, 97.5])
            hits68 += lo68 <= true_days[i] <= hi68
            hits95 += lo95 <= true_days[i] <= hi95
            total += 1
    return hits68 / total, hits95 / total, total, time.perf_counter() - t0


if __name__ == "__main__":
    main()
