"""Delays from simulated light curves (issue 15): coverage, bias and speed. Prints figures.

Quasars: 2-4 images; a damped random walk (σ ~ U(0.1, 0.3) mag, τ ~ U(50, 300) d); three
seasons of 7 months at a 3-4 day cadence; errors U(0.01, 0.05) mag per image; each image
its own microlensing trend (a quadratic with coefficients ~ N(0, 0.05) mag); delays
20-100 d of either sign after the reference. Supernovae: 2-4 images; two bands with
their own Bazin shapes; delays 2-60 d; observed every 2-4 days for 100 days from the
first image's rise, so later images are cut off; flux ratios 0.3-1.5 with 0.05 mag of
chromatic microlensing. Each is measured blind (kind judged from the curves).

Reported: coverage of the 68% / 95% intervals, median relative bias for delays ≥ 20 d,
and the metrics of Liao et al. 2015 (ApJ 800, 11; definitions from memory): success
fraction f (share of delays reported), precision P = ⟨σ/|Δt|⟩, accuracy A = ⟨(Δt̃ −
Δt)/Δt⟩, χ² = ⟨((Δt̃ − Δt)/σ)²⟩ with σ half the 68% interval. Then the speed targets:
4 images × 300 epochs (quasar) and 2 images × 60 epochs (supernova).

Run:  python benchmarks/bench_lightcurves.py [--kind quasar|supernova|speed] [--n 100]
      [--jobs 2] [--seed 15] [--steps 1500]
"""

from __future__ import annotations

import argparse
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np

from lensdelay.lightcurves.measure import measure_delays
from lensdelay.lightcurves.simulate import seasonal_epochs, simulate_quasar, simulate_supernova

LABELS = "ABCD"


def quasar_case(rng):
    n = int(rng.integers(2, 5))
    labels = LABELS[:n]
    epochs = seasonal_epochs(58000.0, 3, 210.0, rng.uniform(3.0, 4.0), rng)
    truth = {"A": 0.0}
    for lab in labels[1:]:
        truth[lab] = float(rng.choice([-1, 1]) * rng.uniform(20.0, 100.0))
    curves = simulate_quasar(
        {lab: epochs for lab in labels},
        truth,
        rng.uniform(0.1, 0.3),
        rng.uniform(50.0, 300.0),
        {lab: rng.uniform(0.01, 0.05) for lab in labels},
        {lab: tuple(rng.normal(0, 0.05, 3)) for lab in labels},
        rng,
        offsets={lab: rng.uniform(-1, 1) for lab in labels},
    )
    return curves, truth


def supernova_case(rng):
    n = int(rng.integers(2, 5))
    labels = LABELS[:n]
    truth = {"A": 0.0}
    for lab in labels[1:]:
        truth[lab] = float(rng.uniform(2.0, 60.0))
    start = 60000.0
    epochs = {}
    for b in ("g", "r"):
        t = [start - 10.0]
        while t[-1] < start + 100.0:
            t.append(t[-1] + rng.uniform(2.0, 4.0))
        for lab in labels:
            epochs[(lab, b)] = np.array(t)
    shapes = {
        "g": (1000.0, start + 5.0, rng.uniform(2.0, 4.0), rng.uniform(12.0, 20.0)),
        "r": (1200.0, start + 7.0, rng.uniform(3.0, 5.0), rng.uniform(20.0, 35.0)),
    }
    scales = {}
    for lab in labels:
        mu = 1.0 if lab == "A" else rng.uniform(0.3, 1.5)
        for b in ("g", "r"):
            chrom = 0.0 if (lab == "A" or b == "g") else rng.normal(0, 0.05)
            scales[(lab, b)] = mu * np.exp(chrom)
    curves = simulate_supernova(epochs, truth, shapes, scales, 0.02, rng, floor_flux=5.0)
    return curves, truth


def one(args):
    kind, seed, steps = args
    rng = np.random.default_rng(seed)
    curves, truth = quasar_case(rng) if kind == "quasar" else supernova_case(rng)
    t0 = time.perf_counter()
    res = measure_delays(curves, "A", steps=steps, simulations=0, seed=seed % 2**31)
    rows = []
    for im in res.images:
        d, true = im.delay_days, truth[im.label]
        if not im.measurable:
            rows.append((0, 0, 0, np.nan, true, np.nan))
            continue
        rows.append(
            (
                1,
                d["p16"] <= true <= d["p84"],
                d["p2.5"] <= true <= d["p97.5"],
                d["median"],
                true,
                0.5 * (d["p84"] - d["p16"]),
            )
        )
    return rows, time.perf_counter() - t0, res.kind


