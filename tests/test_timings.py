"""The seconds of a run's steps: their accounting (summary.json ``timings``) and the terminal line."""

import re

import pytest

import fusion._timing as timing
from fusion._timing import STEP_ORDER, Timings, current, step
from fusion.campaign import CampaignOutcome, RunOutcome
from fusion.campaign._outcome import timing_line


class _Clock:
    """A clock the test moves by hand."""

    def __init__(self):
        self.now = 100.0

    def __call__(self):
        return self.now


@pytest.fixture
def clock(monkeypatch):
    c = _Clock()
    monkeypatch.setattr(timing.time, "perf_counter", c)
    return c


def test_steps_count_their_own_time_and_add_up_to_the_run(clock):
    # not a physics check: the bookkeeping of nested steps
    t = Timings()
    with t.active():
        clock.now += 1.0                     # before any step: "other"
        with step("strain inputs"):
            clock.now += 0.5
            with step("correlation"):
                clock.now += 3.0
            clock.now += 0.25
            with step("strain fit"):
                clock.now += 1.0
        with step("figures"):
            clock.now += 2.0
        with step("lock-in"):
            clock.now += 0.75
        with step("lock-in"):                # a step met twice adds up
            clock.now += 0.25
        with step("my step"):                # a step outside the run's order goes last
            clock.now += 0.5
    d = t.to_dict()
    assert d["steps"] == {"strain inputs": 0.75, "correlation": 3.0, "strain fit": 1.0, "lock-in": 1.0,
                          "figures": 2.0, "my step": 0.5}
    assert list(d["steps"]) == ["strain inputs", "correlation", "strain fit", "lock-in", "figures", "my step"]
    assert d["total"] == 9.25 and d["other"] == 1.0


def test_steps_are_not_recorded_without_active_timings(clock):
    # not a physics check: the library called directly records nothing
    assert current() is None
    with step("correlation"):
        clock.now += 1.0
    t = Timings()
    with t.active():
        assert current() is t
    assert current() is None and t.to_dict()["steps"] == {}


def test_a_failing_step_is_still_counted(clock):
    # not a physics check: the time of a step that raises is kept
    t = Timings()
    with t.active(), pytest.raises(RuntimeError):
        with step("registration"):
            clock.now += 2.0
            raise RuntimeError("boom")
    assert t.to_dict()["steps"] == {"registration": 2.0}


def test_terminal_line_lists_the_steps_in_run_order():
    # not a physics check: the one-line breakdown under a finished run
    timings = {"steps": {"correlation": 12.34, "lock-in": 0.61, "predictions": 0.01, "figures": 1.25},
               "other": 0.4, "total": 14.6}
    assert timing_line(timings) == "correlation 12.3 s, lock-in 0.6 s, figures 1.2 s, other 0.4 s"
    assert timing_line(None) is None and timing_line({"steps": "x"}) is None
    summary = {"verdict": "signal from the surface ply", "warnings": [], "timings": timings}
    text = CampaignOutcome(out="out", runs=[RunOutcome("R1", "done", summary=summary, seconds=15.0),
                                            RunOutcome("R2", "done", summary={"verdict": "v"})]).describe()
    lines = text.splitlines()
    i = next(k for k, line in enumerate(lines) if "done    R1" in line)
    assert lines[i + 1] == "          time: correlation 12.3 s, lock-in 0.6 s, figures 1.2 s, other 0.4 s"
    assert sum("time:" in line for line in lines) == 1      # R2's summary has no timings


def test_step_names_of_the_run_are_known():
    # not a physics check: the steps fusion's run records are in the order the summary keeps
    assert len(set(STEP_ORDER)) == len(STEP_ORDER)
    assert {"correlation", "lock-in", "registration", "figures", "result.nc"} <= set(STEP_ORDER)


@pytest.mark.slow
def test_kernels_compiled_on_first_use_are_said_once(tmp_path):
    # not a physics check: a fresh compile cache (as on a new installation) makes the first run
    # compile its numeric kernels; the terminal says that its time includes them, the next run
    # (kernels from the cache) does not
    import os
    import subprocess
    import sys

    import numpy as np

    from _inputs import stack, write_config, write_load, write_strain

    rng = np.random.default_rng(5)
    t = np.arange(400) / 50.0
    np.save(tmp_path / "ir.npy", stack(t, 5.0, -0.08, rng))
    write_load(tmp_path / "load.csv", t, 5.0)
    write_strain(tmp_path / "strain.csv")
    cfg = write_config(tmp_path, run='frequency = "5 Hz"', thermal='frame_rate = "50 Hz"', dic='coordinates = "mm"')
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "kernels"))
    argv = [sys.executable, "-m", "fusion.cli", "run", str(cfg), "--out", str(tmp_path / "out"), "--overwrite"]
    first = subprocess.run(argv, env=env, capture_output=True, text=True)
    assert first.returncode == 0, first.stderr
    assert re.search(r"time: .*\(includes compiling \d+ numeric kernels? on first use; cached for later runs\)",
                     first.stdout), first.stdout
    again = subprocess.run(argv, env=env, capture_output=True, text=True)
    assert again.returncode == 0, again.stderr
    assert "time:" in again.stdout and "compiling" not in again.stdout, again.stdout
