"""One task per run: in this process, on local worker processes, or on a dask.distributed cluster.

Each task is :func:`fusion.campaign.process_run` with plain arguments (config path,
run name, output folder), so it pickles to any worker; the worker reads the
config and the inputs itself. Inputs and the output folder must therefore be
visible to the workers at the same paths (a shared file system for a remote
cluster); :func:`schedule_runs` checks that on every worker before submitting.
Runs that already have a result with the same stamp are not sent at all.

How many runs at once
---------------------
``workers`` defaults to ``os.cpu_count()`` and is then limited by the runs to do
and by memory: ``min(workers, runs, max(1, available // (memory_budget +
WORKER_BASELINE)))``, where ``available`` is the memory the operating system
reports as available and ``WORKER_BASELINE`` what a worker holds besides its frame
chunks. With more than one, a :class:`concurrent.futures.ProcessPoolExecutor` of
that many worker processes takes the runs, one at a time each, with each run's
numba and OpenCV kernels on ``max(1, cores // workers)`` threads so that workers do
not fight over cores. On Linux the workers are forked from a fork server
(:mod:`multiprocessing`'s ``forkserver``) that has imported what a run needs
(:mod:`fusion.campaign._preload`), so that each worker does not import it again;
elsewhere they are spawned. Either way no worker is a plain fork of this process,
whose threads and open files are not fork-safe. Worker processes exit when the campaign process
dies; when one dies, the runs in flight fail and the others go on in new worker
processes. The ``threads`` kind runs one run at a time: the netCDF/HDF5 library
and numba's default thread pool are not safe for two runs in one process. A
dask.distributed cluster (a ``tcp://`` address) sets its own concurrency (threads
per worker); its memory limits are only checked.

Progress
--------
With ``progress=True`` a campaign bar on a terminal (a line per finished run
printed above it; runs processed one after the other also show the bars of their
long steps), else one log line per finished run (:class:`fusion._progress.Progress`).
"""

from __future__ import annotations

import contextlib
import hashlib
import logging
import math
import multiprocessing
import os
import re
import sys
import threading
import uuid
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path

from .._progress import Progress
from ..errors import ConfigError, FusionError, InputError
from ..io import safe_child
from ._folders import LOCK_NAME, is_marked_folder
from ._outcome import RunOutcome
from ._process import process_run
from ._provenance import read_stamp, read_summary, run_stamp

log = logging.getLogger(__name__)

__all__ = ["schedule_runs", "plan_workers", "available_memory", "WORKER_BASELINE", "CONNECT_TIMEOUT"]

#: Memory of a worker process that has run once, before it touches the next run's frames,
#: bytes: interpreter, libraries, compiled kernels, plus the per-pixel maps of a run (the
#: resident set measured by tests/test_memory_budget.py was 330 MB + 20 to 37 MB).
WORKER_BASELINE = 400e6
#: Seconds to wait for a dask.distributed scheduler before giving up.
CONNECT_TIMEOUT = 10.0

_KINDS = ("synchronous", "threads", "processes")
_ADDRESS = re.compile(r"(tcp|tls|inproc|ucx)://\S+")


