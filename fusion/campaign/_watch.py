"""``fusion watch``: each run processed as soon as its inputs are complete, while the test day goes on.

The watcher holds the campaign lock of the output folder for as long as it runs. Every
``interval`` seconds it reads the config again if the file changed (runs appended during
the day), and for each run asks whether all its inputs exist, sequences are complete
(their ``frame_count``/``image_count``, or their ``done_marker``) and nothing has changed
for ``settle`` seconds. Such a run is processed unless its stamp (config and inputs) is the
one already processed; then the campaign products are rebuilt from the result folders on
disk, and one line is printed.

Each run is processed in a fresh child process (one at a time) that ends with the run:
the watcher itself only reads the config and the files' sizes and times, so it can be
left running for a day without growing. The child dies with the watcher (on Linux), and
on Ctrl-C or SIGTERM the run in progress is abandoned through the same clean-up as an
interrupted ``fusion run``: only whole result folders stay.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import ctypes
import dataclasses
import logging
import multiprocessing
import os
import signal
import sys
import time
from pathlib import Path

from ..config import load_config
from ..errors import FusionError
from ..io import file_identity
from ..run import input_state
from ._folders import campaign_lock, check_campaign_targets, recover
from ._outcome import RunOutcome
from ._process import process_run
from ._products import write_campaign
from ._provenance import DigestCache, read_stamp, run_stamp

log = logging.getLogger(__name__)

__all__ = ["watch_campaign", "refresh_products"]

_PR_SET_PDEATHSIG = 1


def refresh_products(config_path, out, failures=None, outcomes=()):
    """Rebuild the campaign products (report.html, frequency.nc) from the result folders on disk.

    ``failures`` ({run name: error}) and ``outcomes`` (of runs just processed) are reported
    with them. Returns the report's path (None without one) and an error sentence (None
    when written). The caller holds the campaign lock.
    """
    out = Path(out)
    try:
        cfg = load_config(config_path)
        known = {o.name for o in outcomes}
        listed = list(outcomes) + [RunOutcome(n, "failed", error=e) for n, e in (failures or {}).items()
                                   if n not in known]
        check_campaign_targets(out)
        report = write_campaign(cfg, out, listed, digests=DigestCache.load(out))[1]
        return report, None
    except FusionError as e:
        return None, str(e)
    except OSError as e:
        return None, f"{e.filename or out}: {e.strerror or e} (that file left as it was)"


def _child_start(parent: int, level: int) -> None:
    """In each child: die with the watcher, and log like it."""
    with contextlib.suppress(Exception):     # Linux only; elsewhere the child may outlive a killed watcher
        ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    if os.getppid() != parent:
        os._exit(1)
    # an idle child leaves Ctrl-C to the watcher; a child at work takes it (see below)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(message)s"))
    root = logging.getLogger("fusion")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False


def _process_and_refresh(config_path, run_name, out, overwrite, failures):
    """What a child does: one run into its folder, then the campaign products.

    Ctrl-C (or the watcher's SIGINT when it stops) interrupts the run, whose clean-up
    removes its unfinished folder.
    """
    signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        outcome = process_run(config_path, run_name, out, overwrite=overwrite)
        failures = {n: e for n, e in failures.items() if n != run_name}
        report, error = refresh_products(config_path, out, failures, [outcome])
    finally:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    return outcome, report, error


@dataclasses.dataclass
class _RunWatch:
    signature: tuple = ()
    since: float = 0.0
    processed: str | None = None       # stamp of the last processing (or of the result found in place)
    stamp: str | None = None           # the run's stamp, computed for ...
    stamped: tuple = ()                # ... this (config identity, input signature)


class _Watcher:
    """The state of a watch between polls: the config in force and what each run looks like."""

    def __init__(self, config_path, out, *, settle, overwrite, emit, clock=time.monotonic):
        self.config_path = Path(config_path)
        self.out = Path(out)
        self.settle = float(settle)
        self.overwrite = overwrite
        self.emit = emit
        self.clock = clock
        self.cfg = None
        self.config_id = None
        self.runs: dict[str, _RunWatch] = {}
        self.failures: dict[str, str] = {}
        # input digests by file identity: an unchanged file is hashed once (kept in the output folder)
        self.digests = DigestCache.load(self.out)

    def _say(self, text):
        self.emit(f"{time.strftime('%H:%M:%S')} {text}")

    def reload(self) -> None:
        """Read the config again when its file changed; a broken edit keeps the config in force."""
        ident = file_identity(self.config_path)
        if ident == self.config_id:
            return
        self.config_id = ident
        try:
            cfg = load_config(self.config_path)
        except FusionError as e:
            if self.cfg is None:
                raise
            self._say(f"config not reloaded: {e} (the previous config stays in force)")
            return
        new = [r.name for r in cfg.runs if r.name not in self.runs]
        if self.cfg is not None:
            self._say(f"config reloaded: {len(cfg.runs)} runs" + (f", new: {', '.join(new)}" if new else ""))
        names = {r.name for r in cfg.runs}
        self.runs = {n: self.runs.get(n, _RunWatch()) for n in names}   # forget runs taken out
        self.failures = {n: e for n, e in self.failures.items() if n in names}
        self.cfg = cfg

    def ready_runs(self):
        """Runs whose inputs are complete and settled and whose stamp was not processed yet."""
        now = self.clock()
        ready = []
        for run in self.cfg.runs:
            w = self.runs[run.name]
            try:
                state = input_state(run)
            except FusionError as e:
                state = None
                log.debug("run %s: inputs not readable yet (%s)", run.name, e)
            if state is None or not state.ready:
                w.signature, w.since = (), now
                continue
            if state.signature != w.signature:
                w.signature = state.signature
                # inputs last touched longer ago than the settle period need no further wait
                w.since = now - self.settle if _age(state.signature) >= self.settle else now
            if now - w.since < self.settle:
                continue
            if w.stamped != (self.config_id, state.signature):
                # the stamp lists and reads every input: only when something changed
                try:
                    w.stamp = run_stamp(self.cfg, run, digests=self.digests)
                except FusionError as e:
                    w.stamp = f"error:{e}"
                w.stamped = (self.config_id, state.signature)
            stamp = w.stamp
            if stamp == w.processed:
                continue
            folder = self.out / run.name
            if not self.overwrite and w.processed is None and read_stamp(folder) == stamp:
                w.processed = stamp
                self._say(f"unchanged {run.name} (its result is in place)")
                continue
            ready.append((run.name, stamp))
        return ready

    def finished(self, name, stamp, outcome, report, error):
        self.runs[name].processed = stamp
        try:
            self.digests.save(self.out)
        except OSError as e:
            log.warning("cannot keep the input digests in %s (%s)", self.out, e.strerror or e)
        if outcome.status == "failed":
            self.failures[name] = outcome.error
            self._say(f"FAILED  {name}: {outcome.error}")
        else:
            self.failures.pop(name, None)
            verdict = (outcome.summary or {}).get("verdict", "")
            where = "report updated" if report else "no report ([output] report = false)"
            self._say(f"{outcome.status:<7} {name} ({outcome.seconds:.1f} s){': ' + verdict if verdict else ''}; "
                      f"{where}")
        if error:
            self._say(f"FAILED  campaign report: {error}")


def _age(signature) -> float:
    """Seconds since the newest modification among the files of a signature."""
    times = [s[-1] for s in signature if isinstance(s, tuple) and len(s) >= 3 and isinstance(s[-1], int)]
    return time.time() - max(times) / 1e9 if times else 0.0


def _stop_child(executor, future, out, grace=30.0):
    """End the run in progress through its own clean-up (SIGINT), then remove what it left."""
    procs = list((getattr(executor, "_processes", None) or {}).values())
    # Ctrl-C reaches the child too, SIGTERM only the watcher; a second SIGINT that cuts the
    # child's own clean-up short is made good by removing the leftovers below
    for p in procs:
        if p.is_alive() and not future.done():
            with contextlib.suppress(OSError):
                os.kill(p.pid, signal.SIGINT)
    for p in procs:
        p.join(grace)
        if p.is_alive():
            p.kill()
            p.join()
    recover(out)


def _in_child(config_path, name, out, overwrite, failures):
    """One run and the products in a fresh child process; on Ctrl-C the child is stopped first."""
    ctx = multiprocessing.get_context("spawn")
    level = logging.getLogger("fusion").getEffectiveLevel()
    with cf.ProcessPoolExecutor(max_workers=1, mp_context=ctx, initializer=_child_start,
                                initargs=(os.getpid(), level)) as executor:
        future = executor.submit(_process_and_refresh, str(config_path), name, str(out), overwrite,
                                 dict(failures))
        try:
            while not future.done():
                cf.wait([future], timeout=0.5)
            return future.result()
        except cf.process.BrokenProcessPool as e:
            return RunOutcome(name, "failed", error=f"the run's process ended unexpectedly ({e})"), None, None
        except Exception as e:  # a bug in the child: keep watching, say so plainly
            log.debug("run %s crashed", name, exc_info=True)
            return RunOutcome(name, "failed", error=f"internal error ({type(e).__name__}: {e}); rerun with "
                              "--debug and report it"), None, None
        except KeyboardInterrupt:
            _stop_child(executor, future, out)
            raise


def watch_campaign(config_path, *, out=None, settle=5.0, interval=1.0, overwrite=False, emit=print,
                   polls=None) -> int:
    """Process each run of a config as soon as its inputs are complete; stop on Ctrl-C or SIGTERM.

    Parameters
    ----------
    config_path : path
        The campaign config; read again whenever it changes.
    out : path, optional
        Output folder (default: the config's ``[output] folder``, else ``results`` beside it).
    settle : float
        Seconds a run's inputs must stay unchanged (sizes and modification times) before it
        is processed.
    interval : float
        Seconds between two looks at the inputs.
    overwrite : bool
        Replace results made from other inputs or settings (as ``fusion run --overwrite``).
    emit : callable
        Receives each line to print.
    polls : int, optional
        Stop after this many looks (tests); default: until interrupted.

    Returns
    -------
    int
        The number of runs processed.
    """
    if not settle >= 0 or not interval > 0:
        raise ValueError(f"settle must be >= 0 and interval > 0 seconds, got {settle!r} and {interval!r}")
    cfg = load_config(config_path)
    out = Path(cfg.output_folder(out))
    processed = 0
    with campaign_lock(out):
        watcher = _Watcher(config_path, out, settle=settle, overwrite=overwrite, emit=emit)
        watcher.reload()
        emit(f"fusion watch: {len(watcher.cfg.runs)} runs of {config_path}, results in {out}; inputs checked "
             f"every {interval:g} s, processed once unchanged for {settle:g} s; Ctrl-C stops")
        try:
            n = 0
            while polls is None or n < polls:
                n += 1
                watcher.reload()
                for name, stamp in watcher.ready_runs():
                    outcome, report, error = _in_child(config_path, name, out, overwrite, watcher.failures)
                    watcher.finished(name, stamp, outcome, report, error)
                    processed += 1
                    watcher.reload()
                if polls is None or n < polls:
                    time.sleep(interval)
        except KeyboardInterrupt:
            emit(f"{time.strftime('%H:%M:%S')} stopped: {processed} run(s) processed; results in {out}")
    return processed
