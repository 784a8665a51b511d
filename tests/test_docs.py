"""The API reference and what docstrings point at.

Not a physics check: every cross-reference in a docstring of the package (``:func:``,
``:class:``, ``:data:``...) names something that exists, every repository file a docstring
names exists, the package ships ``py.typed``, and the reference's build is wired into CI.
The reference itself is built with Sphinx by .ci/run (``-W``: a warning fails).
"""

import builtins
import importlib
import inspect
import pkgutil
import re
import tomllib
from pathlib import Path

import pytest

import fusion

ROOT = Path(__file__).resolve().parents[1]
ROLE = re.compile(r":(?:func|class|meth|attr|data|mod|obj|exc):`~?([^`<]+?)(?:\s*<([^>]+)>)?`")
FILE = re.compile(r"\b((?:docs|configs|sample_data|fusion|tests)/[\w./-]+\.(?:md|toml|json|py|csv))\b")


def _modules():
    out = []
    for info in pkgutil.walk_packages(fusion.__path__, "fusion."):
        if info.name.endswith("__main__"):
            continue
        out.append(importlib.import_module(info.name))
    return [fusion] + out


def _documented(module):
    """(docstring, the namespaces a relative name in it refers to) of a module and what it defines."""
    yield module.__doc__ or "", (module,)
    for _, obj in vars(module).items():
        if (inspect.isfunction(obj) or inspect.isclass(obj)) and obj.__module__ == module.__name__:
            yield obj.__doc__ or "", (obj, module) if inspect.isclass(obj) else (module,)
            if inspect.isclass(obj):
                for attr in vars(obj).values():
                    f = attr.fget if isinstance(attr, property) else getattr(attr, "__func__", attr)
                    if callable(f) or isinstance(attr, property):
                        yield getattr(f, "__doc__", "") or "", (obj, module)


def _siblings(module):
    """The package of a module and its private modules (where a relative name may live, as the
    reference's Sphinx build resolves it: docs/api/conf.py)."""
    package = importlib.import_module(module.__name__.rpartition(".")[0] or "fusion")
    yield package
    for info in pkgutil.iter_modules(getattr(package, "__path__", [])):
        if info.name.startswith("_") and info.name != "__main__":
            yield importlib.import_module(f"{package.__name__}.{info.name}")


def _resolve(target, spaces):
    target = target.strip().rstrip("()")
    parts = target.split(".")
    module = spaces[-1]
    if not hasattr(module, parts[0]):
        for cut in range(len(parts), 0, -1):
            try:
                obj = importlib.import_module(".".join(parts[:cut]))
            except ImportError:
                continue
            try:
                for p in parts[cut:]:
                    obj = getattr(obj, p)
            except AttributeError:
                return False
            return True
    for space in (*spaces, *_siblings(module), builtins):
        obj = space
        try:
            for p in parts:
                obj = getattr(obj, p)
            return True
        except AttributeError:
            continue
    # an instance attribute the class sets on its objects (self.name = ...)
    classes = [s for s in spaces if inspect.isclass(s)]
    return len(parts) == 1 and any(re.search(rf"\bself\.{parts[0]}\b[^=\n]*=", inspect.getsource(c))
                                   for c in classes)


def test_every_docstring_reference_exists():
    broken = []
    for module in _modules():
        for doc, spaces in _documented(module):
            for m in ROLE.finditer(doc):
                target = m.group(2) or m.group(1)
                if not _resolve(target, spaces):
                    broken.append(f"{module.__name__}: {m.group(0)}")
    assert not broken, "docstrings point at names that do not exist: " + "; ".join(sorted(set(broken)))


def test_every_file_a_docstring_names_exists():
    missing = []
    for module in _modules():
        for doc, _ in _documented(module):
            for m in FILE.finditer(doc):
                if not (ROOT / m.group(1)).exists():
                    missing.append(f"{module.__name__}: {m.group(1)}")
    assert not missing, "docstrings name files that do not exist: " + "; ".join(sorted(set(missing)))


def test_the_check_can_fail():
    correlate = importlib.import_module("fusion.dic._correlate")
    assert not _resolve("fusion.io.write_result", (fusion,))
    assert not _resolve("NO_SUCH_NAME", (correlate,))
    assert not _resolve("xarray.NoSuchClass", (fusion,))
    assert _resolve("REASON_CODES", (correlate,))
    assert _resolve("xarray.Dataset", (fusion,))


def test_typed_package_and_docs_wiring():
    assert (ROOT / "fusion" / "py.typed").is_file()
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    assert "py.typed" in project["tool"]["setuptools"]["package-data"]["fusion"]
    docs = project["project"]["optional-dependencies"]["docs"]
    assert any(d.startswith("sphinx") for d in docs) and any(d.startswith("numpydoc") for d in docs)
    ci = (ROOT / ".ci" / "run").read_text()
    command = "python3 -m sphinx -W --keep-going -q -b html docs/api docs/_build/api"
    assert command in ci and ".[test,docs]" in ci
    assert "sphinx -W" in (ROOT / "DEVELOPERS.md").read_text()
    pages = {p.stem for p in (ROOT / "docs" / "api").glob("*.rst")}
    listed = re.findall(r"^   (\w+)$", (ROOT / "docs" / "api" / "index.rst").read_text(), flags=re.M)
    assert set(listed) == pages - {"index"}


@pytest.mark.parametrize("name", sorted(fusion.__all__))
def test_top_level_names_resolve(name):
    assert getattr(fusion, name) is not None