# --------------------------------------------------------------------------- sizing
def available_memory() -> int | None:
    """Memory available to new processes, bytes (None when the system does not say)."""
    try:
        import psutil  # a dependency of distributed

        return int(psutil.virtual_memory().available)
    except (ImportError, OSError, AttributeError):
        pass
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def plan_workers(requested, n_runs, memory_budget, *, available=None, cores=None):
    """Runs processed at once on this machine, and why.

    Parameters
    ----------
    requested : int or None
        ``[compute] workers`` or ``--workers``; None means every core.
    n_runs : int
        Runs to process.
    memory_budget : float
        ``[compute] memory_budget`` of one run, bytes.
    available : float, optional
        Available memory, bytes (default: :func:`available_memory`; None if unknown).
    cores : int, optional
        Cores of the machine (default ``os.cpu_count()``).

    Returns
    -------
    workers : int
        ``min(requested, n_runs, max(1, available // (memory_budget + WORKER_BASELINE)))``, >= 1.
    reason : str
        Which limit decided, for the log.
    """
    cores = int(cores or os.cpu_count() or 1)
    if requested is not None and (isinstance(requested, bool) or int(requested) != requested or requested < 1):
        raise ValueError(f"workers must be a positive integer, got {requested!r}")
    if not (isinstance(memory_budget, (int, float)) and math.isfinite(memory_budget) and memory_budget > 0):
        raise ValueError(f"memory_budget must be a positive number of bytes, got {memory_budget!r}")
    want = int(requested) if requested is not None else cores
    reason = "[compute] workers" if requested is not None else f"{cores} cores"
    limits = [(want, reason), (max(int(n_runs), 1), f"{n_runs} runs")]
    if available is not None:
        per_run = float(memory_budget) + WORKER_BASELINE
        fit = max(1, int(float(available) // per_run))
        limits.append((fit, f"{_size(available)} available for {_size(per_run)} per run "
                            f"([compute] memory_budget {_size(memory_budget)} + worker)"))
    workers, reason = min(limits, key=lambda x: x[0])
    return workers, reason


def _size(b) -> str:
    return f"{b / 1e9:.3g} GB" if b >= 1e9 else f"{b / 1e6:.3g} MB"


# --------------------------------------------------------------------------- progress
def _describe(o, i, n):
    if o.status == "failed":
        return f"[{i}/{n}] {o.name} failed: {o.error}"
    if o.status == "skipped":
        return f"[{i}/{n}] {o.name} skipped (unchanged since its last result)"
    return f"[{i}/{n}] {o.name} {o.status} ({o.seconds:.1f} s)"


class _Report:
    """Outcomes in config order, one line per finished run (log line, or above the bar)."""

    def __init__(self, names, progress):
        self.names = list(names)
        self.index = {name: i for i, name in enumerate(self.names)}
        self.outcomes = [None] * len(self.names)
        self.bar = Progress(len(self.names), desc="campaign", unit="runs", enabled=progress, leave=True,
                            lines=False)
        self.count = self.failed = 0
        self._lock = threading.Lock()

    def add(self, outcome):
        with self._lock:
            i = self.index[outcome.name]
            if self.outcomes[i] is not None:
                return
            self.outcomes[i] = outcome
            self.count += 1
            self.failed += outcome.status == "failed"
            count = self.count
        text = _describe(outcome, count, len(self.names))
        if self.bar.is_bar:
            log.debug("%s", text)
            self.bar.note(text)
            if self.failed:
                self.bar.postfix(f"{self.failed} failed")
            self.bar.update()
        elif outcome.status == "failed":
            log.warning("%s", text)
        else:
            log.info("%s", text)

    def missing(self):
        return [n for n, o in zip(self.names, self.outcomes) if o is None]


# --------------------------------------------------------------------------- tasks
def _task(config_path, run_name, out, overwrite, threads):
    """One run on a worker: numba (and OpenCV) threads sized to the worker's share of the cores."""
    import numba

    if threads is None:
        threads = _distributed_threads()
    if threads is not None:
        threads = max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS))
        numba.set_num_threads(threads)
        try:
            import cv2

            cv2.setNumThreads(threads)
        except ImportError:  # pragma: no cover - a dependency
            pass
    return process_run(config_path, run_name, out, overwrite=overwrite)


