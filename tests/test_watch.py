"""``fusion watch``: runs processed once, as soon as their files are complete; config reloads; a
watcher killed or stopped mid-run leaves only whole results and picks up again when restarted."""

import os
import signal
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import tifffile
import xarray as xr

from fusion.campaign import LOCK_NAME, campaign_lock
from fusion.campaign._watch import _Watcher
from fusion.io._atomic import parse_temp_name

from _campaigns import FRAMES, ROOT, write_campaign

ENV = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT)] + [p for p in [os.environ.get("PYTHONPATH")] if p]))


def _sequence_campaign(folder, rng, amplitudes=(-0.15,)):
    """The shared synthetic campaign with each run's frames as a folder of TIFFs (moved out of the
    stacks written by write_campaign) and frame_count set; returns the config and the frames."""
    cfg = write_campaign(folder, amplitudes, rng=rng)
    stacks = []
    text = cfg.read_text()
    for k in range(len(amplitudes)):
        stacks.append(np.load(folder / f"ir{k}.npy"))
        (folder / f"ir{k}.npy").unlink()
        text = text.replace(f'frames = "ir{k}.npy"', f'frames = "ir{k}"\nframe_count = {FRAMES}')
    cfg.write_text(text)
    return cfg, stacks


def _write_frames(folder, stack, *, pause=0.0, check=None):
    folder.mkdir(parents=True, exist_ok=True)
    for i, frame in enumerate(stack):
        tmp = folder / f".frame_{i:05d}.tif.part"      # as acquisition software does: write, then rename
        tifffile.imwrite(tmp, frame)
        os.replace(tmp, folder / f"frame_{i:05d}.tif")
        if check is not None:
            check(i)
        if pause:
            time.sleep(pause)


def _start(cfg, out, log, *extra):
    return subprocess.Popen([sys.executable, "-m", "fusion.cli", "watch", str(cfg), "--out", str(out),
                             "--settle", "1", "--interval", "0.2", *extra],
                            cwd=ROOT, env=ENV, stdout=log, stderr=subprocess.STDOUT)


def _wait_for(predicate, proc, log_path, timeout=180.0):
    deadline = time.monotonic() + timeout
    while not predicate():
        assert proc.poll() is None, "the watcher ended: " + log_path.read_text()[-3000:]
        assert time.monotonic() < deadline, "timed out; watcher said: " + log_path.read_text()[-3000:]
        time.sleep(0.05)


def _stop(proc, sig=signal.SIGTERM, timeout=60):
    if proc.poll() is None:
        proc.send_signal(sig)
    try:
        return proc.wait(timeout)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def _whole(out, name):
    """A visible run folder is whole: result.nc opens with its maps, summary.json is there."""
    with xr.open_dataset(out / name / "result.nc") as ds:
        assert "ratio_measured" in ds and ds.attrs["run_name"] == name
    assert (out / name / "summary.json").is_file()


def _leftovers(out):
    return [p.name for p in out.iterdir() if parse_temp_name(p.name) is not None]


@pytest.mark.slow
def test_run_appears_once_after_its_last_frame_and_appended_runs_follow(tmp_path, rng):
    # Not a physics check: the watcher's timing and bookkeeping (the maps are those of fusion run).
    cfg, (stack,) = _sequence_campaign(tmp_path / "data", rng)
    out = tmp_path / "out"
    log_path = tmp_path / "watch.log"
    with open(log_path, "w") as log:
        proc = _start(cfg, out, log)
        try:
            _wait_for(lambda: "fusion watch: 1 runs" in log_path.read_text(), proc, log_path, 60)
            seen_early = []

            def no_result_yet(i):
                if (out / "R0").exists():
                    seen_early.append(i)

            # frames arrive one by one over about 3 s; the run is complete at its 600th file
            _write_frames(tmp_path / "data" / "ir0", stack, pause=3.0 / FRAMES, check=no_result_yet)
            last_written = time.time()
            assert not seen_early, f"a result appeared before the last frame (after frame {seen_early[0]})"
            # the line comes once the run is published and the report rebuilt
            _wait_for(lambda: " done    R0 " in log_path.read_text(), proc, log_path)
            _whole(out, "R0")
            assert (out / "R0").stat().st_mtime >= last_written
            report = out / "report.html"
            assert report.is_file() and "R0" in report.read_text()
            first_report = report.stat().st_mtime_ns

            # a run appended to the config during the day is picked up, the first is not redone
            _, (stack1,) = _sequence_campaign(tmp_path / "more", rng, amplitudes=(-0.2,))
            _write_frames(tmp_path / "data" / "ir1", stack1)
            text = cfg.read_text()
            block = text[text.index("[[run]]"):].replace('"R0"', '"R1"').replace('"ir0"', '"ir1"')
            cfg.write_text(text + "\n" + block)
            _wait_for(lambda: " done    R1 " in log_path.read_text(), proc, log_path)
            assert report.stat().st_mtime_ns > first_report and "R1" in report.read_text()
            time.sleep(2.0)          # several more looks: nothing is processed again
        finally:
            code = _stop(proc)
    said = log_path.read_text()
    assert code == 0, said
    assert said.count(" done    R0 ") == 1 and said.count(" done    R1 ") == 1, said
    assert "config reloaded: 2 runs, new: R1" in said and "report updated" in said, said
    assert "stopped: 2 run(s) processed" in said, said
    summary = (out / "R0" / "summary.json").read_text()
    assert f'"n_frames": {FRAMES}' in summary
    assert not _leftovers(out)


