"""Fault injection for the pipeline: bad inputs inside a campaign, kills, links and locks.

The inputs are the demo scenario's own generated files (``fusion.demo.generate``),
linked into a small campaign of its quick runs with figures and the report off.
Each case asserts the exit code, that the message names the offending file or
key, and that no partial output remains: a run folder is either whole (result.nc
opens, summary.json validates against its schema) or absent, and the hidden
``.NAME.fusion-partial-*`` folders are never visible as runs. The cases and their
outcomes are tabulated in DEVELOPERS.md ("Bad input: cases tried").
"""

from __future__ import annotations

import fcntl
import json
import os
import signal
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import numpy as np
import pytest

from fusion.cli import main
from fusion.io import parse_temp_name, read_netcdf, this_host
from fusion.campaign import LOCK_NAME, campaign_lock
from fusion.report import validate_summary

ROOT = Path(__file__).resolve().parents[1]
QUICK = ("CQ-0p05Hz", "CQ-150Hz", "CX-2Hz")   # the demo's fastest runs (strain tables, frames)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    from fusion.demo import generate

    return generate(tmp_path_factory.mktemp("demo")).parent


def _toml(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)   # a JSON string is a valid TOML basic string
    if isinstance(v, list):
        return "[" + ", ".join(_toml(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {_toml(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


def _table(name, d, out):
    out.append(f"[{name}]")
    out += [f"{k} = {_toml(v)}" for k, v in d.items()]


def campaign(demo, folder, runs=QUICK, *, edit=None):
    """A config of some demo runs in ``folder``, its inputs linked beside it.

    ``edit(run_table)`` may change a run's keys (a copy of the demo's table).
    """
    folder.mkdir(parents=True, exist_ok=True)
    doc = tomllib.loads((demo / "demo.toml").read_text())
    chosen = []
    for r in doc["run"]:
        if r["name"] in runs:
            r = json.loads(json.dumps(r))
            if edit:
                edit(r)
            chosen.append(r)
    out = [f"material_library = {_toml(doc['material_library'])}"]
    for name in sorted({r["laminate"] for r in chosen}):
        _table(f"laminates.{name}", doc["laminates"][name], out)
    _table("registration", doc["registration"], out)
    _table("diagnosis", {k: v for k, v in doc["diagnosis"].items() if k != "regions"}, out)
    _table("compute", doc.get("compute", {}), out)
    _table("output", {"figures": False, "report": False}, out)
    for r in chosen:
        out.append("[[run]]")
        out += [f"{k} = {_toml(v)}" for k, v in r.items() if not isinstance(v, dict)]
        for k, v in r.items():
            if isinstance(v, dict):
                _table(f"run.{k}", v, out)
    for p in demo.iterdir():
        link = folder / p.name
        if p.name != "demo.toml" and not link.exists():
            link.symlink_to(p)
    cfg = folder / "c.toml"
    cfg.write_text("\n".join(out) + "\n")
    return cfg


def replace_input(folder, name, data=None, *, text=None):
    """Replace the link ``folder/name`` by a real file with other contents (a bad copy)."""
    p = folder / name
    p.unlink(missing_ok=True)
    if text is not None:
        p.write_text(text)
    elif isinstance(data, np.ndarray):
        np.save(p, data)
    else:
        p.write_bytes(data)
    return p


def whole_run(folder: Path):
    """A run folder that looks whole must be whole."""
    ds = read_netcdf(folder / "result.nc")
    assert {"T0", "delta_T", "ratio_measured", "valid", "source_layer"} <= set(ds.data_vars)
    summary = json.loads((folder / "summary.json").read_text())
    validate_summary(summary)
    assert summary["provenance"]["stamp"]


def assert_clean(out: Path, done=(), absent=()):
    """``done`` runs whole, ``absent`` ones missing, nothing half-written left visible or hidden."""
    for name in done:
        whole_run(out / name)
    for name in absent:
        assert not (out / name).exists(), name
    leftovers = [p.name for p in out.iterdir() if parse_temp_name(p.name)]
    assert not leftovers, leftovers


def fusion_run(capsys, cfg, out, *extra):
    code = main(["run", str(cfg), "--out", str(out), "--scheduler", "synchronous", *extra])
    cap = capsys.readouterr()
    assert "Traceback" not in cap.out + cap.err
    return code, cap.out, cap.err


def failed_line(stdout, run):
    lines = [ln for ln in stdout.splitlines() if ln.strip().startswith(f"FAILED  {run}:")]
    assert len(lines) == 1, stdout
    return lines[0]


# ------------------------------------------------------------------------ bad inputs in a campaign
def _truncate(folder, name, frac=0.6):
    data = (folder / name).read_bytes()
    return replace_input(folder, name, data[: int(len(data) * frac)])


def _nan_frames(folder, name):
    shape = np.load(folder / name, mmap_mode="r").shape
    return replace_input(folder, name, np.full(shape, np.nan, np.float32))


def _nan_maps(folder, name):
    import netCDF4

    p = replace_input(folder, name, (folder / name).read_bytes())
    with netCDF4.Dataset(p, "a") as ds:
        ds["delta_T"][:] = np.nan
    return p


def _strain_cut(folder, name):
    text = (folder / name).read_text()
    cut = text.index(",", len(text) // 2) + 1        # inside a row: the last row is short
    return replace_input(folder, name, text=text[:cut])


def _strain_nan(folder, name):
    lines = (folder / name).read_text().splitlines()
    rows = [",".join(ln.split(",")[:2] + ["nan", "nan", "nan", "1"]) for ln in lines[1:]]
    return replace_input(folder, name, text="\n".join([lines[0]] + rows) + "\n")


def _folder(folder, name):
    (folder / name).unlink()
    (folder / name).mkdir()
    return folder / name


def _pickled_times(folder, name):
    marker = folder / "unpickled"
    times = np.empty(1000, dtype=object)
    times[:] = [_Touch(marker)] * 1000
    p = folder / name
    np.save(p, times, allow_pickle=True)
    return p


class _Touch:
    def __init__(self, path):
        self.path = str(path)

    def __reduce__(self):
        return (Path.touch, (Path(self.path),))


def _flat_load(folder, name):
    t = np.arange(1000) / 12.5
    return replace_input(folder, name, text="time,load\n" + "".join(f"{a},11000\n" for a in t))


# (case, run, file, damage, config edit, what the message must say)
BAD_INPUTS = [
    ("frames truncated", "CQ-0p05Hz", "CQ-0p05Hz_ir.npy", _truncate, None, "is truncated"),
    ("frames NaN-only", "CQ-0p05Hz", "CQ-0p05Hz_ir.npy", _nan_frames, None, "no usable pixel in the stack"),
    ("frames a folder", "CQ-0p05Hz", "CQ-0p05Hz_ir.npy", _folder, None, "is a folder"),
    ("frames random bytes", "CQ-0p05Hz", "CQ-0p05Hz_ir.npy",
     lambda f, n: replace_input(f, n, np.random.default_rng(1).bytes(5000)), None, "not a valid .npy"),
    ("frames dtype not the config's", "CQ-0p05Hz", "CQ-0p05Hz_ir.npy", None,
     lambda r: r["thermal"].update(dtype="uint16"), "holds dtype float32 but the config says uint16"),
    ("raw frames in the other byte order", "CQ-150Hz", "CQ-150Hz_ir.raw", None,
     lambda r: r["thermal"].update(byte_order="big"), "looks byte-swapped"),
    ("raw shape larger than the file", "CQ-150Hz", "CQ-150Hz_ir.raw", None,
     lambda r: r["thermal"].update(shape=[2000, 96, 80]), "needs 30720000"),
    ("load signal empty", "CQ-0p05Hz", "CQ-0p05Hz_load.csv", lambda f, n: replace_input(f, n, b""), None,
     "is empty"),
    ("load signal binary", "CQ-0p05Hz", "CQ-0p05Hz_load.csv",
     lambda f, n: replace_input(f, n, bytes(range(256)) * 8), None, "not a text file"),
    ("load signal flat", "CQ-150Hz", "CQ-150Hz_load.csv", _flat_load, None, "is constant (11000.0)"),
    ("strain table cut mid-row", "CQ-0p05Hz", "CQ-0p05Hz_strain.csv", _strain_cut, None, "looks truncated"),
    ("strain table NaN-only", "CQ-0p05Hz", "CQ-0p05Hz_strain.csv", _strain_nan, None, "no measured point"),
    ("maps delta_T NaN-only", "GP-100Hz", "GP-100Hz_maps.nc", _nan_maps, None, "delta_T has no finite value"),
    ("maps truncated", "GP-100Hz", "GP-100Hz_maps.nc", _truncate, None, "cannot be read as NetCDF"),
    ("frame times pickled", "CQ-0p05Hz", "CQ-0p05Hz_times.npy", _pickled_times,
     lambda r: r["thermal"].update(times="CQ-0p05Hz_times.npy"), "pickles are refused"),
]


@pytest.mark.parametrize("case, run, name, damage, edit, says", BAD_INPUTS, ids=[b[0] for b in BAD_INPUTS])
def test_bad_input_fails_its_run_cleanly(demo, tmp_path, capsys, case, run, name, damage, edit, says):
    folder = tmp_path / "in"
    cfg = campaign(demo, folder, (run,), edit=(lambda r: edit(r)) if edit else None)
    bad = damage(folder, name) if damage else folder / name
    out = tmp_path / "out"
    code, stdout, _ = fusion_run(capsys, cfg, out)
    assert code == 1
    line = failed_line(stdout, run)
    assert str(bad) in line and says in line, line
    assert_clean(out, absent=(run,))
    assert not (folder / "unpickled").exists()


# every case, NaN-only frames included (`fusion check` reads a sample of the frames)
CHECKABLE = BAD_INPUTS


@pytest.mark.parametrize("case, run, name, damage, edit, says", CHECKABLE, ids=[b[0] for b in CHECKABLE])
def test_check_finds_the_bad_input_first(demo, tmp_path, capsys, case, run, name, damage, edit, says):
    # `fusion check` opens every input: the same fault, one line, before any processing
    folder = tmp_path / "in"
    cfg = campaign(demo, folder, (run,), edit=(lambda r: edit(r)) if edit else None)
    bad = damage(folder, name) if damage else folder / name
    assert main(["check", str(cfg)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"fusion: error: {bad}") and says in err[0], err


def test_one_bad_run_does_not_stop_the_others(demo, tmp_path, capsys):
    folder = tmp_path / "in"
    cfg = campaign(demo, folder, ("CQ-0p05Hz", "CX-2Hz"))
    bad = _truncate(folder, "CX-2Hz_strain.csv", 0.5)
    out = tmp_path / "out"
    code, stdout, _ = fusion_run(capsys, cfg, out)
    assert code == 1
    assert str(bad) in failed_line(stdout, "CX-2Hz")
    assert "done    CQ-0p05Hz" in stdout
    assert_clean(out, done=("CQ-0p05Hz",), absent=("CX-2Hz",))


# ------------------------------------------------------------------------ faults while writing
def test_disk_full_while_writing_leaves_no_folder(demo, tmp_path, capsys, monkeypatch):
    import errno

    import fusion.run._write as writer

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device", str(tmp_path / "out" / "x.tmp"))

    monkeypatch.setattr(writer, "write_summary", full)
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    code, stdout, _ = fusion_run(capsys, cfg, tmp_path / "out")
    assert code == 1
    line = failed_line(stdout, "CQ-0p05Hz")
    assert "No space left on device" in line and "x.tmp" in line, line
    assert_clean(tmp_path / "out", absent=("CQ-0p05Hz",))


def test_interrupt_while_computing_leaves_no_folder(demo, tmp_path, capsys, monkeypatch):
    import fusion.campaign._process as process

    def interrupted(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(process, "write_run", interrupted)
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    assert main(["run", str(cfg), "--out", str(tmp_path / "out"), "--scheduler", "synchronous"]) == 130
    assert "interrupted" in capsys.readouterr().err
    assert_clean(tmp_path / "out", absent=("CQ-0p05Hz",))


def _dead_pid():
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_leftovers_of_an_interrupted_batch_are_removed(demo, tmp_path, capsys):
    # fusion's own temporary entries of a process that is gone are removed; look-alikes of
    # other programs (and of older versions) are someone else's and stay
    out = tmp_path / "out"
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "keep.txt").write_text("mine")
    out.mkdir()
    tag = f"{this_host()}-{_dead_pid()}-0123abcd"
    (out / f".CQ-0p05Hz.fusion-partial-{tag}").mkdir()
    (out / f".CQ-0p05Hz.fusion-partial-{tag}" / "result.nc").write_bytes(b"half")
    (out / f".report.html.fusion-tmp-{tag}").write_text("<html>half")
    (out / f".CQ-150Hz.fusion-partial-{tag}").symlink_to(outside, target_is_directory=True)
    foreign = [".CQ-0p05Hz.partial-abc", ".report.html.k2j3.tmp", ".CQ-150Hz.trash-12"]
    for name in foreign:
        (out / name).write_text("not fusion's")
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    code, _, _ = fusion_run(capsys, cfg, out)
    assert code == 0
    assert_clean(out, done=("CQ-0p05Hz",))
    assert all((out / name).read_text() == "not fusion's" for name in foreign)
    assert (outside / "keep.txt").read_text() == "mine"    # a planted link is never followed


# ------------------------------------------------------------------------ links and the lock
def test_run_folder_linked_outside_is_refused(demo, tmp_path, capsys):
    out, outside = tmp_path / "out", tmp_path / "outside"
    out.mkdir()
    outside.mkdir()
    (outside / "keep.txt").write_text("mine")
    (out / "CQ-0p05Hz").symlink_to(outside, target_is_directory=True)
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    code, stdout, _ = fusion_run(capsys, cfg, out)
    assert code == 1
    line = failed_line(stdout, "CQ-0p05Hz")
    assert str(out / "CQ-0p05Hz") in line and "outside the output folder" in line, line
    assert sorted(p.name for p in outside.iterdir()) == ["keep.txt"]
    assert (outside / "keep.txt").read_text() == "mine"
    assert_clean(out)


def test_run_folder_linked_inside_is_refused(demo, tmp_path, capsys):
    out = tmp_path / "out"
    (out / "elsewhere").mkdir(parents=True)
    (out / "CQ-0p05Hz").symlink_to(out / "elsewhere", target_is_directory=True)
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    code, stdout, _ = fusion_run(capsys, cfg, out)
    assert code == 1
    assert "is a symbolic link" in failed_line(stdout, "CQ-0p05Hz")
    assert not list((out / "elsewhere").iterdir())


@pytest.mark.parametrize("what", [LOCK_NAME, "figures"])
def test_campaign_files_linked_outside_are_refused(demo, tmp_path, capsys, what):
    out, outside = tmp_path / "out", tmp_path / "outside"
    out.mkdir()
    outside.mkdir()
    target = outside / "thesis.tex"
    target.write_text("precious")
    (out / what).symlink_to(target if what == LOCK_NAME else outside)
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    code, stdout, stderr = fusion_run(capsys, cfg, out)
    assert code == 1
    assert f"{out / what}: is a symbolic link" in stdout + stderr
    assert target.read_text() == "precious"
    assert sorted(p.name for p in outside.iterdir()) == ["thesis.tex"]


def test_output_folder_that_is_a_file(demo, tmp_path, capsys):
    out = tmp_path / "results"
    out.write_text("not a folder")
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    code = main(["run", str(cfg), "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1, err
    assert err[0].startswith(f"fusion: error: {out}: cannot be used as the output folder")


def test_lock_held_refuses_a_second_run(demo, tmp_path):
    # the lock is an flock on the output folder's lock file: held here, a `fusion run`
    # process must refuse at once with one clear line and write nothing
    out = tmp_path / "out"
    cfg = campaign(demo, tmp_path / "in", ("CQ-0p05Hz",))
    with campaign_lock(out):
        r = subprocess.run([sys.executable, "-m", "fusion.cli", "run", str(cfg), "--out", str(out)],
                           capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert r.returncode == 1
    assert r.stderr.strip() == (f"fusion: error: {out}: another fusion process is writing to this output "
                                "folder; wait for it to finish or choose another --out")
    assert sorted(p.name for p in out.iterdir()) == [LOCK_NAME]


def test_concurrent_runs_on_one_output_folder(demo, tmp_path, capsys):
    # a real first `fusion run`; while it holds the lock a second one is refused, and the
    # first finishes untouched
    out = tmp_path / "out"
    runs = ("CQ-0p05Hz",)
    cfg = campaign(demo, tmp_path / "in", runs)
    first = subprocess.Popen([sys.executable, "-m", "fusion.cli", "run", str(cfg), "--out", str(out),
                              "--scheduler", "synchronous"], cwd=ROOT, stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 120
        while not _locked_by_other(out / LOCK_NAME):
            assert first.poll() is None and time.monotonic() < deadline, "first run never took the lock"
            time.sleep(0.05)
        code = main(["run", str(cfg), "--out", str(out), "--scheduler", "synchronous"])
        err = capsys.readouterr().err
        assert code == 1 and "another fusion process is writing to this output folder" in err
        stdout, stderr = first.communicate(timeout=300)
    finally:
        if first.poll() is None:
            first.kill()
            first.wait()
    assert first.returncode == 0, stderr
    assert_clean(out, done=runs)


def _locked_by_other(lock):
    """True when another process holds the flock (probe without keeping it)."""
    try:
        fd = os.open(lock, os.O_RDWR | os.O_NOFOLLOW)
    except FileNotFoundError:
        return False
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        return True
    else:
        fcntl.flock(fd, fcntl.LOCK_UN)
        return False
    finally:
        os.close(fd)


# ------------------------------------------------------------------------ kill and rerun
def _group_alive(pgid):
    """Processes of group ``pgid`` still running (zombies excluded), from /proc."""
    alive = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[2]) == pgid and fields[0] != "Z":   # state, ppid, pgrp
            alive.append(stat.parent.name)
    return alive


def _visible_state_is_whole(out: Path):
    """After a kill: every visible run folder whole, campaign files whole or absent."""
    for p in out.iterdir():
        if p.name.startswith("."):
            continue                      # hidden temporary entries: invisible as runs, handled next time
        if p.is_dir():
            whole_run(p)
        elif p.name == "frequency.nc":
            read_netcdf(p)


@pytest.mark.slow
def test_kill_at_random_points_then_rerun(demo, tmp_path):
    # SIGKILL (no cleanup possible) at seeded random delays, alternately of the whole process
    # group (power cut, OOM killer) and of the command alone (its workers must then stop by
    # themselves); each rerun resumes (finished runs are skipped), so later kills land in
    # later runs and phases. A last rerun must finish everything.
    cfg = campaign(demo, tmp_path / "in", QUICK)
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "fusion.cli", "run", str(cfg), "--out", str(out)]
    # the kill windows follow the campaign's own duration on this machine (a whole run
    # first): one delay in each quarter of it, startup, lock-in, writing, the campaign step
    t0 = time.monotonic()
    subprocess.run(cmd[:-1] + [str(tmp_path / "timing")], cwd=ROOT, capture_output=True, check=True,
                   timeout=300)
    span = time.monotonic() - t0
    rng = np.random.default_rng(20261201)
    hits = 0
    for i, delay in enumerate(span * rng.uniform([0.04, 0.25, 0.5, 0.75], [0.25, 0.5, 0.75, 1.0])):
        proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                start_new_session=True)
        time.sleep(float(delay))
        if proc.poll() is None:
            (os.killpg if i % 2 == 0 else os.kill)(proc.pid, signal.SIGKILL)
            hits += 1
        proc.wait()
        deadline = time.monotonic() + 15
        while _group_alive(proc.pid):
            assert time.monotonic() < deadline, "worker processes outlived the killed command"
            time.sleep(0.1)
        if out.exists():
            _visible_state_is_whole(out)
    assert hits >= 2, "the runs ended before the kills: the delays no longer span a run"
    r = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stdout + r.stderr
    assert_clean(out, done=QUICK)
    assert (out / "frequency.nc").is_file()
    read_netcdf(out / "frequency.nc")