def _distributed_threads():
    try:
        from distributed import get_worker

        return max(1, (os.cpu_count() or 1) // max(1, get_worker().state.nthreads))
    except (ImportError, ValueError, AttributeError):
        return None


def _wait_for_campaign_process():
    parent = multiprocessing.parent_process()
    if parent is not None:
        parent.join()   # returns when the campaign process is gone (its sentinel closes)
        os._exit(1)


def _worker_init():
    """In a worker: exit as soon as the campaign process is gone (killed with SIGKILL, say).

    A worker orphaned by ``kill -9`` would otherwise go on computing a run that no one
    waits for, and race the next ``fusion run`` on the same output folder.
    """
    threading.Thread(target=_wait_for_campaign_process, daemon=True, name="fusion-parent-watch").start()


def _already_done(cfg, run, out, digests):
    """The outcome "skipped" when the run's folder holds fusion's result with the same stamp, else None.

    Checked here so that a resumed batch sends no task (and starts no worker) for a
    finished run; :func:`fusion.campaign.process_run` makes the same check again.
    """
    try:
        folder = safe_child(Path(out), run.name)
        if not is_marked_folder(folder, run.name) or not (folder / "result.nc").is_file():
            return None
        if read_stamp(folder) != run_stamp(cfg, run, digests=digests):
            return None
    except (FusionError, OSError):
        return None  # the task reports the problem with the run
    return RunOutcome(run.name, "skipped", folder, summary=read_summary(folder))


# --------------------------------------------------------------------------- entry
def schedule_runs(cfg, runs, out, *, overwrite=False, scheduler=None, workers=None, progress=False,
                  digests=None):
    """Process ``runs`` and return their :class:`~fusion.campaign.RunOutcome` in config order.

    Parameters
    ----------
    cfg : fusion.config.Config
        The loaded campaign config (its ``path`` is what workers read).
    runs : list of fusion.config.RunSpec
        The runs to process.
    out : path
        Output folder (exists; the caller holds its lock).
    overwrite : bool
        Recompute runs that have a result already.
    scheduler : str, optional
        ``"synchronous"`` (in this process, one run after the other; ``"threads"`` is
        the same, see the module notes), ``"processes"`` (Dask's local scheduler over
        worker processes) or the address of a dask.distributed
        scheduler (``tcp://HOST:PORT``). Default: ``"processes"`` when more than one
        run can go at once, else ``"synchronous"``.
    workers : int, optional
        Runs at once on this machine (default: cores, limited by memory; see
        :func:`plan_workers`).
    progress : bool
        Campaign bar and step bars on a terminal (see the module notes).
    digests : DigestCache, optional
        Input digests of the output folder (saved there before any task starts, so that
        the workers find them).

    Returns
    -------
    list of RunOutcome
        One per run, in the order of ``runs``. Never raises for a failed run; a worker
        process that dies (out of memory, killed) fails the runs in flight at that moment.

    Raises
    ------
    fusion.errors.ConfigError
        An unknown scheduler kind.
    fusion.errors.InputError
        The distributed scheduler cannot be reached, or a worker cannot see the config
        or the output folder at the same path.
    """
    if scheduler is not None and scheduler not in _KINDS and not _ADDRESS.fullmatch(str(scheduler)):
        raise ConfigError("--scheduler", f"{scheduler!r} is not a scheduler: expected tcp://HOST:PORT, "
                          "'processes', 'threads' or 'synchronous'")
    report = _Report([r.name for r in runs], progress)
    todo = []
    for run in runs:
        done = None if overwrite else _already_done(cfg, run, out, digests)
        if done is not None:
            report.add(done)
        else:
            todo.append(run)
    if digests is not None:
        try:
            digests.save(out)
        except OSError as e:      # only a cache: the workers hash their inputs themselves
            log.warning("cannot keep the input digests in %s (%s)", out, e.strerror or e)
    try:
        if todo:
            _dispatch(cfg, todo, Path(out), report, overwrite=overwrite, scheduler=scheduler,
                      workers=workers, progress=progress)
    finally:
        report.bar.close()
        if digests is not None:
            for o in report.outcomes:
                if o is not None:
                    digests.merge(o.digests)
    return report.outcomes


def _dispatch(cfg, todo, out, report, *, overwrite, scheduler, workers, progress):
    remote = scheduler is not None and scheduler not in _KINDS
    if remote:
        return _distributed(scheduler, cfg, todo, out, report, overwrite)
    n, reason = plan_workers(workers, len(todo), cfg.compute.memory_budget, available=available_memory())
    if scheduler == "threads" and n > 1:
        # HDF5 (netCDF4) and numba's default thread pool crash when two runs share a process
        log.warning("scheduler 'threads' processes one run at a time (the netCDF/HDF5 library and "
                    "the numba kernels are not safe side by side in one process); use 'processes'")
        n = 1
    if scheduler in ("synchronous", "threads") or n == 1 or cfg.path is None:
        if workers not in (None, 1) and n == 1 and scheduler is None:
            log.info("processing %d runs one at a time (%s)", len(todo), reason)
        return _sequential(cfg, todo, out, report, overwrite=overwrite, progress=progress)
    log.info("processing %d runs on %d local worker processes (%s)", len(todo), n, reason)
    return _local(cfg, todo, out, report, n=n, overwrite=overwrite)


def _sequential(cfg, todo, out, report, *, overwrite, progress):
    for run in todo:
        log.debug("%s ...", run.name)
        o = process_run(cfg.path, run.name, out, overwrite=overwrite, progress=progress, config=cfg)
        report.add(o)


def _preload_products():
    """Import what the campaign products need (report, sweep fit) while the workers compute.

    The runs go to worker processes, so this process would otherwise meet these imports
    only after the last run, as a serial tail of a few seconds.
    """
    import importlib

    for name in ("xarray", "netCDF4", "matplotlib.figure", "matplotlib.backends.backend_agg",
                 "fusion.io", "fusion.mechanics", "fusion.report", "fusion.campaign._products"):
        try:
            importlib.import_module(name)
        except Exception:  # only a head start: the products import (and report) it again later
            log.debug("preloading %s failed", name, exc_info=True)


#: Native thread pools limited to one thread in the worker processes (their numba and OpenCV
#: threads are set per run): two workers on two cores must not start four BLAS threads.
_THREAD_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS",
               "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")


