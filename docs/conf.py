"""Sphinx configuration of the qgradlib documentation site.

Build it with warnings as errors, from the repository root:

    python -m pip install ".[docs]"
    python -m sphinx -W -b html docs build/docs

The guide pages are the Markdown files beside this one (read by MyST); the API reference is
generated at build time from the package's public names (``_ext/qgl_api.py``); the example
notebooks in ``examples/`` are stored without outputs and executed during the build.
"""
import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
# document (and run the notebooks against) this checkout's qgradlib, installed or not; the
# notebook kernels are child processes, so they get it through PYTHONPATH
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE / "_ext"))
os.environ["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + [p for p in
                                           os.environ.get("PYTHONPATH", "").split(os.pathsep) if p])
os.environ.setdefault("MPLBACKEND", "Agg")

import qgradlib  # noqa: E402

project = "qgradlib"
author = "the qgradlib developers"
copyright = "the qgradlib developers"
release = version = qgradlib.__version__

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.autosummary",
    "numpydoc",
    "myst_nb",          # reads the Markdown pages (MyST) and the notebooks
    "qgl_api",          # writes api/*.rst from the public names before the sources are read
]

root_doc = "index"
exclude_patterns = ["_build", "_ext", "**/.ipynb_checkpoints", "img/*.md"]
source_suffix = {".md": "myst-nb", ".ipynb": "myst-nb", ".rst": "restructuredtext"}
# `name` in a docstring links to the object where one of that name is documented
default_role = "py:obj"

# -- API reference -------------------------------------------------------------------------
autodoc_default_options = {"member-order": "bysource"}
autodoc_typehints = "none"             # numpydoc sections carry the types
autosummary_generate = False           # qgl_api writes the pages itself
numpydoc_show_class_members = False    # members are documented by autodoc below the class
numpydoc_class_members_toctree = False
numpydoc_xref_param_type = False
# a public name without a docstring fails the -W build
numpydoc_validation_checks = {"GL08"}
# members that need no docstring of their own: dunder methods and dataclass internals
numpydoc_validation_exclude = {r"\.__\w+__$"}

# -- Markdown pages and notebooks ------------------------------------------------------------
myst_heading_anchors = 3
suppress_warnings = ["myst.header"]    # the guide pages start their sections at level 2
nb_execution_mode = "force"            # the notebooks are stored without outputs: run them
nb_execution_raise_on_error = True     # a failing cell fails the build
nb_execution_timeout = 300
nb_execution_show_tb = True
nb_merge_streams = True

# -- HTML ----------------------------------------------------------------------------------------
html_theme = "pydata_sphinx_theme"
html_title = f"qgradlib {release}"
html_static_path = ["_static"]
html_css_files = ["qgl.css"]
html_theme_options = {
    "navbar_align": "left",
    "show_toc_level": 2,
    "navigation_with_keys": False,
    "secondary_sidebar_items": ["page-toc"],
    "footer_start": ["copyright"],
    "footer_end": [],
}
html_sidebars = {"**": ["sidebar-nav-bs"]}
html_show_sourcelink = False
