"""Fault injection for configs: shared, edited, truncated or hostile config files.

A config decides folder names (run names) and which files are read, so it is
input like any other: every broken config must end in exit code 1 and one line
naming the file and the key, and no run name may become a path that leaves the
output folder. Cases and outcomes are listed in DEVELOPERS.md ("Bad input:
cases tried").
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

from fusion.cli import main
from fusion.config import load_config, loads_config
from fusion.errors import ConfigError, FusionError

from _inputs import IDENTITY_HEAD

ROOT = Path(__file__).resolve().parents[1]
LIB = (ROOT / "configs" / "materials.toml").as_posix()

BASE = IDENTITY_HEAD


def _run(name='"r1"', frames='"frames.npy"'):
    return f'''[[run]]
name = {name}
frequency = "5 Hz"
[run.thermal]
frames = {frames}
frame_rate = "100 Hz"
[run.dic]
strain_ranges = "strain.csv"
coordinates = "px"
'''


def _check_one_line(capsys, path, *, names=None, key=None, match=None):
    """``fusion check`` must exit 1 with one line naming the offending file (the config
    unless ``names`` says otherwise) and key, no traceback."""
    code = main(["check", str(path)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1
    assert len(err) == 1, err
    line = err[0]
    assert line.startswith("fusion: error: ") and "Traceback" not in line
    assert str(names or path) in line, line
    if key is not None:
        assert key in line, line
    if match is not None:
        assert re.search(match, line), line
    return line


# ------------------------------------------------------------------------ run names
@pytest.mark.parametrize("name", ["../evil", "..", ".", "", "a/b", "a\\b", "/abs", ".hidden", "a\x00b",
                                  "-rf", "x" * 101, "tab\tname", "new\nline", "café", "C:evil"])
def test_unsafe_run_names_are_refused(name):
    # run names become folder names: separators, "..", hidden, empty, control
    # characters and non-ASCII are refused at load time
    # the message names the run as written where that is printable, by its place otherwise
    where = f"run {name!r}" if name and len(name) <= 100 and name.isprintable() else "run[0]"
    with pytest.raises(ConfigError, match=re.escape(where) + r"\.name: .* is not allowed") as err:
        loads_config(BASE + _run(name=json.dumps(name)), base="/tmp")
    assert err.value.key == f"{where}.name"


@pytest.mark.parametrize("name", ["con", "NUL", "figures", "report.html", "frequency.nc", "Summary.JSON"])
def test_reserved_run_names_are_refused(name):
    with pytest.raises(ConfigError, match=re.escape(f"run {name!r}.name: ") + ".* is a reserved name"):
        loads_config(BASE + _run(name=json.dumps(name)), base="/tmp")


@pytest.mark.parametrize("name", ["com1", "lpt9", "nul.txt", "run."])
def test_names_unsafe_on_windows_shares_are_refused(name):
    with pytest.raises(ConfigError):
        loads_config(BASE + _run(name=json.dumps(name)), base="/tmp")


def test_names_equal_ignoring_case_are_refused(tmp_path, capsys):
    # two folders "Run1" and "run1" are one folder on case-insensitive file systems
    p = tmp_path / "dup.toml"
    p.write_text(BASE + _run(name='"Run1"') + _run(name='"run1"'))
    _check_one_line(capsys, p, key="run 'run1'.name", match="'run1' is used by run 'Run1' already")


def test_run_name_in_cli_message_names_file_and_key(tmp_path, capsys):
    p = tmp_path / "c.toml"
    p.write_text(BASE + _run(name='"../../etc"'))
    _check_one_line(capsys, p, key="run '../../etc'.name")


# ------------------------------------------------------------------------ paths
def test_input_paths_resolve_from_the_config_folder(tmp_path, monkeypatch):
    # a config shared with a colleague must read the files beside it, whatever the cwd
    cfg_dir, elsewhere = tmp_path / "campaign", tmp_path / "cwd"
    cfg_dir.mkdir()
    elsewhere.mkdir()
    (cfg_dir / "c.toml").write_text(BASE + _run(frames='"ir/frames.npy"'))
    monkeypatch.chdir(elsewhere)
    run = load_config(cfg_dir / "c.toml").runs[0]
    assert run.thermal.frames == cfg_dir / "ir" / "frames.npy"
    assert run.dic.strain_ranges == cfg_dir / "strain.csv"


def test_missing_input_named_with_its_key(tmp_path, capsys):
    p = tmp_path / "c.toml"
    p.write_text(BASE + _run())
    _check_one_line(capsys, p, names=tmp_path / "frames.npy", key="run 'r1'.thermal.frames")


def test_config_shape_larger_than_the_raw_file(tmp_path, capsys):
    # a config claiming 10^12 frames must fail from the file size, not try to map them
    import numpy as np

    np.zeros((4, 6, 5), np.uint16).tofile(tmp_path / "cam.raw")
    p = tmp_path / "c.toml"
    p.write_text(BASE + _run(frames='"cam.raw"').replace(
        'frame_rate = "100 Hz"', 'frame_rate = "100 Hz"\ndtype = "uint16"\nshape = [1000000000000, 6, 5]'))
    _check_one_line(capsys, p, names=tmp_path / "cam.raw", match="needs 60000000000000")


# ------------------------------------------------------------------------ broken config files
def _truncated(text):
    return text[: text.index("ply_thickness") + 20]     # cut inside a string value


@pytest.mark.parametrize("case, content, match", [
    ("binary", bytes(range(256)) * 4, "is not UTF-8 text"),
    ("latin-1", 'name = "caf\xe9"\n'.encode("latin-1"), "is not UTF-8 text"),
    ("NUL byte", b"a = 1\n\x00\n", "is not valid TOML"),
    ("truncated", _truncated(BASE).encode(), "is not valid TOML"),
    ("duplicate key", b"[campaign]\nname = 'a'\nname = 'b'\n", "is not valid TOML"),
    ("unknown key", b"rm_rf = true\n", "rm_rf: unknown key"),
    ("too large", b"# " + b"x" * (5 << 20) + b"\n", "a config is at most"),
])
def test_broken_config_file(tmp_path, capsys, case, content, match):
    p = tmp_path / "c.toml"
    p.write_bytes(content)
    _check_one_line(capsys, p, match=match)


def test_config_is_a_folder_or_missing(tmp_path, capsys):
    (tmp_path / "dir.toml").mkdir()
    _check_one_line(capsys, tmp_path / "dir.toml", match="is a folder")
    _check_one_line(capsys, tmp_path / "none.toml", match="does not exist")


@pytest.mark.skipif(os.geteuid() == 0, reason="running as root: chmod 000 does not stop root from reading")
def test_unreadable_config(tmp_path, capsys):
    p = tmp_path / "c.toml"
    p.write_text(BASE)
    p.chmod(0)
    try:
        _check_one_line(capsys, p, match="permission denied")
    finally:
        p.chmod(0o644)


@pytest.mark.parametrize("what", ["folder", "binary", "missing", "not materials"])
def test_broken_material_library(tmp_path, capsys, what):
    lib = tmp_path / "lib.toml"
    if what == "folder":
        lib.mkdir()
    elif what == "binary":
        lib.write_bytes(b"\xff\xfe" * 50)
    elif what == "not materials":
        lib.write_text("[[run]]\nname = 'sneaky'\n")
    p = tmp_path / "c.toml"
    p.write_text(BASE.replace(LIB, "lib.toml"))
    _check_one_line(capsys, p, key="material_library")


_FUZZ = settings(max_examples=int(os.environ.get("FUSION_FUZZ_EXAMPLES", "60")), deadline=None,
                 derandomize=True, database=None, phases=[Phase.explicit, Phase.generate, Phase.shrink],
                 suppress_health_check=[HealthCheck.too_slow])


@_FUZZ
@given(text=st.lists(st.sampled_from(list('[]{}="\'.,#\n abc01_-:') + ["name", "run", "laminate", "[[run]]"]),
                    max_size=80).map("".join))
def test_random_toml_like_text(text):
    # TOML-ish noise: either a valid (mostly empty) config or a ConfigError, nothing else
    try:
        loads_config(text)
    except ConfigError:
        pass


@_FUZZ
@given(cut=st.floats(0, 1))
def test_config_cut_anywhere(cut):
    text = BASE + _run()
    try:
        loads_config(text[: int(cut * len(text))], base="/tmp")
    except FusionError:
        pass


# ------------------------------------------------------------------------ gaps found by this suite, fixed
def test_deeply_nested_config():
    with pytest.raises(ConfigError):
        loads_config("a = " + "[" * 5000 + "]" * 5000 + "\n")


def test_config_with_a_byte_order_mark(tmp_path):
    p = tmp_path / "c.toml"
    p.write_bytes(b"\xef\xbb\xbf" + BASE.encode())
    assert load_config(p).laminates


def test_config_that_is_a_named_pipe(tmp_path):
    p = tmp_path / "c.toml"
    os.mkfifo(p)
    # a subprocess with a timeout: a hang must not hang the suite
    try:
        r = subprocess.run([sys.executable, "-m", "fusion.cli", "check", str(p)], capture_output=True,
                           text=True, timeout=8, cwd=ROOT)
    except subprocess.TimeoutExpired:
        pytest.fail("fusion check waited on the pipe")
    assert r.returncode == 1 and str(p) in r.stderr
