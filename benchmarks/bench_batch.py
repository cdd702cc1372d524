"""Catalogue throughput (issue 17): 1 and 2 workers on the local pool and on Dask.

Twenty systems (the three invented demos, copied under twenty names; each its own seed
from its name) are forecast by ``lensdelay batch`` serially, with a local pool of two
processes, and on a Dask ``LocalCluster`` of two worker processes; prints the wall time
of each, the speed-up of two workers (goal ≥ 1.8×) and whether the three summaries and
all forecasts are identical.

Run:  python benchmarks/bench_batch.py [--systems 20] [--steps 600] [--samples 5000]
"""

from __future__ import annotations

import argparse
import contextlib
import io
import pathlib
import shutil
import tempfile
import time

from lensdelay.cli.main import main as cli

ROOT = pathlib.Path(__file__).resolve().parent.parent
DEMOS = ("vellmar_quad", "ostrin_double", "kessoway_group")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--systems", type=int, default=20)
    ap.add_argument("--steps", type=int, default=600)
    ap.add_argument("--samples", type=int, default=5000)
    args = ap.parse_args()
    settings = ["--steps", str(args.steps), "--samples", str(args.samples), "--quiet"]
    settings += ["--now", "2026-12-03"]
    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)
        cat = tmp / "catalogue"
        cat.mkdir()
        shutil.copytree(ROOT / "models", cat / "models")
        for k in range(args.systems):
            demo = DEMOS[k % len(DEMOS)]
            shutil.copy(ROOT / "scenarios" / f"{demo}.toml", cat / f"{demo}-{k:02d}.toml")
        times = {}

        def run(label, extra):
            t0 = time.perf_counter()
            with contextlib.redirect_stdout(io.StringIO()):
                code = cli(["batch", str(cat), "--out", str(tmp / label), *settings, *extra])
            times[label] = time.perf_counter() - t0
            assert code == 0, label

        run("serial", [])
        run("pool2", ["--workers", "2"])
        from distributed import LocalCluster

        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True) as cluster:
            run("dask2", ["--scheduler", cluster.scheduler_address])

        def outputs(label):
            out = tmp / label
            return {p.relative_to(out): p.read_bytes() for p in sorted(out.rglob("*.json"))} | {
                "summary": (out / "summary.ecsv").read_bytes()
            }

        same = outputs("serial") == outputs("pool2") == outputs("dask2")
    print(f"{args.systems} systems ({args.steps} steps, {args.samples} samples each)")
    for label, seconds in times.items():
        print(f"  {label:<7} {seconds:6.1f} s  ({args.systems / seconds * 60:.1f} systems/min)")
    print(
        f"speed-up with 2 workers: pool {times['serial'] / times['pool2']:.2f}x, "
        f"Dask {times['serial'] / times['dask2']:.2f}x (goal >= 1.8x)"
    )
    print(f"identical summaries and forecasts across the three engines: {same}")


if __name__ == "__main__":
    main()
