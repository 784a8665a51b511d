"""Resumable batches: a batch killed with SIGKILL leaves only whole result folders, and the rerun
processes exactly the runs that had not finished; a changed input or run section is not skipped;
a worker process that dies fails only the runs in flight."""

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from fusion.config import load_config
from fusion.campaign import run_campaign, run_stamp

from _campaigns import ROOT, write_campaign, write_stack  # noqa: E402  (shared synthetic campaign)

AMPLITUDES = (-0.10, -0.12, -0.14, -0.16, -0.18, -0.20)     # K, signed dT of runs R0..R5


def _write_campaign(folder, rng):
    return write_campaign(folder, AMPLITUDES, rng=rng)


def _stat(pid):
    """(state, parent pid) of a process from /proc, or None when it is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = text[text.rindex(")") + 2:].split()   # the command name may hold spaces
    return fields[0], int(fields[1])


def _children(pid):
    kids = []
    for p in Path("/proc").iterdir():
        if p.name.isdigit():
            st = _stat(int(p.name))
            if st and st[1] == pid:
                kids.append(int(p.name))
    return kids


def _cmdline(pid):
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return b""


def _descendants(pid):
    out, todo = [], [pid]
    while todo:
        kids = _children(todo.pop())
        out += kids
        todo += kids
    return out


def _worker_processes(pid):
    """The run workers under ``pid``: forked by the fork server (Linux), or spawned."""
    found = []
    for p in _descendants(pid):
        st = _stat(p)
        parent = st[1] if st else None
        if (parent is not None and b"forkserver" in _cmdline(parent)) or b"spawn_main" in _cmdline(p):
            found.append(p)
    return found


def _alive(pid):
    st = _stat(pid)
    return st is not None and st[0] not in "ZX"


def _visible_folders(out):
    return sorted(p.name for p in out.iterdir() if p.is_dir() and not p.name.startswith(".")) if out.exists() else []


def _assert_whole(out, name, cfg):
    """A result folder as a finished run writes it: summary with the run's stamp, a complete result.nc."""
    folder = out / name
    summary = json.loads((folder / "summary.json").read_text())
    run = next(r for r in cfg.runs if r.name == name)
    assert summary["provenance"]["stamp"] == run_stamp(cfg, run)
    with xr.open_dataset(folder / "result.nc") as ds:
        dT = ds["delta_T"].values
        valid = ds["valid"].values.astype(bool)
    # forward model of the stack: per-pixel lock-in std sigma sqrt(8/N) = 2.3 mK (Kay 1993, ch. 4);
    # the mean over ~1900 valid pixels is within 0.05 mK, so 0.5 mK tells every run apart (2e-2 K steps)
    assert valid.sum() > 1500
    assert abs(float(np.mean(dT[valid])) - AMPLITUDES[int(name[1:])]) < 5e-4


@pytest.mark.slow
def test_killed_batch_leaves_whole_folders_and_resumes(tmp_path, rng):
    cfg_path = _write_campaign(tmp_path / "data", rng)
    out = tmp_path / "out"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT)] + [p for p in [os.environ.get("PYTHONPATH")] if p]))
    with open(tmp_path / "stderr.txt", "w") as err:
        proc = subprocess.Popen([sys.executable, "-m", "fusion.cli", "-q", "run", str(cfg_path), "--out", str(out),
                                 "--workers", "2", "--scheduler", "processes"],
                                cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=err)
        try:
            deadline = time.monotonic() + 120
            while not _visible_folders(out):
                assert proc.poll() is None, "the batch ended before it could be killed: " + \
                    (tmp_path / "stderr.txt").read_text()[-2000:]
                assert time.monotonic() < deadline, "no run finished within 120 s"
                time.sleep(0.01)
            workers = _descendants(proc.pid)
            os.kill(proc.pid, signal.SIGKILL)       # as `kill -9`: no cleanup code of ours runs
        finally:
            if proc.poll() is None:
                proc.kill()
            proc.wait()
    assert proc.returncode == -signal.SIGKILL
    # the worker processes (and the fork server, multiprocessing's resource tracker)
    assert len(workers) >= 2, workers
    # the worker processes notice that the campaign process is gone and stop (its sentinel closes)
    deadline = time.monotonic() + 15
    while any(_alive(p) for p in workers) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not [p for p in workers if _alive(p)], "worker processes outlived the killed batch"

    cfg = load_config(cfg_path)
    finished = _visible_folders(out)
    names = [f"R{k}" for k in range(len(AMPLITUDES))]
    assert set(finished) < set(names) and finished, finished     # killed mid-way
    print(f"finished before the kill: {finished}")
    for name in finished:
        _assert_whole(out, name, cfg)

    again = run_campaign(cfg_path, out=out, workers=1)
    assert again.ok, again.describe()
    status = {r.name: r.status for r in again.runs}
    assert {n for n, s in status.items() if s == "skipped"} == set(finished)
    assert {n for n, s in status.items() if s == "done"} == set(names) - set(finished)
    assert not [p.name for p in out.iterdir() if ".partial-" in p.name or ".trash-" in p.name]
    for name in names:
        _assert_whole(out, name, cfg)


