"""Large kernel calls split over threads (lensdelay/lensing/threads.py): the same numbers.

Every point, image or sample is computed alone by the same compiled code whichever
thread runs it, so a split call must give one whole call's values bit for bit
(equality to the bit for a split that drops or reorders no arithmetic: common practice).
The splits are forced here with a tiny work threshold and three threads.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest
from test_compiled import _default_recipe_likelihood

from lensdelay.errors import InputError
from lensdelay.forecast.perturbers import PerturberPopulation, draw_perturbers
from lensdelay.lensing import compiled, threads

pytestmark = pytest.mark.skipif(not compiled.enabled(), reason="numba not installed")


@pytest.fixture
def split(monkeypatch):
    """A function that runs ``fn`` whole (one thread), then split (three), both results."""

    def run(fn):
        monkeypatch.setenv("LENSDELAY_THREADS", "1")
        whole = fn()
        monkeypatch.setenv("LENSDELAY_THREADS", "3")
        monkeypatch.setattr(threads, "MIN_WORK", 1)
        calls = []
        original = threads.run_ranges

        def counting(call, bounds):
            calls.append(len(bounds) - 1)
            return original(call, bounds)

        monkeypatch.setattr(threads, "run_ranges", counting)
        parts = fn()
        assert max(calls) > 1, "the call was not split"
        return whole, parts

    return run


def _walker_lens(rng, walkers=7):
    like = _default_recipe_likelihood()
    lo = np.where(np.isfinite(like.lower), like.lower, -1.0)
    hi = np.where(np.isfinite(like.upper), like.upper, 1.0)
    rows = lo + (hi - lo) * rng.uniform(0.2, 0.8, (walkers, len(lo)))
    return like, rows, like.lens_for(rows)


def test_split_evaluation_equals_one_call(rng, split):
    """α, ψ, Hessian and κ of walkers × points, and of one model on a grid."""
    like, rows, lens = _walker_lens(rng)
    x, y = rng.uniform(-1.5, 1.5, (2, 7, 9))
    x[2, 3] = np.nan
    whole, parts = split(lambda: compiled.evaluate(lens, x, y, 0.9))
    for a, b in zip(whole, parts):
        np.testing.assert_array_equal(a, b)

    one = like.model.lens(rows[0, : like.n_model])
    gx, gy = rng.uniform(-2, 2, (2, 501))
    whole, parts = split(lambda: compiled.evaluate(one, gx, gy, 1.0))
    for a, b in zip(whole, parts):
        np.testing.assert_array_equal(a, b)


def test_split_newton_equals_one_call(rng, split):
    """Every walker's images, their residuals, from one call and from ranges on threads."""
    like, rows, lens = _walker_lens(rng)
    fam = like.families[0]
    x = np.broadcast_to(fam.x, (len(rows), len(fam.x))) + rng.normal(0, 0.01, (len(rows), 4))
    y = np.broadcast_to(fam.y, (len(rows), len(fam.y))) + rng.normal(0, 0.01, (len(rows), 4))
    bx, by = lens.source_position(x, y, fam.scale)
    bx, by = bx.mean(axis=1, keepdims=True), by.mean(axis=1, keepdims=True)
    whole, parts = split(
        lambda: compiled.newton_solve(lens, x, y, bx, by, fam.scale, 20, 0.5, 1e-12)
    )
    for a, b in zip(whole, parts):
        np.testing.assert_array_equal(a, b)


def test_split_jacobian_blocks_equal_one_call(rng, split):
    """The forward-difference Jacobian's shifted lenses, split by walker rows."""
    like = _default_recipe_likelihood()
    lo = np.where(np.isfinite(like.lower), like.lower, -1.0)
    hi = np.where(np.isfinite(like.upper), like.upper, 1.0)
    base = lo + (hi - lo) * rng.uniform(0.2, 0.8, (5, len(lo)))
    n = like.n_model
    lens = like.lens_for(
        np.concatenate([*(base + 1e-3 * np.eye(len(lo))[k] for k in range(n)), base])
    )
    x, y = rng.uniform(-1.5, 1.5, (2, 5, 4))
    whole, parts = split(lambda: compiled.block_deflections(lens, x, y, 0.9, n))
    for a, b in zip(whole, parts):
        np.testing.assert_array_equal(a, b)


