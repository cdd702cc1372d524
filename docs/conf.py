"""Sphinx configuration of the lensdelay documentation (built in CI with warnings as errors)."""

from __future__ import annotations

import os
import sys

sys.path.insert(0, os.path.abspath(".."))

from lensdelay.version import __version__  # noqa: E402

project = "lensdelay"
author = "the lensdelay developers"
copyright = "2026, the lensdelay developers"
version = release = __version__

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.autosummary",
    "sphinx.ext.mathjax",
    "sphinx.ext.viewcode",
    "numpydoc",
    "myst_parser",
]
source_suffix = {".rst": "restructuredtext", ".md": "markdown"}
myst_enable_extensions = ["dollarmath"]
myst_heading_anchors = 3  # links to a page's sections (formats.md#light-curves)
suppress_warnings = ["myst.header"]  # pages moved from the README start at level 2 in places
autosummary_generate = True
autodoc_typehints = "none"  # numpydoc's Parameters sections say the types
numpydoc_show_class_members = False
numpydoc_class_members_toctree = False
numpydoc_xref_param_type = False
exclude_patterns = ["_build"]
templates_path = ["_templates"]
html_theme = "furo"
html_title = f"lensdelay {version}"
html_static_path: list[str] = []
# no network: nothing is fetched while building (intersphinx stays off). The pages'
# Python examples run in the test suite (tests/test_docs.py), from the repository's top.
