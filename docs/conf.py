"""Sphinx configuration of tilewright's documentation site (`make docs`).

Sphinx + numpydoc reads the numpydoc docstrings the code already has (Parameters, Returns,
Raises, References); MyST lets the user-guide pages be Markdown, so the README's blocks and the
pages' blocks are walked by the same test (``tests/newcomer``). The build is offline: no
intersphinx, no remote fonts, no analytics.
"""

from importlib.metadata import version as _version

project = "tilewright"
author = "tilewright developers"
copyright = "2026, tilewright developers"
release = _version("tilewright")
version = ".".join(release.split(".")[:2])

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.autosummary",
    "numpydoc",
    "myst_parser",
]
source_suffix = {".md": "markdown", ".rst": "restructuredtext"}
root_doc = "index"
exclude_patterns = ["_build", "api/generated/*.md"]

# API reference: one page a public name, generated from the docstrings at build time.
autosummary_generate = True
autodoc_typehints = "none"            # the numpydoc sections already give types in prose
numpydoc_show_class_members = False   # each class page lists its members through autosummary
numpydoc_class_members_toctree = False
myst_enable_extensions = ["colon_fence", "deflist"]
myst_heading_anchors = 3

html_theme = "pydata_sphinx_theme"
html_title = "tilewright"
html_theme_options = {
    "navigation_with_keys": False,
    "show_prev_next": True,
    "footer_start": ["copyright"],
    "footer_end": [],
}
html_static_path = []