@contextlib.contextmanager
def _one_native_thread():
    """While the pool lives: workers (and the fork server) start with one thread per native pool
    (they inherit the environment when started); this process's own is restored afterwards."""
    saved = {k: os.environ.get(k) for k in _THREAD_ENV}
    try:
        for k in _THREAD_ENV:
            os.environ[k] = "1"
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


#: The module the fork server of the local workers imports before it forks any.
PRELOAD_MODULE = "fusion.campaign._preload"


def _context():
    """Linux: the fork server with the run's modules preloaded (started with the first worker,
    inside :func:`_one_native_thread`); elsewhere spawn."""
    if sys.platform.startswith("linux") and "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload([PRELOAD_MODULE])
        return ctx
    return multiprocessing.get_context("spawn")


def _process_pool(n):
    return ProcessPoolExecutor(n, mp_context=_context(), initializer=_worker_init)


_DIED = ("a worker process died while processing this run (killed, or out of memory: lower [compute] "
         "memory_budget or --workers); rerun to retry")


def _outcome(fut, run):
    """The outcome of a finished task; a task that failed outside process_run is a bug."""
    try:
        return fut.result()
    except BrokenProcessPool:
        raise
    except Exception as e:  # a result that cannot be unpickled, say
        return RunOutcome(run.name, "failed", error=f"internal error ({type(e).__name__}: {e}); rerun with "
                          "--debug and report it")


