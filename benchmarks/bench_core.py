"""Benchmark of the physics core (issue 2). Prints ratios measured in one run.

Run:  python benchmarks/bench_core.py
"""

from __future__ import annotations

import time

import numpy as np
from astropy import units as u
from astropy.cosmology import FlatLambdaCDM
from scipy import optimize

from lensdelay.lensing.distances import DelayDistanceTable, LensDistances
from lensdelay.lensing.images import ImageFinder
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def naive_images(lens, bx, by, extent, starts=15):
    """Per-source multi-start scipy.optimize.root on the lens equation."""
    g = np.linspace(-extent, extent, starts)
    found = []
    for x0 in g:
        for y0 in g:
            sol = optimize.root(
                lambda p: np.array(lens.source_position(p[0], p[1])) - (bx, by),
                [x0, y0],
                method="hybr",
            )
            if sol.success and np.hypot(*sol.fun) < 1e-10:
                if not any(np.hypot(sol.x[0] - a, sol.x[1] - b) < 1e-6 for a, b in found):
                    found.append(tuple(sol.x))
    return found


def main():
    rng = np.random.default_rng(1)
    lens = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=30.0),
            ExternalShear(strength=0.06, position_angle=-20.0),
        )
    )
    n = 2000
    bx, by = rng.uniform(-0.3, 0.3, (2, n))

    # 1. image finder vs naive multi-start root search
    def ours():
        finder = ImageFinder(lens, source_radius=0.45)
        return finder.solve(bx, by)

    t_ours = best_of(ours, 2) / n
    table = ours()
    n_naive = 10
    t0 = time.perf_counter()
    naive = [naive_images(lens, bx[i], by[i], 2.0) for i in range(n_naive)]
    t_naive = (time.perf_counter() - t0) / n_naive

    def bright(points):  # the naive search also lands on the singular centre (|mu| ~ 0)
        pts = np.array(points).reshape(-1, 2)
        return int(np.sum(np.abs(lens.magnification(pts[:, 0], pts[:, 1])) > 1e-3))

    agree = all(bright(naive[i]) == len(table.of_source(i)) for i in range(n_naive))
    print(
        f"image finder: {t_ours * 1e3:.3f} ms/source (mesh built per call, {n} sources); "
        f"naive multi-start scipy root: {t_naive * 1e3:.1f} ms/source; "
        f"ratio {t_naive / t_ours:.0f}x (goal >= 50x); same images found: {agree}"
    )

    # 2. SIE+shear deflection + potential vs the bare transcendental operations
    m = 1_000_000
    x, y = rng.uniform(-2, 2, (2, m))

    def evaluate():
        lens.deflection_and_potential(x, y)

    def bare():
        s = np.sqrt(x * x + y * y)
        np.arctan(x / (s + 1.0))
        np.arctanh(0.5 * y / (s + 1.0))

    t_eval, t_bare = best_of(evaluate), best_of(bare)
    print(
        f"SIE+shear deflection+potential: {t_eval / m * 1e9:.1f} ns/point; bare "
        f"sqrt+arctan+arctanh: "
        f"{t_bare / m * 1e9:.1f} ns/point; ratio {t_eval / t_bare:.2f}x (goal <= 2x)"
    )

    # 3. D_dt for 1e6 (H0, Om0) samples vs one astropy call per sample
    k = 1_000_000
    h0 = rng.normal(70, 5, k)
    om = rng.uniform(0.2, 0.4, k)
    t_build = time.perf_counter()
    fast = DelayDistanceTable(0.5, 2.0)
    t_build = time.perf_counter() - t_build
    t_fast = best_of(lambda: fast(h0, om)) + t_build
    n_ref = 300
    t0 = time.perf_counter()
    ref = [
        LensDistances(FlatLambdaCDM(H0=h0[i], Om0=om[i], Tcmb0=0.0), 0.5, 2.0)
        .time_delay_distance(2.0)
        .to_value(u.Mpc)
        for i in range(n_ref)
    ]
    t_ref = (time.perf_counter() - t0) / n_ref * k
    err = np.max(np.abs(fast(h0[:n_ref], om[:n_ref]) / np.array(ref) - 1))
    print(
        f"D_dt for 1e6 samples: table {t_fast:.3f} s (incl. {t_build:.2f} s build); astropy per "
        f"sample "
        f"{t_ref:.0f} s (extrapolated from {n_ref}); ratio {t_ref / t_fast:.0f}x (goal >= 100x); "
        f"max relative error {err:.1e} (bound at build: {fast.max_relative_error:.1e}; goal <= "
        f"1e-6)"
    )


if __name__ == "__main__":
    main()
