"""Sphinx settings of pathfinder's documentation (built offline, warnings as errors).

Build: python -m sphinx -W --keep-going -b html docs docs/_build/html
"""

import pathlib
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

project = "pathfinder"
author = "the pathfinder developers"
copyright = "the pathfinder developers"

from pathfinder import __version__ as release  # noqa: E402

version = release

extensions = ["myst_parser", "sphinx.ext.autodoc", "sphinx.ext.napoleon"]
source_suffix = {".md": "markdown"}
root_doc = "index"
exclude_patterns = ["_build"]
myst_heading_anchors = 3

# The API reference reads docstrings; annotations are shown in the signature.
autodoc_typehints = "signature"
autodoc_member_order = "bysource"
autodoc_default_options: dict = {}
napoleon_numpy_docstring = True
napoleon_google_docstring = False

# Offline: the built-in theme, no web fonts, no links fetched.
html_theme = "alabaster"
html_theme_options = {"show_powered_by": False}
html_title = f"pathfinder {release}"
html_static_path: list = []
