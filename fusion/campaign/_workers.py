"""Local worker processes that start warm: a fork server with the run's modules preloaded.

A worker spawned from nothing spends seconds importing the libraries a run needs
(numpy, numba, xarray, netCDF4, matplotlib, dask, ...) and initialising them (the
unit registry, the font cache), and it does so before its first run, while the
campaign process waits. With two cores and demo-sized runs of about a second,
that start-up is as long as several runs and eats the gain of a second worker.

So on Linux the workers are forked from a *fork server* (:mod:`multiprocessing`'s
``forkserver`` start method): a fresh, single-threaded interpreter that imports
and initialises everything once (:mod:`fusion.campaign._preload`) and then forks one
worker per request in milliseconds, each inheriting the loaded modules.
:func:`prestart` launches that server as early as a campaign is known to need
workers -- the CLI calls it before it imports the pipeline or validates the
config -- so that the server's start-up overlaps the campaign process's own.

Forking is safe because the server runs no threads: nothing in the preload
starts a thread (numba's thread pool starts at a kernel's first parallel call,
which happens only in the workers), and the native thread pools of the numeric
libraries are limited to one thread in the server's environment, which the
workers inherit (two workers on two cores must not start four). Elsewhere
(macOS, Windows) the workers are spawned as before.
"""

from __future__ import annotations

import logging
import os
import sys
import threading

log = logging.getLogger(__name__)

__all__ = ["prestart", "context", "watch_campaign_process", "PRELOAD_MODULE"]

#: The module the fork server imports before it forks any worker.
PRELOAD_MODULE = "fusion.campaign._preload"
#: Native thread pools limited in the fork server (and so in every worker it forks).
_THREAD_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS",
               "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")

_lock = threading.Lock()
_started = False


def _use_fork_server() -> bool:
    import multiprocessing

    return sys.platform.startswith("linux") and "forkserver" in multiprocessing.get_all_start_methods()


def context():
    """The multiprocessing context of local workers: the preloaded fork server, else spawn."""
    import multiprocessing

    if _use_fork_server():
        _start_fork_server()
        return multiprocessing.get_context("forkserver")
    return multiprocessing.get_context("spawn")


def _start_fork_server():
    """Start the fork server with the preload (once per process; later calls return at once)."""
    global _started
    with _lock:
        if _started:
            return
        import multiprocessing
        from multiprocessing import forkserver

        multiprocessing.get_context("forkserver").set_forkserver_preload([PRELOAD_MODULE])
        # the server inherits this environment when it is started, and the workers inherit
        # the server's: one thread per native pool (the run's numba threads are set per task)
        saved = {k: os.environ.get(k) for k in _THREAD_ENV}
        try:
            for k in _THREAD_ENV:
                os.environ[k] = "1"
            forkserver.ensure_running()
        finally:
            for k, v in saved.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v
        _started = True


def _wants_workers(config_path, *, workers=None, scheduler=None, only=None) -> bool:
    """Whether a campaign will most likely run on local worker processes.

    A cheap look at the config (TOML only, no validation, no imports of the
    pipeline): more than one core, more than one run to do, and neither the
    arguments nor ``[compute]`` ask for one worker or another scheduler. A wrong
    guess costs only an idle server; the real decision is :func:`fusion.campaign._schedule.plan_workers`.
    """
    cores = os.cpu_count() or 1
    if cores < 2 or (workers is not None and workers < 2):
        return False
    if scheduler is not None and scheduler != "processes":
        return False
    try:
        import tomllib

        with open(config_path, "rb") as fh:
            doc = tomllib.load(fh)
    except (OSError, ValueError, TypeError):
        return False  # the config is refused later, with its real message
    compute = doc.get("compute") if isinstance(doc.get("compute"), dict) else {}
    if scheduler is None and compute.get("scheduler", "processes") != "processes":
        return False
    if workers is None and isinstance(compute.get("workers"), int) and compute["workers"] < 2:
        return False
    runs = doc.get("run") if isinstance(doc.get("run"), list) else []
    names = [r.get("name") for r in runs if isinstance(r, dict)]
    if only:
        names = [n for n in names if n in set(only)]
    return len(names) >= 2


def prestart(config_path, *, workers=None, scheduler=None, only=None) -> bool:
    """Start the preloaded fork server now if the campaign will need local workers.

    Returns True when the server is running (started now or before). Never raises:
    a config it cannot read is left to :func:`fusion.config.load_config` to report.
    """
    if not _use_fork_server() or not _wants_workers(config_path, workers=workers, scheduler=scheduler,
                                                    only=only):
        return _started
    try:
        _start_fork_server()
    except (OSError, ValueError) as e:  # no server: the workers are forked on demand later
        log.debug("fork server not started early: %s", e)
    return _started


def _wait_for_campaign_process():
    import multiprocessing

    parent = multiprocessing.parent_process()
    if parent is not None:
        parent.join()   # returns when the campaign process is gone (its sentinel closes)
        os._exit(1)


def watch_campaign_process():
    """In a worker: exit as soon as the campaign process is gone (killed with SIGKILL, say).

    A worker orphaned by ``kill -9`` would otherwise go on computing a run that no one
    waits for, and race the next ``fusion run`` on the same output folder. The watch
    waits on the sentinel of the process that asked for the worker, whichever start
    method made it (a forked worker's parent *process* is the fork server).
    """
    threading.Thread(target=_wait_for_campaign_process, daemon=True, name="fusion-parent-watch").start()
