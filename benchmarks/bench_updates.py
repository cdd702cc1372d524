"""Simulation-based calibration of the forecast's update on timing data (issue 10).

Truths are drawn from the forecast's own prior predictive: lens parameters from the
posterior given the image positions (one half of a long chain), H0 ~ N(70, 5),
κ_ext ~ N(0, 0.05), t0 ~ N(detection, σ_det). For each truth one measured delay
(D − C) and one sighting (of B) are simulated with Gaussian errors, the forecast is
updated exactly as ``lensdelay forecast`` does (importance weights, or a new joint
posterior sample when fewer than N/10 effective samples would remain), and the 68%
and 95% date windows of the images that were not sighted (A, the reference, whose
date t0 the sighting also informs; C; D) are checked against the true dates.
Half of the draws use precise measurements (σ = 0.1 d), which usually forces the
resampling route; half use σ = 1 d, which usually keeps the importance weights.

Run: python benchmarks/bench_updates.py [--draws 200] [--samples 4000]
(200 draws take about 15 min on 2 cores.)
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
import bench_fit  # noqa: E402  (the calibration quad)

from lensdelay.errors import LensdelayWarning  # noqa: E402
from lensdelay.inference.fit import fit  # noqa: E402
from lensdelay.forecast.samples import ForecastSettings, image_tracks, solve_samples  # noqa: E402
from lensdelay.forecast.update import condition_on_timing  # noqa: E402
from lensdelay.inference.sampling import SamplerSettings  # noqa: E402
from lensdelay.inference.likelihood import ImageLikelihood  # noqa: E402
from lensdelay.inference.sampling import sample  # noqa: E402
from lensdelay.model.scenario import parse_scenario  # noqa: E402
from lensdelay.model.simulate import simulate_family  # noqa: E402
from lensdelay.inference.summaries import weighted_quantiles  # noqa: E402
from lensdelay.model.scenario import MeasuredDelay  # noqa: E402
from lensdelay.inference.timing import SightingRow, TimingData  # noqa: E402

DETECTION_SIGMA = 1.5
H0_PRIOR = (70.0, 5.0)
KAPPA_PRIOR = (0.0, 0.05)


def quad_scenario(rng):
    """The calibration quad of bench_fit, with a transient seen in A."""
    fam = simulate_family(
        bench_fit.TRUTH, *bench_fit.SOURCE, label="s", redshift=1.5, sigma=0.003, rng=rng
    )
    doc = {
        "lens": {"redshift": 0.4},
        "family": [fam],
        "mass": bench_fit.MASS,
        "lens_light": {
            "x": float(rng.normal(0, 0.01)),
            "y": float(rng.normal(0, 0.01)),
            "sigma": 0.01,
        },
        "transient": {
            "family": "s",
            "seen_in": "A",
            "date": "2027-03-01",
            "date_sigma_days": DETECTION_SIGMA,
        },
    }
    return parse_scenario(doc, "update-calibration.toml")


def update_calibration(
    draws: int = 200,
    n_samples: int = 4000,
    seed: int = 7,
    steps: int = 1500,
    verbose: bool = False,
    sigmas=(0.1, 1.0),
) -> dict:
    """Coverage of the 68%/95% date windows after an update, over ``draws`` truths."""
    warnings.simplefilter("ignore", LensdelayWarning)
    rng = np.random.default_rng(seed)
    sc = quad_scenario(rng)
    like = ImageLikelihood(sc, sc.model)
    best = fit(like, seed=seed)
    chain = sample(
        like, best.values, walkers=32, steps=4000, seed=seed, progress=False, scales=best.errors
    )
    flat = chain.samples()
    rng.shuffle(flat)
    truths, pool = flat[: len(flat) // 2], flat[len(flat) // 2 :]
    tracks, _ = image_tracks(like, best.values, "s")
    labels = [t.label for t in tracks]
    settings = ForecastSettings(
        n_samples=n_samples, seed=seed, h0_prior=H0_PRIOR, kappa_ext=KAPPA_PRIOR
    )
    prior_draws = pool[rng.integers(0, len(pool), n_samples)]
    prior = solve_samples(
        like,
        prior_draws,
        tracks,
        "A",
        rng.normal(*H0_PRIOR, n_samples),
        rng.normal(*KAPPA_PRIOR, n_samples),
    )
    hits68, hits95, routes, by_route = [], [], [], {}
    start = time.perf_counter()
    k = 0
    while len(routes) < draws:
        k += 1
        theta = truths[rng.integers(len(truths))][None, :]
        h0, kappa = rng.normal(*H0_PRIOR, 1), rng.normal(*KAPPA_PRIOR, 1)
        truth = solve_samples(like, theta, tracks, "A", h0, kappa)
        if not np.all(truth.exists[0, :4]):
            continue
        t0 = rng.normal(0.0, DETECTION_SIGMA)
        delay = truth.delay[0]
        sigma = sigmas[len(routes) % len(sigmas)]
        i = {lab: labels.index(lab) for lab in "ABCD"}
        measured_delay = delay[i["D"]] - delay[i["C"]] + rng.normal(0, sigma)
        sighting = t0 + delay[i["B"]] + rng.normal(0, sigma)
        timing = TimingData(
            [(t.family, t.label) for t in tracks],
            [MeasuredDelay("s", "D", "C", measured_delay, sigma)],
            [SightingRow("s", "B", sighting, sigma)],
            DETECTION_SIGMA,
            ("s", "A"),
        )
        samples, update, _ = condition_on_timing(
            sc,
            like,
            chain,
            tracks,
            timing,
            prior,
            settings,
            seed=seed + k,
            sampler=SamplerSettings(steps=steps),
        )
        t0_draws = timing.draw_t0(samples.columns(timing), rng)
        for lab in "ACD":
            col = i[lab]
            offsets = t0_draws + samples.delay[:, col]
            w = np.where(samples.exists[:, col], update.weights, 0.0)
            q = weighted_quantiles(offsets, w, [2.5, 16, 84, 97.5])
            true_date = t0 + delay[col]
            hits68.append(q[1] <= true_date <= q[2])
            hits95.append(q[0] <= true_date <= q[3])
            by_route.setdefault(update.route, []).append((hits68[-1], hits95[-1]))
        routes.append(update.route)
        if verbose and len(routes) % 20 == 0:
            print(
                f"  {len(routes)} draws: 68% {np.mean(hits68):.3f}, 95% {np.mean(hits95):.3f} "
                f"({time.perf_counter() - start:.0f} s)",
                flush=True,
            )
    return {
        "draws": draws,
        "windows": len(hits68),
        "coverage68": float(np.mean(hits68)),
        "coverage95": float(np.mean(hits95)),
        "routes": {r: routes.count(r) for r in sorted(set(routes))},
        "coverage_by_route": {
            r: (float(np.mean([h[0] for h in v])), float(np.mean([h[1] for h in v])))
            for r, v in by_route.items()
        },
        "seconds": time.perf_counter() - start,
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=200, help="number of simulated truths")
    ap.add_argument("--samples", type=int, default=4000, help="forecast samples per update")
    ap.add_argument("--seed", type=int, default=7, help="seed of the whole run")
    ap.add_argument(
        "--sigmas",
        default="0.1,1.0",
        help="measurement errors (days) used in turn, comma separated (default 0.1,1.0)",
    )
    args = ap.parse_args()
    out = update_calibration(
        args.draws,
        args.samples,
        args.seed,
        verbose=True,
        sigmas=tuple(float(v) for v in args.sigmas.split(",")),
    )
    print(
        f"update calibration over {out['draws']} draws ({out['windows']} date windows of A, C, D): "
        f"68% windows hold the truth {100 * out['coverage68']:.1f}%, 95% windows "
        f"{100 * out['coverage95']:.1f}% (goal 68 ± 7, 95 ± 4); routes {out['routes']}; "
        f"{out['seconds'] / 60:.1f} min"
    )
    for route, (c68, c95) in out["coverage_by_route"].items():
        print(f"  route {route}: 68% {100 * c68:.1f}%, 95% {100 * c95:.1f}%")


if __name__ == "__main__":
    main()
