"""Cross-matching a survey night's alerts against a watch list (issue 31).

1. **Cross-match.** Synthetic: 10⁵ watched lenses spread uniformly over the sky
   (footprints of 2-4" radius, four images each), 10⁶ alerts spread uniformly, plus 1,000
   injected events, each at one of a lens's images (astrometric noise 50 mas). Measured:
   the footprint search's throughput, whether every injected event is found and assigned
   to its own image, and whether every other match really lies inside a footprint.
2. **One alert, cold.** An alert file written, then ``lensdelay watch --once`` run from
   the shell: start-up, index, forecast and notice, timed whole.
3. **A survey night.** ``lensdelay watch`` running (polling every second, its default)
   over three prepared invented lenses while Avro alert files arrive every
   ``--every`` seconds (each moved into the folder whole, 2,000 alerts spread over the
   sky); among them the alerts of three lensed transients — first detections, a
   sighting of another image, an alert at none of the images. Measured: each alert
   file's arrival → its notice on disk, as the running watch answers it; that every file
   and every alert is read; that SIGTERM ends the watch cleanly.

Run: python benchmarks/bench_watch.py [--lenses 100000] [--alerts 1000000] [--files 30]
     [--only cross-match|cold|night] [--show-log]
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
    parser.add_argument("--files", type=int, default=30, help="alert files of the night")
    parser.add_argument("--every", type=float, default=1.0, help="seconds between files")
    parser.add_argument("--only", choices=("cross-match", "cold", "night"), help="one part")
    parser.add_argument("--show-log", action="store_true", help="the night's watch log")
    args = parser.parse_args()
    if args.only in (None, "cross-match"):
        cross_match(args)
    if args.only in (None, "cold"):
        latency()
    if args.only in (None, "night"):
        night(args.files, args.every, show_log=args.show_log)


def cross_match(args) -> None:
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


#: The survey night's lensed transients: (file number, lens, object, where, role expected).
#: "where" is an observed image's label; "next" the observed image the first notice's
#: forecast expects last (the alert dated at its median date: a sighting that fits);
#: "none" the lens's centre (no image there: the match was wrong).
NIGHT_EVENTS = (
    (3, "vellmar", "o1", "A", "first"),
    (8, "pellory", "o2", "A", "first"),
    (12, "vellmar", "o1", "next", "update"),
    (16, "ostrin", "o3", "A", "first"),
    (20, "pellory", "o2", "none", "retraction"),
    (25, "ostrin", "o3", "next", "update"),
)
NIGHT_LENSES = {
    "vellmar": "scenarios/vellmar_quad.toml",
    "pellory": "scenarios/pellory_quad.toml",
    "ostrin": "scenarios/ostrin_double.toml",
}
AVRO_SCHEMA = {
    "type": "record",
    "name": "detection",
    "fields": [
        {"name": "alert_id", "type": "string"},
        {"name": "ra", "type": "double"},
        {"name": "dec", "type": "double"},
        {"name": "mjd", "type": "double"},
        {"name": "mag", "type": ["null", "double"], "default": None},
        {"name": "band", "type": "string"},
        {"name": "object_id", "type": ["null", "string"], "default": None},
    ],
}


def _without_transient(text: str) -> str:
    """A scenario's TOML without its [transient] and [[delay]] tables."""
    kept, skipping = [], False
    for line in text.splitlines():
        if line.startswith("["):
            skipping = line.strip() in ("[transient]", "[[delay]]")
        if not skipping:
            kept.append(line)
    return "\n".join(kept) + "\n"


def _expected_last(folder) -> tuple[str, float]:
    """(label, median MJD) of the observed image the first notice's forecast expects last."""
    import json

    forecast = json.loads((folder / "001-first-forecast.json").read_text())
    later = [im for im in forecast["images"] if im["observed"]]
    last = max(later, key=lambda im: im["date_mjd"]["median"])
    return last["label"], float(last["date_mjd"]["median"])


