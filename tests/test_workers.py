"""Local worker processes and what happens before any starts: the config is validated first, bad
arguments end in one line, and nothing outlives a campaign that is refused."""

import os
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import pytest

from fusion.campaign import _schedule, run_campaign
from fusion.cli import main
from fusion.errors import ConfigError

from _campaigns import ROOT, write_campaign  # noqa: E402  (shared synthetic campaign)

LINUX = sys.platform.startswith("linux")


def _inside_worker():
    return {"pid": os.getpid(), "ppid": os.getppid(), "blas_threads": os.environ.get("OPENBLAS_NUM_THREADS"),
            "preloaded": "fusion.run" in sys.modules and "matplotlib.figure" in sys.modules}


def test_local_workers_start_warm_with_one_native_thread():
    before = {k: os.environ.get(k) for k in _schedule._THREAD_ENV}
    with _schedule._one_native_thread():
        pool = _schedule._process_pool(1)
        try:
            got = pool.submit(_inside_worker).result(timeout=120)
        finally:
            pool.shutdown(wait=True)
    assert got["pid"] != os.getpid()
    if LINUX:
        # forked by the fork server (never a fork of this process's threads), the run's modules loaded
        assert got["ppid"] != os.getpid() and got["preloaded"], got
    assert got["blas_threads"] == "1"           # two workers on two cores must not start four
    assert {k: os.environ.get(k) for k in _schedule._THREAD_ENV} == before    # this process's as it was


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
def test_a_refused_config_starts_no_process(tmp_path, rng):
    # valid TOML with several runs, refused by validation: nothing may start before it
    cfg = write_campaign(tmp_path / "data", (-0.1, -0.12), rng=rng)
    cfg.write_text(cfg.read_text().replace('ply_thickness = "0.25 mm"', 'ply_thickness = "0.25 Hz"'))
    proc = subprocess.Popen([sys.executable, "-m", "fusion.cli", "run", str(cfg), "--out", str(tmp_path / "out")],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 1 and "ply_thickness" in err and err.count("\n") == 1, err
    deadline = time.monotonic() + 30
    while _session_processes(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not _session_processes(proc.pid)
    assert not (tmp_path / "out").exists()        # refused before the output folder is touched


@pytest.mark.parametrize("value", ["-1", "0", "two", "1.5"])
def test_bad_worker_count_is_a_usage_error_in_one_line(tmp_path, capsys, value):
    with pytest.raises(SystemExit) as stop:
        main(["run", str(tmp_path / "c.toml"), "--workers", value])
    err = capsys.readouterr().err
    assert stop.value.code == 2
    assert "argument --workers: expected a whole number of at least 1" in err and "Traceback" not in err


@pytest.mark.parametrize("value", [-1, 0, True, 2.5])
def test_bad_worker_count_in_the_api_is_refused_before_anything(tmp_path, value):
    with pytest.raises(ConfigError, match=r"--workers: expected a whole number of at least 1"):
        run_campaign(tmp_path / "missing.toml", out=tmp_path / "out", workers=value)
    assert not (tmp_path / "out").exists()


def test_deeply_nested_config_is_one_line_for_run(tmp_path, capsys):
    p = tmp_path / "c.toml"
    p.write_text("a = " + "[" * 50000 + "]" * 50000 + "\n")
    code = main(["run", str(p), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1 and "nested too deeply" in err[0], err
    assert not (tmp_path / "out").exists()


def test_huge_config_is_refused_by_its_size_before_parsing(tmp_path, capsys, monkeypatch):
    p = tmp_path / "c.toml"
    with open(p, "w") as fh:                      # 38 MB of valid TOML
        fh.write('[campaign]\nname = "big"\n')
        for i in range(38 * 1024 * 1024 // 40):
            fh.write(f"# padding line {i:023d}\n")
    assert p.stat().st_size > 38e6

    def never(*a, **k):
        raise AssertionError("the config was parsed before its size was checked")

    monkeypatch.setattr(tomllib, "loads", never)
    monkeypatch.setattr(tomllib, "load", never)
    code = main(["run", str(p), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1 and "a config is at most" in err[0], err
