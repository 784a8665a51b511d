"""What in an output folder is fusion's: only what it made and marked is ever replaced or removed.

A run folder carries fusion's marker, temporary entries carry a name of fusion's own with
the host and process id, campaign files are listed with the digest of their content. The
publish of a run folder is crashed between every pair of its file operations (a real
process ending with ``os._exit``), and the next start must find exactly one whole result,
old or new, and every user file untouched.
"""

import errno
import json
import os
import subprocess
import time
import sys
import textwrap
from pathlib import Path

import pytest

from fusion.campaign import (LOCK_NAME, campaign_lock, foreign_message, is_marked_folder, mark_folder,
                             recover, run_campaign)
from fusion.campaign._folders import publish_steps
from fusion.cli import main
from fusion.errors import InputError
from fusion.io import parse_temp_name, temp_name, this_host

from _campaigns import ROOT, write_campaign, write_stack  # noqa: E402  (shared synthetic campaign)


@pytest.fixture(autouse=True)
def _fresh_log_handlers():
    """`main` points the package logger at the stderr of the test that called it (a stream closed
    afterwards): start each test without such a handler and put back what was there."""
    import logging

    logger = logging.getLogger("fusion")
    saved = (logger.handlers[:], logger.level, logger.propagate)
    logger.handlers[:], logger.level, logger.propagate = [], logging.NOTSET, True
    yield
    logger.handlers[:], logger.level, logger.propagate = saved[0], saved[1], saved[2]


def _tree(folder: Path) -> dict:
    """Every file under ``folder`` with its bytes (links by their target)."""
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_symlink():
            out[str(p.relative_to(folder))] = ("link", os.readlink(p))
        elif p.is_file():
            out[str(p.relative_to(folder))] = p.read_bytes()
    return out


def _dead_pid() -> int:
    """The id of a process that has ended (a short child, waited for)."""
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def _own_leftover(folder: Path, base: str, kind: str, *, pid: int, host=None) -> Path:
    """The name fusion gives a temporary entry, as made by process ``pid`` on ``host``."""
    return folder / f".{base}.fusion-{kind}-{host or this_host()}-{pid}-0123abcd"


# ------------------------------------------------------------------------ names of our own
def test_temp_names_carry_host_and_process_and_parse_back():
    name = temp_name("CX-2Hz", "partial")
    assert parse_temp_name(name) == ("CX-2Hz", "partial", this_host(), os.getpid())
    # names a user or another program would make are not ours
    for other in (".CX-2Hz.partial-abc", ".report.html.k2j3.tmp", "CX-2Hz", ".x.fusion-tmp-host-12-xyz",
                  ".x.fusion-old-host-pid-0123abcd"):
        assert parse_temp_name(other) is None, other


def test_start_up_removes_only_our_leftovers_whose_process_is_gone(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    dead = _dead_pid()
    mine_dead = _own_leftover(out, "R0", "partial", pid=dead)
    mine_dead.mkdir()
    (mine_dead / "result.nc").write_bytes(b"half")
    tmp_dead = _own_leftover(out, "report.html", "tmp", pid=dead)
    tmp_dead.write_text("<html>half")
    alive = _own_leftover(out, "R1", "partial", pid=os.getppid())        # pytest's parent: alive
    alive.mkdir()
    other_host = _own_leftover(out, "R2", "partial", pid=dead, host="another-host")
    other_host.mkdir()
    # look-alikes of other programs (or of older versions): not ours, never touched
    user = {".R0.partial-abc": "dir", ".report.html.k2j3.tmp": "file", ".notes.tmp": "file",
            "R0.partial-1": "dir"}
    for name, kind in user.items():
        (out / name).mkdir() if kind == "dir" else (out / name).write_text("mine")
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "keep.txt").write_text("mine")
    link = _own_leftover(out, "R3", "partial", pid=dead)
    link.symlink_to(outside, target_is_directory=True)
    # a worker that has ended but whose parent has not collected it yet (a zombie) is gone too
    zombie = subprocess.Popen([sys.executable, "-c", "pass"])
    deadline = time.monotonic() + 10
    while Path(f"/proc/{zombie.pid}/stat").read_bytes().rsplit(b")", 1)[1].split()[0] != b"Z":
        assert time.monotonic() < deadline
        time.sleep(0.02)
    of_zombie = _own_leftover(out, "R4", "partial", pid=zombie.pid)
    of_zombie.mkdir()
    with campaign_lock(out):
        pass
    zombie.wait()
    left = {p.name for p in out.iterdir()}
    assert of_zombie.name not in left
    assert mine_dead.name not in left and tmp_dead.name not in left and link.name not in left
    assert {alive.name, other_host.name} <= left
    assert set(user) <= left
    assert (outside / "keep.txt").read_text() == "mine"       # a link is removed, never followed


