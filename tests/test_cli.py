"""The command line: exit codes, one clear line on bad input, no traceback without --debug."""

import subprocess
import sys
from pathlib import Path

import pytest

from fusion.cli import main

from _inputs import IDENTITY_HEAD

ROOT = Path(__file__).resolve().parents[1]


def _write(tmp_path, text, name="c.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_usage_error_exits_2(capsys):
    with pytest.raises(SystemExit) as e:
        main(["frobnicate"])
    assert e.value.code == 2


@pytest.mark.parametrize("text, expected", [
    ("[laminate]\nlayup = '[0/90]s'\nply_material = 'x'\nply_thickness = '5 Hz'\n",
     r"laminate\.ply_thickness: '5 Hz' has dimension"),
    ("[[run]]\nname = 'a'\nfrequency = '5 mm'\n", r"run 'a'\.frequency: '5 mm' has dimension \[length\]"),
    # a run without a usable name can only be named by its place
    ("[[run]]\nfrequency = '5 Hz'\n", r"run\[0\]\.name: is required"),
    ("bogus = 1\n", r"bogus: unknown key"),
    ("a = [1,\n", r"not valid TOML"),
])
def test_bad_config_one_line_exit_1(tmp_path, capsys, text, expected):
    import re

    cfg = _write(tmp_path, text)
    assert main(["check", str(cfg)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert re.search(expected, err[0]), err[0]
    assert str(cfg) in err[0]            # the file is named
    assert "Traceback" not in err[0]


def test_missing_input_file_named(tmp_path, capsys):
    cfg = _write(tmp_path, IDENTITY_HEAD + '''[[run]]
name = "r1"
frequency = "5 Hz"
[run.thermal]
frames = "nothere.npy"
frame_rate = "100 Hz"
[run.dic]
strain_ranges = "also_missing.csv"
coordinates = "px"
''')
    assert main(["check", str(cfg)]) == 1
    err = capsys.readouterr().err.strip()
    assert "nothere.npy" in err and "does not exist" in err and "run 'r1'.thermal.frames" in err


def test_debug_shows_traceback(tmp_path):
    cfg = _write(tmp_path, "bogus = 1\n")
    r = subprocess.run([sys.executable, "-m", "fusion.cli", "--debug", "check", str(cfg)],
                       capture_output=True, text=True, cwd=ROOT)
    assert r.returncode != 0 and "Traceback" in r.stderr
    r = subprocess.run([sys.executable, "-m", "fusion.cli", "check", str(cfg)],
                       capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 1 and "Traceback" not in r.stderr


def test_version(capsys):
    from fusion import __version__

    with pytest.raises(SystemExit) as e:
        main(["--version"])
    assert e.value.code == 0
    assert __version__ in capsys.readouterr().out


@pytest.mark.parametrize("thread", [False, True])
def test_leaving_flushes_output_and_runs_exit_handlers(thread):
    # not a physics check: the command ends without the interpreter's teardown, yet output
    # written, exit handlers and a thread still at work are kept
    code = ("import atexit, sys, threading, time\n"
            "from fusion.cli import leave\n"
            "atexit.register(lambda: print('handler', flush=True))\n"
            + ("threading.Thread(target=lambda: (time.sleep(0.3), print('thread'))).start()\n" if thread else "")
            + "print('written', end=' ')\n"
            "sys.stderr.write('to stderr')\n"
            "leave(3)\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert done.returncode == 3
    assert done.stdout.split() == (["written", "thread", "handler"] if thread else ["written", "handler"])
    assert done.stderr == "to stderr"
