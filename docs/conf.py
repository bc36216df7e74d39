"""Sphinx configuration of the aspectus documentation (built by tests/test_docs.py with warnings as errors)."""
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from aspectus import __version__  # noqa: E402

project = "aspectus"
author = "the aspectus developers"
copyright = "the aspectus developers, GPL-3.0-or-later"
version = release = __version__

extensions = ["sphinx.ext.autodoc", "numpydoc", "sphinx.ext.viewcode"]
# everything is built from the docstrings as written; nothing is downloaded (no intersphinx)
autodoc_member_order = "bysource"
autodoc_typehints = "none"  # numpydoc's Parameters sections give the types
autodoc_default_options = {"members": False}
numpydoc_show_class_members = False
numpydoc_class_members_toctree = False
numpydoc_xref_param_type = False
numpydoc_validation_checks = set()
# the statistics module lists its references once, in the module docstring, and its functions cite
# them by number: keep the labels as written so they resolve on the page (numpydoc would rename them
# per docstring)
numpydoc_citation_re = "(?!x)x"
default_role = "code"  # `name` renders as code, never a broken reference
nitpicky = False

exclude_patterns = ["_build", "tutorials/*.py"]
html_theme = "alabaster"
html_static_path = []
html_title = f"aspectus {version}"
