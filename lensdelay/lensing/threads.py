"""Large kernel calls split over threads.

The compiled kernels that run on large batches (:mod:`lensdelay.lensing._kernels`: a
lens at many points, Newton's method for many images, the unseen perturbers of many
samples) release the GIL and take an index range. Every point, image or sample is
computed on its own, by the same code, so a call split into ranges gives the numbers of
one whole call bit for bit (tests/test_compiled.py); only the time changes. A call
whose work is small stays on the calling thread: starting a thread costs about a tenth
of a millisecond. The threads are joined before the call returns, so none is left
running (a forecast's output writer forks only when no other thread runs).

``LENSDELAY_THREADS`` sets the number of threads (default: the CPUs this process may
run on); 1 keeps every call on the calling thread.
"""

from __future__ import annotations

import functools
import os
import threading
from collections.abc import Callable, Sequence

from lensdelay.errors import InputError

__all__ = ["MIN_WORK", "thread_count", "parts_for", "even_bounds", "run_split", "run_ranges"]

#: Work (points times lens components, or an estimate in those units) a thread should
#: get at least: about half a millisecond of kernel time (30–150 ns a component and
#: point), several times a thread's start. On the Tarrow cluster 10,000 was faster than
#: 20,000 (its source-plane Jacobian and Newton calls per family then split too).
MIN_WORK = 10_000


def thread_count() -> int:
    """Threads a large kernel call may use: ``LENSDELAY_THREADS``, else the usable CPUs."""
    text = os.environ.get("LENSDELAY_THREADS", "").strip()
    return _count(text) if text else _usable_cpus()


@functools.lru_cache(maxsize=8)
def _count(text: str) -> int:
    """``LENSDELAY_THREADS``'s value as a count (checked once per value)."""
    try:
        count = int(text)
    except ValueError:
        count = 0
    if count < 1:
        raise InputError(
            f"LENSDELAY_THREADS must be a whole number of threads, at least 1, got {text!r}"
        )
    return count


@functools.lru_cache(maxsize=1)
def _usable_cpus() -> int:
    """The CPUs this process may run on (asked once: the call is in every kernel call's path)."""
    try:
        return max(len(os.sched_getaffinity(0)), 1)
    except AttributeError:  # not every platform has affinity
        return max(os.cpu_count() or 1, 1)


def parts_for(work: float, items: int) -> int:
    """How many ranges to split ``items`` into for ``work`` (in :data:`MIN_WORK` units).

    Several ranges per thread when there is work enough, so a thread that drew cheap
    items (images that converge at once) takes another range while the others finish.
    """
    if work < 2 * MIN_WORK:  # the common small call: no need to ask for the thread count
        return 1
    threads = min(thread_count(), int(work // MIN_WORK), items)
    if threads <= 1:
        return 1
    return max(1, min(RANGES_PER_THREAD * threads, int(work // MIN_WORK), items))


#: Ranges per thread when the work allows (see :func:`parts_for`).
RANGES_PER_THREAD = 4


def even_bounds(n: int, parts: int) -> list[int]:
    """Cut points 0 = b₀ ≤ b₁ ≤ … ≤ b_parts = n of ``parts`` nearly equal ranges."""
    return [n * k // parts for k in range(parts + 1)]


def run_split(call: Callable[[int, int], None], items: int, work: float) -> None:
    """``call(lo, hi)`` over ``range(items)``: one call for small work, else ranges on threads."""
    parts = parts_for(work, items)
    if parts == 1:
        call(0, items)
    else:
        run_ranges(call, even_bounds(items, parts))


def run_ranges(call: Callable[[int, int], None], bounds: Sequence[int]) -> None:
    """``call(lo, hi)`` for each range of ``bounds``, on up to :func:`thread_count` threads.

    The calling thread is one of them; each takes the next range not yet taken until
    none is left, and the call returns when all are done. An exception raised in any
    range is raised here (the first one, in range order).
    """
    ranges = [(lo, hi) for lo, hi in zip(bounds[:-1], bounds[1:]) if hi > lo]
    helpers = min(thread_count(), len(ranges)) - 1
    if helpers <= 0:
        for lo, hi in ranges:
            call(lo, hi)
        return
    errors: list[BaseException | None] = [None] * len(ranges)
    queue = iter(range(len(ranges)))
    lock = threading.Lock()

    def work() -> None:
        while True:
            with lock:
                k = next(queue, None)
            if k is None:
                return
            try:
                call(*ranges[k])
            except BaseException as exc:  # handed to the calling thread below
                errors[k] = exc

    workers = [threading.Thread(target=work) for _ in range(helpers)]
    for w in workers:
        w.start()
    work()
    for w in workers:
        w.join()
    for exc in errors:
        if exc is not None:
            raise exc
