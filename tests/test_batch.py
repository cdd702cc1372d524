"""``lensdelay batch`` (issue 17): engines agree, failures are rows, reruns resume."""

import pathlib
import shutil
import signal
import subprocess
import sys
import time

import pytest

from lensdelay.io.catalogue import list_systems, system_seed
from lensdelay.cli.main import main

pytestmark = pytest.mark.integration

ROOT = pathlib.Path(__file__).resolve().parent.parent
QUICK = ["--samples", "500", "--steps", "100", "--walkers", "16", "--now", "2026-12-03"]


def _catalogue(folder: pathlib.Path, broken: bool = True) -> pathlib.Path:
    folder.mkdir()
    shutil.copy(ROOT / "scenarios" / "vellmar_quad.toml", folder / "alpha.toml")
    shutil.copy(ROOT / "scenarios" / "ostrin_double.toml", folder / "beta.toml")
    shutil.copytree(ROOT / "models", folder / "models")
    if broken:
        shutil.copy(
            ROOT / "tests" / "bad_inputs" / "duplicate_family_label.toml", folder / "c.toml"
        )
    return folder


def _outputs(out: pathlib.Path) -> dict:
    return {p.relative_to(out): p.read_bytes() for p in sorted(out.rglob("*.json"))} | {
        "summary": (out / "summary.ecsv").read_bytes()
    }


def test_seeds_come_from_the_name_and_the_base_seed():
    assert system_seed("alpha", 1) == system_seed("alpha", 1)
    assert system_seed("alpha", 1) != system_seed("beta", 1)
    assert system_seed("alpha", 1) != system_seed("alpha", 2)


def test_serial_pool_and_dask_give_identical_results_and_a_failure_is_a_row(tmp_path, capsys):
    cat = _catalogue(tmp_path / "cat")
    argv = ["batch", str(cat), "--out", str(tmp_path / "serial"), "--workers", "1", "--quiet"]
    assert main([*argv, *QUICK]) == 0
    serial = _outputs(tmp_path / "serial")
    summary = (tmp_path / "serial" / "summary.ecsv").read_text()
    assert "failed: " in summary and "family[1].label must be unique" in summary
    assert (tmp_path / "serial" / "alpha" / "forecast.json").is_file()
    assert not (tmp_path / "serial" / "c").exists()  # nothing written for the failure
    argv = ["batch", str(cat), "--out", str(tmp_path / "pool"), "--workers", "2", "--quiet"]
    assert main([*argv, *QUICK]) == 0
    assert _outputs(tmp_path / "pool") == serial
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True) as cluster:
        argv = ["batch", str(cat), "--out", str(tmp_path / "dask"), "--quiet"]
        assert main([*argv, "--scheduler", cluster.scheduler_address, *QUICK]) == 0
    assert _outputs(tmp_path / "dask") == serial


def test_rerun_skips_finished_systems(tmp_path, capsys):
    cat = _catalogue(tmp_path / "cat", broken=False)
    out = tmp_path / "out"
    assert main(["batch", str(cat), "--out", str(out), "--quiet", *QUICK]) == 0
    capsys.readouterr()
    stamp = (out / "alpha" / "forecast.json").stat().st_mtime_ns
    shutil.rmtree(out / "beta")
    assert main(["batch", str(cat), "--out", str(out), "--quiet", *QUICK]) == 0
    assert "2 systems (1 done before, 1 now)" in capsys.readouterr().out
    assert (out / "alpha" / "forecast.json").stat().st_mtime_ns == stamp
    assert (out / "beta" / "forecast.json").is_file()


def test_sigterm_mid_batch_then_rerun_finishes_only_the_rest(tmp_path):
    cat = _catalogue(tmp_path / "cat", broken=False)
    copies = 12  # far more systems than a pool has in hand, so work is left however fast
    for k in range(copies):
        shutil.copy(cat / "alpha.toml", cat / f"delta{k:02d}.toml")
    total = copies + 2
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "lensdelay", "batch", str(cat), "--out", str(out), "--quiet"]
    proc = subprocess.Popen([*cmd, *QUICK], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.time() + 120
    while time.time() < deadline and not list(out.glob("*/forecast.json")):
        time.sleep(0.2)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    done = {p.parent.name for p in out.glob("*/forecast.json")}
    assert 1 <= len(done) < total
    for folder in out.iterdir():  # no partial outputs: a system has all its files or none
        if folder.is_dir():
            visible = {p.name for p in folder.iterdir() if not p.name.startswith(".")}
            assert visible == set() or "forecast.json" in visible, visible
    rerun = subprocess.run([*cmd, *QUICK], capture_output=True, text=True, timeout=300)
    assert rerun.returncode == 0, rerun.stderr
    assert f"{total} systems ({len(done)} done before, {total - len(done)} now)" in rerun.stdout
    assert len(list(out.glob("*/forecast.json"))) == total


def test_bad_catalogue_is_one_line(tmp_path, capsys):
    assert main(["batch", str(tmp_path / "missing")]) == 2
    assert "must be a folder of scenario files" in capsys.readouterr().err
    (tmp_path / "empty").mkdir()
    assert main(["batch", str(tmp_path / "empty")]) == 2
    assert "must hold at least one scenario" in capsys.readouterr().err
    cat = _catalogue(tmp_path / "cat", broken=False)
    assert [name for name, _ in list_systems(cat)] == ["alpha", "beta"]
    assert main(["batch", str(cat), "--workers", "0"]) == 2
    assert "--workers must be at least 1" in capsys.readouterr().err
