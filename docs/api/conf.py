"""Sphinx configuration of the API reference (generated from the docstrings).

Build:  pip install ".[docs]" && python -m sphinx -b html docs/api build/api
"""

import hashlib
import re
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


# --- numpydoc "References" under napoleon ---------------------------------------------------------
# Every public docstring has a numpydoc References section with ``.. [1]``-style citations.  Several
# docstrings share one page, and docutils/Sphinx want citation labels unique, so each docstring's
# labels are prefixed with a tag of its object's name (as numpydoc's ``rename_references`` does) and
# shown again as the plain number in the built page (numpydoc's ``relabel_references``).
_CITATION = re.compile(r"^(\s*)\.\. \[(\d+)\]")
_CITED = re.compile(r"\[(\d+)\]_")
_TAGGED = re.compile(r"R[0-9a-f]{8}-(\d+)")


def _unique_citations(app, what, name, obj, options, lines):
    tag = "R" + hashlib.sha1(name.encode()).hexdigest()[:8] + "-"
    for i, line in enumerate(lines):
        line = _CITATION.sub(lambda m: f"{m.group(1)}.. [{tag}{m.group(2)}]", line)
        lines[i] = _CITED.sub(lambda m: f"[{tag}{m.group(1)}]_", line)


def _relabel_citations(app, doctree):
    from docutils import nodes
    from sphinx import addnodes

    for cit in doctree.findall(nodes.citation):
        m = _TAGGED.fullmatch(cit[0].astext())
        if m:
            cit[0].replace(cit[0][0], nodes.Text(m.group(1)))
    for ref in doctree.findall(addnodes.pending_xref):
        m = _TAGGED.fullmatch(ref.get("reftarget", ""))
        if ref.get("refdomain") == "citation" and m:
            ref.children = [nodes.inline("", f"[{m.group(1)}]")]


# the citations are a reference list, not cited from the text: Sphinx's "not referenced" note is noise
suppress_warnings = ["ref.citation"]


def setup(app):
    app.connect("autodoc-process-docstring", _unique_citations)
    app.connect("doctree-read", _relabel_citations)
