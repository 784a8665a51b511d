"""Local worker processes: when a campaign starts the preloaded fork server, what a forked
worker inherits, and that nothing outlives a campaign that fails before it needs workers."""

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from fusion.campaign import _schedule, _workers

from _campaigns import ROOT, write_campaign  # noqa: E402  (shared synthetic campaign)

LINUX = sys.platform.startswith("linux")


def _config(tmp_path, runs=3, compute=""):
    text = "".join(f'[[run]]\nname = "R{k}"\n' for k in range(runs))
    path = tmp_path / "c.toml"
    path.write_text(compute + "\n" + text)
    return path


@pytest.mark.parametrize("kwargs, compute, runs, expected", [
    ({}, "", 3, True),
    ({}, "", 1, False),                                          # one run: processed in-process
    ({"workers": 1}, "", 3, False),
    ({"workers": 2}, "[compute]\nworkers = 1\n", 3, True),      # the argument wins, as in the pipeline
    ({}, "[compute]\nworkers = 1\n", 3, False),
    ({"scheduler": "threads"}, "", 3, False),
    ({}, '[compute]\nscheduler = "synchronous"\n', 3, False),
    ({}, '[compute]\nscheduler = "tcp://127.0.0.1:8786"\n', 3, False),
    ({"only": ["R1"]}, "", 3, False),
    ({"only": ["R0", "R2"]}, "", 3, True),
])
def test_workers_are_expected_only_for_local_parallel_campaigns(tmp_path, kwargs, compute, runs, expected,
                                                                monkeypatch):
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    assert _workers._wants_workers(_config(tmp_path, runs, compute), **kwargs) is expected


def test_unreadable_config_starts_nothing(tmp_path, monkeypatch):
    monkeypatch.setattr(os, "cpu_count", lambda: 8)
    bad = tmp_path / "bad.toml"
    bad.write_text('[[run]]\nname = "R0"\n[[run]\nname = ')
    assert _workers._wants_workers(bad) is False
    assert _workers._wants_workers(tmp_path / "missing.toml") is False
    monkeypatch.setattr(os, "cpu_count", lambda: 1)
    assert _workers._wants_workers(_config(tmp_path, 5)) is False


def _inside_worker():
    import sys as _sys

    return {"pipeline": "fusion.campaign" in _sys.modules, "matplotlib": "matplotlib.figure" in _sys.modules,
            "blas_threads": os.environ.get("OPENBLAS_NUM_THREADS"), "pid": os.getpid(), "ppid": os.getppid()}


@pytest.mark.skipif(not LINUX, reason="the fork server is used on Linux only")
def test_forked_worker_starts_with_the_run_modules_and_one_native_thread():
    before = {k: os.environ.get(k) for k in _workers._THREAD_ENV}
    pool = _schedule._process_pool(1)
    try:
        got = pool.submit(_inside_worker).result(timeout=120)
    finally:
        pool.shutdown(wait=True)
    assert got["pipeline"] and got["matplotlib"], got
    assert got["blas_threads"] == "1"
    assert got["ppid"] != os.getpid()          # forked by the server, not by this process
    assert {k: os.environ.get(k) for k in _workers._THREAD_ENV} == before    # this process's left as it was


def _session_processes(sid):
    found = []
    for p in Path("/proc").iterdir():
        if not p.name.isdigit():
            continue
        try:
            text = (p / "stat").read_text()
        except OSError:
            continue
        fields = text[text.rindex(")") + 2:].split()
        if int(fields[3]) == sid and fields[0] not in "ZX":
            found.append(int(p.name))
    return found


@pytest.mark.skipif(not LINUX, reason="reads /proc")
def test_a_config_refused_after_the_early_start_leaves_no_process(tmp_path, rng):
    # valid TOML with several runs (so the fork server starts at once), then refused by validation
    cfg = write_campaign(tmp_path / "data", (-0.1, -0.12), rng=rng)
    cfg.write_text(cfg.read_text().replace('ply_thickness = "0.25 mm"', 'ply_thickness = "0.25 Hz"'))
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT)] + [p for p in [os.environ.get("PYTHONPATH")] if p]))
    proc = subprocess.Popen([sys.executable, "-m", "fusion.cli", "run", str(cfg), "--out", str(tmp_path / "out")],
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 1 and "ply_thickness" in err and err.count("\n") == 1, err
    # the server notices that the campaign process is gone between its preload steps
    deadline = time.monotonic() + 30
    while _session_processes(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not _session_processes(proc.pid)
