"""Faults and reproducibility (issue 6): interrupted sampling, resume, degenerate geometry."""

import json
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import IsothermalEllipsoid, NFWHalo
from lensdelay.lensing.critical import critical_lines
from lensdelay.atomic import load_npz
from lensdelay.io.storage import atomic_write_json

pytestmark = pytest.mark.integration

DOUBLE = """
[lens]
redshift = 0.4
[[family]]
label = "q"
redshift = 2.0
[[family.image]]
label = "A"
x = 1.25
y = 0.02
sigma = 0.003
[[family.image]]
label = "B"
x = -0.74
y = -0.01
sigma = 0.003
[[mass]]
profile = "SIS"
einstein_radius = { value = 1.0, min = 0.2, max = 3.0, prior = [1.0, 0.5] }
[[mass]]
profile = "shear"
strength = { value = 0.02, min = 0.0, max = 0.3, prior = [0.02, 0.02] }
position_angle = { value = 0.0 }
"""


def _run(args, **kw):
    return subprocess.Popen(
        [sys.executable, "-m", "lensdelay", *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        **kw,
    )


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT])
def test_signal_during_sampling_keeps_checkpoint_and_resume_matches(tmp_path, sig):
    """A real signal mid-sampling leaves chain.npz and no fit.json; --resume then gives the
    same samples as an uninterrupted run with the same seed."""
    scen = tmp_path / "double.toml"
    scen.write_text(DOUBLE)
    args = [
        "fit",
        str(scen),
        "--sample",
        "--steps",
        # long enough that the signal arrives mid-sampling; a chain that has not mixed
        # runs on (sampling.EXTEND_FACTOR), and the resumed run must follow it exactly
        "2400",
        "--walkers",
        "12",
        "--seed",
        "3",
        "--quiet",
    ]
    full = _run(args + ["--out", str(tmp_path / "full")])
    assert full.wait(timeout=300) == 0, full.stderr.read()
    part = tmp_path / "part"
    proc = _run(args + ["--out", str(part)])
    deadline = time.time() + 120
    while not (part / "chain.npz").exists() and time.time() < deadline:
        time.sleep(0.05)
    proc.send_signal(sig)
    code = proc.wait(timeout=60)
    err = proc.stderr.read()
    if code == 0:
        pytest.skip("the run finished before the signal arrived")
    assert code == 130 and "interrupted" in err and "Traceback" not in err
    assert (part / "chain.npz").exists()
    assert not (part / "fit.json").exists() and not (part / "samples.npz").exists()
    assert not [p for p in part.iterdir() if p.name.endswith(".part")]
    resumed = _run(args + ["--out", str(part), "--resume"])
    assert resumed.wait(timeout=300) == 0, resumed.stderr.read()
    a = load_npz(tmp_path / "full" / "samples.npz")["samples"]
    b = load_npz(part / "samples.npz")["samples"]
    np.testing.assert_array_equal(a, b)


def test_json_never_holds_nan(tmp_path):
    """Non-finite numbers are written as null, never as NaN (RFC 8259 has no NaN)."""
    atomic_write_json(
        tmp_path / "x.json", {"a": float("nan"), "b": [np.inf, 1.0], "c": np.float64(2)}
    )
    doc = json.loads((tmp_path / "x.json").read_text())
    assert doc == {"a": None, "b": [None, 1.0], "c": 2.0}


@pytest.mark.parametrize(
    "lens",
    [
        Lens((IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=1.0),)),
        Lens((IsothermalEllipsoid(einstein_radius=1.0, axis_ratio=0.7, core=0.1),)),
        Lens((NFWHalo(kappa_s=0.6, scale_radius=3.0),)),
    ],
    ids=["round", "cored", "NFW"],
)
def test_degenerate_sources_give_finite_images(lens):
    """A source at r = 0, at q = 1, and on a caustic: finite numbers, never NaN."""
    lines = critical_lines(lens, extent=3.0)
    cx = np.concatenate([c.caustic_x for c in lines])[:5]
    cy = np.concatenate([c.caustic_y for c in lines])[:5]
    t = find_images(lens, np.r_[0.0, cx], np.r_[0.0, cy])
    for name in ("x", "y", "fermat"):
        assert np.all(np.isfinite(getattr(t, name)))
    assert not np.any(np.isnan(t.magnification))


