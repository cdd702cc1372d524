"""``lensdelay batch``: one forecast per system of a catalogue, and a summary to triage them.

The catalogue is a folder of scenario files (``*.toml``) and/or prepared lenses (folders
from ``lensdelay prepare``). Each system is forecast with its own seed, derived from the
base seed and the system's name, so the result does not depend on which engine ran it or
in what order: serially, on a local process pool (``--workers N``) or on a Dask cluster
(``--scheduler ADDRESS``; the optional extra ``lensdelay[distributed]``). Each system's
outputs are written as one set into ``OUT/<system>/`` (``forecast.json`` last), with a
fingerprint of the system's input files and of every setting (``--now`` included: the
day, when it is not given). A rerun skips a system whose ``forecast.json`` carries the
same fingerprint, so an interrupted batch resumes; one whose inputs or settings changed,
or whose outputs are unreadable, is forecast again, and the command says how many.
A system that fails is recorded in the summary with its one-line error and does not stop
the others.
"""

from __future__ import annotations

import io
import json
import sys
from pathlib import Path


from lensdelay.errors import InputError
from lensdelay.io.catalogue import list_systems, system_seed

__all__ = [
    "TRIAGE_OBSERVABLE",
    "TRIAGE_DEPTH",
    "TRIAGE_MIN_DELAY",
    "SUMMARY",
    "system_files",
    "system_fingerprint",
    "previous_row",
    "forecast_one",
    "failed_row",
    "summary_row",
    "summary_table",
    "SCHEDULER_TIMEOUT",
    "check_scheduler_address",
    "run",
    "register",
]


#: Triage (docs/benchmarks.md, "Many systems"): a system is ranked when its next image
#: is observable on at least this share of the nights in its 95% window, no fainter than
#: TRIAGE_DEPTH (the forecast's default depth) and its delay after the image seen at least
#: TRIAGE_MIN_DELAY days (shorter delays cannot be measured from nightly light curves:
#: common practice); ranked systems are ordered by the median date of that next image.
TRIAGE_OBSERVABLE = 0.5
TRIAGE_DEPTH = 25.0
TRIAGE_MIN_DELAY = 2.0
SUMMARY = "summary.ecsv"


def system_files(path) -> list[Path]:
    """Every file a system's forecast reads: a prepared lens's files, or a scenario's.

    A scenario that cannot be read counts as its own file only (its forecast fails, and
    that failure is the system's row).
    """
    from lensdelay.errors import LensdelayError
    from lensdelay.io.reading import load_scenario

    path = Path(path)
    if path.is_dir():
        return sorted(p for p in path.iterdir() if p.is_file() and not p.name.startswith("."))
    try:
        return [Path(p) for p in load_scenario(path)[1]]
    except (LensdelayError, OSError):
        return [path]


def system_fingerprint(path, seed: int, settings: dict) -> str:
    """The fingerprint of one system's forecast: its files, its seed and the settings."""
    from lensdelay.io.provenance import fingerprint
    from lensdelay.version import __version__

    return fingerprint(system_files(path), {**settings, "seed": int(seed), "version": __version__})


def previous_row(name: str, done: Path, wanted: str) -> tuple[dict | None, str]:
    """The summary row of a finished forecast in ``done`` if it is current, and why not.

    Returns ``(row, "")`` when ``done`` holds a readable forecast.json with fingerprint
    ``wanted``; otherwise ``(None, reason)`` (reason "" when there is no forecast yet).
    """
    if not done.is_file():
        return None, ""
    try:
        doc = json.loads(done.read_text(encoding="utf-8"))
        recorded = doc["provenance"].get("batch_fingerprint")
        row = summary_row(name, doc)
    except (OSError, ValueError, KeyError, TypeError, AttributeError, IndexError):
        return None, "its forecast.json is unreadable or incomplete"
    if recorded != wanted:
        return None, "its inputs or the settings changed since"
    return row, ""


