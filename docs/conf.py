"""Sphinx configuration: the topic pages, the generated API reference (api.md, from the
docstrings by tools/gen_docs.py), the methods table and the figure gallery, all Markdown.

Build (warnings are errors):  python -m sphinx -W -b html docs docs/_build/html
"""

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))

import eddyhop  # noqa: E402

project = "eddyhop"
author = "The eddyhop developers"
copyright = "2026, The eddyhop developers"
release = version = eddyhop.__version__
extensions = ["myst_parser", "sphinx.ext.doctest"]
source_suffix = {".md": "markdown"}
exclude_patterns = ["_build"]
myst_heading_anchors = 3
myst_enable_extensions = ["dollarmath"]
html_theme = "alabaster"
suppress_warnings = ["myst.xref_missing"]  # links to repository files outside docs/
