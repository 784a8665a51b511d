"""One run of a campaign into its folder of the output folder, published whole or not at all."""

from __future__ import annotations

import logging
import shutil
import time
from pathlib import Path

from .._timing import Timings, compiled_kernels, step
from ..config import Config, load_config
from ..errors import ConfigError, FusionError, InputError
from ..io import make_temp_folder, safe_child
from ..run import compute_run, frames_within_budget, input_digests, write_run
from ._folders import is_marked_folder, mark_folder, publish, refuse_foreign
from ._outcome import RunOutcome
from ._provenance import DigestCache, read_stamp, read_summary, run_stamp

log = logging.getLogger(__name__)

__all__ = ["process_run"]


def process_run(config_path, run_name: str, out, *, overwrite: bool = False,
                progress: bool = False, config: Config | None = None) -> RunOutcome:
    """Process one run of a config into ``out/<run name>/``; never raises for bad input.

    The function reads the config itself so that it can run on a Dask worker.
    """
    t0 = time.perf_counter()
    with Timings().active():
        return _process(config_path, run_name, out, overwrite=overwrite, progress=progress, config=config, t0=t0)


def _process(config_path, run_name, out, *, overwrite, progress, config, t0) -> RunOutcome:
    compiled = compiled_kernels()
    try:
        cfg = config if config is not None else load_config(config_path)
        run = next((r for r in cfg.runs if r.name == run_name), None)
        if run is None:
            raise ConfigError("run", f"no run named {run_name!r}")
        out = Path(out)
        folder = safe_child(out, run.name)
        ours = is_marked_folder(folder, run.name)
        if not ours:
            refuse_foreign(folder, run.name)   # nothing there, or someone else's: never replaced
        # a header promising frames too large for the budget: refused before the stack is hashed
        frames_within_budget(run, cfg.compute.memory_budget)
        digests = DigestCache.load(out)        # the campaign process keeps it; read only here
        with step("input digests"):
            stamp = run_stamp(cfg, run, digests=digests)
            # the provenance of the result: the digests the stamp was made from (no second read)
            inputs = input_digests(run, digest=digests.digest)
        if ours and not overwrite:
            if read_stamp(folder) == stamp:
                return RunOutcome(run.name, "skipped", folder, seconds=time.perf_counter() - t0,
                                  summary=read_summary(folder), digests=digests.new)
            raise InputError(folder, "holds a result made from other inputs or settings; pass "
                             "--overwrite to replace it")
        tmp = make_temp_folder(out, run.name, "partial")
        try:
            result = compute_run(cfg, run, progress=progress)
            summary = write_run(result, tmp, cfg=cfg, run=run, stamp=stamp, inputs=inputs)
            digests.check_unchanged()          # the stamp names what was read
            mark_folder(tmp, run.name)         # last: a marked folder is a complete one
            publish(tmp, folder, run.name)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        return RunOutcome(run.name, "done", folder, seconds=time.perf_counter() - t0, summary=summary,
                          digests=digests.new, compiled=compiled_kernels() - compiled)
    except FusionError as e:
        log.info("run %s failed: %s", run_name, e)
        return RunOutcome(run_name, "failed", error=str(e), seconds=time.perf_counter() - t0)
    except MemoryError:
        return RunOutcome(run_name, "failed", error="out of memory; lower [compute] memory_budget",
                          seconds=time.perf_counter() - t0)
    except OSError as e:
        # the system refused a read or write (disk full, permissions, a share gone): name the
        # file, this is not a bug to report
        where = e.filename or out
        return RunOutcome(run_name, "failed", error=f"{where}: {e.strerror or e}",
                          seconds=time.perf_counter() - t0)
    except Exception as e:  # a bug: keep the batch going, say so plainly
        log.debug("run %s crashed", run_name, exc_info=True)
        return RunOutcome(run_name, "failed", error=f"internal error ({type(e).__name__}: {e}); "
                          "rerun with --debug and report it", seconds=time.perf_counter() - t0)