def night(files: int, every: float, per_file: int = 2000, show_log: bool = False) -> None:
    """A running watch fed a night of alert files; arrival -> notice for each event."""
    import os
    import signal
    import subprocess
    import sys
    import tempfile
    import threading
    from pathlib import Path

    import fastavro
    from astropy.time import Time

    from lensdelay.io.reading import load_scenario

    rng = np.random.default_rng(5)
    schema = fastavro.parse_schema(AVRO_SCHEMA)
    mjd0 = Time.now().mjd
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        positions = {}
        for name, path in NIGHT_LENSES.items():
            # prepared before anything was seen: the scenario without its transient
            blank = tmp / Path(path).name
            blank.write_text(_without_transient(Path(path).read_text()))
            cmd = [sys.executable, "-m", "lensdelay", "prepare", str(blank), "--quiet"]
            subprocess.run([*cmd, "--out", str(tmp / "lenses" / name)], check=True)
            sc = load_scenario(path)[0]
            where = {im.label: (im.x, im.y) for im in sc.families[0].images}
            where["none"] = (0.0, 0.0)
            positions[name] = (sc.sky, where)
        (tmp / "alerts").mkdir()
        (tmp / "spool").mkdir()
        cmd = [sys.executable, "-m", "lensdelay", "watch", str(tmp / "lenses")]
        cmd += ["--alerts", str(tmp / "alerts"), "--out", str(tmp / "out")]
        t_start = time.perf_counter()
        proc = subprocess.Popen(cmd, stderr=subprocess.PIPE, text=True)
        log = []
        ready = threading.Event()

        def reader():
            for line in proc.stderr:
                log.append((time.perf_counter(), line.rstrip()))
                if "watching" in line:
                    ready.set()

        threading.Thread(target=reader, daemon=True).start()
        if not ready.wait(60):
            proc.kill()
            raise SystemExit("the watch did not start within 60 s")
        t_ready = time.perf_counter() - t_start
        events = {k: e for k, *e in NIGHT_EVENTS}
        sequence = {}
        arrivals, written = [], 0
        for k in range(files):
            ra, dec = _uniform_sky(per_file, rng)
            mjd = mjd0 + k * every / 86400.0
            records = [
                {
                    "alert_id": f"bg{k}-{i}",
                    "ra": float(r),
                    "dec": float(d),
                    "mjd": mjd,
                    "mag": 22.0,
                    "band": "r",
                    "object_id": f"bg{k}-{i}",
                }
                for i, (r, d) in enumerate(zip(ra, dec))
            ]
            expect = None
            if k in events:
                lens, obj, label, role = events[k]
                sky, where = positions[lens]
                when = mjd
                if label == "next":
                    label, when = _expected_last(tmp / "out" / "notices" / lens / obj)
                x, y = where[label]
                at = sky.spherical_offsets_by(
                    (x + rng.normal(0, 0.03)) * u.arcsec, (y + rng.normal(0, 0.03)) * u.arcsec
                )
                records.insert(
                    rng.integers(per_file),
                    {
                        "alert_id": f"{obj}-{k}",
                        "ra": float(at.ra.deg),
                        "dec": float(at.dec.deg),
                        "mjd": when,
                        "mag": 21.0,
                        "band": "r",
                        "object_id": obj,
                    },
                )
                sequence[(lens, obj)] = sequence.get((lens, obj), 0) + 1
                seq = sequence[(lens, obj)]
                expect = tmp / "out" / "notices" / lens / obj / f"{seq:03d}-{role}.json"
            spool = tmp / "spool" / f"night-{k:03d}.avro"
            with open(spool, "wb") as handle:
                fastavro.writer(handle, schema, records)
            written += len(records)
            t_arrive = time.perf_counter()
            os.replace(spool, tmp / "alerts" / spool.name)  # arrives whole
            if expect is not None:
                arrivals.append((k, expect, t_arrive))
            while time.perf_counter() < t_arrive + every:
                time.sleep(0.005)
                for n, (kk, path, t0) in enumerate(arrivals):
                    if isinstance(path, Path) and path.exists():
                        arrivals[n] = (kk, time.perf_counter() - t0, t0)
        deadline = time.perf_counter() + 30
        while any(isinstance(a[1], Path) for a in arrivals) and time.perf_counter() < deadline:
            time.sleep(0.005)
            for n, (kk, path, t0) in enumerate(arrivals):
                if isinstance(path, Path) and path.exists():
                    arrivals[n] = (kk, time.perf_counter() - t0, t0)
        time.sleep(2 * 1.0)  # the last file read
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(30)
        lines = [line for _, line in log]
        read = sum(int(line.split(": ")[2].split()[0]) for line in lines if "alerts read" in line)
        files_read = sum("alerts read" in line for line in lines)
        waits = [a[1] for a in arrivals if not isinstance(a[1], Path)]
        if show_log:
            for t, line in log:
                print(f"{t - t_start:8.2f} {line[:150]}")
            print("arrivals", [(k, round(t0 - t_start, 2)) for k, _, t0 in arrivals])
        missing = [events[a[0]] for a in arrivals if isinstance(a[1], Path)]
    print(
        f"survey night with a running watch (3 prepared lenses, polling every 1 s): start-up "
        f"{t_ready:.1f} s; {files} Avro files of {per_file:,} alerts every {every:g} s"
    )
    print(
        f"  alert file arriving -> notice written: {len(waits)} of {len(NIGHT_EVENTS)} notices, "
        f"median {np.median(waits):.2f} s, longest {max(waits):.2f} s (goal < 2 s); "
        f"each: {', '.join(f'{w:.2f}' for w in waits)}"
        + (f"; MISSING {missing}" if missing else "")
    )
    print(
        f"  files read {files_read} of {files}, alerts read {read:,} of {written:,}; "
        f"SIGTERM: exit {code}"
    )


if __name__ == "__main__":
    main()
