"""Seconds spent in the steps of a run: what summary.json ``timings`` and the terminal line show.

A :class:`Timings` is made active for the work of one run (:meth:`Timings.active`); the steps
of that work say where they start and end with :func:`step`, wherever they sit in the call
tree, and nothing is recorded when no timings are active (the library called directly). A
step's own time excludes the steps inside it, so the steps add up to the run's time less
what no step claims (``other``).
"""

from __future__ import annotations

import contextlib
import contextvars
import sys
import time

__all__ = ["Timings", "step", "current", "compiled_kernels", "STEP_ORDER"]

#: Steps in the order of a run (summary.json and the terminal line keep this order).
STEP_ORDER = ("input digests", "strain inputs", "correlation", "strain fit", "lock-in", "thermal maps",
              "registration", "predictions", "diagnosis", "result.nc", "figures", "summary")

_active: contextvars.ContextVar = contextvars.ContextVar("fusion_timings", default=None)


class Timings:
    """Own seconds of each step of one run, and the run's wall time so far."""

    def __init__(self):
        self.seconds: dict[str, float] = {}
        self._start = time.perf_counter()
        self._stack: list[list] = []       # [name, start, seconds of the steps inside]

    @contextlib.contextmanager
    def active(self):
        """Record the steps of the work inside this block (this thread or task only)."""
        token = _active.set(self)
        try:
            yield self
        finally:
            _active.reset(token)

    def _enter(self, name):
        self._stack.append([name, time.perf_counter(), 0.0])

    def _leave(self):
        name, t0, inner = self._stack.pop()
        took = time.perf_counter() - t0
        self.seconds[name] = self.seconds.get(name, 0.0) + took - inner
        if self._stack:
            self._stack[-1][2] += took

    def elapsed(self) -> float:
        """Wall seconds since these timings were made."""
        return time.perf_counter() - self._start

    def to_dict(self) -> dict:
        """``{"steps": {name: seconds}, "other": seconds, "total": seconds}``, steps in run order."""
        total = self.elapsed()
        order = [n for n in STEP_ORDER if n in self.seconds] + sorted(set(self.seconds) - set(STEP_ORDER))
        steps = {n: round(self.seconds[n], 3) for n in order}
        return {"steps": steps, "other": round(max(total - sum(self.seconds.values()), 0.0), 3),
                "total": round(total, 3)}


def current() -> Timings | None:
    """The active timings, or None."""
    return _active.get()


@contextlib.contextmanager
def step(name: str):
    """Count the time of the block as step ``name`` of the active timings (if any)."""
    timings = _active.get()
    if timings is None:
        yield
        return
    timings._enter(name)
    try:
        yield
    finally:
        timings._leave()


def compiled_kernels() -> int:
    """How many of fusion's numeric kernels this process has compiled rather than loaded from
    numba's cache (a cache miss each): a run's first use on a fresh installation compiles them,
    which the terminal says so that the time is not taken for the step's own."""
    registry = sys.modules.get("numba.core.registry")
    if registry is None:
        return 0
    seen, n = set(), 0
    for name, module in list(sys.modules.items()):
        if not name.startswith("fusion.") or module is None:
            continue
        for value in list(vars(module).values()):
            if isinstance(value, registry.CPUDispatcher) and id(value) not in seen:
                seen.add(id(value))
                n += sum(value.stats.cache_misses.values())
    return n
