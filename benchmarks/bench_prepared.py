"""Alert to forecast from a prepared lens (issue 17): seconds, files and figures included.

The invented Vellmar quad is prepared once with the forecast's default sampler settings
(32 walkers × 2,000 steps); then ``lensdelay forecast DIR --transient sn/B=DATE±1 --out
OUT`` runs in this process three times (the median is printed) beside one from-scratch
forecast of the same scenario. Goal: under 5 s on 2 cores.

Run:  python benchmarks/bench_prepared.py
"""

from __future__ import annotations

import contextlib
import io
import pathlib
import statistics
import tempfile
import time

from lensdelay.api import prepare_lens
from lensdelay.cli.main import main as cli

ROOT = pathlib.Path(__file__).resolve().parent.parent
QUAD = ROOT / "scenarios" / "vellmar_quad.toml"


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)
        t0 = time.perf_counter()
        prepare_lens(QUAD, out=tmp / "lens")
        t_prepare = time.perf_counter() - t0
        alerts = []
        for k in range(3):
            t0 = time.perf_counter()
            argv = ["forecast", str(tmp / "lens"), "--transient", "sn/B=2026-12-20±1"]
            with contextlib.redirect_stdout(io.StringIO()):  # the forecast's own text
                cli([*argv, "--out", str(tmp / f"alert{k}"), "--quiet", "--now", "2026-12-21"])
            alerts.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        cli(
            ["forecast", str(QUAD), "--out", str(tmp / "scratch"), "--quiet", "--now", "2026-12-21"]
        )
        t_scratch = time.perf_counter() - t0
    print(f"prepare (fit + 32 walkers x 2000 steps): {t_prepare:.1f} s")
    print(
        f"alert -> forecast with files and figures: median {statistics.median(alerts):.1f} s "
        f"({', '.join(f'{a:.1f}' for a in alerts)}); from scratch: {t_scratch:.1f} s; "
        f"speed-up {t_scratch / statistics.median(alerts):.0f}x"
    )


if __name__ == "__main__":
    main()
