"""A share of a run's figures drawn by a forked process while the run goes on.

Drawing is pure Python (matplotlib) and holds the GIL, so a thread would not help; a forked
child shares the result's arrays without copying them. The parent keeps writing (result.nc,
its own share of the figures) and collects the child's paths, or its exception, at the end.
Used only where fork is the platform's own start method (Linux) and the run has more than
one core to itself; elsewhere the share is drawn in this process when it is collected.
"""

from __future__ import annotations

import os
import pickle
import sys
import traceback
import warnings
from pathlib import Path

from ..errors import FusionError
from ._run_figures import figure_names, run_figures

__all__ = ["draw_figures_aside", "split_figures", "FIGURE_COST"]

#: Rough relative cost of drawing each figure and of writing result.nc, to share the work
#: between two processes (measured on a run of realistic size; only the order matters much).
FIGURE_COST = {"measured_vs_predicted": 1.7, "residuals": 1.3, "heat_spread": 1.3, "source_map": 0.7,
               "overlay": 1.6, "profile": 1.1, "through_thickness": 0.8}
RESULT_NC_COST = 2.5


def split_figures(names, *, head_start: float = RESULT_NC_COST) -> tuple[list[str], list[str]]:
    """(aside, here): the figures for the other process and for this one.

    Greedy by cost, each figure to the lighter side; this side starts with ``head_start``
    (the result.nc write it does meanwhile). Both lists keep report order.
    """
    load = {"aside": 0.0, "here": float(head_start)}
    side = {}
    for name in sorted(names, key=lambda n: -FIGURE_COST.get(n, 1.0)):
        to = min(load, key=load.get)
        side[name] = to
        load[to] += FIGURE_COST.get(name, 1.0)
    return [n for n in names if side[n] == "aside"], [n for n in names if side[n] == "here"]


class _Aside:
    """The figures of one share: drawn by a child process, or here when collected."""

    def __init__(self, args, kwargs, names, fork: bool):
        self._args, self._kwargs, self._names = args, kwargs, list(names)
        self._pid = self._fd = None
        if fork and self._names:
            self._start()

    def _start(self):
        try:
            read, write = os.pipe()
        except OSError:            # out of file descriptors: draw here when collected
            return
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (AttributeError, OSError, ValueError):
                pass
        with warnings.catch_warnings():
            # Python 3.12+ warns about fork in a process with threads (here numba's idle pool):
            # the child only draws with matplotlib and numpy and leaves with os._exit
            warnings.filterwarnings("ignore", message=r".*fork\(\) may lead to deadlocks",
                                    category=DeprecationWarning)
            try:
                pid = os.fork()
            except OSError:        # no process to spare (a process limit, strict memory overcommit)
                os.close(read)
                os.close(write)
                return
        if pid == 0:                                   # the child: draw, report, leave at once
            status = 0
            try:
                os.close(read)
                try:
                    paths = run_figures(*self._args, names=self._names, **self._kwargs)
                    message = ("ok", {k: str(v) for k, v in paths.items()})
                except BaseException as e:       # noqa: BLE001 - every failure goes to the parent
                    message = ("error", e, traceback.format_exc())
                try:
                    payload = pickle.dumps(message)
                except Exception:                 # noqa: BLE001 - an exception that does not pickle
                    payload = pickle.dumps(("error", None, message[-1] if message[0] == "error" else ""))
                with os.fdopen(write, "wb") as fh:
                    fh.write(payload)
            except BaseException:                 # noqa: BLE001
                status = 1
            finally:
                # no atexit handlers, no flushing of the parent's buffers, no finalizers
                os._exit(status)
        os.close(write)
        self._pid, self._fd = pid, read

    def collect(self) -> dict:
        """Figure name to path for this share; re-raises the drawing's exception."""
        if self._pid is None:
            return run_figures(*self._args, names=self._names, **self._kwargs) if self._names else {}
        fh, self._fd = os.fdopen(self._fd, "rb"), None
        with fh:
            payload = fh.read()
        _, status = os.waitpid(self._pid, 0)
        self._pid = None
        if not payload:
            raise FusionError(f"the process drawing figures {self._names} ended without a result "
                              f"(exit status {os.waitstatus_to_exitcode(status)}; out of memory?)")
        message = pickle.loads(payload)
        if message[0] == "ok":
            return {k: Path(v) for k, v in message[1].items()}
        _, exc, text = message
        if isinstance(exc, BaseException):
            raise exc
        raise FusionError(f"drawing figures {self._names} failed:\n{text}")

    def abandon(self):
        """Stop the child (this process failed meanwhile) and wait for it."""
        if self._pid is None:
            return
        import signal

        try:
            os.kill(self._pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        os.waitpid(self._pid, 0)
        if self._fd is not None:
            os.close(self._fd)
        self._pid = self._fd = None


def draw_figures_aside(ds, out_dir, *, parallel: bool, **kwargs) -> tuple[_Aside, list[str]]:
    """Start drawing a share of the run's figures aside; returns (its handle, this side's names).

    ``kwargs`` are those of :func:`fusion.report.run_figures` (formats, dpi, reference_image,
    region_mask, profile_line, ply_profile, overwrite). With ``parallel`` false, or without
    fork, nothing starts now and the handle draws its share when collected.
    """
    names = figure_names(ds, reference_image=kwargs.get("reference_image"),
                         profile_line=kwargs.get("profile_line"), ply_profile=kwargs.get("ply_profile"))
    fork = bool(parallel) and sys.platform.startswith("linux") and hasattr(os, "fork")
    aside, here = split_figures(names) if fork else ([], names)
    return _Aside((ds, out_dir), kwargs, aside, fork), here
