"""Runs as tasks on Dask schedulers give the same results as in one process.

A small campaign of our own (three runs with different, known temperature ranges) is processed
in-process, on local worker processes and on a dask.distributed LocalCluster of two worker
processes on loopback through ``fusion run --scheduler``; every variable and attribute of each
result.nc must be identical. Also: worker-count limits, unreachable and blind clusters, progress.
"""

import io
import logging
import re
import socket

import numpy as np
import pytest
import xarray as xr

from fusion.campaign import _schedule
from fusion.cli import main
from fusion.errors import InputError
from fusion.campaign import run_campaign

from _campaigns import T0, write_campaign  # noqa: E402  (shared synthetic campaign)

AMPLITUDES = (-0.10, -0.15, -0.20)      # K, signed range dT of each run (tension cools)


@pytest.fixture(autouse=True)
def _fusion_logger():
    """``fusion.cli.main`` installs its own stderr handler; give each test the logger as it was."""
    logger = logging.getLogger("fusion")
    saved = logger.handlers[:], logger.level, logger.propagate
    yield
    logger.handlers[:], logger.level, logger.propagate = saved[0], saved[1], saved[2]


def _open(path):
    with xr.open_dataset(path) as ds:
        return ds.load()


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    folder = tmp_path_factory.mktemp("campaign")
    cfg = write_campaign(folder / "data", AMPLITUDES, rng=np.random.default_rng(20261201))
    ref = run_campaign(cfg, out=folder / "in-process", scheduler="synchronous")
    assert ref.ok, ref.describe()
    return cfg, folder


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None, silence_logs=logging.ERROR) as c:
        yield c


def _assert_same_results(folder_a, folder_b, names):
    for name in names:
        a, b = _open(folder_a / name / "result.nc"), _open(folder_b / name / "result.nc")
        assert sorted(a.data_vars) == sorted(b.data_vars)
        # every variable, coordinate and attribute, bit for bit: a task must not depend on where it runs
        xr.testing.assert_identical(a, b)


def test_in_process_run_recovers_the_built_in_ranges(campaign):
    cfg, folder = campaign
    for k, amp in enumerate(AMPLITUDES):
        ds = _open(folder / "in-process" / f"R{k}" / "result.nc")
        valid = ds["valid"].values.astype(bool)
        # independent forward model: frames T0 + (dT/2) cos(theta) + N(0, sigma); the lock-in's
        # per-pixel std is sigma sqrt(8/N) = 2.3 mK (Kay 1993, ch. 4), so the mean over ~1900
        # pixels is within 0.05 mK: 0.5 mK is ten times that
        assert valid.sum() > 1500
        assert abs(float(np.nanmean(ds["delta_T"].values[valid])) - amp) < 5e-4
        assert abs(float(np.nanmean(ds["T0"].values[valid])) - T0) < 1e-3


def test_local_cluster_through_cli_matches_in_process(campaign, cluster, capsys):
    cfg, folder = campaign
    out = folder / "cluster"
    assert main(["run", str(cfg), "--out", str(out), "--scheduler", cluster.scheduler_address]) == 0
    printed = capsys.readouterr().out
    assert "3 of 3 runs ok" in printed
    _assert_same_results(folder / "in-process", out, [f"R{k}" for k in range(len(AMPLITUDES))])


def test_local_processes_match_in_process(campaign):
    cfg, folder = campaign
    res = run_campaign(cfg, out=folder / "processes", scheduler="processes", workers=2)
    assert res.ok, res.describe()
    assert [r.name for r in res.runs] == ["R0", "R1", "R2"]     # config order, whatever finished first
    _assert_same_results(folder / "in-process", folder / "processes", ["R0", "R1", "R2"])


def test_threads_kind_runs_one_at_a_time(campaign, caplog, tmp_path):
    cfg, folder = campaign
    with caplog.at_level(logging.INFO, logger="fusion"):
        res = run_campaign(cfg, out=tmp_path / "o", scheduler="threads", workers=2)
    assert res.ok, res.describe()
    assert [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING
            and "one run at a time" in r.getMessage()]
    _assert_same_results(folder / "in-process", tmp_path / "o", ["R0", "R1", "R2"])


def test_finished_runs_are_not_sent_to_workers(campaign, cluster, monkeypatch):
    cfg, folder = campaign

    def no_dispatch(*a, **k):
        raise AssertionError("a finished run was scheduled again")

    monkeypatch.setattr(_schedule, "_dispatch", no_dispatch)
    res = run_campaign(cfg, out=folder / "in-process", scheduler=cluster.scheduler_address)
    assert [r.status for r in res.runs] == ["skipped"] * 3


