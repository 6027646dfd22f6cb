"""Sphinx configuration of the setkit documentation (build: sphinx-build -W -b html docs docs/_build/html)."""
import os
import sys

sys.path.insert(0, os.path.abspath(".."))

project = "setkit"
author = "the setkit contributors"
copyright = "2026, the setkit contributors"
extensions = ["sphinx.ext.autodoc", "sphinx.ext.autosummary", "sphinx.ext.napoleon", "sphinx.ext.mathjax"]
autosummary_generate = True
autodoc_typehints = "none"
autodoc_member_order = "bysource"
napoleon_numpy_docstring = True
napoleon_google_docstring = False
napoleon_use_rtype = False
exclude_patterns = ["_build"]
html_theme = "alabaster"
html_static_path = []
suppress_warnings = ["autosummary.import_cycle"]
