"""Sphinx configuration of the API reference (built from the docstrings).

Build: ``python -m sphinx -W --keep-going -b html docs/api docs/_build/api`` (the ``docs``
extras of pyproject.toml); .ci/run builds it and fails on any warning.
"""

import importlib
import inspect
import re
import sys

import fusion

project = "fusion"
version = release = fusion.__version__
extensions = ["sphinx.ext.autodoc", "numpydoc"]
exclude_patterns = ["_build"]
# every cross-reference must resolve; outside libraries are not built here (no intersphinx:
# the build runs offline), and names of private modules are checked by tests/test_docs.py
nitpicky = True
nitpick_ignore_regex = [
    (r"py:.*", r"(numpy|scipy|xarray|matplotlib|pathlib|dask|distributed|os|pint)(\..*)?"),
    (r"py:.*", r".*\._[a-z].*"),
]
autodoc_default_options = {"members": True, "undoc-members": True, "imported-members": True, "member-order": "bysource"}
autodoc_typehints = "none"
numpydoc_show_class_members = False
numpydoc_validation_checks = set()
html_theme = "alabaster"
html_static_path = []
suppress_warnings = []


def _join_wrapped_names(app, what, name, obj, options, lines):
    """A package docstring lists its public names as a definition list whose term (a list of
    names) may wrap over lines; reStructuredText wants a term on one line."""
    if what != "module":
        return
    i = 0
    while i + 1 < len(lines):
        a, b = lines[i], lines[i + 1]
        if a and not a[0].isspace() and a.rstrip().endswith(",") and b and not b[0].isspace():
            lines[i:i + 2] = [a.rstrip() + " " + b]
        else:
            i += 1


def _public_data(app, docname, source):
    """A page of a subpackage gets its public constants (autodoc skips data a package imports)."""
    m = re.search(r"^\.\. automodule:: (fusion[\w.]*)\s*$", source[0], flags=re.M)
    if not m or ":no-members:" in source[0]:
        return
    mod = importlib.import_module(m.group(1))
    if not hasattr(mod, "__path__"):
        return          # a plain module: autodoc documents the data it defines itself
    names = [n for n in getattr(mod, "__all__", ()) if not n.startswith("_")]
    data = [n for n in names if not callable(getattr(mod, n)) and not inspect.ismodule(getattr(mod, n))]
    if data:
        source[0] += "\n\nConstants\n---------\n\n" + "".join(
            f".. autodata:: {mod.__name__}.{n}\n   :no-value:\n\n" for n in data)


def _private_name(app, env, node, contnode):
    """A bare name that a private module of the page's package defines (a module constant named in
    a docstring, e.g. a threshold): shown as code, not linked; tests/test_docs.py checks it exists."""
    target, module = node.get("reftarget", ""), node.get("py:module") or ""
    if node.get("refdomain") != "py" or "." in target or not module.startswith("fusion"):
        return None
    for name, mod in list(sys.modules.items()):
        if name.startswith(module + ".") and name.rsplit(".", 1)[-1].startswith("_") and hasattr(mod, target):
            return contnode
    return None


def setup(app):
    app.connect("autodoc-process-docstring", _join_wrapped_names)
    app.connect("source-read", _public_data)
    app.connect("missing-reference", _private_name)
