"""Sphinx configuration of the API reference (generated from the docstrings).

Build:  pip install ".[docs]" && python -m sphinx -b html docs/api build/api
"""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import compquant  # noqa: E402

project = "compquant"
author = "compquant developers"
release = version = compquant.__version__
extensions = ["sphinx.ext.autodoc", "sphinx.ext.napoleon", "sphinx.ext.viewcode"]
autodoc_default_options = {"members": True, "show-inheritance": True}
autodoc_member_order = "bysource"
autodoc_typehints = "description"
napoleon_numpy_docstring = True
html_theme = "alabaster"
exclude_patterns = ["_build"]
nitpicky = False