def forecast_one(
    name: str, path: str, out: str, seed: int, options: dict, fingerprint: str = ""
) -> dict:
    """Forecast one system and write its outputs; never raises (a failure is a row)."""
    import warnings
    from dataclasses import replace

    from lensdelay.api import forecast_prepared, forecast_scenario
    from lensdelay.cli.forecast import write_forecast
    from lensdelay.errors import LensdelayError, LensdelayWarning
    from lensdelay.io.prepared_files import is_prepared

    from lensdelay.cli.libraries import configure_libraries

    configure_libraries()  # in a worker process too: no downloads, no time-library noise
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", LensdelayWarning)
            if is_prepared(path):
                # a prepared lens keeps the sampler settings and prior it was drawn with
                kept = ("walkers", "steps", "prior")
                res = forecast_prepared(
                    path, seed=seed, **{k: v for k, v in options.items() if k not in kept}
                )
            else:
                res = forecast_scenario(path, seed=seed, **options)
            if fingerprint:
                res = replace(res, provenance={**res.provenance, "batch_fingerprint": fingerprint})
            doc, _ = write_forecast(Path(out) / name, res)
        return summary_row(name, doc)
    except LensdelayError as err:  # bad input of this system: its one line
        return failed_row(name, _first_line(err))
    except Exception as err:  # one system's bug must not stop the others; it is reported
        return failed_row(name, f"{type(err).__name__}: {_first_line(err)}")
    # (a KeyboardInterrupt is no Exception: an interruption stops the whole batch)


def _first_line(err: BaseException) -> str:
    """The first line of an error's message (its type's name when it has none)."""
    text = str(err)
    return text.splitlines()[0] if text else type(err).__name__


def failed_row(name: str, message: str) -> dict:
    """The summary row of a system whose forecast failed."""
    return {"system": name, "status": f"failed: {message}"}


def summary_row(name: str, doc: dict) -> dict:
    """One summary row from a forecast's JSON: the next image ahead and the triage facts."""
    ahead = [im for im in doc["images"] if im["status"] in ("now", "future")]
    row = {"system": name, "status": "ok"}
    if not ahead:
        return {**row, "triage": "no image ahead"}
    nxt = min(ahead, key=lambda im: im["date"]["median"])
    obs = nxt.get("observability") or {}
    mag = nxt.get("magnitude") or {}
    row.update(
        {
            "next_image": f"{nxt['family']}/{nxt['label']}",
            "date_median": nxt["date"]["median"],
            "date_p16": nxt["date"]["p16"],
            "date_p84": nxt["date"]["p84"],
            "date_p2.5": nxt["date"]["p2.5"],
            "date_p97.5": nxt["date"]["p97.5"],
            "p_observable": obs.get("probability_observable"),
            "magnitude": mag.get("median"),
            "delay_days": nxt["delay_days"]["median"],
        }
    )
    if row["p_observable"] is None:
        # not known to be observable: no site, or no sky position (the forecast says which)
        row["triage"] = "observability unknown"
    elif row["p_observable"] < TRIAGE_OBSERVABLE:
        row["triage"] = "rarely observable"
    elif row["magnitude"] is None:
        row["triage"] = "brightness unknown"
    elif row["magnitude"] > TRIAGE_DEPTH:
        row["triage"] = f"fainter than {TRIAGE_DEPTH:g} mag"
    elif abs(row["delay_days"]) < TRIAGE_MIN_DELAY:
        row["triage"] = f"delay under {TRIAGE_MIN_DELAY:g} d"
    else:
        row["triage"] = "ranked"
    return row


def summary_table(rows: list[dict], now: str | None = None):
    """The summary as an astropy Table, ranked (rank 0: not ranked).

    ``now`` (ISO) is the date the statuses were judged as of; it is kept in the meta.
    """
    import numpy as np
    from astropy.table import MaskedColumn, Table

    ranked = sorted(
        (r for r in rows if r.get("triage") == "ranked"), key=lambda r: r["date_median"]
    )
    rank = {r["system"]: k + 1 for k, r in enumerate(ranked)}
    rows = sorted(rows, key=lambda r: (rank.get(r["system"], len(rows) + 1), r["system"]))
    table = Table()
    table["rank"] = [rank.get(r["system"], 0) for r in rows]
    table["system"] = [r["system"] for r in rows]
    table["status"] = [r["status"] for r in rows]
    table["triage"] = [r.get("triage", "failed") for r in rows]
    for key in (
        "next_image",
        "date_median",
        "date_p16",
        "date_p84",
        "date_p2.5",
        "date_p97.5",
    ):
        values = [r.get(key) for r in rows]
        table[key] = MaskedColumn([v or "" for v in values], mask=[v is None for v in values])
    for key, unit in (("p_observable", None), ("magnitude", "mag"), ("delay_days", "d")):
        values = [r.get(key) for r in rows]
        table[key] = MaskedColumn(
            [np.nan if v is None else float(v) for v in values],
            mask=[v is None for v in values],
            unit=unit,
        )
    if now is not None:
        table.meta["now"] = now
    table.meta["triage_rule"] = (
        f"ranked when the next image is observable on >= {TRIAGE_OBSERVABLE:g} of its 95% "
        f"window, no fainter than {TRIAGE_DEPTH:g} mag and >= {TRIAGE_MIN_DELAY:g} d after "
        "the image seen; ranked systems by the next image's median date"
    )
    return table