def _local(cfg, todo, out, report, *, n, overwrite):
    """Runs on ``n`` local worker processes, one run per worker at a time.

    Runs are processed in worker processes only, although this process could take one
    and save a process start: a run that crashes its process (a C library on a damaged
    file, the out-of-memory killer) then fails, with the runs in flight beside it,
    instead of ending the campaign. At most ``n`` runs are handed out at once, so the
    runs in flight are exactly those a dead worker's pool loses.
    """
    config_path, out_s = str(Path(cfg.path).resolve()), str(out.resolve())
    threads = max(1, (os.cpu_count() or 1) // n)
    threading.Thread(target=_preload_products, daemon=True, name="fusion-preload").start()
    remaining = list(todo)
    while remaining:
        with _one_native_thread():
            _run_pool(config_path, out_s, remaining, report, n=n, overwrite=overwrite, threads=threads)
        missing = set(report.missing())
        remaining = [r for r in remaining if r.name in missing]


def _run_pool(config_path, out_s, remaining, report, *, n, overwrite, threads):
    """One pool of ``n`` workers over ``remaining`` until they are done or a worker dies."""
    queue = list(remaining)
    pool = _process_pool(min(n, len(queue)))
    in_flight = {}
    try:
        while queue or in_flight:
            while queue and len(in_flight) < n:
                run = queue.pop(0)
                in_flight[pool.submit(_task, config_path, run.name, out_s, overwrite, threads)] = run
            finished, _ = wait(in_flight, return_when=FIRST_COMPLETED)
            for fut in finished:
                report.add(_outcome(fut, in_flight[fut]))   # BrokenProcessPool: a worker died
                del in_flight[fut]
    except BrokenProcessPool:
        # one worker died and the pool stopped the others: the runs in flight are lost
        # (each leaves at most a temporary folder); the runs not started go on
        for fut, run in in_flight.items():
            try:
                report.add(_outcome(fut, run) if fut.done() else RunOutcome(run.name, "failed", error=_DIED))
            except BrokenProcessPool:
                report.add(RunOutcome(run.name, "failed", error=_DIED))
        log.warning("a worker process died; the runs not started go on in new worker processes")
    except BaseException:
        # interrupted: stop the workers now rather than after their current run (their
        # temporary folders are removed when the campaign runs next)
        for proc in list((getattr(pool, "_processes", None) or {}).values()):
            proc.terminate()
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


# --------------------------------------------------------------------------- distributed
def _one_line(e) -> str:
    return " ".join(str(e).split()) or type(e).__name__


def _connect(address):
    from distributed import Client

    try:
        return Client(address, timeout=CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as e:
        raise InputError(address, f"cannot reach the Dask scheduler ({_one_line(e)}); check the "
                         "address (tcp://HOST:PORT) and that the scheduler is running") from e


def _probe(config_path, config_sha256, out):
    """On a worker: None when the config and the output folder are visible as on the client."""
    p = Path(config_path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return f"cannot read the config {config_path}"
    if hashlib.sha256(text.encode("utf-8")).hexdigest() != config_sha256:
        return f"sees another file at {config_path} (it differs from the client's config)"
    o = Path(out)
    if not (o / LOCK_NAME).is_file():
        return f"cannot see the output folder {out}"
    if not os.access(o, os.W_OK):
        return f"cannot write to the output folder {out}"
    return None


def _check_workers(client, cfg, out):
    answers = client.run(_probe, str(Path(cfg.path).resolve()), cfg.sha256, str(out))
    if not answers:
        raise InputError(client.scheduler.address, "the Dask cluster has no workers")
    bad = {w: why for w, why in answers.items() if why}
    if bad:
        w, why = next(iter(sorted(bad.items())))
        more = f" (and {len(bad) - 1} more workers)" if len(bad) > 1 else ""
        raise InputError(cfg.path, f"Dask worker {w} {why}{more}: the config, its input files and the "
                         "output folder must be visible to every worker at the same path (a shared "
                         "file system)")
    per_run = cfg.compute.memory_budget + WORKER_BASELINE
    for w, info in client.scheduler_info().get("workers", {}).items():
        limit = info.get("memory_limit") or 0
        threads = max(1, int(info.get("nthreads") or 1))
        if limit and limit / threads < per_run:
            log.warning("Dask worker %s has %s per thread, less than the %s a run needs "
                        "([compute] memory_budget + worker); lower memory_budget or threads per worker",
                        w, _size(limit / threads), _size(per_run))
    return len(answers)


def _distributed(address, cfg, todo, out, report, overwrite):
    from distributed import as_completed

    if cfg.path is None:
        raise InputError(address, "a Dask cluster needs the config as a file the workers can read")
    client = _connect(address)
    with client:
        n = _check_workers(client, cfg, out)
        log.info("processing %d runs on the Dask cluster at %s (%d workers)", len(todo), address, n)
        token = uuid.uuid4().hex[:8]  # two campaigns on one cluster never share task keys
        config_path = str(Path(cfg.path).resolve())
        futures = {client.submit(_task, config_path, r.name, str(out.resolve()), overwrite, None,
                                 key=f"fusion-run-{r.name}-{token}", pure=False): r.name for r in todo}
        for fut in as_completed(futures, loop=client.loop):
            try:
                o = fut.result()
            except Exception as e:  # a lost worker (KilledWorker), or a task that cannot unpickle
                o = RunOutcome(futures[fut], "failed", error=f"the Dask worker failed ({_one_line(e)}); "
                               "rerun to retry")
            if o.status == "failed" and "does not exist" in (o.error or ""):
                o.error += " (inputs must be visible to the Dask workers at the same path)"
            report.add(o)
