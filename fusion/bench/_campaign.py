"""Benchmark: a campaign of demo-sized runs on two local workers against one by one.

Both timings are whole ``fusion run`` commands in fresh processes, as a user types
them: interpreter start, imports, the runs (figures included, as in the demo) and the
campaign report. They differ only in ``--workers 1`` against ``--workers 2
--scheduler processes``. The compiled kernels are cached on disk by a warm-up
command first, so neither timing pays for compilation. The machine is shared and
noisy: the two commands alternate and the best of ``repeats`` of each is kept.
"""

from __future__ import annotations

import logging
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

log = logging.getLogger(__name__)

__all__ = ["bench_campaign", "campaign_config"]

# demo runs whose inputs are frame stacks and imported strain (the common case)
_TEMPLATE_RUNS = ("CQ-0p05Hz", "CX-2Hz", "GP-0p05Hz", "CQ-150Hz")


def campaign_config(data_folder: Path, n_runs: int, *, figures: bool = True) -> str:
    """A config of ``n_runs`` copies of demo runs, each its own specimen, as TOML text.

    The copies read the demo's input files (relative paths: the config must be written
    into ``data_folder``).
    """
    text = (Path(data_folder) / "demo.toml").read_text()
    head, *blocks = re.split(r"(?m)^\[\[run\]\]\s*$", text)
    by_name = {re.search(r'name = "([^"]+)"', b).group(1): b for b in blocks}
    if not figures:
        head = head.replace("figures = true", "figures = false")
    out = [head]
    for i in range(n_runs):
        name = _TEMPLATE_RUNS[i % len(_TEMPLATE_RUNS)]
        block = by_name[name].replace(f'name = "{name}"', f'name = "{name}-copy{i}"', 1)
        block = block.replace(f'specimen = "{name[:2]}"', f'specimen = "{name[:2]}-copy{i}"', 1)
        out.append("[[run]]" + block)
    return "".join(out)


def _fusion_run(cfg, out, *options):
    """Wall time of one ``fusion run`` command in a fresh interpreter, s (None if it failed)."""
    root = str(Path(__file__).resolve().parents[2])
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([root] + [p for p in [os.environ.get("PYTHONPATH")] if p]))
    t0 = time.perf_counter()
    r = subprocess.run([sys.executable, "-m", "fusion.cli", "-q", "run", str(cfg), "--out", str(out), *options],
                       env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    seconds = time.perf_counter() - t0
    if r.returncode != 0:
        log.warning("benchmark campaign: `fusion run %s` failed: %s", " ".join(options),
                    (r.stderr or r.stdout).strip().splitlines()[-1:] or r.returncode)
        return None
    return seconds


def bench_campaign(*, quick: bool = False, repeats: int | None = None) -> dict:
    """Wall time of ``n`` demo-sized runs one by one and on two local worker processes.

    Parameters
    ----------
    quick : bool
        4 runs, one timing each (CI smoke test); else 8 runs, best of 3.
    repeats : int, optional
        Timings of each command (default 1 with ``quick``, else 3).

    Returns
    -------
    dict
        ``campaign_speedup`` (sequential over parallel wall time, None if a command
        failed), ``campaign_runs``, ``campaign_workers`` and the two times
        ``campaign_sequential_s`` and ``campaign_parallel_s`` in seconds.

    Notes
    -----
    Worker processes are spawned and import what a run needs before their first run;
    with demo-sized runs that start-up is as long as a few runs, so the speed-up grows
    with the size of the runs. Sequential runs use both cores inside their numba
    kernels, which caps what two workers can gain on two cores.
    """
    from ..demo import generate

    n = 4 if quick else 8
    repeats = int(repeats or (1 if quick else 3))
    data = generate().parent
    cfg = data / f".bench-campaign-{n}-{os.getpid()}.toml"
    tmp = Path(tempfile.mkdtemp(prefix="fusion-bench-"))
    seq, par = [], []
    try:
        cfg.write_text(campaign_config(data, n))
        # warm-up: every template once, so that the kernels of every input kind are in the disk cache
        _fusion_run(cfg, tmp / "warm", "--workers", "1",
                    *[a for i in range(len(_TEMPLATE_RUNS)) for a in ("--only", f"{_TEMPLATE_RUNS[i]}-copy{i}")])
        for k in range(repeats):
            seq.append(_fusion_run(cfg, tmp / f"seq{k}", "--workers", "1"))
            par.append(_fusion_run(cfg, tmp / f"par{k}", "--workers", "2", "--scheduler", "processes"))
    finally:
        cfg.unlink(missing_ok=True)
        shutil.rmtree(tmp, ignore_errors=True)
    ok = all(s is not None for s in seq + par)
    t_seq = min(seq) if ok else None
    t_par = min(par) if ok else None
    return {"campaign_speedup": (t_seq / t_par) if ok else None, "campaign_runs": n, "campaign_workers": 2,
            "campaign_sequential_s": t_seq, "campaign_parallel_s": t_par}
