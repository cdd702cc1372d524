"""The documentation's Python examples run as doctests, and its pages link only to pages
that exist (issue 29: the documented API works; a newcomer finds every format here)."""

import doctest
import os
import pathlib
import re
import warnings

import pytest

from lensdelay.errors import LensdelayWarning

pytestmark = pytest.mark.integration

ROOT = pathlib.Path(__file__).parent.parent
PAGES = sorted((ROOT / "docs").glob("*.md"))


@pytest.mark.parametrize(
    "page", [p for p in PAGES if ">>> " in p.read_text()], ids=lambda p: p.name
)
def test_python_examples_run(page, monkeypatch):
    monkeypatch.chdir(ROOT)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        result = doctest.testfile(
            os.fspath(page),
            module_relative=False,
            optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE,
        )
    assert result.attempted >= 1
    assert result.failed == 0


def test_the_python_page_has_its_examples():
    text = (ROOT / "docs" / "python.md").read_text()
    assert text.count(">>> ") >= 8


@pytest.mark.parametrize("page", [ROOT / "README.md", *PAGES], ids=lambda p: p.name)
def test_links_to_pages_and_files_exist(page):
    """Every relative link of a page (README included) names a file of the repository."""
    for target in re.findall(r"\]\(([^)#:]+)(?:#[^)]*)?\)", page.read_text()):
        assert (page.parent / target).exists(), f"{page.name} links to {target}"


def test_every_input_format_is_documented():
    """The file formats a user writes are all on the formats page."""
    text = (ROOT / "docs" / "formats.md").read_text()
    for heading in (
        "## Scenario",
        "## Mass model",
        "## Member catalogue",
        "## Light curves",
        "## Measured delays",
        "## Forecast",
        "## Prepared lens",
        "## Catalogue",
    ):
        assert heading in text
