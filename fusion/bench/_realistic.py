"""Benchmark: a run of realistic size end to end, against its compute core.

The inputs (:mod:`fusion.bench._realistic_data`) are generated once into the cache: an
infrared stack of 640 x 512 px int16 counts (2000 frames by default, 1.3 GB), two speckle
images of 2448 x 2048 px correlated with subsets of 31 px every 10 px (about 35 000 points inside the coupon's mask), a
homography from six markers. Measured, all in one call of the benchmark:

* in a fresh interpreter, in turns: the **compute core** (the lock-in pass over the stack and
  the correlation at the run's points, called as the run calls them) and the **whole run**
  (:func:`fusion.campaign.process_run`, figures and report files included); the first turn
  loads what the process has not loaded yet and is reported apart, the later turns give
  ``run_overhead_ratio`` = whole run / compute core (median of the turns' ratios);
* between those turns, ``fusion run`` as a user types it (a fresh process: interpreter start,
  imports, kernel loading, the run, the campaign report): ``run_cli_ratio`` = its wall time /
  the compute core of the same turn;
* the seconds of each step of the run (summary.json ``timings`` of the last whole run) and the
  peak resident memory of the ``fusion run`` process (``run_peak_rss_mb``), beside the memory
  a run may hold under its budget: ``[compute] memory_budget`` plus what the worker planner
  counts per worker (``WORKER_BASELINE``).

The machine is shared: ratios are taken within one turn and their median and spread
(smallest, largest) reported.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from ..campaign._schedule import WORKER_BASELINE
from ._realistic_data import FRAMES, IR_SHAPE, VIS_SHAPE, realistic_config, realistic_inputs

log = logging.getLogger(__name__)

__all__ = ["bench_realistic", "QUICK_FRAMES"]

#: Frames of the realistic run at quick sizes (a smoke test; its ratios are not judged).
QUICK_FRAMES = 200
#: ``[compute] memory_budget`` of the run, bytes.
BUDGET = 500e6
#: Subset and grid step of the correlation (px).
SUBSET, STEP = 31, 10

# one turn after another in a fresh interpreter: core, whole run; times on stdout as JSON lines
_CHILD = r"""
import json, sys, time
t0 = time.perf_counter()
import numpy as np
from fusion.campaign import process_run
from fusion.config import load_config
from fusion.dic import correlate
from fusion.io import open_frames, read_image, read_load_signal
from fusion.thermal import lockin
imports = time.perf_counter() - t0
cfg_path, out, turns = sys.argv[1], sys.argv[2], int(sys.argv[3])
import os
os.makedirs(out, exist_ok=True)
cfg = load_config(cfg_path)
run = cfg.runs[0]
th, dic = run.thermal, run.dic

