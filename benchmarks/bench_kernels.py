"""Compiled lens kernels (issue 27): ratios to floors measured in the same run. Prints figures.

* **Floor**: the bare transcendental functions the default recipe's formulas need per
  point, in a compiled loop — the power law's √ and one power; each isothermal multipole's
  √, atan2, cos and sin (as its formula ψ = r F(φ) is written) — and the kernel's cost
  per point (α, ψ, Hessian and κ of power law + shear + m = 3 and 4 multipoles, fused)
  as a ratio to it; the numpy path's deflection + Hessian for 128 points against the
  kernel's.
* **Newton**: the kernel's image solve of a quad for many walkers, per image and as a
  ratio to one fused evaluation per image (the floor of one Newton step).
* **Likelihood**: walker-evaluations per second of the quad likelihood (the default
  recipe on scenarios/vellmar_quad.toml), compiled and numpy, on one core; the Langevin
  move's geometry of 32 walkers, compiled and numpy, beside one likelihood call.
* **End to end** (``--end-to-end``): the quad forecast with 10⁵ samples, default recipe
  and SIE + shear, compiled and with ``LENSDELAY_COMPILED=0``, each in a fresh process;
  and the alert command from a prepared lens run from the shell, wall time whole.

Run:  python benchmarks/bench_kernels.py [--end-to-end]
"""

from __future__ import annotations

import argparse
import contextlib
import math
import os
import subprocess
import sys
import time

import numpy as np
from numba import njit

from lensdelay.lensing import compiled, threads
from lensdelay.lensing.images import newton_polish
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import EllipticalPowerLaw, ExternalShear, IsothermalMultipole


@contextlib.contextmanager
def all_threads():
    """Large kernel calls split over every usable CPU (the per-core figures use one)."""
    before = os.environ.pop("LENSDELAY_THREADS")
    try:
        yield
    finally:
        os.environ["LENSDELAY_THREADS"] = before


def best_of(fn, repeat=5, number=1):
    fn()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        times.append((time.perf_counter() - t0) / number)
    return min(times)


@njit(cache=True)
def _floor(x, y, out):
    """The transcendental calls of power law + two multipoles, per point, nothing else."""
    for i in range(x.shape[0]):
        r = math.sqrt(0.49 * x[i] * x[i] + y[i] * y[i])
        acc = (1.1 / r) ** 0.05
        for m in (3.0, 4.0):
            rr = math.sqrt(x[i] * x[i] + y[i] * y[i])
            phi = math.atan2(x[i], y[i])
            acc += rr * math.cos(m * phi) + math.sin(m * phi)
        out[i] = acc


def recipe(values):
    """Power law + shear + m = 3, 4 multipoles (the default galaxy recipe's mass)."""
    te, slope, q, pa, x0, y0, g, gpa, c3, s3, c4, s4 = values
    return Lens(
        (
            EllipticalPowerLaw(
                einstein_radius=te, slope=slope, axis_ratio=q, position_angle=pa, x=x0, y=y0
            ),
            ExternalShear(strength=g, position_angle=gpa),
            IsothermalMultipole(order=3, cosine=c3, sine=s3, x=x0, y=y0),
            IsothermalMultipole(order=4, cosine=c4, sine=s4, x=x0, y=y0),
        )
    )


MODEL = (1.1, 2.05, 0.7, 30.0, 0.01, -0.02, 0.06, 100.0, 0.01, -0.005, 0.008, 0.01)


def kernels():
    rng = np.random.default_rng(27)
    lens = recipe(MODEL)
    n = 200_000
    x, y = rng.uniform(-1.5, 1.5, (2, n))
    out = np.empty(n)
    t_floor = best_of(lambda: _floor(x, y, out)) / n
    t_kernel = best_of(lambda: compiled.evaluate(lens, x, y)) / n
    print(
        f"power law + shear + m=3,4 multipoles, {n} points: kernel {t_kernel * 1e9:.0f} ns a "
        f"point (α, ψ, Hessian, κ), floor {t_floor * 1e9:.0f} ns: ratio "
        f"{t_kernel / t_floor:.2f} (goal ≤ 2; both on one thread)"
    )
    with all_threads():
        t_threads = best_of(lambda: compiled.evaluate(lens, x, y)) / n
        count = threads.thread_count()
    print(
        f"  the same call split over {count} threads: "
        f"{t_threads * 1e9:.0f} ns a point ({t_kernel / t_threads:.2f}× one thread)"
    )
    x, y = x[:128], y[:128]
    t_fast = best_of(lambda: compiled.evaluate(lens, x, y), number=200)
    with compiled.disabled():
        t_slow = best_of(lambda: (lens.deflection(x, y), lens.hessian(x, y)), number=50)
    print(
        f"  128 points: kernel {t_fast * 1e6:.0f} µs, numpy deflection + Hessian "
        f"{t_slow * 1e6:.0f} µs: {t_slow / t_fast:.1f}× faster (goal ≥ 20×)"
    )
    return lens