#: Seconds to wait for a Dask scheduler to answer before giving up.
SCHEDULER_TIMEOUT = 30.0


def check_scheduler_address(scheduler: str) -> None:
    """Refuse a scheduler address that is not ``PROTOCOL://HOST:PORT``."""
    if "://" not in scheduler or not scheduler.rsplit(":", 1)[-1].isdigit():
        raise InputError(f"--scheduler must be an address like tcp://HOST:PORT, got {scheduler!r}")


def _connect(client_class, scheduler: str):
    """A Dask client of ``scheduler``, or one line when it is unreachable or silent.

    The connection runs in a daemon thread joined with a deadline: a server that
    accepts the connection and never answers must not hang the batch (its own timeout
    does not cover every stage of the handshake).
    """
    import threading

    check_scheduler_address(scheduler)
    box: dict = {}

    def connect():
        try:
            box["client"] = client_class(scheduler, timeout=SCHEDULER_TIMEOUT)
        except BaseException as err:  # reported by the caller's thread
            box["error"] = err

    thread = threading.Thread(target=connect, daemon=True)
    thread.start()
    thread.join(1.5 * SCHEDULER_TIMEOUT)
    if thread.is_alive() or "error" in box:
        err = box.get("error")
        reason = f"{type(err).__name__}: {err}" if err else "no answer"
        raise InputError(
            f"--scheduler {scheduler!r} could not be reached within "
            f"{SCHEDULER_TIMEOUT:.0f} s ({reason})"
        )
    return box["client"]


def _share_threads(threads_each: int) -> None:
    """Pool initializer: a worker's kernels use ``threads_each`` threads.

    Unless the user set ``LENSDELAY_THREADS``: the pool then runs no more threads than CPUs.
    """
    import os

    os.environ.setdefault("LENSDELAY_THREADS", str(threads_each))


