"""The campaign pipeline: every ``[[run]]`` of a config through every step, safely.

:func:`run_campaign` processes the runs of a config (one task per run, locally
or on a Dask scheduler), writes each run's folder atomically (a run's folder
appears complete or not at all), skips runs whose inputs and config are
unchanged, keeps going when a run fails, and then writes the campaign
products: ``frequency.nc`` for specimens tested at two or more frequencies and
``report.html``. :func:`check_campaign` validates a config and its inputs
without processing.
"""

from __future__ import annotations

import contextlib
import dataclasses
import errno
import json
import logging
import os
import shutil
import stat
import tempfile
import time
from pathlib import Path

from . import __version__
from .config import Config, RunSpec, load_config
from .errors import ConfigError, FusionError, InputError
from .io import safe_child

log = logging.getLogger(__name__)

__all__ = ["run_campaign", "check_campaign", "process_run", "CampaignOutcome", "RunOutcome",
           "run_stamp", "campaign_lock"]

LOCK_NAME = ".fusion.lock"


@dataclasses.dataclass
class RunOutcome:
    """What became of one run: ``status`` is "done", "skipped" or "failed"."""

    name: str
    status: str
    folder: Path | None = None
    error: str | None = None
    seconds: float = 0.0
    summary: dict | None = None


@dataclasses.dataclass
class CampaignOutcome:
    """What became of a campaign."""

    out: Path
    runs: list
    report: Path | None = None
    frequency: Path | None = None
    campaign_errors: list = dataclasses.field(default_factory=list)

    @property
    def ok(self) -> bool:
        return all(r.status != "failed" for r in self.runs) and not self.campaign_errors

    def describe(self) -> str:
        lines = []
        for r in self.runs:
            if r.status == "failed":
                lines.append(f"  FAILED  {r.name}: {r.error}")
            elif r.status == "skipped":
                lines.append(f"  skipped {r.name} (unchanged since its last result; --overwrite recomputes)")
            else:
                verdict = (r.summary or {}).get("verdict", "")
                lines.append(f"  done    {r.name} ({r.seconds:.1f} s){': ' + verdict if verdict else ''}")
        for e in self.campaign_errors:
            lines.append(f"  FAILED  campaign: {e}")
        n_fail = sum(r.status == "failed" for r in self.runs)
        head = (f"{len(self.runs) - n_fail} of {len(self.runs)} runs ok" if self.runs else "no runs")
        lines.insert(0, f"fusion: {head}; results in {self.out}")
        if self.frequency:
            lines.append(f"  frequency sweep fit: {self.frequency}")
        if self.report:
            lines.append(f"  report: {self.report}")
        return "\n".join(lines)


# --------------------------------------------------------------------------- provenance
def _input_files(run: RunSpec) -> list[Path]:
    files = []
    for spec in (run.thermal, run.dic):
        for f in dataclasses.fields(spec):
            v = getattr(spec, f.name)
            if isinstance(v, Path):
                files.append(v)
            elif isinstance(v, tuple) and v and all(isinstance(x, Path) for x in v):
                files.extend(v)
    return files


def _quick_file_id(path: Path) -> list:
    """Size and modification time: cheap identity for the skip check (hashes come with results)."""
    try:
        st = path.stat()
    except OSError:
        return [str(path), None]
    return [str(path), st.st_size, st.st_mtime_ns]


def run_stamp(cfg: Config, run: RunSpec) -> str:
    """A hash of everything that determines a run's result (its config, laminate, materials,
    registration, diagnosis settings, input file identities and the package version)."""
    import hashlib

    lam = cfg.laminate_for(run)
    parts = {
        "version": __version__,
        "run": repr(run),
        "laminate": repr(lam),
        "registration": repr(cfg.registration_for(run)),
        "diagnosis": repr(cfg.diagnosis),
        "output": repr((cfg.output.figures, cfg.output.formats, cfg.output.dpi, cfg.output.profile_line)),
        "inputs": [_quick_file_id(p) for p in _input_files(run)],
    }
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()