def newton():
    rng = np.random.default_rng(3)
    walkers = 256
    values = np.array(MODEL) + 0.01 * rng.standard_normal((walkers, len(MODEL)))
    lens = recipe([v[:, None] for v in values.T])
    with compiled.disabled():
        from lensdelay.lensing.images import find_images

        found = find_images(recipe(MODEL), 0.03, 0.02)
    sx, sy = found.x[None, :] + 0.003, found.y[None, :] - 0.003
    bx, by = np.full((walkers, 1), 0.03), np.full((walkers, 1), 0.02)
    xx = np.broadcast_to(sx, (walkers, sx.shape[1]))
    yy = np.broadcast_to(sy, (walkers, sy.shape[1]))

    def solve():
        return newton_polish(lens, sx, sy, bx, by, iterations=15, max_step=0.05, tolerance=1e-11)

    t_solve = best_of(solve, number=5)
    t_eval = best_of(lambda: compiled.evaluate(lens, xx, yy), number=20)
    with compiled.disabled():
        t_numpy = best_of(solve)
    images = walkers * sx.shape[1]
    print(
        f"Newton's method, {walkers} walkers × {sx.shape[1]} images: kernel "
        f"{t_solve / images * 1e6:.2f} µs an image, {t_solve / t_eval:.1f}× one fused "
        f"evaluation per image (the floor of one step); numpy {t_numpy / t_solve:.0f}× slower"
    )


def _quad_likelihood(walkers: int):
    """The default recipe's likelihood of the Vellmar quad and walker rows near its best fit."""
    from dataclasses import replace

    from lensdelay.inference.fit import fit
    from lensdelay.inference.likelihood import ImageLikelihood
    from lensdelay.io.reading import load_scenario
    from lensdelay.model.recipe import default_galaxy_recipe

    sc, _ = load_scenario("scenarios/vellmar_quad.toml")
    xs = np.concatenate([[im.x for im in f.images] for f in sc.families])
    ys = np.concatenate([[im.y for im in f.images] for f in sc.families])
    centre = (sc.lens_light.x, sc.lens_light.y) if sc.lens_light else (0.0, 0.0)
    sc = replace(sc, model=default_galaxy_recipe(xs, ys, centre))
    like = ImageLikelihood(sc, sc.model)
    best = fit(like).values
    rng = np.random.default_rng(5)
    scale = 1e-4 * np.maximum(np.abs(best), 1.0)
    rows = best + scale * rng.standard_normal((walkers, len(best)))
    return like, np.clip(rows, like.lower, like.upper)


def langevin_geometry():
    """The Langevin move's geometry of 32 walkers (metric, its factor, drift): compiled vs numpy."""
    from lensdelay.inference.moves import FisherLangevinMove

    like, rows = _quad_likelihood(32)
    _, res, jac = like.evaluate(rows)
    move = FisherLangevinMove(like)
    t_fast = best_of(lambda: move._geometry(res, jac), number=20)
    with compiled.disabled():
        t_slow = best_of(lambda: move._geometry(res, jac), number=20)
    t_step = best_of(lambda: like.evaluate(rows), number=5)
    print(
        f"Langevin geometry, 32 walkers x {rows.shape[1]} parameters: {1e6 * t_fast:.0f} us "
        f"compiled, {1e6 * t_slow:.0f} us numpy ({t_slow / t_fast:.1f}x); the likelihood "
        f"with its Jacobian {1e6 * t_step:.0f} us"
    )


def jacobian_blocks():
    """The forward Jacobian's shifted lenses: only changed components vs every block in full."""
    from lensdelay.inference.information import _lens_blocks

    like, rows = _quad_likelihood(32)
    pred = like.predict(rows)[0]
    x, y = pred["x"], pred["y"]
    n_all = rows.shape[1]
    shift = 1e-6 * np.maximum(1.0, np.abs(rows)).T[:, :, None] * np.eye(n_all)[:, None, :]
    _, lens_rows = _lens_blocks(
        like, np.arange(n_all), rows[None] + shift, rows[None], "forward", False
    )
    lens = like.lens_for(lens_rows)
    blocks = len(lens_rows) // len(rows)
    t_blocks = best_of(lambda: compiled.block_deflections(lens, x, y, 1.0, blocks - 1), number=20)
    tiled = (np.tile(x, (blocks, 1)), np.tile(y, (blocks, 1)))
    t_full = best_of(lambda: lens.deflection(*tiled, 1.0), number=20)
    print(
        f"forward Jacobian's lenses ({blocks} blocks x 32 walkers x 4 images): "
        f"{1e6 * t_blocks:.0f} us re-evaluating changed components only, "
        f"{1e6 * t_full:.0f} us every block in full ({t_full / t_blocks:.1f}x)"
    )


