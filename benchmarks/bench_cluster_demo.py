"""The invented Tarrow cluster end to end (issue 16): time and injection–recovery.

Fit, posterior and forecast of scenarios/tarrow_cluster.toml (140 member galaxies, 43
images in 9 families, one family of unknown redshift, 30 free parameters) through the
Python interface, as `lensdelay forecast` runs them, timed on this machine (goal: under
15 minutes on 2 cores). The scenario was simulated (scenarios/generate.py) from a
truth saved in scenarios/tarrow_truth.json, against which the run is checked:

- the image-plane rms of each family against the noise put into its positions;
- every true delay of the supernova's images after the one seen, inside its 95% window;
- each image's status (past / now / future) against its true date;
- the free redshift's posterior against the true 2.71.

Run:  python benchmarks/bench_cluster_demo.py [--walkers 64] [--steps 800] [--samples 4000]
"""

from __future__ import annotations

import argparse
import json
import pathlib
import time
import warnings

import numpy as np
from astropy.time import Time

from lensdelay.api import forecast_scenario, load_scenario
from lensdelay.errors import LensdelayWarning

ROOT = pathlib.Path(__file__).resolve().parent.parent
SCENARIO = ROOT / "scenarios" / "tarrow_cluster.toml"
TRUTH = ROOT / "scenarios" / "tarrow_truth.json"
#: the noise put into the positions by scenarios/generate.py (arcsec)
NOISE = {"sn": 0.02, "arc": 0.06}


def run(walkers: int, steps: int, samples: int, now: str, seed: int = 1) -> dict:
    """Forecast the demo cluster and compare with its truth; a dict of the figures."""
    truth = json.loads(TRUTH.read_text())
    sc = load_scenario(SCENARIO)
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", LensdelayWarning)
        res = forecast_scenario(
            sc, walkers=walkers, steps=steps, n_samples=samples, seed=seed, now=Time(now)
        )
    seconds = time.perf_counter() - t0
    fit = res.fits[0]
    chain = res.chains[0]
    rms = fit.rms_arcsec()
    detection = res.images[0].detection_date
    now_t = Time(now)
    inside, status_ok, rows = 0, 0, []
    for im in res.images:
        true_days = truth["sn_delays_days"].get(im.label)
        if true_days is None:
            continue
        d = im.delay_days
        ok = d["p2.5"] <= true_days <= d["p97.5"]
        inside += ok
        true_date = Time(detection.jd + true_days, format="jd", scale="utc")
        expected = "seen" if im.status == "seen" else ("past" if true_date < now_t else "future")
        # "now" or "uncertain" are honest answers, never wrong ones
        right = im.status == expected or im.status in ("now", "uncertain")
        status_ok += right
        rows.append((im.label, true_days, d, im.status, expected, ok))
    z_name = "redshift[arc4]"
    z = chain.samples()[:, chain.names.index(z_name)] if z_name in chain.names else None
    return {
        "seconds": seconds,
        "rms": rms,
        "chi2": fit.chi2,
        "dof": fit.dof,
        "rows": rows,
        "inside": inside,
        "status_ok": status_ok,
        "n": len(rows),
        "z": None if z is None else np.percentile(z, [2.5, 50, 97.5]),
        "tau_max": float(np.nanmax(chain.autocorr)),
        "ess_min": float(np.nanmin(chain.effective_sample_sizes())),
        "move": chain.move,
        "warnings": sorted({str(w.message)[:90] for w in caught}),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--walkers", type=int, default=64)
    ap.add_argument("--steps", type=int, default=800)
    ap.add_argument("--samples", type=int, default=4000)
    ap.add_argument("--now", default="2026-12-03")
    args = ap.parse_args()
    out = run(args.walkers, args.steps, args.samples, args.now)
    print(
        f"Tarrow cluster: fit + posterior ({args.walkers} walkers x {args.steps} steps, "
        f"{out['move']} moves) + forecast ({args.samples} samples): {out['seconds'] / 60:.1f} min"
    )
    print(
        f"fit chi2 = {out['chi2']:.1f} for {out['dof']} dof; sampler max tau "
        f"{out['tau_max']:.0f} steps, fewest effective samples {out['ess_min']:.0f}"
    )
    print("image-plane rms [mas] (noise put in: sn 20, arcs 60):")
    print("  " + ", ".join(f"{k} {1e3 * v:.0f}" for k, v in out["rms"].items() if v is not None))
    for label, true_days, d, status, expected, ok in out["rows"]:
        print(
            f"  sn/{label}: true delay {true_days:+9.1f} d, 95% window "
            f"[{d['p2.5']:+9.1f}, {d['p97.5']:+9.1f}] {'inside' if ok else 'OUTSIDE'}; "
            f"status {status} (truth: {expected})"
        )
    print(
        f"true delays inside their 95% windows: {out['inside']} of {out['n']}; "
        f"statuses right: {out['status_ok']} of {out['n']}"
    )
    if out["z"] is not None:
        lo, mid, hi = out["z"]
        print(f"free redshift of arc4: {mid:.3f} (95%: {lo:.3f}-{hi:.3f}); true 2.71")
    for w in out["warnings"]:
        print(f"warning: {w}")


if __name__ == "__main__":
    main()