def _engine(jobs, workers: int, scheduler: str | None):
    """Yield each job's row as it completes: serial, a process pool or a Dask cluster."""
    if scheduler:
        try:
            from dask.distributed import Client, as_completed
        except ImportError as err:
            raise InputError(
                "--scheduler needs Dask (pip install 'lensdelay[distributed]'), got no dask"
            ) from err
        client = _connect(Client, scheduler)
        with client:
            futures = [client.submit(forecast_one, *job, pure=False) for job in jobs]
            try:
                for future in as_completed(futures):
                    yield future.result()
            finally:
                client.cancel(futures)
        return
    if workers <= 1 or len(jobs) <= 1:
        for job in jobs:
            yield forecast_one(*job)
        return
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    from lensdelay.lensing.threads import thread_count

    # the workers share the CPUs: each one's large kernel calls use its share of threads
    pool = ProcessPoolExecutor(
        workers,
        mp_context=multiprocessing.get_context("spawn"),
        initializer=_share_threads,
        initargs=(max(1, thread_count() // workers),),
    )
    futures = [pool.submit(forecast_one, *job) for job in jobs]
    try:
        for future in as_completed(futures):
            yield future.result()
    finally:
        # on an interruption the running systems finish their (atomic) writes; the rest
        # are not started
        pool.shutdown(wait=True, cancel_futures=True)


def run(args) -> int:
    """Forecast every system of the catalogue not forecast yet, then write the summary."""
    import numpy as np
    from lensdelay.cli.options import output_folder, request_options
    from lensdelay.io.storage import atomic_write_text
    from lensdelay.model.scenario import parse_date

    systems = list_systems(args.catalogue)
    out = output_folder(args.out) or Path(args.catalogue).with_name(
        Path(args.catalogue).name + "-forecasts"
    )
    if args.workers is None:
        import os

        args.workers = os.cpu_count() or 1
    if args.workers < 1:
        raise InputError(f"--workers must be at least 1, got {args.workers}")
    from astropy.time import Time

    from lensdelay.forecast.request import ForecastRequest

    # one 'now' for every system; when not given, the day it is part of the fingerprint
    now = parse_date(args.now, "--now") if args.now is not None else Time.now()
    now_key = now.isot[:19] if args.now is not None else now.isot[:10]
    options = request_options(args, now)
    options.pop("seed")  # each system's own seed, derived from --seed
    # settings every system shares are refused once, before any system runs
    try:
        ForecastRequest.from_options(seed=args.seed, **options)
        if args.scheduler:
            check_scheduler_address(args.scheduler)
    except InputError as err:
        from lensdelay.cli.options import with_flags

        raise InputError(with_flags(str(err))) from err
    settings = {k: v for k, v in options.items() if k not in ("now", "site")}
    settings |= {"now": now_key, "site": repr(options.get("site"))}
    rows, jobs, redone = [], [], []
    for name, path in systems:
        seed = system_seed(name, args.seed)
        wanted = system_fingerprint(path, seed, settings)
        row, reason = previous_row(name, out / name / "forecast.json", wanted)
        if row is not None:
            rows.append(row)
            continue
        if reason:
            redone.append(f"{name} ({reason})")
        jobs.append((name, str(path), str(out), seed, options, wanted))
    bar = None
    if not args.quiet and jobs:
        from tqdm import tqdm

        bar = tqdm(total=len(jobs), unit="system", desc="batch", file=sys.stderr)
    interrupted = False
    try:
        for row in _engine(jobs, args.workers, args.scheduler):
            rows.append(row)
            if bar is not None:
                bar.update(1)
            if args.stop is not None and args.stop.requested:
                raise KeyboardInterrupt
    except KeyboardInterrupt:
        # every finished system's outputs are complete (written as one set); the summary
        # lists them (also those a worker finished while the interruption was handled),
        # and a rerun forecasts only the others
        interrupted = True
        listed = {r["system"] for r in rows}
        for name, _, _, _, _, wanted in jobs:
            if name not in listed:
                row, _ = previous_row(name, out / name / "forecast.json", wanted)
                if row is not None:
                    rows.append(row)
    finally:
        if bar is not None:
            bar.close()
    table = summary_table(rows, now.isot[:19] + "Z")
    buffer = io.StringIO()
    table.write(buffer, format="ascii.ecsv")
    atomic_write_text(out / SUMMARY, buffer.getvalue())
    if interrupted:
        print(
            f"lensdelay: interrupted after {len(rows)} of {len(systems)} systems; "
            f"{out / SUMMARY} lists those; run the same command again to forecast the rest",
            file=sys.stderr,
        )
        return 130
    failed = sum(1 for r in rows if r["status"] != "ok")
    print(
        f"{len(rows)} systems ({len(rows) - len(jobs)} done before, {len(jobs)} now), "
        f"{failed} failed; ranked: {int(np.sum(table['rank'] > 0))}; statuses as of "
        f"{now.isot[:16]}Z (a system is done before when its inputs and settings are the same)"
    )
    if redone:
        print(f"forecast again: {', '.join(redone)}")
    for r in table[table["rank"] > 0][:10]:
        print(
            f"  {r['rank']:3d}  {r['system']:<24} next {r['next_image']} on "
            f"{r['date_median'][:10]} (95%: {r['date_p2.5'][:10]} .. "
            f"{r['date_p97.5'][:10]}), {r['magnitude']:.1f} mag"
        )
    print(
        f"wrote {out / SUMMARY}; each system's forecast is in {out}/<system>/ "
        "(lensdelay report FOLDER makes one page of a system)",
        file=sys.stderr,
    )
    return 0


def register(sub) -> None:
    """Add the ``batch`` sub-command to the parser."""
    from lensdelay.cli.options import add_request_arguments

    p = sub.add_parser("batch", help="forecast every system of a catalogue; rank them")
    p.add_argument("catalogue", help="folder of scenario files and/or prepared lenses")
    p.add_argument("--out", help="folder for one sub-folder per system and summary.ecsv")
    p.add_argument(
        "--workers",
        type=int,
        help="local worker processes (default: one per CPU; 1 runs the systems in this process)",
    )
    p.add_argument(
        "--scheduler", metavar="ADDRESS", help="run on this Dask scheduler (tcp://host:port)"
    )
    # the same request options as lensdelay forecast (for every system; default: each
    # scenario's own [site])
    add_request_arguments(p, seed_help="base seed, each system's own derived from it")
    p.add_argument("--quiet", action="store_true", help="no progress display")
    p.set_defaults(func=run)