def coverage(kind, n, jobs, seed, steps):
    seeds = np.random.SeedSequence(seed).generate_state(n)
    rows, seconds, kinds = [], [], []
    with ProcessPoolExecutor(jobs) as pool:
        for k, (r, sec, guessed) in enumerate(
            pool.map(one, [(kind, int(s), steps) for s in seeds])
        ):
            rows += r
            seconds.append(sec)
            kinds.append(guessed)
            print(
                f"set {k:3d}: {len(r)} delays, {sum(x[2] for x in r)} inside 95%; {sec:.1f} s",
                flush=True,
            )
    a = np.array(rows, dtype=float)
    ok = a[:, 0] == 1
    m = a[ok]
    err = m[:, 3] - m[:, 4]
    print()
    print(
        f"{kind}: {n} data sets, {len(a)} delays, kind judged right in "
        f"{100 * np.mean(np.array(kinds) == kind):.0f}%"
    )
    print(f"success fraction f: {100 * ok.mean():.1f}%")
    print(f"coverage of the 68% intervals: {100 * m[:, 1].mean():.1f}%")
    print(f"coverage of the 95% intervals: {100 * m[:, 2].mean():.1f}%")
    long = np.abs(m[:, 4]) >= 20
    if np.any(long):
        bias = 100 * np.median(err[long] / m[long, 4])
        print(f"median relative bias (|delay| >= 20 d): {bias:+.2f}%")
    print(f"precision P: {100 * np.mean(m[:, 5] / np.abs(m[:, 4])):.2f}%")
    print(f"accuracy A: {100 * np.mean(err / m[:, 4]):+.2f}%")
    print(f"chi2: {np.mean((err / m[:, 5]) ** 2):.2f}")
    print(f"median time per data set: {np.median(seconds):.1f} s")


def speed(seed, steps):
    rng = np.random.default_rng(seed)
    epochs = seasonal_epochs(58000.0, 6, 210.0, 3.5, rng)[:300]
    truth = {"A": 0.0, "B": 35.0, "C": -20.0, "D": 70.0}
    curves = simulate_quasar(
        {lab: epochs for lab in truth},
        truth,
        0.2,
        150.0,
        {lab: 0.02 for lab in truth},
        {lab: (0.0, 0.03, -0.02) for lab in truth},
        rng,
    )
    t0 = time.perf_counter()
    res = measure_delays(curves, "A", steps=steps, simulations=0)
    t_q = time.perf_counter() - t0
    t0 = time.perf_counter()
    res_sims = measure_delays(curves, "A", steps=steps, simulations=10)
    t_qs = time.perf_counter() - t0
    print(
        f"quasar, 4 images x {len(epochs)} epochs: posterior {t_q:.1f} s (goal < 60 s); with "
        f"10 simulations for the bias: {t_qs:.1f} s"
    )
    for im in res.images:
        print(f"  {im.label}: {im.delay_days['median']:+.2f} d (truth {truth[im.label]:+.1f})")
    del res_sims
    ep = np.linspace(60000.0, 60118.0, 60)
    sn = simulate_supernova(
        {(lab, "r"): ep for lab in "AB"},
        {"A": 0.0, "B": 18.0},
        {"r": (1000.0, 60015.0, 3.0, 20.0)},
        {("A", "r"): 1.0, ("B", "r"): 0.7},
        0.02,
        rng,
        floor_flux=5.0,
    )
    t0 = time.perf_counter()
    res = measure_delays(sn, "A", simulations=0)
    t_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    measure_delays(sn, "A", simulations=10)
    t_ss = time.perf_counter() - t0
    b = res.image("B")
    print(
        f"supernova, 2 images x 60 epochs: posterior {t_s:.1f} s (goal < 10 s); with 10 "
        f"simulations: {t_ss:.1f} s; B {b.delay_days['median']:+.2f} d (truth +18.0)"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--kind", choices=("quasar", "supernova", "speed"), default="quasar")
    parser.add_argument("--n", type=int, default=100)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--seed", type=int, default=15)
    parser.add_argument("--steps", type=int, default=1500)
    args = parser.parse_args()
    if args.kind == "speed":
        speed(args.seed, args.steps)
    else:
        coverage(args.kind, args.n, args.jobs, args.seed, args.steps)


if __name__ == "__main__":
    main()
