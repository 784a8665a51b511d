"""One task per run: in-process, on local Dask workers, or on a dask.distributed cluster.

Each task is :func:`fusion.pipeline.process_run` with plain arguments (config path,
run name, output folder), so it pickles to any worker; the worker reads the
config and the inputs itself. Inputs must therefore be visible to the workers
at the same paths (a shared file system for a remote cluster).
"""

from __future__ import annotations

import logging
import os
from pathlib import Path

log = logging.getLogger(__name__)

__all__ = ["schedule_runs"]


def _log_outcome(o, i, n):
    if o.status == "failed":
        log.warning("[%d/%d] %s failed: %s", i, n, o.name, o.error)
    else:
        log.info("[%d/%d] %s %s (%.1f s)", i, n, o.name, o.status, o.seconds)


def schedule_runs(cfg, runs, out, *, overwrite=False, scheduler=None, workers=None, progress=False):
    """Process ``runs`` and return their :class:`~fusion.pipeline.RunOutcome` in config order."""
    from .pipeline import process_run

    n = len(runs)
    if n == 0:
        return []
    workers = workers or os.cpu_count() or 1
    remote = scheduler is not None and "://" in scheduler
    if not remote and (scheduler == "synchronous" or workers == 1 or n == 1 or cfg.path is None):
        outcomes = []
        for i, run in enumerate(runs, 1):
            log.info("[%d/%d] %s ...", i, n, run.name)
            o = process_run(cfg.path, run.name, out, overwrite=overwrite, progress=progress, config=cfg)
            _log_outcome(o, i, n)
            outcomes.append(o)
        return outcomes

    args = [(str(cfg.path.resolve()), r.name, str(Path(out).resolve())) for r in runs]
    if remote:
        return _distributed(scheduler, args, overwrite)
    import dask

    tasks = [dask.delayed(process_run, pure=False)(c, name, o, overwrite=overwrite) for c, name, o in args]
    kind = "threads" if scheduler == "threads" else "processes"
    log.info("processing %d runs on %d local %s", n, min(workers, n), kind)
    outcomes = list(dask.compute(*tasks, scheduler=kind, num_workers=min(workers, n)))
    for i, o in enumerate(outcomes, 1):
        _log_outcome(o, i, n)
    return outcomes


def _distributed(address, args, overwrite):
    from distributed import Client

    from .errors import InputError
    from .pipeline import process_run

    try:
        client = Client(address, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError) as e:
        raise InputError(address, f"cannot reach the Dask scheduler ({e}); check the address "
                         "(tcp://HOST:PORT) and that the scheduler is running") from e
    with client:
        futures = [client.submit(process_run, c, name, o, overwrite=overwrite, pure=False,
                                 key=f"fusion-run-{name}") for c, name, o in args]
        outcomes = client.gather(futures)
    for i, o in enumerate(outcomes, 1):
        if o.status == "failed" and "does not exist" in (o.error or ""):
            o.error += " (inputs must be visible to the Dask workers at the same path)"
        _log_outcome(o, i, len(outcomes))
    return outcomes
