"""Compiled kernels: each cached compilation has an on-disk cache entry of its own.

numba's cache names an entry after the function's module, qualified name and first line,
not after its compile options. Two compilations of one Python function (say a serial and a
parallel one) would share an entry and load each other's machine code: the parallel kernel
then runs on one thread, with right results and no warning.
"""

from __future__ import annotations

import importlib
import pkgutil

from numba.core.registry import CPUDispatcher

import fusion


def _cached_dispatchers():
    found = []
    for info in pkgutil.walk_packages(fusion.__path__, prefix="fusion."):
        if info.name.endswith("__main__") or info.name == "fusion.pipeline":
            continue
        module = importlib.import_module(info.name)
        for name, obj in vars(module).items():
            if isinstance(obj, CPUDispatcher) and obj._cache.__class__.__name__ != "NullCache":
                found.append((info.name, name, obj))
    return found


def test_every_cached_kernel_has_its_own_cache_entry():
    """Not a physics check: the identity of compiled kernels in numba's on-disk cache."""
    seen = {}
    kernels = _cached_dispatchers()
    assert len(kernels) > 10, "the package's compiled kernels were not found"
    for module, name, disp in kernels:
        f = disp.py_func
        key = (f.__module__, f.__qualname__, f.__code__.co_firstlineno)
        other = seen.setdefault(key, (module, name, disp))
        if other[2] is not disp:
            assert other[2].targetoptions == disp.targetoptions, (
                f"{module}.{name} and {other[0]}.{other[1]} compile one function with different "
                f"options under one cache entry {key}")

