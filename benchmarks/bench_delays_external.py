"""Delays measured on light curves the tool did not simulate (issue 26). Prints figures.

Two external sets in ``../shared/data`` (see their SOURCE.md):

* **TDC1 rungs 0 and 1** (Liao et al. 2015, ApJ 800, 11; simulations of Dobler et al.
  2015, ApJ 799, 168): every pair of both rungs, measured with the defaults of
  ``lensdelay delays`` (kind quasar, reference A). The challenge's metrics (section 4 of
  the paper; SOURCE.md): f = measured / all; χ² = ⟨((Δ̃ − Δ)/σ)²⟩; P = ⟨σ/|Δ|⟩;
  A = ⟨(Δ̃ − Δ)/Δ⟩, σ the half-width of the 68% interval, over the pairs measured; and the
  share of true delays inside the 95% intervals. Printed for every pair measured and for
  the pairs a team would submit for cosmography, those whose stated precision σ/|Δ̃| is
  at most SUBMIT_PRECISION (the challenge's entries chose their own such cut).
  Goals (issue 26): f ≥ 0.5, P ≤ 0.03, |A| ≤ 0.01, χ² ≤ 1.5, ≥ 90% inside the 95%.
* **Real monitoring curves** with published delays (four systems): the curves alone, the
  defaults, reference = the file's first image; each published delay Δt_XY = t_X − t_Y
  (SOURCE.md) compared with the tool's Δ_X − Δ_Y draws; a published value counts as inside
  when it lies in the tool's 95% interval widened by the published 1σ on each side.
  Goal: every one measured and inside.

Run:  python benchmarks/bench_delays_external.py [--set tdc|real|all] [--jobs 2]
      [--limit N] [--rung 0 1] [--save rows.json | --load rows.json]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from external_curves import REAL, TDC, read_rdb, read_tdc, tdc_truths  # noqa: E402

from lensdelay.lightcurves.measure import measure_delays  # noqa: E402

SUBMIT_PRECISION = 0.05
#: Other cuts printed from the same run (chosen after the first run: they show the trade
#: between f and P, they are not the benchmark's cut).
OTHER_CUTS = (0.07, 0.1)

#: Published delays, Δt_XY = t_X − t_Y in days with their 1σ (SOURCE.md's table).
PUBLISHED = {
    # Tewes et al. 2013, A&A 556, A22, abstract: D trails A, B, C by about 91 d, 1.5%
    "RXJ1131_Tewes2013.rdb": [("D", "A", 91.0, 1.4), ("D", "B", 91.0, 1.4), ("D", "C", 91.0, 1.4)],
    # Courbin et al. 2011, A&A 536, A53, abstract (A left out by the authors)
    "HE0435_Courbin2011.rdb": [("B", "C", 7.8, 0.8), ("B", "D", -6.5, 0.7), ("C", "D", -14.3, 0.8)],
    # Bonvin et al. 2019, A&A 629, A97, abstract (the larger of the asymmetric errors)
    "WFI2033_Euler-SMARTS.rdb": [
        ("A", "B", 36.2, 0.8),
        ("A", "C", -23.3, 1.4),
        ("B", "C", -59.4, 1.3),
    ],
    # Eulaers et al. 2013, A&A 553, A121 (via a compilation; SOURCE.md)
    "J1206_Eulaers2013.rdb": [("B", "A", 111.3, 3.0)],
}


def one_tdc(job):
    rung, name, truth = job
    curves = read_tdc(TDC / f"rung{rung}" / name)
    t0 = time.perf_counter()
    res = measure_delays(curves, "A", kind="quasar")
    dt = time.perf_counter() - t0
    im = res.image("B")
    if not im.measurable:
        return rung, name, truth, None, dt, im.statement
    return rung, name, truth, im.delay_days, dt, ""


def tdc_metrics(rows):
    rows = [r for r in rows if r[3] is not None]
    if not rows:
        return dict(n=0)
    truth = np.array([r[2] for r in rows])
    med = np.array([r[3]["median"] for r in rows])
    sig = np.array([0.5 * (r[3]["p84"] - r[3]["p16"]) for r in rows])
    lo = np.array([r[3]["p2.5"] for r in rows])
    hi = np.array([r[3]["p97.5"] for r in rows])
    ok = truth != 0
    return dict(
        n=len(rows),
        chi2=float(np.mean(((med - truth) / sig) ** 2)),
        P=float(np.mean(sig[ok] / np.abs(truth[ok]))),
        A=float(np.mean((med[ok] - truth[ok]) / truth[ok])),
        in95=float(np.mean((lo <= truth) & (truth <= hi))),
        in68=float(
            np.mean(
                (np.array([r[3]["p16"] for r in rows]) <= truth)
                & (truth <= np.array([r[3]["p84"] for r in rows]))
            )
        ),
    )


def run_tdc(rungs, jobs, limit, save=None, load=None):
    work = []
    for rung in rungs:
        truths = tdc_truths(rung)
        names = sorted(n for n in truths if (TDC / f"rung{rung}" / n).exists())
        if limit:
            names = names[:limit]
        work += [(rung, n, truths[n]) for n in names]
    t0 = time.perf_counter()
    if load:
        rows = [tuple(r) for r in json.loads(Path(load).read_text())]
    else:
        with ProcessPoolExecutor(jobs) as pool:
            rows = list(pool.map(one_tdc, work, chunksize=1))
    wall = time.perf_counter() - t0
    if save:
        Path(save).write_text(json.dumps(rows))
    n_all = len(rows)
    measured = [r for r in rows if r[3] is not None]

    def submitted(cut):
        return [
            r for r in measured if 0.5 * (r[3]["p84"] - r[3]["p16"]) <= cut * abs(r[3]["median"])
        ]

    print(
        f"TDC1 rungs {', '.join(map(str, rungs))}: {n_all} pairs, {wall:.0f} s wall on {jobs} "
        f"processes; per pair median {np.median([r[4] for r in rows]):.1f} s, "
        f"max {max(r[4] for r in rows):.1f} s"
    )
    for label, sel in (
        ("all measured", measured),
        (f"submitted (sigma/|dt| <= {SUBMIT_PRECISION:g})", submitted(SUBMIT_PRECISION)),
        *[(f"  other cut: sigma/|dt| <= {c:g}", submitted(c)) for c in OTHER_CUTS],
    ):
        m = tdc_metrics(sel)
        if not m["n"]:
            print(f"  {label}: none")
            continue
        print(
            f"  {label}: f = {len(sel) / n_all:.2f} ({len(sel)}/{n_all}), chi2 = {m['chi2']:.2f}, "
            f"P = {m['P']:.3f}, A = {m['A']:+.4f}, inside 68% = {m['in68']:.0%}, "
            f"inside 95% = {m['in95']:.0%}"
        )
    worst = sorted(
        measured,
        key=lambda r: -abs(r[3]["median"] - r[2]) / max(0.5 * (r[3]["p84"] - r[3]["p16"]), 1e-9),
    )[:5]
    for r in worst:
        d = r[3]
        print(
            f"    worst: rung {r[0]} {r[1]}: truth {r[2]:+.2f}, measured {d['median']:+.2f} "
            f"[{d['p2.5']:+.2f}, {d['p97.5']:+.2f}]"
        )
    return rows


def one_real(name):
    """Measure one system with the defaults; compare with its published delays."""
    curves = read_rdb(REAL / name)
    t0 = time.perf_counter()
    res = measure_delays(curves, curves.labels[0], kind="quasar")
    dt = time.perf_counter() - t0
    order = list(res.model.labels[1:])
    rows = []
    for x, y, pub, err in PUBLISHED[name]:
        if any(lab != res.reference and not res.image(lab).measurable for lab in (x, y)):
            rows.append((x, y, pub, err, None))
            continue

        def col(lab):
            if lab == res.reference:
                return np.zeros(len(res.samples))
            return res.samples[:, order.index(lab)]

        rows.append((x, y, pub, err, np.percentile(col(x) - col(y), [2.5, 50, 97.5])))
    statements = [f"{im.label}: {im.statement}" for im in res.images if not im.measurable]
    g = res.goodness
    return name, dt, res.reference, g["chi2"] / g["dof"], rows, statements, list(res.notes)


def run_real(jobs):
    names = list(PUBLISHED)
    with ProcessPoolExecutor(jobs) as pool:
        results = list(pool.map(one_real, names))
    n_in = n_all = 0
    for name, dt, reference, chi2_dof, rows, statements, notes in results:
        print(f"{name}: {dt:.0f} s, reference {reference}, chi2/dof = {chi2_dof:.2f}")
        for x, y, pub, err, q in rows:
            n_all += 1
            if q is None:
                print(f"  dt_{x}{y}: published {pub:+.1f} ± {err}: NOT MEASURED")
                continue
            lo, med, hi = q
            inside = lo - err <= pub <= hi + err
            n_in += inside
            print(
                f"  dt_{x}{y}: published {pub:+.1f} ± {err}; "
                f"tool {med:+.1f} [{lo:+.1f}, {hi:+.1f}] "
                f"-> {'inside' if inside else 'OUTSIDE'}"
            )
        for st in statements:
            print(f"  {st}")
        for n in notes:
            if "error" in n or "poor" in n or "highest evidence" in n:
                print(f"  note: {n}")
    print(
        f"real curves: {n_in}/{n_all} published delays measured and inside the widened "
        "95% intervals"
    )


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--set", default="all", choices=("tdc", "real", "all"))
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--limit", type=int, default=0, help="pairs per rung (0: all)")
    ap.add_argument("--rung", type=int, nargs="+", default=[0, 1])
    ap.add_argument("--save", help="write the TDC rows to this JSON file")
    ap.add_argument("--load", help="read the TDC rows from a --save file instead of measuring")
    a = ap.parse_args()
    if a.set in ("real", "all"):
        run_real(a.jobs)
    if a.set in ("tdc", "all"):
        run_tdc(a.rung, a.jobs, a.limit, a.save, a.load)


if __name__ == "__main__":
    main()