def core():
    t = time.perf_counter()
    frames = open_frames(th.frames, dtype=th.dtype, shape=th.shape, byte_order=th.byte_order,
                         header_bytes=th.header_bytes)
    sig = read_load_signal(th.load)
    row_bytes = 8 * int(np.prod(frames.shape[1:]))
    chunk = int(max(16, min(4096, cfg.compute.memory_budget // max(1, 4 * row_bytes))))
    lockin(frames, frequency=run.frequency, frame_rate=th.frame_rate, load=sig.load, load_times=sig.times,
           gain=th.gain, offset=th.offset, chunk_frames=chunk)
    t_lockin = time.perf_counter() - t
    ref, moved = (read_image(p) for p in dic.images)
    mask = read_image(dic.mask) > 0
    t = time.perf_counter()
    res = correlate(ref, moved, subset=dic.subset, step=dic.step, region=mask)
    return t_lockin, time.perf_counter() - t, int(np.size(res.u))

print(json.dumps({"imports": imports}), flush=True)
for k in range(turns):
    t_lockin, t_corr, points = core()
    t = time.perf_counter()
    o = process_run(cfg_path, run.name, out, overwrite=True)
    t_run = time.perf_counter() - t
    summary = o.summary or {}
    print(json.dumps({"turn": k, "lockin": t_lockin, "correlation": t_corr, "points": points, "run": t_run,
                      "status": o.status, "error": o.error, "timings": summary.get("timings")}), flush=True)
    sys.stdin.readline()       # the parent times `fusion run` meanwhile
"""


def _peak_rss_mb(pid: int) -> float | None:
    """The peak resident memory of a running process so far (``VmHWM``, Linux), MB."""
    try:
        with open(f"/proc/{pid}/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return None


def _cli_run(cfg, out):
    """Wall seconds and peak resident memory (MB) of one ``fusion run`` command, or (None, None).

    The peak is polled from ``/proc/<pid>/status`` while the command runs: the rusage of a
    child (``ru_maxrss``) keeps the peak of the process it was forked from across ``exec``
    on Linux, so it would report this benchmark's own memory. Elsewhere ``ru_maxrss``.
    """
    root = str(Path(__file__).resolve().parents[2])
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([root] + [p for p in [os.environ.get("PYTHONPATH")] if p]))
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "fusion.cli", "-q", "run", str(cfg), "--out", str(out),
                             "--overwrite"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    peaks = []
    stop = threading.Event()

    def poll():
        while not stop.wait(0.02):
            peak = _peak_rss_mb(proc.pid)
            if peak is not None:
                peaks.append(peak)

    watcher = threading.Thread(target=poll, daemon=True)
    watcher.start()
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - t0
    stop.set()
    watcher.join()
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        log.warning("benchmark run_realistic: `fusion run` failed: %s",
                    err.decode(errors="replace").strip().splitlines()[-1:] or proc.returncode)
        return None, None
    if peaks:
        return seconds, max(peaks)
    # ru_maxrss: kilobytes on Linux, bytes on macOS
    return seconds, usage.ru_maxrss / (1024 * 1024 if sys.platform == "darwin" else 1024)


def _spread(values):
    vals = [v for v in values if v is not None]
    if not vals:
        return None, None, None
    return statistics.median(vals), min(vals), max(vals)


def bench_realistic(*, quick: bool = False, frames: int | None = None, turns: int | None = None) -> dict:
    """A run of realistic size end to end against its compute core (see the module notes).

    Parameters
    ----------
    quick : bool
        :data:`QUICK_FRAMES` frames, two turns and no ratios (a smoke test of the whole
        path; at that size start-up costs dominate and a ratio means nothing).
    frames : int, optional
        Frames of the infrared stack (default 2000, or :data:`QUICK_FRAMES` with ``quick``).
    turns : int, optional
        Turns of (compute core, whole run, ``fusion run``) (default 4; 2 with ``quick``).

    Returns
    -------
    dict
        ``run_overhead_ratio``, ``run_cli_ratio`` (medians over the turns after the first)
        with ``_min`` and ``_max``; ``run_seconds``, ``run_core_seconds``,
        ``run_cli_seconds`` (medians); ``run_peak_rss_mb`` (largest over the ``fusion run``
        commands) and ``run_memory_limit_mb``; ``run_realistic``: sizes, points, the first
        turn, and ``steps`` (summary.json ``timings`` of the last whole run).
    """
    frames = int(frames or (QUICK_FRAMES if quick else FRAMES))
    turns = max(2, int(turns or (2 if quick else 4)))
    t_gen = time.perf_counter()
    data = realistic_inputs(frames)
    t_gen = time.perf_counter() - t_gen
    tmp = Path(tempfile.mkdtemp(prefix="fusion-bench-realistic-"))
    rows, cli, peaks = [], [], []
    imports = None
    try:
        cfg = tmp / "run.toml"
        cfg.write_text(realistic_config(data, budget=f"{BUDGET / 1e6:g} MB", subset=SUBSET, step=STEP))
        root = str(Path(__file__).resolve().parents[2])
        env = dict(os.environ, PYTHONPATH=os.pathsep.join([root] + [p for p in [os.environ.get("PYTHONPATH")] if p]))
        child = subprocess.Popen([sys.executable, "-c", _CHILD, str(cfg), str(tmp / "inproc"), str(turns)],
                                 env=env, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                 text=True)
        try:
            imports = json.loads(child.stdout.readline() or "{}").get("imports")
            for _ in range(turns):
                line = child.stdout.readline()
                if not line:
                    break
                row = json.loads(line)
                if row.get("status") != "done":
                    log.warning("benchmark run_realistic: the run failed: %s", row.get("error"))
                    break
                rows.append(row)
                seconds, peak = _cli_run(cfg, tmp / "cli")
                cli.append(seconds)
                peaks.append(peak)
                child.stdin.write("\n")
                child.stdin.flush()
        finally:
            child.stdin.close()
            err = child.stderr.read()
            if child.wait() != 0:
                log.warning("benchmark run_realistic: the measuring process failed: %s",
                            err.strip().splitlines()[-1:] if err else child.returncode)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    if not rows:
        return {"run_overhead_ratio": None, "run_cli_ratio": None}

    warm = rows[1:] if len(rows) > 1 else rows
    warm_cli = cli[1:len(rows)] if len(rows) > 1 else cli
    core = [r["lockin"] + r["correlation"] for r in warm]
    ratio = _spread([r["run"] / c for r, c in zip(warm, core)])
    cli_ratio = _spread([s / c if s else None for s, c in zip(warm_cli, core)])
    first = rows[0]
    detail = {
        "frames": frames, "subset": SUBSET, "step": STEP, "ir_shape": list(IR_SHAPE), "visible_shape": list(VIS_SHAPE),
        "points": first["points"], "turns": len(rows), "generate_seconds": round(t_gen, 2),
        "imports_seconds": imports,
        "first_turn": {"core_seconds": first["lockin"] + first["correlation"], "run_seconds": first["run"],
                       "cli_seconds": cli[0] if cli else None},
        "core": {"lockin_seconds": statistics.median(r["lockin"] for r in warm),
                 "correlation_seconds": statistics.median(r["correlation"] for r in warm)},
        "steps": rows[-1].get("timings"),
    }
    out = {
        "run_seconds": statistics.median(r["run"] for r in warm),
        "run_core_seconds": statistics.median(core),
        "run_cli_seconds": _spread(warm_cli)[0],
        "run_peak_rss_mb": max((p for p in peaks if p is not None), default=None),
        "run_memory_limit_mb": (BUDGET + WORKER_BASELINE) / 1e6,
        "run_realistic": detail,
    }
    if not quick:
        out.update(run_overhead_ratio=ratio[0], run_overhead_ratio_min=ratio[1], run_overhead_ratio_max=ratio[2],
                   run_cli_ratio=cli_ratio[0], run_cli_ratio_min=cli_ratio[1], run_cli_ratio_max=cli_ratio[2])
    return out
