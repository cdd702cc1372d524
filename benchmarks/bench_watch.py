"""Cross-matching a survey night's alerts against a watch list (issue 31).

Synthetic: 10⁵ watched lenses spread uniformly over the sky (footprints of 2-4" radius,
four images each), 10⁶ alerts spread uniformly, plus 1,000 injected events, each at one
of a lens's images (astrometric noise 50 mas). Measured: the footprint search's
throughput, whether every injected event is found and assigned to its own image, and
whether every other match really lies inside a footprint.

Run: python benchmarks/bench_watch.py [--lenses 100000] [--alerts 1000000]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from astropy import units as u
from astropy.coordinates import SkyCoord

from lensdelay.forecast.watchlist import WatchedImage, WatchedLens, WatchIndex, assign


def _uniform_sky(n: int, rng) -> tuple[np.ndarray, np.ndarray]:
    ra = rng.uniform(0.0, 360.0, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1.0, 1.0, n)))
    return ra, dec


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--lenses", type=int, default=100_000)
    parser.add_argument("--alerts", type=int, default=1_000_000)
    parser.add_argument("--injected", type=int, default=1000)
    args = parser.parse_args()
    rng = np.random.default_rng(31)
    t0 = time.perf_counter()
    lra, ldec = _uniform_sky(args.lenses, rng)
    lenses = []
    for k in range(args.lenses):
        theta = rng.uniform(0.6, 1.8)
        angles = rng.uniform(0, 2 * np.pi) + np.array([0.0, 0.5, 1.0, 1.5]) * np.pi
        images = tuple(
            WatchedImage("sn", "ABCD"[j], theta * np.cos(a), theta * np.sin(a), 0.005, True)
            for j, a in enumerate(angles)
        )
        lenses.append(WatchedLens(f"lens{k}", lra[k], ldec[k], images, theta + 1.0 + 0.2))
    t_build = time.perf_counter() - t0
    ara, adec = _uniform_sky(args.alerts, rng)
    # the injected events: at one image of a random lens, with 50 mas of noise
    chosen = rng.integers(0, args.lenses, args.injected)
    which = rng.integers(0, 4, args.injected)
    inj_ra, inj_dec = [], []
    for k, j in zip(chosen, which):
        im = lenses[k].images[j]
        origin = SkyCoord(lenses[k].ra * u.deg, lenses[k].dec * u.deg)
        where = origin.spherical_offsets_by(
            (im.x + rng.normal(0, 0.05)) * u.arcsec, (im.y + rng.normal(0, 0.05)) * u.arcsec
        )
        inj_ra.append(where.ra.deg)
        inj_dec.append(where.dec.deg)
    ra = np.concatenate([ara, inj_ra])
    dec = np.concatenate([adec, inj_dec])
    t0 = time.perf_counter()
    index = WatchIndex(lenses)
    t_index = time.perf_counter() - t0
    t0 = time.perf_counter()
    i_alert, i_lens, sep = index.candidates(ra, dec)
    t_match = time.perf_counter() - t0
    injected = set(range(args.alerts, args.alerts + args.injected))
    found = {(int(a), int(b)) for a, b in zip(i_alert, i_lens)}
    missed = [n for n, k in zip(sorted(injected), chosen) if (n, int(k)) not in found]
    false = [(a, b) for a, b in found if a not in injected]
    # every false match must really lie inside the footprint (an exact separation check)
    if false:
        fa, fl = map(np.array, zip(*false))
        exact = (
            SkyCoord(ra[fa] * u.deg, dec[fa] * u.deg)
            .separation(index.coords[fl])
            .to_value(u.arcsec)
        )
        outside = int(np.sum(exact > index.radius[fl]))
    else:
        outside = 0
    t0 = time.perf_counter()
    right = 0
    for n, k, j in zip(sorted(injected), chosen, which):
        a = assign(lenses[k], ra[n], dec[n], alert_sigma=0.05)
        right += a.image == f"sn/{'ABCD'[j]}"
    t_assign = (time.perf_counter() - t0) / args.injected
    print(
        f"{args.alerts + args.injected:,} alerts against {args.lenses:,} lenses: footprint "
        f"search {t_match:.2f} s (index {t_index:.2f} s; goal < 10 s together), "
        f"{len(found):,} matches"
    )
    print(
        f"injected events: {args.injected - len(missed)} of {args.injected} found (goal: all), "
        f"{right} assigned to their own image; {len(false)} other alerts matched, "
        f"{outside} of them outside a footprint (goal 0); assignment {1e3 * t_assign:.1f} ms "
        f"per match; building the synthetic watch list {t_build:.1f} s"
    )


def latency() -> None:
    """Alert file appearing -> notice written, from the shell, for a prepared quad."""
    import json
    import subprocess
    import sys
    import tempfile
    from pathlib import Path

    from lensdelay.io.reading import load_scenario

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        lensdelay = [sys.executable, "-m", "lensdelay"]
        prepare = [*lensdelay, "prepare", "scenarios/vellmar_quad.toml", "--quiet"]
        subprocess.run([*prepare, "--out", str(tmp / "lenses" / "vellmar")], check=True)
        sc = load_scenario("scenarios/vellmar_quad.toml")[0]
        im = sc.families[0].images[1]
        where = sc.sky.spherical_offsets_by(im.x * u.arcsec, im.y * u.arcsec)
        (tmp / "alerts").mkdir()
        record = {
            "alert_id": "a1",
            "ra": where.ra.deg,
            "dec": where.dec.deg,
            "mjd": 61372.2,
            "mag": 21.0,
            "band": "r",
            "object_id": "o1",
        }
        t0 = time.perf_counter()
        (tmp / "alerts" / "n1.jsonl").write_text(json.dumps(record) + "\n")
        watch = [*lensdelay, "watch", str(tmp / "lenses"), "--alerts", str(tmp / "alerts")]
        subprocess.run(
            [*watch, "--out", str(tmp / "out"), "--once"], check=True, capture_output=True
        )
        wall = time.perf_counter() - t0
        notice = tmp / "out" / "notices" / "vellmar" / "o1" / "001-first.json"
        print(
            f"alert file written -> notice written, one watch run from the shell "
            f"(start-up, index, forecast of 20,000 samples, notice): {wall:.1f} s "
            f"(goal < 2 s; notice {'written' if notice.exists() else 'MISSING'})"
        )


if __name__ == "__main__":
    main()
    latency()
