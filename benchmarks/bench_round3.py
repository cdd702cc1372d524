"""The round-3 break test's cases through the command line (issue 25). Prints counts.

Builds the break test's work area from its own scripts (``../shared/repro/round3``:
light curves, delays.json variants, scenario variants, tampered prepared lenses and
reports), then runs its cases. Each run is classed as

- ``ok``: exit 0 (or the expected refusal), no traceback, and the output holds what the
  case needs to be right (``want``) and nothing it must not (``never``);
- ``refused``: exit 2 with one line on stderr (warnings aside), no traceback;
- ``FAILED``: anything else: a traceback, another exit code, a refusal of more than one
  line, a wrong answer (``want``/``never``), a timeout.

Run from the project root:

    python benchmarks/bench_round3.py [--repro ../shared/repro/round3] [--work DIR]
"""

from __future__ import annotations

import argparse
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
Q = ["--steps", "300", "--walkers", "16", "--simulations", "0"]
F = ["--samples", "2000", "--steps", "300", "--walkers", "16", "--now", "2026-12-04", "--quiet"]
T = ["--transient", "sn/B=2026-12-20±1", "--samples", "2000", "--quiet", "--no-budget"]
B = ["--samples", "2000", "--steps", "300", "--walkers", "16", "--quiet", "--now", "2026-12-04"]
TIMEOUT = 900


def L(*argv) -> list[str]:
    return [sys.executable, "-m", "lensdelay.cli.main", *argv]


def build(repro: Path, work: Path) -> None:
    """The work area of the break test (its setup.sh, in Python)."""
    for sub in ("scen", "models", "out", "lenses", "curves", "dj"):
        (work / sub).mkdir(parents=True, exist_ok=True)
    for p in (ROOT / "scenarios").iterdir():
        if p.is_file():
            shutil.copy(p, work / "scen")
    for p in (ROOT / "models").iterdir():
        shutil.copy(p, work / "models")
    shutil.copytree(ROOT / "models", work / "scen" / "models", dirs_exist_ok=True)
    py = sys.executable
    subprocess.run([py, repro / "gen_curves.py", work / "curves"], check=True, capture_output=True)
    subprocess.run([py, repro / "gen_delays.py", work / "dj"], check=True, capture_output=True)
    subprocess.run([py, repro / "gen_vq_curves.py", work / "scen"], check=True)
    subprocess.run([py, repro / "gen_scen.py", work], check=True, capture_output=True)
    subprocess.run(
        [py, repro / "gen_sn_multiband.py", work / "curves/sn_3band_sameNight.csv", "3", "0.01"],
        check=True,
    )
    old = repro.parent / "reliability"
    shutil.copy(old / "five_sie.toml", work / "scen")
    shutil.copytree(old / "models", work / "scen" / "models", dirs_exist_ok=True)
    cat2 = work / "cat2"
    cat2.mkdir(exist_ok=True)
    shutil.copytree(ROOT / "models", cat2 / "models", dirs_exist_ok=True)
    for name in ("vellmar_quad.toml", "ostrin_double.toml"):
        shutil.copy(ROOT / "scenarios" / name, cat2)