def likelihood():
    walkers = 64
    like, rows = _quad_likelihood(walkers)
    t_fast = best_of(lambda: like.log_probability(rows), number=5)
    with compiled.disabled():
        t_slow = best_of(lambda: like.log_probability(rows), repeat=3)
    print(
        f"quad likelihood (default recipe, {like.prior} prior, {walkers} walkers a call): "
        f"{walkers / t_fast:,.0f} walker-evaluations a second compiled, "
        f"{walkers / t_slow:,.0f} numpy ({t_slow / t_fast:.1f}×; goal ≥ 100,000)"
    )


def end_to_end():
    code = (
        "import time, warnings; t0 = time.perf_counter();"
        "from dataclasses import replace; import numpy as np;"
        "from lensdelay.api import forecast_scenario;"
        "from lensdelay.io.reading import load_scenario;"
        "from lensdelay.model.recipe import default_galaxy_recipe;"
        "sc, _ = load_scenario('scenarios/vellmar_quad.toml');"
        "xs = np.concatenate([[im.x for im in f.images] for f in sc.families]);"
        "ys = np.concatenate([[im.y for im in f.images] for f in sc.families]);"
        "c = (sc.lens_light.x, sc.lens_light.y) if sc.lens_light else (0.0, 0.0);"
        "sc = sc if '{which}' == 'sie' else replace(sc, model=default_galaxy_recipe(xs, ys, c));"
        "warnings.simplefilter('ignore');"
        "forecast_scenario(sc, n_samples=100_000, budget=False);"
        "print(time.perf_counter() - t0)"
    )
    for which, label in (("default", "default recipe"), ("sie", "SIE + shear")):
        times = {}
        for mode in ("1", "0"):
            env = dict(os.environ, LENSDELAY_COMPILED=mode)
            out = subprocess.run(
                [sys.executable, "-c", code.format(which=which)],
                capture_output=True,
                text=True,
                env=env,
                check=True,
            )
            times[mode] = float(out.stdout.strip().splitlines()[-1])
        print(
            f"quad forecast, 1e5 samples, {label}: {times['1']:.1f} s compiled, "
            f"{times['0']:.1f} s numpy ({times['0'] / times['1']:.1f}×)"
        )


def alert_from_shell():
    """Prepare the Vellmar quad once; then the alert command from a shell, timed whole."""
    import tempfile

    from lensdelay.api import prepare_lens

    with tempfile.TemporaryDirectory() as tmp:
        lens_dir = os.path.join(tmp, "lens")
        prepare_lens("scenarios/vellmar_quad.toml", out=lens_dir)
        exe = os.path.join(os.path.dirname(sys.executable), "lensdelay")
        for mode in ("1", "0"):
            env = dict(os.environ, LENSDELAY_COMPILED=mode)
            walls = []
            for k in range(3):
                cmd = [exe, "forecast", lens_dir, "--transient", "sn/B=2026-12-20±1"]
                cmd += ["--now", "2026-12-21", "--quiet", "--out", os.path.join(tmp, f"a{mode}{k}")]
                t0 = time.perf_counter()
                subprocess.run(cmd, env=env, check=True, capture_output=True)
                walls.append(time.perf_counter() - t0)
            label = "compiled" if mode == "1" else "numpy"
            print(
                f"alert -> forecast from a prepared lens, from the shell ({label}): median "
                f"{sorted(walls)[1]:.2f} s wall of 3 (process start, imports, forecast, files; "
                "goal < 1.5 s)"
            )


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--end-to-end", action="store_true")
    args = ap.parse_args()
    if not compiled.enabled():
        sys.exit("the compiled kernels are off (numba missing or LENSDELAY_COMPILED=0)")
    # ratios to floors and figures per core on one thread (all_threads() says otherwise)
    os.environ["LENSDELAY_THREADS"] = "1"
    kernels()
    newton()
    likelihood()
    jacobian_blocks()
    langevin_geometry()
    if args.end_to_end:
        with all_threads():  # the commands as a user runs them
            end_to_end()
            alert_from_shell()


if __name__ == "__main__":
    main()
