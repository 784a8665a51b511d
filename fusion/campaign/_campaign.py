"""The campaign pipeline: every ``[[run]]`` of a config through every step, safely.

:func:`run_campaign` validates the config, then processes its runs (one task per
run, on local worker processes or a Dask cluster), publishes each run's folder
whole (a run's folder appears complete or not at all), skips runs whose inputs
and settings are unchanged, keeps going when a run fails, and then rebuilds the
campaign products from every complete run folder: ``frequency.nc`` for specimens
tested at two or more frequencies, the campaign figures and ``report.html``.
:func:`check_campaign` validates a config and its inputs without processing.
"""

from __future__ import annotations

import logging
from pathlib import Path

from ..config import Config, RunSpec, load_config
from ..errors import ConfigError, FusionError
from ..run import check_run_inputs
from ._folders import campaign_lock, check_campaign_targets
from ._outcome import CampaignOutcome
from ._products import write_campaign
from ._provenance import DigestCache
from ._schedule import schedule_runs

log = logging.getLogger(__name__)

__all__ = ["run_campaign", "check_campaign"]


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
    progress : bool
        A campaign bar (and step bars) on a terminal, else a log line per finished run.

    Returns
    -------
    CampaignOutcome
        Per-run outcomes and the campaign files written.
    """
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise ConfigError("--workers", f"expected a whole number of at least 1, got {workers!r}")
    cfg = load_config(config_path)      # validated before anything starts
    for m in cfg.deprecations:          # said once here; each run's warnings repeat it
        log.warning("warning: %s", m)
    out = Path(cfg.output_folder(out))
    runs = _select(cfg, only)
    with campaign_lock(out):
        digests = DigestCache.load(out)
        outcomes = schedule_runs(cfg, runs, out, overwrite=overwrite, scheduler=scheduler or cfg.compute.scheduler,
                                 workers=workers or cfg.compute.workers, progress=progress, digests=digests)
        result = CampaignOutcome(out=out, runs=outcomes)
        try:
            check_campaign_targets(out)
            result.frequency, result.report, result.bands = write_campaign(cfg, out, outcomes,
                                                                           digests=digests)
        except FusionError as e:
            result.campaign_errors.append(str(e))
        except OSError as e:
            # disk full, the file-size limit, a share gone: the file being written is left as it was
            where = e.filename or out
            result.campaign_errors.append(f"{where}: {e.strerror or e} (that file left as it was)")
        try:
            digests.save(out)
        except OSError as e:
            result.campaign_errors.append(f"{out}: cannot keep the input digests ({e.strerror or e})")
    return result


def check_campaign(config_path) -> list[str]:
    """Validate a config and every input file it names (existence, format, shape).

    Returns the lines to print; raises :class:`~fusion.errors.FusionError` at the
    first problem (naming the key or file).
    """
    cfg = load_config(config_path)
    lines = [f"{cfg.path}: config valid ({len(cfg.runs)} runs, {len(cfg.laminates)} laminates, "
             f"{len(cfg.materials)} materials)"]
    for run in cfg.runs:
        lines.append(f"  {run.name}: " + check_run_inputs(cfg, run, key=run.config_key))
        lines += [f"  warning: {m}" for m in run.deprecations()]
    lines.append("ok")
    return lines