def cases():
    """(id, argv, want, never): ``want``/``never`` are texts the output must / must not hold."""
    c = []
    add = lambda i, argv, want=(), never=(): c.append((i, argv, want, never))  # noqa: E731
    # 1. delays
    add("D1", L("delays", "curves/q_time_years.ecsv", *Q), ["+21."])
    add("D1s", L("delays", "curves/q_time_seconds.ecsv", *Q), ["+21."])
    add("D2", L("delays", "curves/q_magerr_mmag.ecsv", *Q), ["+21."])
    add("D3", L("delays", "curves/q_timecol_mjd.ecsv", *Q), ["+21."])
    add("D4", L("delays", "curves/q_date_offset.csv", *Q), ["+21."])
    add("D5", L("delays", "curves/q_limit_err0.csv", *Q), ["+21."])
    add("D5e", L("delays", "curves/q_limit_err_empty.csv", *Q), ["+21."])
    add("D6", L("delays", "curves/f_limit_negflux.csv", *Q))
    add("D9", L("delays", "curves/q_band_noref.csv", *Q))
    add("D10", L("delays", "curves/q_band_C_only_g.csv", *Q), ["C"])
    add("D11", L("delays", "scen/vq_curves_Clim.toml", "--steps", "500", "--simulations", "0"),
        ["only upper limits"])
    add("D12", L("delays", "curves/q2.csv", *Q, "--max-delay", "10"), ["not measurable"])
    add("D13", L("delays", "curves/q2.csv", *Q, "--max-delay=0"))
    add("D13n", L("delays", "curves/q2.csv", *Q, "--max-delay=-5"))
    add("D14", L("delays", "curves/sn_disjoint_bands.csv", "--steps", "500"), ["not measurable"])
    add("D14q", L("delays", "curves/sn_disjoint_bands.csv", *Q), ["not measurable"])
    add("D15", L("delays", "curves/sn_3band_sameNight.csv", "--simulations", "0"), ["+11."],
        ["not measurable"])
    add("D18", L("delays", "curves/q2.csv", "--seed", "-1"))
    add("D19", L("forecast", "scen/vq_early.toml", *F), ["no measurable delay yet"])
    add("D20", L("forecast", "scen/vq_curves.toml", *F))
    # 2. delays.json
    for name in ("images_dict", "images_strings", "median_nan", "median_inf", "p84_below_p16",
                 "zero_width", "ref_Z", "cov_nan", "cov_asym", "cov_negdiag", "cov_not_pd",
                 "dup_D"):
        add(f"E-{name}", L("forecast", "scen/vellmar_quad.toml", *F, "--delays", f"dj/{name}.json"))
    add("E3h", L("hubble", "scen/vellmar_quad.toml", "--steps", "300", "--walkers", "16",
                 "--quiet", "--delays", "dj/zero_width.json"))
    add("E9", L("forecast", "scen/ostrin_double.toml", *F, "--delays", "dj/ostrin_same.json"))
    add("E10", L("forecast", "scen/vellmar_quad.toml", *F, "--delays", "dj/cov_inconsistent.json"),
        ["the covariance is used"])
    # 3. report, regions, maps
    add("R5", L("check", "scen/reglabels.toml"))
    add("R7", L("maps", "scen/vellmar_quad.toml", "--samples", "5000", "--steps", "300",
                "--walkers", "16", "--quiet", "--out", "out/m"))
    # 4. prepared lenses
    for name in ("chain_swapped", "json_edit", "json_shaempty_scen_edit", "chain_trunc",
                 "chain_missing", "json_list", "json_nofit", "json_watched", "scen_edit"):
        add(f"P-{name}", L("forecast", f"lenses/t_{name}", *T, "--now", "2026-12-21"))
    add("P5", L("forecast", "lenses/vq", "--transient", "sn/B=9999-12-25", "--samples", "2000",
                "--quiet"))
    add("P5b", L("forecast", "lenses/vq", "--transient", "sn/B=0001-01-05", "--samples", "2000",
                 "--quiet"))
    add("P5c", L("forecast", "scen/vq_9999.toml", *F))
    add("P6", L("forecast", "lenses/vq", "--transient", "sn/B=2026-12-20±1e9", "--quiet"))
    add("P9", L("forecast", "lenses/vq", "--samples", "2000", "--now", "2026-12-04", "--quiet",
                "--cosmology", "Planck18", "--no-budget"), ["+10.9"])
    # 5. batch
    add("B1", L("batch", "cat2", "--out", "out/b", *B, "--seed", "-1"))
    add("B2", L("batch", "cat2", "--out", "out/b", "--workers", "1", "--samples", "-5"))
    add("B2s", L("batch", "cat2", "--out", "out/b", "--workers", "1", "--steps", "0"))
    add("B5", L("batch", "cat2", "--out", "out/s", *B, "--scheduler", "tcp://127.0.0.1:{port}"))
    add("B6", L("batch", "cat2", "--scheduler", "not a url", *B))
    # 6. clusters
    add("C1", L("check", "scen/kz_minmax_eq.toml"))
    add("C2b", L("check", "scen/kz_prior_only.toml"))
    add("C3", L("check", "scen/m_dupid.toml"))
    add("C4", L("check", "scen/m_idnum.toml"), ["+ 1 member"])
    add("C5", L("check", "scen/m_arcmin.toml"))
    add("C8", L("check", "scen/m_3000.toml"), ["3000 member galaxies"])
    # 7. sightings
    add("S1", L("forecast", "scen/five_sie.toml", "--samples", "2000", "--quiet", "--now",
                "2027-03-01", "--seen", "sn/E=2027-02-15", "--steps", "300", "--walkers", "16"),
        ["cannot produce the measurements"])
    add("S2", L("forecast", "lenses/vq", *T, "--now", "2027-01-10", "--seen", "sn/A=2024-12-20"),
        ["detection image's own date"])
    add("S3", L("forecast", "lenses/vq", *T, "--now", "2026-12-25", "--seen", "sn/D=2027-01-05"))
    return c