def test_outputs_keep_the_users_umask_and_identical_runs_give_identical_files(
    tmp_path, quick_forecast_args
):
    """Files are created as 0666 minus the umask (POSIX open(2)), not 0600, and two runs
    with the same inputs, seed and --now write byte-identical files, PDF and .ics included."""
    import os

    from lensdelay.cli.main import main

    old = os.umask(0o022)
    try:
        outs = [tmp_path / "a", tmp_path / "b"]
        for out in outs:
            assert (
                main(["forecast", "scenarios/ostrin_double.toml", *quick_forecast_args(out)]) == 0
            )
    finally:
        os.umask(old)
    for name in ("forecast.json", "forecast.ics", "timeline.pdf", "timeline.png", "forecast.ecsv"):
        a, b = outs[0] / name, outs[1] / name
        assert (a.stat().st_mode & 0o777) == 0o644, name
        assert a.read_bytes() == b.read_bytes(), name


@pytest.mark.parametrize("case", ["under_a_file", "dangling_link", "read_only"])
def test_out_problems_are_found_before_computing(tmp_path, capsys, case):
    """--out is checked before the fit and the sampler run: one line, exit 2."""
    import os

    from lensdelay.cli.main import main

    if case == "under_a_file":
        (tmp_path / "file").write_text("x")
        out = tmp_path / "file" / "sub"
    elif case == "dangling_link":
        out = tmp_path / "link"
        out.symlink_to(tmp_path / "nowhere")
    else:
        if os.geteuid() == 0:
            pytest.skip("root writes to read-only folders")
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        out = ro / "out"
    assert main(["forecast", "scenarios/vellmar_quad.toml", "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("lensdelay: --out must be") and err.count("\n") == 1


def test_output_set_is_replaced_as_a_whole(tmp_path, quick_forecast_args):
    """A rerun with fewer outputs removes the older run's extra files (--no-budget drops the
    budget figures); a leftover .part file is cleared; another command's files and the
    sampler checkpoint in the same folder are left alone (issue 12, item 4)."""
    from lensdelay.cli.main import main

    out = tmp_path / "out"
    common = quick_forecast_args(out)
    assert main(["forecast", "scenarios/ostrin_double.toml", *common]) == 0
    assert (out / "budget.png").exists()
    (out / ".forecast.json.abc.part").write_text("leftover")
    (out / "fit.json").write_text("{}")  # another command's output
    (out / "chain.npz").write_bytes(b"x")  # a checkpoint
    assert main(["forecast", "scenarios/ostrin_double.toml", *common, "--no-budget"]) == 0
    assert not (out / "budget.png").exists() and not (out / "budget.pdf").exists()
    assert not (out / ".forecast.json.abc.part").exists()
    assert (out / "fit.json").exists() and (out / "chain.npz").exists()
    assert not list(out.glob(".lensdelay-staging-*"))
    assert (out / "forecast.json").exists() and (out / "timeline.png").exists()


def test_full_disk_is_one_line_and_leaves_the_previous_outputs(
    tmp_path, capsys, monkeypatch, quick_forecast_args
):
    """ENOSPC while writing: one line naming the folder, exit 2, the earlier set intact."""
    import errno

    import lensdelay.io.storage as storage
    from lensdelay.cli.main import main

    out = tmp_path / "out"
    common = quick_forecast_args(out)
    assert main(["forecast", "scenarios/ostrin_double.toml", *common]) == 0
    before = {p.name: p.read_bytes() for p in out.iterdir() if p.is_file()}
    capsys.readouterr()

    def full_disk(path, data):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(storage, "atomic_write_bytes", full_disk)
    assert main(["forecast", "scenarios/ostrin_double.toml", *common, "--seed", "2"]) == 2
    err = capsys.readouterr().err
    assert "No space left on device" in err and err.count("\n") == 1
    after = {p.name: p.read_bytes() for p in out.iterdir() if p.is_file()}
    assert after == before
    assert not list(out.glob(".lensdelay-staging-*"))
