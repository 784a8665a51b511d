"""Messages quote a file's content only from regular files, and never more than a few dozen characters:
an error line is printed and embedded in report.html, so it must not carry a process's environment or a
megabyte of a header row."""

import os

import pytest

from fusion.errors import InputError
from fusion.io import input_file, read_dic_field, read_load_signal, read_thermal_maps
from fusion.io._guard import QUOTE_CHARS, clip, quote

ENVIRON = "/proc/self/environ"


@pytest.mark.skipif(not os.path.exists(ENVIRON), reason="needs /proc")
@pytest.mark.parametrize("reader", [
    lambda p: read_load_signal(p),
    lambda p: read_dic_field(p),
    lambda p: read_thermal_maps({"T0": p, "delta_T": p}),
    lambda p: input_file(p, "a load signal"),
])
def test_a_file_the_system_makes_up_is_never_read_or_quoted(reader):
    with pytest.raises(InputError) as err:
        reader(ENVIRON)
    text = str(err.value)
    assert "is a file of the operating system" in text, text
    for key in ("PATH", "HOME"):
        value = os.environ.get(key)
        if value:
            assert value not in text


def test_a_long_header_row_is_quoted_cut_short(tmp_path):
    p = tmp_path / "load.csv"
    names = ",".join(f"column_{i:05d}" for i in range(2000))
    p.write_text(names + "\n" + ",".join("1" for _ in range(2000)) + "\n")
    with pytest.raises(InputError, match=r"has no time column 'time'; columns are \['column_00000'") as err:
        read_load_signal(p)
    text = str(err.value)
    assert len(text) < len(str(p)) + 200, len(text)
    assert f"({len(repr(names.split(',')))} characters)" in text


def test_clip_and_quote():
    assert clip("short") == "short"
    long = "x" * 500
    assert clip(long) == "x" * QUOTE_CHARS + "... (500 characters)"
    assert quote(["a"]) == "['a']"
    assert quote(["a" * 200]).startswith("['aaaa") and quote(["a" * 200]).endswith("(204 characters)")
