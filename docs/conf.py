"""Sphinx settings for chipflow's documentation (API pages from the numpydoc docstrings)."""

import os
import sys

sys.path.insert(0, os.path.abspath(".."))

project = "chipflow"
author = "chipflow contributors"
copyright = "chipflow contributors, MIT license"
extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.napoleon",  # numpydoc-style sections
    "sphinx.ext.doctest",
]
napoleon_google_docstring = False
napoleon_numpy_docstring = True
napoleon_use_rtype = False
autodoc_default_options = {"members": True, "show-inheritance": False}
autodoc_member_order = "bysource"
autodoc_typehints = "none"  # the docstrings give types and units
exclude_patterns = ["_build"]
html_theme = "alabaster"
html_static_path: list[str] = []
# a name exported from two modules is documented once; illustrative TOML with "..." in it
# cannot be coloured, which is no defect of the page
suppress_warnings = ["ref.python", "misc.highlighting_failure"]
