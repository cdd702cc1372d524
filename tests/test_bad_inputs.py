"""The corpus of broken inputs (issue 6): each file states the one line it must produce.

Every case: exit status 2, exactly one line on stderr naming the file, no traceback,
nothing written to the output folder.
"""

import os
import pathlib

import pytest

from lensdelay.cli.main import main

pytestmark = pytest.mark.integration

HERE = pathlib.Path(__file__).parent / "bad_inputs"
CASES = sorted(HERE.glob("*.toml"))


def expected_of(path):
    first = path.read_bytes().split(b"\n", 1)[0].decode("utf-8")
    assert first.startswith("# expect: ")
    return first[len("# expect: ") :]


def test_corpus_is_large_enough():
    assert len(CASES) >= 40


@pytest.mark.parametrize("path", CASES, ids=[p.stem for p in CASES])
@pytest.mark.parametrize("command", ["check", "forecast"])
def test_bad_input_one_line_exit_2_nothing_written(path, command, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(pathlib.Path(__file__).parent.parent)  # model = "models/..." resolves here
    out = tmp_path / "out"
    argv = [command, str(path)] + (
        ["--out", str(out), "--quiet", "--steps", "50"] if command == "forecast" else []
    )
    code = main(argv)
    captured = capsys.readouterr()
    assert code == 2, captured.err
    assert captured.err.count("\n") == 1, captured.err
    assert "Traceback" not in captured.err
    assert str(path) in captured.err
    assert expected_of(path) in captured.err
    assert not out.exists()


def test_directory_instead_of_file(tmp_path, capsys):
    assert main(["check", str(tmp_path)]) == 2
    assert "is a directory, expected a TOML file" in capsys.readouterr().err


def test_missing_file(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    assert "file does not exist" in capsys.readouterr().err


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root can read any file")
def test_unreadable_file(tmp_path, capsys):
    path = tmp_path / "secret.toml"
    path.write_text("[lens]\nredshift = 0.5\n")
    path.chmod(0)
    assert main(["check", str(path)]) == 2
    assert "cannot be read" in capsys.readouterr().err


def test_existing_outputs_are_not_touched_on_bad_input(tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    keep = out / "forecast.json"
    keep.write_text("earlier result")
    bad = HERE / "transient_bad_date.toml"
    assert main(["forecast", str(bad), "--out", str(out), "--quiet"]) == 2
    assert keep.read_text() == "earlier result"


@pytest.mark.parametrize(
    "call, name",
    [
        (lambda api: api.load_scenario(5), "scenario"),
        (lambda api: api.forecast_scenario(5.0), "scenario"),
        (lambda api: api.fit_scenario(None), "scenario"),
        (lambda api: api.forecast_prepared(7), "prepared"),
        (lambda api: api.measure_delays(curves=3), "light curves"),
        (lambda api: api.infer_joint_h0(12), "catalogue"),
    ],
)
def test_a_path_of_the_wrong_kind_is_one_input_error(call, name):
    """A number or None where a file or folder is expected: an InputError naming the
    argument (was Python's TypeError from pathlib)."""
    from lensdelay import api
    from lensdelay.errors import InputError

    with pytest.raises(InputError, match=f"^{name} must be a path"):
        call(api)
