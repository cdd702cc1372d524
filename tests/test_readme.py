"""The README's Python examples run as doctests (issue 11: the documented API works)."""

import doctest
import os
import pathlib
import warnings

from lensdelay.errors import LensdelayWarning

import pytest  # noqa: E402

pytestmark = pytest.mark.integration

ROOT = pathlib.Path(__file__).parent.parent


def test_readme_python_examples(monkeypatch):
    monkeypatch.chdir(ROOT)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        result = doctest.testfile(
            os.fspath(ROOT / "README.md"),
            module_relative=False,
            optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE,
        )
    assert result.attempted >= 8
    assert result.failed == 0
