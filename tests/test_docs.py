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


def _toml_blocks(page):
    return re.findall(r"```toml\n(.*?)```", page.read_text(), flags=re.S)


def test_the_formats_page_examples_are_valid_input(tmp_path, monkeypatch):
    """The scenario, model and members examples of docs/formats.md are read as they stand
    (the scenario with the model file it names; the members table with a catalogue)."""
    from lensdelay.io.reading import load_model, load_scenario

    monkeypatch.chdir(ROOT)
    scenario, model, members = _toml_blocks(ROOT / "docs" / "formats.md")[:3]
    path = tmp_path / "scenario.toml"
    path.write_text(scenario.replace('"models/sie_shear.toml"', f'"{ROOT}/models/sie_shear.toml"'))
    sc, _ = load_scenario(path)
    assert sc.transient.seen_in == "A" and sc.delays[0].days == 26.8
    (tmp_path / "model.toml").write_text(model)
    assert load_model(tmp_path / "model.toml")[0].n_free() == 4  # θE, q, angle, x
    (tmp_path / "members.csv").write_text("id,x,y,mag\nG1,3.0,1.0,20.5\nG2,-4.0,2.0,21.0\n")
    path.write_text(path.read_text() + members.replace('"members.ecsv"', '"members.csv"'))
    sc, _ = load_scenario(path)
    assert sc.model.members is not None


def test_closing_line_names_files_and_what_to_open():
    """Every command ends with what it wrote and what to open next (issue 29, item 6)."""
    from lensdelay.cli.options import written_line

    names = ["forecast.ecsv", "timeline.png", "timeline.pdf", "sky.png", "sky.pdf", "x.json"]
    line = written_line("out/v", names, [("timeline.png", "the dates")], "--report adds a page")
    assert line == (
        "wrote out/v: forecast.ecsv, timeline.png/pdf, sky.png/pdf, x.json; "
        "open timeline.png (the dates); --report adds a page"
    )