def test_workers_blind_to_the_config_are_named(campaign, cluster, tmp_path):
    cfg, _ = campaign
    from distributed import Client

    from fusion.config import load_config

    c = load_config(cfg)
    ghost = type("Cfg", (), {"path": tmp_path / "only-on-the-client.toml", "sha256": c.sha256,
                             "compute": c.compute})()
    with Client(cluster.scheduler_address, set_as_default=False) as client:
        with pytest.raises(InputError, match=r"visible to every worker at the same path") as e:
            _schedule._check_workers(client, ghost, tmp_path)
    assert "only-on-the-client.toml" in str(e.value) and "\n" not in str(e.value)


def test_unreachable_scheduler_is_one_line(campaign, monkeypatch, capsys, tmp_path):
    cfg, _ = campaign
    with socket.socket() as s:          # a loopback port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setattr(_schedule, "CONNECT_TIMEOUT", 2.0)
    address = f"tcp://127.0.0.1:{port}"
    assert main(["run", str(cfg), "--out", str(tmp_path / "o"), "--scheduler", address]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert address in err[0] and "cannot reach the Dask scheduler" in err[0]


def test_bad_scheduler_kind_is_refused(campaign, tmp_path, capsys):
    cfg, _ = campaign
    assert main(["run", str(cfg), "--out", str(tmp_path / "o"), "--scheduler", "cluster"]) == 1
    err = capsys.readouterr().err
    assert "--scheduler" in err and "'cluster'" in err and "tcp://HOST:PORT" in err


@pytest.mark.parametrize("requested, runs, budget, available, cores, expected", [
    (None, 10, 1e8, 1e12, 4, 4),        # default: every core
    (8, 3, 1e8, 1e12, 2, 3),            # no more workers than runs
    (8, 10, 2e9, 5.0e9, 8, 2),          # memory: 5.0 GB // (2 GB + 0.4 GB) = 2
    (8, 10, 2e9, 1e9, 8, 1),            # even without room for one, one run at a time
    (3, 10, 1e8, None, 8, 3),           # available memory unknown: no memory limit
])
def test_worker_count_limits(requested, runs, budget, available, cores, expected):
    # arithmetic of the stated rule, min(workers, runs, available // (budget + baseline))
    n, reason = _schedule.plan_workers(requested, runs, budget, available=available, cores=cores)
    assert n == expected and reason
    assert _schedule.WORKER_BASELINE == 400e6   # the baseline the cases above are computed with


def test_worker_count_rejects_bad_values():
    with pytest.raises(ValueError, match=r"workers must be a positive integer, got 0"):
        _schedule.plan_workers(0, 3, 1e8)
    with pytest.raises(ValueError, match=r"memory_budget must be a positive number of bytes, got -1"):
        _schedule.plan_workers(2, 3, -1)


def test_one_log_line_per_run_when_not_interactive(campaign, caplog, tmp_path):
    cfg, _ = campaign
    with caplog.at_level(logging.INFO, logger="fusion"):
        res = run_campaign(cfg, out=tmp_path / "o", workers=1, progress=True)   # stderr is no terminal
    assert res.ok
    lines = [r.getMessage() for r in caplog.records if r.name == "fusion.campaign._schedule" and r.levelno >= logging.INFO]
    for name in ("R0", "R1", "R2"):
        mine = [m for m in lines if f" {name} " in m]
        assert len(mine) == 1 and "done" in mine[0], lines
    with caplog.at_level(logging.INFO, logger="fusion"):
        caplog.clear()
        run_campaign(cfg, out=tmp_path / "o", workers=1)
    assert sum("skipped" in r.getMessage() for r in caplog.records if r.name == "fusion.campaign._schedule") == 3


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_bars_on_a_terminal(campaign, caplog, monkeypatch, tmp_path):
    cfg, _ = campaign
    term = _Terminal()
    monkeypatch.setattr("sys.stderr", term)
    with caplog.at_level(logging.INFO, logger="fusion"):
        res = run_campaign(cfg, out=tmp_path / "o", workers=1, progress=True)
    assert res.ok
    text = term.getvalue()
    assert re.search(r"campaign: 100%\|.*\| 3/3 ", text), text   # the campaign bar (tqdm)
    assert re.search(r"lock-in: .*\| 600/600 ", text), text      # the bar of the long step
    for name in ("R0", "R1", "R2"):
        assert f"] {name} done" in text                            # a line per run above the bar
    # the terminal shows the lines; the log does not repeat them
    assert not [r for r in caplog.records if r.name == "fusion.campaign._schedule" and r.levelno == logging.INFO
                and " R0 " in r.getMessage()]
