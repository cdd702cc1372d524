"""Break-test corpus through every command (issue 12). Prints counts measured in one run.

Every scenario of a corpus folder goes through ``check``, ``fit``, ``forecast`` and (with a
measured delay added) ``hubble``; every lens-only model through ``images`` at four source
positions; and settings that cannot work through the commands that take them. Each run is
classed as

- ``ran``: exit 0, no traceback, no NaN/Infinity in the JSON written;
- ``refused``: exit 2, one line on stderr (warnings aside), no traceback, nothing written;
- ``FAILED``: anything else (a traceback, another exit code, a multi-line error, a partial
  output, a NaN, a timeout).

Run from the project root (the corpus's scenarios name ``models/...`` files):

    python benchmarks/bench_robustness.py [CORPUS] [--jobs 2]

CORPUS defaults to ``../shared/repro/reliability``.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
import tomllib
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

QUICK = ["--walkers", "16", "--steps", "100", "--quiet"]
FORECAST = ["--samples", "500", *QUICK, "--now", "2026-12-01"]
SOURCES = [("0", "0"), ("0.05", "0.02"), ("0.3", "-0.2"), ("1200", "0")]
TIMEOUT = 900


def lensdelay(*argv) -> list[str]:
    return [sys.executable, "-m", "lensdelay.cli.main", *argv]


def with_a_delay(path: Path, folder: Path) -> Path | None:
    """A copy of the scenario with a measured delay between its first family's first two images."""
    try:
        doc = tomllib.loads(path.read_text())
        fam = doc["family"][0]
        a, b = fam["image"][0]["label"], fam["image"][1]["label"]
    except (KeyError, IndexError, TypeError, tomllib.TOMLDecodeError):
        return None
    out = folder / f"{path.stem}_delay.toml"
    out.write_text(
        path.read_text()
        + f'\n[[delay]]\nfamily = "{fam["label"]}"\nimage = "{b}"\nrelative_to = "{a}"\n'
        + "days = 12.0\nsigma = 1.5\n"
    )
    return out


def cases(corpus: Path, work: Path) -> list[tuple[str, list[str], Path | None]]:
    """(name, argv, output folder or None) of every run."""
    runs = []
    scenarios = sorted(corpus.glob("*.toml"))
    copies = work / "corpus"
    shutil.copytree(corpus, copies)
    for sc in scenarios:
        out = work / "out" / sc.stem
        runs.append((f"check {sc.name}", ["check", str(sc)], None))
        runs.append((f"fit {sc.name}", ["fit", str(sc), "--out", str(out / "fit")], out / "fit"))
        runs.append(
            (
                f"forecast {sc.name}",
                ["forecast", str(sc), "--out", str(out / "fc"), *FORECAST],
                out / "fc",
            )
        )
        delayed = with_a_delay(sc, copies)
        if delayed is not None:
            runs.append(
                (
                    f"hubble {sc.name}+delay",
                    ["hubble", str(delayed), "--out", str(out / "h0"), *QUICK],
                    out / "h0",
                )
            )
    for model in sorted((corpus / "lens-models").glob("*.toml")):
        for bx, by in SOURCES:
            runs.append(
                (
                    f"images {model.name} {bx},{by}",
                    ["images", str(model), "--source", bx, by, "--json"],
                    None,
                )
            )
    base = corpus / "base.toml"
    flags = {
        "steps 0": ["--steps", "0"],
        "steps -5": ["--steps", "-5"],
        "steps 1": ["--steps", "1"],
        "steps 5": ["--steps", "5"],
        "seed -1": ["--seed", "-1"],
        "abbreviation --sample 100": ["--sample", "100"],
        "second --model": ["--model", "models/sie_shear.toml", "--model", "models/sie_shear.toml"],
        "kappa-ext -5": ["--kappa-ext", "-5", "0.1"],
        "kappa-ext 0.9 0.5": ["--kappa-ext", "0.9", "0.5"],
        "kappa-ext 0 0.6": ["--kappa-ext", "0", "0.6"],
        "site height -1e7": ["--site", "-24.6", "-70.4", "-1e7"],
        "repeated --seen": ["--seen", "B=2027-03-01", "--seen", "B=2027-03-09"],
    }
    takes = {
        "fit": {"steps 0", "steps -5", "steps 1", "steps 5", "seed -1", "second --model"},
        "forecast": set(flags),
        "hubble": {"steps 0", "steps -5", "seed -1", "kappa-ext -5", "kappa-ext 0.9 0.5"},
    }
    delayed_base = copies / "base_delay.toml"
    for command, names in takes.items():
        for name in sorted(names):
            out = work / "out" / "flags" / command / name.replace(" ", "_")
            target = str(delayed_base if command == "hubble" else base)
            extra = ["--sample"] if command == "fit" and name != "second --model" else []
            argv = [command, target, "--out", str(out), *extra, *flags[name]]
            if command == "forecast":
                argv += ["--samples", "500", "--quiet", "--now", "2026-12-01"]
            runs.append((f"{command} {name}", argv, out))
    # output folders that cannot work
    dangling = work / "dangling"
    dangling.symlink_to(work / "nowhere")
    for name, out in (
        ("under a file", base / "sub"),
        ("dangling link", dangling),
    ):
        runs.append(
            (f"forecast --out {name}", ["forecast", str(base), "--out", str(out), *FORECAST], None)
        )
    return runs