@pytest.mark.slow
def test_watcher_killed_mid_run_then_restarted(tmp_path, rng):
    # Not a physics check: crash safety of the watch (SIGKILL, then a restart, then SIGTERM mid-run).
    cfg, stacks = _sequence_campaign(tmp_path / "data", rng, amplitudes=(-0.15, -0.2))
    for k, stack in enumerate(stacks):
        _write_frames(tmp_path / "data" / f"ir{k}", stack)
    out = tmp_path / "out"
    log_path = tmp_path / "watch1.log"
    with open(log_path, "w") as log:
        proc = _start(cfg, out, log)
        try:
            _wait_for(lambda: out.is_dir() and any(".fusion-partial-" in p.name for p in out.iterdir()), proc, log_path)
            os.kill(proc.pid, signal.SIGKILL)        # as `kill -9`: no clean-up code of the watcher runs
            proc.wait(30)
        finally:
            _stop(proc, signal.SIGKILL)
    # the child processing the run dies with the watcher: nothing is published after the kill
    time.sleep(3.0)
    visible = sorted(p.name for p in out.iterdir() if not p.name.startswith(".") and p.is_dir())
    for name in visible:
        _whole(out, name)
    assert visible != ["R0", "R1"], "both runs finished before the kill: the test did not kill mid-run"
    before = {n: (out / n).stat().st_mtime_ns for n in visible}

    log_path = tmp_path / "watch2.log"
    with open(log_path, "w") as log:
        proc = _start(cfg, out, log)
        try:
            _wait_for(lambda: all(f"done    {n}" in log_path.read_text() or f"unchanged {n}" in log_path.read_text()
                                  for n in ("R0", "R1")), proc, log_path)
        finally:
            code = _stop(proc)
    said = log_path.read_text()
    assert code == 0, said
    for name in ("R0", "R1"):
        _whole(out, name)
    assert "R0" in (out / "report.html").read_text() and "R1" in (out / "report.html").read_text()
    for name, mtime in before.items():           # a whole result of the first watcher is kept
        assert (out / name).stat().st_mtime_ns == mtime and f"unchanged {name}" in said
    assert not _leftovers(out)

    # SIGTERM while a run is in progress: it is abandoned cleanly and the lock is released
    (out / "R1").rename(tmp_path / "R1-kept")
    log_path = tmp_path / "watch3.log"
    with open(log_path, "w") as log:
        proc = _start(cfg, out, log)
        try:
            _wait_for(lambda: any(p.name.startswith(".R1.fusion-partial-") for p in out.iterdir()), proc, log_path)
        finally:
            code = _stop(proc, signal.SIGTERM)
    said = log_path.read_text()
    assert code == 0 and "stopped: 0 run(s) processed" in said, said
    assert not _leftovers(out) and not (out / "R1").exists()
    with campaign_lock(out):
        pass
    assert (out / LOCK_NAME).is_file()


# ------------------------------------------------------------------------------ in process, fast
def _clocked(cfg, out, now, lines):
    w = _Watcher(cfg, out, settle=5.0, overwrite=False, emit=lines.append, clock=lambda: now[0])
    w.reload()
    return w