# --------------------------------------------------------------------------- output safety
@contextlib.contextmanager
def campaign_lock(out: Path):
    """Hold an exclusive lock on the output folder (refuse a concurrent ``fusion run``)."""
    import fcntl

    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(out, f"cannot be used as the output folder ({e.strerror or e}); expected a "
                         "folder that can be created or written") from e
    lock_path = out / LOCK_NAME
    try:
        # O_NOFOLLOW: a lock "file" planted as a link would have us truncate its target
        fd = os.open(lock_path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW, 0o644)
    except OSError as e:
        if e.errno == errno.ELOOP:
            raise InputError(lock_path, "is a symbolic link; fusion keeps its lock file inside the "
                             "output folder and will not write through a link (remove it)") from e
        raise InputError(lock_path, f"cannot create the lock file of the output folder "
                         f"({e.strerror or e}); check that the folder is writable") from e
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise InputError(lock_path, "is not a regular file; remove it")
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as e:
            if e.errno in (errno.EAGAIN, errno.EACCES):
                raise InputError(out, "another fusion process is writing to this output folder; "
                                 "wait for it to finish or choose another --out") from e
            raise
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode())
        _remove_partials(out)
        yield
    finally:
        with contextlib.suppress(OSError):
            import fcntl as _f
            _f.flock(fd, _f.LOCK_UN)
        os.close(fd)


def _remove_partials(out: Path) -> None:
    """Remove what an interrupted batch left: hidden ``.NAME.partial-*`` run folders,
    ``.NAME.trash-*`` folders and the ``.NAME.*.tmp`` files of unfinished atomic writes
    (report, frequency fit, campaign figures). Links are removed, never followed."""
    for pattern in (".*.partial-*", ".*.trash-*"):
        for p in out.glob(pattern):
            if p.is_symlink():
                with contextlib.suppress(OSError):
                    p.unlink()
            else:
                shutil.rmtree(p, ignore_errors=True)
    figures = out / "figures"
    for folder in (out, figures) if figures.is_dir() and not figures.is_symlink() else (out,):
        for p in folder.glob(".*.tmp"):
            if p.is_file() or p.is_symlink():
                with contextlib.suppress(OSError):
                    p.unlink()


def _check_campaign_targets(out: Path) -> None:
    """Refuse campaign outputs that a link would carry outside ``out`` (figures/ is written
    into; report.html and frequency.nc are replaced by rename, which replaces a link itself)."""
    figures = out / "figures"
    if figures.is_symlink():
        raise InputError(figures, f"is a symbolic link (to {os.readlink(figures)!r}); campaign figures "
                         "are written only inside the output folder: remove the link")
    if figures.exists() and not figures.is_dir():
        raise InputError(figures, "exists and is not a folder; remove it")


def _read_stamp(folder: Path) -> str | None:
    try:
        return json.loads((folder / "summary.json").read_text()).get("provenance", {}).get("stamp")
    except (OSError, ValueError, AttributeError):
        return None


def _publish(tmp: Path, folder: Path) -> None:
    """Move a finished temporary run folder into place (replacing an old one)."""
    if folder.exists() or folder.is_symlink():
        trash = folder.parent / f".{folder.name}.trash-{os.getpid()}"
        os.replace(folder, trash)
        os.replace(tmp, folder)
        shutil.rmtree(trash, ignore_errors=True)
    else:
        os.replace(tmp, folder)


