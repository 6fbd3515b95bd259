"""Sphinx configuration of rtrace's documentation (``make docs``; built with ``-W``, so a warning fails the build)."""

import pathlib
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import rtrace  # noqa: E402  (the path above first)

project = "rtrace"
author = "the rtrace developers"
copyright = "2026, the rtrace developers"
release = version = rtrace.__version__

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.autosummary",
    "sphinx.ext.mathjax",
    "numpydoc",
    "myst_parser",
]
source_suffix = {".rst": "restructuredtext", ".md": "markdown"}
exclude_patterns = ["_build", "_gallery"]
root_doc = "index"

autosummary_generate = True
autodoc_typehints = "none"
autodoc_member_order = "bysource"
numpydoc_show_class_members = False  # autosummary lists them
numpydoc_class_members_toctree = False
numpydoc_xref_param_type = False
myst_heading_anchors = 3
myst_enable_extensions = ["dollarmath"]
# the guide's pages are the README's "##" sections under a page title, so their "###" subsections
# come right after the title: a heading level skipped by design, not an error
suppress_warnings = ["myst.header"]

html_theme = "alabaster"
html_title = f"rtrace {release}"
html_static_path = []