def test_settle_period_and_completion(tmp_path, rng):
    """Not a physics check: a run is ready only when its sequence is complete and its files have
    not changed for the settle period (a clock of the test's own)."""
    cfg, (stack,) = _sequence_campaign(tmp_path / "data", rng)
    now, lines = [1000.0], []
    w = _clocked(cfg, tmp_path / "out", now, lines)
    _write_frames(tmp_path / "data" / "ir0", stack[:-1])
    assert w.ready_runs() == []                       # 599 of 600 frames
    _write_frames(tmp_path / "data" / "ir0", stack)   # complete, just written
    assert w.ready_runs() == []
    now[0] += 4.0
    assert w.ready_runs() == []
    now[0] += 1.5
    assert [n for n, _ in w.ready_runs()] == ["R0"]
    # files last changed long ago are settled at first sight (a watcher started after the test)
    old = time.time() - 60
    for p in (tmp_path / "data").rglob("*"):
        os.utime(p, (old, old))
    w2 = _clocked(cfg, tmp_path / "out", now, lines)
    assert [n for n, _ in w2.ready_runs()] == ["R0"]
    # a changed file starts the settle period again
    _write_frames(tmp_path / "data" / "ir0", stack[:1])
    assert w2.ready_runs() == []


def test_config_reload_keeps_a_good_config_over_a_broken_edit(tmp_path, rng):
    """Not a physics check: a broken edit of the config is reported once; the last good one stays."""
    cfg, _ = _sequence_campaign(tmp_path / "data", rng, amplitudes=(-0.1, -0.2))
    lines = []
    w = _clocked(cfg, tmp_path / "out", [0.0], lines)
    text = cfg.read_text()
    cfg.write_text(text + "\n[[run]]\nname = 'bad'\n")
    os.utime(cfg, ns=(time.time_ns() + 10**9,) * 2)
    w.reload()
    w.reload()
    assert len(lines) == 1 and "config not reloaded" in lines[0] and "run 'bad'.thermal" in lines[0], lines
    assert sorted(w.runs) == ["R0", "R1"]
    cfg.write_text(text[: text.index('[[run]]\nname = "R1"')])
    os.utime(cfg, ns=(time.time_ns() + 2 * 10**9,) * 2)
    w.reload()
    assert sorted(w.runs) == ["R0"] and "config reloaded: 1 runs" in lines[-1]


def test_a_day_of_looks_does_not_grow_in_memory(tmp_path, rng):
    """Not a physics check: memory of the watcher's loop. Hundreds of looks at a campaign whose
    runs are waiting, settled or processed leave the watcher's own memory (traced by Python's
    tracemalloc) where it was; runs are processed in child processes that end with the run."""
    cfg, stacks = _sequence_campaign(tmp_path / "data", rng, amplitudes=(-0.1, -0.2))
    cfg.write_text(cfg.read_text().replace(f"frame_count = {FRAMES}", "frame_count = 60"))
    _write_frames(tmp_path / "data" / "ir0", stacks[0][:10])          # R0 waits for its frames
    _write_frames(tmp_path / "data" / "ir1", stacks[1][:60])          # R1 complete ...
    now = [0.0]
    w = _clocked(cfg, tmp_path / "out", now, [])
    assert w.ready_runs() == []                                       # R1 settling
    now[0] += 10.0
    (name, stamp), = w.ready_runs()
    w.runs[name].processed = stamp                                    # ... and processed

    def looks(n):
        for _ in range(n):
            now[0] += 1.0
            w.reload()
            assert w.ready_runs() == []

    looks(100)
    tracemalloc.start()
    try:
        looks(20)
        base = tracemalloc.get_traced_memory()[0]
        looks(200)
        grown = tracemalloc.get_traced_memory()[0] - base
    finally:
        tracemalloc.stop()
    # a leak of even 100 bytes a look would show as 20 kB here
    assert grown < 16 * 1024, f"the watcher's memory grew by {grown} bytes over 200 looks"


def test_watch_refuses_a_second_writer(tmp_path, rng):
    """Not a physics check: the watcher holds the campaign lock."""
    cfg, _ = _sequence_campaign(tmp_path / "data", rng)
    out = tmp_path / "out"
    with campaign_lock(out):
        code = subprocess.run([sys.executable, "-m", "fusion.cli", "watch", str(cfg), "--out", str(out)],
                              cwd=ROOT, env=ENV, capture_output=True, text=True, timeout=120)
    assert code.returncode == 1
    assert "another fusion process is writing to this output folder" in code.stderr