def test_changed_input_or_run_section_is_not_skipped(tmp_path, rng):
    cfg_path = _write_campaign(tmp_path / "data", rng)
    out = tmp_path / "out"
    assert run_campaign(cfg_path, out=out, workers=1, only=["R0", "R1", "R2"]).ok

    # new frames for R1 (another amplitude, so another size-and-time identity), a new note in R2's section
    new_amp = -0.30
    write_stack(tmp_path / "data" / "ir1.npy", new_amp, rng)
    os.utime(tmp_path / "data" / "ir1.npy", ns=(time.time_ns(), time.time_ns() + 10**9))
    text = cfg_path.read_text().replace('name = "R2"\n', 'name = "R2"\ndescription = "re-gripped"\n')
    cfg_path.write_text(text)

    res = run_campaign(cfg_path, out=out, workers=1, only=["R0", "R1", "R2"])
    status = {r.name: r for r in res.runs}
    assert status["R0"].status == "skipped"
    for name in ("R1", "R2"):
        assert status[name].status == "failed"
        assert "other inputs or settings" in status[name].error and "--overwrite" in status[name].error

    res = run_campaign(cfg_path, out=out, workers=1, only=["R0", "R1", "R2"], overwrite=True)
    assert [r.status for r in res.runs] == ["done"] * 3
    with xr.open_dataset(out / "R1" / "result.nc") as ds:
        valid = ds["valid"].values.astype(bool)
        # the recomputed result follows the new frames (same tolerance argument as _assert_whole)
        assert abs(float(np.mean(ds["delta_T"].values[valid])) - new_amp) < 5e-4


def test_dead_worker_process_fails_only_the_runs_in_flight(tmp_path, rng):
    cfg_path = _write_campaign(tmp_path / "data", rng)
    out = tmp_path / "out"
    done = {}
    batch = threading.Thread(target=lambda: done.setdefault(
        "outcome", run_campaign(cfg_path, out=out, workers=2, scheduler="processes")))
    batch.start()
    deadline = time.monotonic() + 60
    workers = []
    while not workers and time.monotonic() < deadline and batch.is_alive():
        workers = _worker_processes(os.getpid())
        time.sleep(0.01)
    assert workers, "no worker process started"
    os.kill(workers[0], signal.SIGKILL)     # as the kernel's out-of-memory killer would
    batch.join(120)
    assert not batch.is_alive()
    runs = done["outcome"].runs
    failed = [r for r in runs if r.status == "failed"]
    # killed while starting: it and its sibling held one run each (the pool stops the sibling too)
    assert 1 <= len(failed) <= 2, [(r.name, r.status, r.error) for r in runs]
    cfg = load_config(cfg_path)
    for r in failed:
        assert "worker process died" in r.error and "rerun to retry" in r.error
        assert not (out / r.name).exists()
    for r in runs:
        if r.status != "failed":
            assert r.status == "done"          # the runs not started went on in new workers
            _assert_whole(out, r.name, cfg)
    # a run stopped mid-way may leave its hidden partial folder, and nothing else does
    partial = {p.name[1:].split(".partial-")[0] for p in out.iterdir() if ".partial-" in p.name}
    assert partial <= {r.name for r in failed}, partial
    again = run_campaign(cfg_path, out=out, workers=1)
    assert again.ok and sorted(r.name for r in again.runs if r.status == "done") == sorted(r.name for r in failed)
    assert not [p.name for p in out.iterdir() if ".partial-" in p.name]     # the rerun cleared them