def classify(argv, out_dir: Path | None) -> tuple[str, str]:
    """Run one case; return (class, detail)."""
    env = dict(os.environ, PYTHONWARNINGS="default")
    start = time.perf_counter()
    try:
        proc = subprocess.run(
            lensdelay(*argv), capture_output=True, text=True, timeout=TIMEOUT, env=env
        )
    except subprocess.TimeoutExpired:
        return "FAILED", f"timeout after {TIMEOUT} s"
    seconds = time.perf_counter() - start
    err_lines = [
        line for line in proc.stderr.splitlines() if line and not line.startswith("warning:")
    ]
    if "Traceback" in proc.stderr:
        return "FAILED", proc.stderr.strip().splitlines()[-1]
    if proc.returncode == 2:
        written = (
            [p for p in out_dir.rglob("*") if p.is_file()]
            if out_dir is not None and out_dir.is_dir()
            else []
        )
        if len(err_lines) != 1 or written:
            return "FAILED", f"exit 2 with {len(err_lines)} lines, {len(written)} files"
        return "refused", err_lines[0]
    if proc.returncode != 0:
        return "FAILED", f"exit {proc.returncode}: {proc.stderr.strip()[-200:]}"
    texts = [proc.stdout]
    if out_dir is not None and out_dir.is_dir():
        texts += [p.read_text() for p in out_dir.rglob("*.json")]
    for text in texts:
        if any(word in text for word in ("NaN", "Infinity")):
            return "FAILED", "NaN or Infinity in JSON"
        if text.lstrip().startswith("{"):
            try:
                json.loads(text)
            except json.JSONDecodeError as err:
                return "FAILED", f"invalid JSON: {err}"
    return "ran", f"{seconds:.1f} s"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("corpus", nargs="?", default="../shared/repro/reliability")
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    corpus = Path(args.corpus)
    with tempfile.TemporaryDirectory() as tmp:
        runs = cases(corpus, Path(tmp))
        tally: dict[str, dict[str, int]] = {}
        with ThreadPoolExecutor(args.jobs) as pool:
            # results arrive in order as they finish: print each at once
            for (name, _, _), (kind, detail) in zip(
                runs, pool.map(lambda r: classify(r[1], r[2]), runs)
            ):
                command = name.split()[0]
                tally.setdefault(command, {"ran": 0, "refused": 0, "FAILED": 0})[kind] += 1
                print(f"{kind:8} {name:45} {detail}", flush=True)
    print()
    print(f"{'command':10} {'runs':>5} {'ran':>5} {'refused':>8} {'FAILED':>7}")
    for command, t in tally.items():
        print(f"{command:10} {sum(t.values()):5d} {t['ran']:5d} {t['refused']:8d} {t['FAILED']:7d}")
    total = {k: sum(t[k] for t in tally.values()) for k in ("ran", "refused", "FAILED")}
    print(
        f"{'all':10} {sum(total.values()):5d} {total['ran']:5d} {total['refused']:8d} "
        f"{total['FAILED']:7d}"
    )
    return 1 if total["FAILED"] else 0


if __name__ == "__main__":
    raise SystemExit(main())