def test_split_perturber_field_equals_one_call(split):
    """Softened point masses of many samples, ranges cut where a sample starts."""
    draws = draw_perturbers(
        PerturberPopulation(), 300, 1.0, (0.0, 0.0), 4.5e-12, np.random.default_rng(5)
    )
    assert np.all(np.diff(draws.owner) >= 0) and len(draws.owner) > 1000
    x, y = np.random.default_rng(6).uniform(-1.5, 1.5, (2, 300, 4))
    whole, parts = split(lambda: draws.field(300, x, y))
    for a, b in zip(whole, parts):
        np.testing.assert_array_equal(a, b)


def test_ranges_each_run_once_and_errors_reach_the_caller(monkeypatch):
    monkeypatch.setenv("LENSDELAY_THREADS", "3")
    before = threading.active_count()
    seen, lock = [], threading.Lock()

    def record(lo, hi):
        with lock:
            seen.append((lo, hi))

    threads.run_ranges(record, threads.even_bounds(10, 7))
    bounds = threads.even_bounds(10, 7)
    assert sorted(seen) == list(zip(bounds[:-1], bounds[1:]))

    def fail(lo, hi):
        if lo == 0:
            raise ValueError("range 0")

    with pytest.raises(ValueError, match="range 0"):
        threads.run_ranges(fail, [0, 2, 4, 6])
    assert threading.active_count() == before  # every helper thread joined


def test_thread_count_reads_the_environment(monkeypatch):
    monkeypatch.setenv("LENSDELAY_THREADS", "2")
    assert threads.thread_count() == 2
    monkeypatch.delenv("LENSDELAY_THREADS")
    assert threads.thread_count() >= 1
    for bad in ("0", "two", "-1"):
        monkeypatch.setenv("LENSDELAY_THREADS", bad)
        with pytest.raises(InputError, match="LENSDELAY_THREADS must be"):
            threads.thread_count()


def test_small_calls_stay_on_the_calling_thread(monkeypatch):
    """Work below MIN_WORK per thread is not split (a thread's start would cost more)."""
    monkeypatch.setenv("LENSDELAY_THREADS", "4")
    assert threads.parts_for(threads.MIN_WORK - 1, 1000) == 1
    assert threads.parts_for(2.5 * threads.MIN_WORK, 1000) == 2
    assert threads.parts_for(1000 * threads.MIN_WORK, 1000) == 4 * threads.RANGES_PER_THREAD
    assert threads.parts_for(1000 * threads.MIN_WORK, 3) == 3


def test_batch_workers_share_the_threads(monkeypatch):
    """A local batch pool gives each worker its share of the threads, unless the user set it."""
    from lensdelay.cli.batch import _share_threads

    monkeypatch.setenv("LENSDELAY_THREADS", "2")  # restored (or removed) after the test
    monkeypatch.delenv("LENSDELAY_THREADS")
    _share_threads(3)
    assert threads.thread_count() == 3
    monkeypatch.setenv("LENSDELAY_THREADS", "1")
    _share_threads(4)
    assert threads.thread_count() == 1


def test_a_bad_thread_count_is_one_line_before_any_work(monkeypatch, tmp_path, capsys):
    """The command line refuses a bad LENSDELAY_THREADS at once: exit 2, one line, no output."""
    from lensdelay.cli.main import main

    monkeypatch.setenv("LENSDELAY_THREADS", "many")
    out = tmp_path / "out"
    status = main(["forecast", "scenarios/vellmar_quad.toml", "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert err == [
        "lensdelay: LENSDELAY_THREADS must be a whole number of threads, at least 1, got 'many'"
    ]
    assert not out.exists()