# ------------------------------------------------------------------------ the lock
def test_hard_linked_lock_is_refused_and_its_other_name_untouched(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    precious = tmp_path / "thesis.tex"
    precious.write_text("precious")
    os.link(precious, out / LOCK_NAME)
    with pytest.raises(InputError, match="is hard-linked to another file"):
        with campaign_lock(out):
            pass
    assert precious.read_text() == "precious"


def test_symbolic_link_lock_is_refused(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    precious = tmp_path / "thesis.tex"
    precious.write_text("precious")
    (out / LOCK_NAME).symlink_to(precious)
    with pytest.raises(InputError, match="is a symbolic link"):
        with campaign_lock(out):
            pass
    assert precious.read_text() == "precious"


# ------------------------------------------------------------------------ publish, crashed at every step
def _result(folder: Path, tag: str, name="R0"):
    folder.mkdir()
    (folder / "result.nc").write_text(f"{tag} maps")
    (folder / "summary.json").write_text(json.dumps({"tag": tag}))
    (folder / "figures").mkdir()
    (folder / "figures" / "ratio.png").write_text(f"{tag} figure")
    mark_folder(folder, name)


_CRASH = textwrap.dedent("""
    import os, shutil, sys
    from pathlib import Path
    from fusion.campaign._folders import publish_steps
    from fusion.io import temp_name
    new, folder, k = Path(sys.argv[1]), Path(sys.argv[2]), int(sys.argv[3])
    tmp = folder.parent / temp_name("R0", "partial")     # the run's temporary folder, made here
    shutil.copytree(new, tmp, symlinks=True)
    steps, _ = publish_steps(tmp, folder, "R0")
    for _, step in steps[:k]:
        step()
    os._exit(0)     # the process ends here: no cleanup code runs
""")


@pytest.mark.parametrize("replace", [True, False], ids=["overwrite", "first"])
def test_publish_crashed_between_every_pair_of_steps_recovers_one_whole_result(tmp_path, replace):
    probe = tmp_path / "probe"
    probe.mkdir()
    _result(probe / "new", "new")
    if replace:
        _result(probe / "R0", "old")
    n_steps = len(publish_steps(probe / "new", probe / "R0", "R0")[0])
    assert n_steps == (3 if replace else 1)
    for k in range(n_steps + 1):
        out = tmp_path / f"crash{k}"
        out.mkdir()
        (out / "notes.ipynb").write_text("user notebook")
        (out / ".R0.partial-mine").mkdir()                    # a look-alike of someone else's
        if replace:
            _result(out / "R0", "old")
        user = {p: _tree(out)[p] for p in ("notes.ipynb",)}
        r = subprocess.run([sys.executable, "-c", _CRASH, str(probe / "new"), str(out / "R0"), str(k)], cwd=ROOT,
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0, r.stderr
        # the next start: the crashed process is gone
        recover(out)
        entries = sorted(p.name for p in out.iterdir())
        assert entries == [".R0.partial-mine", "R0", "notes.ipynb"], (k, entries)
        assert is_marked_folder(out / "R0", "R0")
        tags = {(out / "R0" / f).read_text().split()[0] for f in ("result.nc", "figures/ratio.png")}
        tags.add(json.loads((out / "R0" / "summary.json").read_text())["tag"])
        assert len(tags) == 1 and tags <= {"old", "new"}, (k, tags)       # whole: one result, not a mix
        if k == n_steps:
            assert tags == {"new"}
        assert {p: _tree(out)[p] for p in user} == user


def test_publish_refuses_a_folder_fusion_did_not_make(tmp_path):
    out = tmp_path / "out"
    (out / "R0").mkdir(parents=True)
    (out / "R0" / "frames.npy").write_bytes(b"user frames")
    tmp = out / temp_name("R0", "partial")
    _result(tmp, "new")
    with pytest.raises(InputError, match=r"R0: is a folder fusion did not make .*fusion never replaces"):
        publish_steps(tmp, out / "R0", "R0")
    assert (out / "R0" / "frames.npy").read_bytes() == b"user frames"


# ------------------------------------------------------------------------ whole campaigns
def _campaign(tmp_path, rng, amplitudes=(-0.10, -0.12)):
    return write_campaign(tmp_path / "data", amplitudes, rng=rng)


def test_user_folder_named_like_a_run_is_never_replaced(tmp_path, rng, capsys):
    # `fusion run c.toml --out .` where ./R0/ holds the user's inputs: --overwrite must not
    # replace it; the sentence names the folder
    cfg = _campaign(tmp_path, rng)
    out = tmp_path / "data"               # --out . beside the inputs
    (out / "R0").mkdir()
    (out / "R0" / "frames.npy").write_bytes(b"\x93NUMPY user frames")
    (out / "R0" / "analysis.ipynb").write_text('{"cells": []}')
    before = _tree(out / "R0")
    code = main(["run", str(cfg), "--out", str(out), "--overwrite", "--workers", "1"])
    stdout = capsys.readouterr().out
    assert code == 1
    line = next(ln for ln in stdout.splitlines() if "FAILED  R0" in ln)
    assert f"{out / 'R0'}: is a folder fusion did not make" in line and "never replaces" in line, line
    assert _tree(out / "R0") == before
    assert "done    R1" in stdout and is_marked_folder(out / "R1", "R1")


def test_foreign_campaign_file_is_not_replaced(tmp_path, rng, capsys):
    cfg = _campaign(tmp_path, rng, (-0.1,))
    out = tmp_path / "out"
    out.mkdir()
    (out / "report.html").write_text("<html>my own report</html>")
    res = run_campaign(cfg, out=out, workers=1)
    assert [r.status for r in res.runs] == ["done"]
    assert res.campaign_errors and "report.html: was not written by fusion" in res.campaign_errors[0]
    assert (out / "report.html").read_text() == "<html>my own report</html>"


def test_campaign_file_changed_by_the_user_is_not_replaced(tmp_path, rng):
    cfg = _campaign(tmp_path, rng, (-0.1,))
    out = tmp_path / "out"
    assert run_campaign(cfg, out=out, workers=1).ok
    (out / "report.html").write_text((out / "report.html").read_text() + "<!-- my notes -->")
    res = run_campaign(cfg, out=out, workers=1, overwrite=True)
    assert any("changed since fusion wrote it" in e for e in res.campaign_errors), res.campaign_errors
    assert (out / "report.html").read_text().endswith("<!-- my notes -->")


def test_products_come_from_every_complete_run_folder_whatever_only_selects(tmp_path, rng):
    cfg = _campaign(tmp_path, rng)
    out = tmp_path / "out"
    assert run_campaign(cfg, out=out, workers=1).ok
    # an unchanged campaign: --only R1 skips R1 (the selection is not in the stamp) and the
    # report still holds both runs
    res = run_campaign(cfg, out=out, workers=1, only=["R1"])
    assert [(r.name, r.status) for r in res.runs] == [("R1", "skipped")]
    report = (out / "report.html").read_text()
    assert 'id="run-r0"' in report and 'id="run-r1"' in report
    # R1's frames change: refused without --overwrite; the report keeps both runs, R1 flagged
    write_stack(tmp_path / "data" / "ir1.npy", -0.3, rng)
    res = run_campaign(cfg, out=out, workers=1, only=["R1"])
    assert res.runs[0].status == "failed" and "other inputs or settings" in res.runs[0].error
    report = (out / "report.html").read_text()
    assert 'id="run-r0"' in report and 'id="run-r1"' in report
    assert "made from other inputs or settings than the config names now" in report


def test_failed_campaign_keeps_the_good_products(tmp_path, rng):
    cfg = _campaign(tmp_path, rng, (-0.1,))
    out = tmp_path / "out"
    assert run_campaign(cfg, out=out, workers=1).ok
    good = (out / "report.html").read_bytes()
    (out / "R0").rename(tmp_path / "moved")          # no complete run folder is left
    (tmp_path / "data" / "ir0.npy").write_bytes(b"broken")
    res = run_campaign(cfg, out=out, workers=1)
    assert res.runs[0].status == "failed"
    assert (out / "report.html").read_bytes() == good


def test_relative_and_absolute_config_paths_give_one_stamp(tmp_path, rng, monkeypatch):
    # a worker reads the config by its absolute path, the campaign process by what the user
    # typed: the stamps must agree or `--only R1` refuses an unchanged run
    from fusion.campaign import run_stamp
    from fusion.config import load_config

    cfg = _campaign(tmp_path, rng)
    monkeypatch.chdir(tmp_path)
    rel, absolute = load_config(Path("data") / "c.toml"), load_config(cfg.resolve())
    assert [run_stamp(rel, r) for r in rel.runs] == [run_stamp(absolute, r) for r in absolute.runs]


def test_content_changed_with_size_and_times_restored_is_recomputed(tmp_path, rng):
    cfg = _campaign(tmp_path, rng, (-0.1,))
    out = tmp_path / "out"
    assert run_campaign(cfg, out=out, workers=1).ok
    strain = tmp_path / "data" / "strain.csv"
    st = strain.stat()
    text = strain.read_text()
    changed = text.replace("2.000000000000000042e-03", "3.000000000000000062e-03")
    assert changed != text and len(changed) == len(text)
    strain.write_text(changed)
    os.utime(strain, ns=(st.st_atime_ns, st.st_mtime_ns))       # size and modification time as before
    assert (strain.stat().st_size, strain.stat().st_mtime_ns) == (st.st_size, st.st_mtime_ns)
    res = run_campaign(cfg, out=out, workers=1)
    assert res.runs[0].status == "failed" and "other inputs or settings" in res.runs[0].error
    res = run_campaign(cfg, out=out, workers=1, overwrite=True)
    assert res.runs[0].status == "done"
    summary = json.loads((out / "R0" / "summary.json").read_text())
    res = run_campaign(cfg, out=out, workers=1)
    assert res.runs[0].status == "skipped"                      # and now unchanged again
    assert summary["provenance"]["stamp"] == json.loads((out / "R0" / "summary.json").read_text())[
        "provenance"]["stamp"]


def test_disk_full_while_writing_the_campaign_files_is_one_line(tmp_path, rng, capsys, monkeypatch):
    import fusion.campaign._products as products

    cfg = _campaign(tmp_path, rng, (-0.1,))
    out = tmp_path / "out"
    assert run_campaign(cfg, out=out, workers=1).ok
    good = (out / "report.html").read_bytes()

    def full(path, **kw):
        Path(path).write_text("<html>half")
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    monkeypatch.setattr(products, "write_report", full)
    code = main(["run", str(cfg), "--out", str(out), "--overwrite", "--workers", "1"])
    cap = capsys.readouterr()
    assert code == 1 and "Traceback" not in cap.out + cap.err
    line = next(ln for ln in cap.out.splitlines() if "FAILED  campaign" in ln)
    assert "No space left on device" in line and "that file left as it was" in line, line
    assert (out / "report.html").read_bytes() == good
    assert not [p.name for p in out.iterdir() if parse_temp_name(p.name)]


@pytest.mark.slow
def test_file_size_limit_while_writing_the_campaign_files_is_one_line(tmp_path, rng):
    # a real limit (RLIMIT_FSIZE): the runs are skipped, the report is larger than the limit
    import resource

    cfg = _campaign(tmp_path, rng, (-0.1,))
    out = tmp_path / "out"
    assert run_campaign(cfg, out=out, workers=1).ok
    good = (out / "report.html").read_bytes()
    limit = 4096
    assert len(good) > limit
    r = subprocess.run([sys.executable, "-m", "fusion.cli", "run", str(cfg), "--out", str(out)], cwd=ROOT,
                       capture_output=True, text=True, timeout=300,
                       preexec_fn=lambda: resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit)))
    assert r.returncode == 1, r.stdout + r.stderr
    assert "Traceback" not in r.stdout + r.stderr
    line = next(ln for ln in r.stdout.splitlines() if "FAILED  campaign" in ln)
    assert "File too large" in line, line
    assert (out / "report.html").read_bytes() == good


def test_foreign_message_names_the_rule():
    assert "never replaces or removes what it did not make" in foreign_message("is a folder")


# ------------------------------------------------------------------------ the demo's folder
def test_demo_refuses_a_folder_of_the_user(tmp_path):
    from fusion.demo import generate

    folder = tmp_path / "my_data"
    folder.mkdir()
    (folder / "thesis.tex").write_text("precious")
    (folder / "demo.toml").write_text("# my own config")
    before = _tree(folder)
    with pytest.raises(InputError, match=r"my_data: is not empty and is not a demo folder fusion made"):
        generate(folder)
    with pytest.raises(InputError, match="never replaces or removes"):
        generate(folder, force=True)
    assert _tree(folder) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["my_data"]      # nothing left beside it


def test_demo_folder_it_made_is_reused_as_it_is(tmp_path):
    from fusion.demo import generate

    folder = tmp_path / "demo"
    folder.mkdir()
    (folder / "demo.toml").write_text("# made before")
    (folder / "truth.json").write_text("{}")
    mark_folder(folder, "demo")
    before = _tree(folder)
    assert generate(folder) == folder / "demo.toml"
    assert _tree(folder) == before


_KILL = textwrap.dedent("""
    import os, signal, sys
    import fusion.campaign._folders as folders
    from fusion.cli import main
    cfg, out, k = sys.argv[1], sys.argv[2], int(sys.argv[3])
    real = folders.publish_steps

    def steps_then_kill(tmp, folder, name):
        steps, aside = real(tmp, folder, name)
        if name != "R0":
            return steps, aside

        def kill():
            os.kill(os.getpid(), signal.SIGKILL)     # as `kill -9`: nothing of ours runs after it
        wrapped = list(steps[:k]) + [("kill", kill)] + list(steps[k:])
        return wrapped, aside

    folders.publish_steps = steps_then_kill
    sys.exit(main(["-q", "run", cfg, "--out", out, "--overwrite", "--workers", "1"]))
""")


@pytest.mark.slow
def test_overwrite_killed_at_every_publish_step_then_the_next_run(tmp_path, rng):
    import signal

    import xarray as xr

    cfg = _campaign(tmp_path, rng, (-0.1,))
    for k in range(4):          # before the first step, between each pair, after the last
        out = tmp_path / f"out{k}"
        assert run_campaign(cfg, out=out, workers=1).ok
        (out / "notes.txt").write_text("user notes")
        r = subprocess.run([sys.executable, "-c", _KILL, str(cfg), str(out), str(k)], cwd=ROOT,
                           capture_output=True, text=True, timeout=300)
        assert r.returncode == -signal.SIGKILL, (k, r.returncode, r.stderr[-2000:])
        again = run_campaign(cfg, out=out, workers=1)
        assert again.ok and again.runs[0].status == "skipped", (k, again.describe())
        assert is_marked_folder(out / "R0", "R0")
        with xr.open_dataset(out / "R0" / "result.nc") as ds:
            assert ds["delta_T"].shape == (40, 48)
        assert not [p.name for p in out.iterdir() if parse_temp_name(p.name)], k
        assert (out / "notes.txt").read_text() == "user notes"


def test_unchanged_inputs_are_not_hashed_again(tmp_path, rng, monkeypatch):
    import fusion.campaign._provenance as provenance

    cfg = _campaign(tmp_path, rng)
    out = tmp_path / "out"
    assert run_campaign(cfg, out=out, workers=1).ok
    hashed = []
    real = provenance.content_digest
    monkeypatch.setattr(provenance, "content_digest", lambda p: hashed.append(p) or real(p))
    res = run_campaign(cfg, out=out, workers=1)
    assert [r.status for r in res.runs] == ["skipped", "skipped"] and hashed == []
    os.utime(tmp_path / "data" / "ir1.npy")       # a new identity: hashed again, content the same
    res = run_campaign(cfg, out=out, workers=1)
    assert [r.status for r in res.runs] == ["skipped", "skipped"]
    assert [Path(p).name for p in hashed] == ["ir1.npy"]