def silent_server():
    """A TCP server that accepts connections and never answers (the break test's black hole)."""
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(16)
    held = []

    def loop():
        while True:
            try:
                held.append(server.accept()[0])
            except OSError:
                return

    threading.Thread(target=loop, daemon=True).start()
    return server, server.getsockname()[1]


def classify(code, out, err, want, never) -> str:
    if "Traceback" in err or code not in (0, 2):
        return "FAILED"
    text = out + err
    if code == 2:
        lines = [x for x in err.splitlines() if x and not x.startswith("lensdelay: warning:")]
        return "refused" if len(lines) == 1 else "FAILED"
    if any(w not in text for w in want) or any(n in text for n in never):
        return "FAILED"
    return "ok"


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repro", default=str(ROOT.parent / "shared" / "repro" / "round3"))
    parser.add_argument("--work", default=None)
    args = parser.parse_args()
    repro = Path(args.repro).resolve()
    work = Path(args.work or tempfile.mkdtemp(prefix="round3-")).resolve()
    build(repro, work)
    env_run = dict(cwd=work, capture_output=True, text=True, timeout=TIMEOUT)
    # the prepared lenses, then the tampered copies, as the break test made them
    for scen, name in (("vellmar_quad", "vq"), ("vq_scaled", "vq_scaled")):
        subprocess.run(L("prepare", f"scen/{scen}.toml", "--out", f"lenses/{name}", "--steps",
                         "300", "--walkers", "16", "--quiet"), check=True, **env_run)
    subprocess.run([sys.executable, repro / "tamper_prepared.py"], check=True, **env_run)
    server, port = silent_server()
    counts = {"ok": 0, "refused": 0, "FAILED": 0}
    start = time.time()
    for ident, argv, want, never in cases():
        argv = [a.replace("{port}", str(port)) for a in argv]
        t0 = time.time()
        try:
            run = subprocess.run(argv, **env_run)
            verdict = classify(run.returncode, run.stdout, run.stderr, want, never)
            last = (run.stderr.strip().splitlines() or [""])[-1][:140]
        except subprocess.TimeoutExpired:
            verdict, last = "FAILED", f"timeout after {TIMEOUT} s"
        counts[verdict] += 1
        print(f"{ident:<26} {verdict:<8} {time.time() - t0:6.1f} s  {last}", flush=True)
    server.close()
    print(
        f"\n{sum(counts.values())} cases: {counts['ok']} ran right, {counts['refused']} refused "
        f"in one line, {counts['FAILED']} failed ({time.time() - start:.0f} s; work area {work})"
    )
    return 1 if counts["FAILED"] else 0


if __name__ == "__main__":
    sys.exit(main())