# --------------------------------------------------------------------------- one run
def process_run(config_path, run_name: str, out, *, overwrite: bool = False,
                progress: bool = False, config: Config | None = None) -> RunOutcome:
    """Process one run of a config into ``out/<run name>/``; never raises for bad input.

    The function reads the config itself so that it can run on a Dask worker.
    """
    t0 = time.perf_counter()
    try:
        cfg = config if config is not None else load_config(config_path)
        run = next((r for r in cfg.runs if r.name == run_name), None)
        if run is None:
            raise ConfigError("run", f"no run named {run_name!r}")
        out = Path(out)
        folder = safe_child(out, run.name)
        stamp = run_stamp(cfg, run)
        if folder.exists() or folder.is_symlink():
            if folder.is_symlink() or not folder.is_dir():
                raise InputError(folder, "exists and is not a result folder; remove it or choose another --out")
            if not overwrite:
                if _read_stamp(folder) == stamp:
                    return RunOutcome(run.name, "skipped", folder, seconds=time.perf_counter() - t0,
                                      summary=_read_summary(folder))
                raise InputError(folder, "holds a result made from other inputs or settings; pass "
                                 "--overwrite to replace it")
        tmp = Path(tempfile.mkdtemp(prefix=f".{run.name}.partial-", dir=out))
        # mkdtemp makes the folder private (0700); a published result follows the umask
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o777 & ~umask)
        try:
            from ._runner import compute_run, write_run

            result = compute_run(cfg, run, progress=progress)
            summary = write_run(result, tmp, cfg=cfg, run=run, stamp=stamp)
            _publish(tmp, folder)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        return RunOutcome(run.name, "done", folder, seconds=time.perf_counter() - t0, summary=summary)
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


def _read_summary(folder: Path) -> dict | None:
    try:
        return json.loads((folder / "summary.json").read_text())
    except (OSError, ValueError):
        return None


# --------------------------------------------------------------------------- the campaign
def _select(cfg: Config, only) -> list[RunSpec]:
    if not only:
        return list(cfg.runs)
    names = {r.name for r in cfg.runs}
    missing = [n for n in only if n not in names]
    if missing:
        raise ConfigError("--only", f"no run named {missing[0]!r}; runs: {sorted(names)}", source=str(cfg.path))
    return [r for r in cfg.runs if r.name in set(only)]


def run_campaign(config_path, *, out=None, overwrite: bool = False, only=None, scheduler=None,
                 workers=None, progress: bool = False) -> CampaignOutcome:
    """Process the runs of a config and write the campaign products.

    Parameters
    ----------
    config_path : path
        The campaign config (TOML).
    out : path, optional
        Output folder (default: the config's ``[output] folder``, else ``results`` beside it).
    overwrite : bool
        Recompute and replace existing results.
    only : list of str, optional
        Names of the runs to process.
    scheduler : str, optional
        Dask scheduler address or kind (``tcp://HOST:PORT``, ``processes``, ``threads``,
        ``synchronous``); default ``[compute] scheduler``, else in-process for one worker and
        local processes for more.
    workers : int, optional
        Runs processed at once (default ``[compute] workers``, else the number of cores).

    Returns
    -------
    CampaignOutcome
        Per-run outcomes and the campaign files written.
    """
    from ._workers import prestart

    prestart(config_path, workers=workers, scheduler=scheduler, only=only)   # no-op when started
    cfg = load_config(config_path)
    out = Path(cfg.output_folder(out))
    runs = _select(cfg, only)
    with campaign_lock(out):
        from ._schedule import schedule_runs

        outcomes = schedule_runs(cfg, runs, out, overwrite=overwrite, scheduler=scheduler or cfg.compute.scheduler,
                                 workers=workers or cfg.compute.workers, progress=progress)
        result = CampaignOutcome(out=out, runs=outcomes)
        try:
            from ._campaign import write_campaign

            _check_campaign_targets(out)
            result.frequency, result.report = write_campaign(cfg, out, outcomes, overwrite=True)
        except FusionError as e:
            result.campaign_errors.append(str(e))
    return result


def check_campaign(config_path) -> list[str]:
    """Validate a config and every input file it names (existence, format, shape).

    Returns the lines to print; raises :class:`~fusion.errors.FusionError` at the
    first problem (naming the key or file).
    """
    cfg = load_config(config_path)
    from ._runner import check_run_inputs

    lines = [f"{cfg.path}: config valid ({len(cfg.runs)} runs, {len(cfg.laminates)} laminates, "
             f"{len(cfg.materials)} materials)"]
    for i, run in enumerate(cfg.runs):
        lines.append(f"  {run.name}: " + check_run_inputs(cfg, run, key=f"run[{i}]"))
    lines.append("ok")
    return lines
