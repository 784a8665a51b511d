"""Config parsing: units, layup codes, every error path names its key."""

import math
import re
import string
import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fusion.config import load_config, loads_config, markdown_reference
from fusion.errors import ConfigError
from fusion.mechanics import LayupError, parse_layup
from fusion.units import parse_quantity

ROOT = Path(__file__).resolve().parents[1]
LIB = ROOT / "configs" / "materials.toml"

BASE = f'''
material_library = "{LIB.as_posix()}"
[laminate]
layup = "[45/0/-45/90]s"
ply_material = "carbon_epoxy"
ply_thickness = "0.25 mm"
zero_direction = "90 deg"
resin_layer = {{ material = "epoxy", thickness = "20 um" }}
coating = {{ material = "black_paint", thickness = "25 um" }}
[registration]
method = "identity"
[[run]]
name = "OH1-10Hz"
specimen = "OH1"
frequency = "10 Hz"
[run.thermal]
frames = "ir/oh1.npy"
frame_rate = "200 Hz"
[run.dic]
strain_ranges = "dic/oh1.csv"
coordinates = "px"                 # 'identity': the file's x, y are IR [col, row]
'''


def test_units_are_parsed_to_si():
    cfg = loads_config(BASE, base="/data/campaign")
    lam = cfg.laminates["default"]
    assert lam.plies[0].thickness == pytest.approx(0.25e-3)
    assert lam.zero_direction == 90.0
    assert lam.resin_layer.thickness == pytest.approx(20e-6)
    assert lam.coating.material.name == "black_paint"
    # Kaw (2006) Table 2.1 graphite/epoxy, as shipped in configs/materials.toml
    assert lam.plies[0].material.E1 == pytest.approx(181e9)
    assert lam.plies[0].material.alpha2 == pytest.approx(22.5e-6)
    run = cfg.runs[0]
    assert run.frequency == 10.0 and run.thermal.frame_rate == 200.0
    # relative paths resolve from the config's folder
    assert run.thermal.frames == Path("/data/campaign/ir/oh1.npy")


@pytest.mark.parametrize("text, unit, expected", [
    ("135 GPa", "Pa", 135e9), ("250 um", "m", 250e-6), ("5 Hz", "Hz", 5.0),
    ("-0.3e-6 / K", "1/K", -0.3e-6), ("1000 microstrain", "", 1e-3), (3.5, "Pa", 3.5),
    ("2 kN", "N", 2000.0), ("0.6 W/m/K", "W/m/K", 0.6),
])
def test_parse_quantity(text, unit, expected):
    assert parse_quantity(text, unit, key="k") == pytest.approx(expected)


def test_wrong_dimension_names_key():
    with pytest.raises(ConfigError, match=r"run 'OH1-10Hz'\.frequency: '5 mm' has dimension \[length\], "
                                          "expected a value in Hz"):
        loads_config(BASE.replace('frequency = "10 Hz"', 'frequency = "5 mm"'))


@pytest.mark.parametrize("old, new, key_re, what", [
    ('ply_thickness = "0.25 mm"', 'ply_thickness = "-0.25 mm"', r"laminate\.ply_thickness", "positive"),
    ('ply_material = "carbon_epoxy"', 'ply_material = "unobtainium"', r"laminate\.ply_material", "unknown material 'unobtainium'"),
    ('ply_material = "carbon_epoxy"', 'ply_material = "epoxy"', r"laminate\.ply_material", "isotropic"),
    ('layup = "[45/0/-45/90]s"', 'layup = "[45/0/-45/90"', r"laminate\.layup", "cannot read layup code"),
    ('[registration]', '[registraton]', r"registraton", "unknown key; valid keys here: .*registration"),
    ('name = "OH1-10Hz"', 'name = "../etc"', r"run '\.\./etc'\.name", "letters, digits"),
    ('frame_rate = "200 Hz"', 'frame_rate = "200 Hz"\nmaps = "m.nc"', r"run 'OH1-10Hz'\.thermal",
     "exactly one of 'frames' or 'maps'"),
    ('method = "identity"', 'method = "homography"', r"registration\.dic_points", "needs 'dic_points'"),
    ('zero_direction = "90 deg"', 'zero_direction = "90 deg"\nextra = 1', r"laminate\.extra", "unknown key"),
    ('frequency = "10 Hz"', 'frequency = true', r"run 'OH1-10Hz'\.frequency", "expected a number"),
    ('name = "OH1-10Hz"', 'name = 12', r"run\[0\]\.name", "expected a string"),
])
def test_error_paths_name_the_key(old, new, key_re, what):
    assert old in BASE
    with pytest.raises(ConfigError, match=key_re + r".*" + what):
        loads_config(BASE.replace(old, new, 1))


def test_material_bound_names_property():
    text = BASE + '\n[materials.bad]\nE1 = "10 GPa"\nE2 = "10 GPa"\nG12 = "3 GPa"\nnu12 = 1.5\n' \
        'alpha1 = 1e-6\nalpha2 = 1e-6\ndensity = 1500\nspecific_heat = 900\nk1 = 1\nk2 = 1\nk3 = 1\n'
    with pytest.raises(ConfigError, match=r"materials\.bad\.nu12: .*sqrt\(E1/E2\)"):
        loads_config(text)


def test_duplicate_run_names_refused():
    dup = BASE + BASE[BASE.index("[[run]]"):].replace("OH1-10Hz", "oh1-10hz")
    with pytest.raises(ConfigError, match=r"run 'oh1-10hz'\.name: 'oh1-10hz' is used by run 'OH1-10Hz'"):
        loads_config(dup)


def test_errors_name_a_later_run_by_its_name():
    # the example: the second run's frames named as run 'CX-2Hz', not as run[1]
    second = BASE[BASE.index("[[run]]"):].replace("OH1-10Hz", "CX-2Hz").replace('frequency = "10 Hz"',
                                                                              'frequency = "2 mm"')
    with pytest.raises(ConfigError, match=r"run 'CX-2Hz'\.frequency: '2 mm' has dimension") as err:
        loads_config(BASE + second)
    assert err.value.key == "run 'CX-2Hz'.frequency"
    assert "[1]" not in str(err.value)


def test_missing_config_file_and_library(tmp_path):
    with pytest.raises(ConfigError, match="does not exist"):
        load_config(tmp_path / "nope.toml")
    cfg = tmp_path / "c.toml"
    cfg.write_text(BASE.replace(LIB.as_posix(), "missing.toml"))
    with pytest.raises(ConfigError, match=r"material_library: file .*missing\.toml.* does not exist"):
        load_config(cfg)
    (tmp_path / "d.toml").write_text("a = [1,")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(tmp_path / "d.toml")


def test_home_folder_of_an_unknown_user_names_the_key(tmp_path):
    # "~name/..." expands to that user's home; for no such user pathlib raises RuntimeError
    cfg = tmp_path / "c.toml"
    cfg.write_text(BASE.replace(LIB.as_posix(), "~no_such_user_7f3/materials.toml"))
    with pytest.raises(ConfigError, match=r"material_library: .*'~no_such_user_7f3', a home folder this "
                                          r"system does not know; write the path in full"):
        load_config(cfg)


# The trade's compact layup codes (common practice: "s" mirrors, a trailing count repeats the
# group, ± expands to +a/-a, viewed face first).
@pytest.mark.parametrize("code, expected", [
    ("[0/90]2s", (0, 90, 0, 90, 90, 0, 90, 0)),
    ("[±45]s", (45, -45, -45, 45)),
    ("[+-45]s", (45, -45, -45, 45)),
    ("[45/0/-45/90]s", (45, 0, -45, 90, 90, -45, 0, 45)),
    ("[0/90]", (0, 90)),
    ("[0_2/90]s", (0, 0, 90, 90, 0, 0)),
    ("[0/90]3", (0, 90, 0, 90, 0, 90)),
    ("[90/0]T", (90, 0)),
    ("[ 0 / 90 ]s", (0, 90, 90, 0)),
])
def test_compact_layup_codes(code, expected):
    assert parse_layup(code) == tuple(float(a) for a in expected)


def test_quasi_isotropic_code_has_eight_plies():
    assert len(parse_layup("[45/0/-45/90]s")) == 8


@pytest.mark.parametrize("code", ["[0/90", "0/90", "[0/x]s", "[]", "[0//90]", "[0/90]0", "[0/90]st", "[400]"])
def test_malformed_layup_codes(code):
    with pytest.raises(LayupError):
        parse_layup(code)


def test_layup_as_explicit_list():
    cfg = loads_config(BASE.replace('layup = "[45/0/-45/90]s"', 'layup = [0, "90 deg", 0]'))
    assert cfg.laminates["default"].angles == (0.0, 90.0, 0.0)


def test_shipped_materials_have_sources():
    doc = tomllib.loads(LIB.read_text())
    assert set(doc["materials"]) >= {"carbon_epoxy", "glass_epoxy", "epoxy", "black_paint"}
    for name, table in doc["materials"].items():
        assert table.get("source"), f"{name} has no source"


def test_readme_documents_every_key():
    text = (ROOT / "configs" / "README.md").read_text()
    ref = markdown_reference()
    assert ref.strip() in text, "configs/README.md is stale: regenerate with `python -m fusion.config`"


def _readme_tables():
    """{heading: [row cells...]} of the key reference in configs/README.md, read as Markdown
    (GitHub Flavored Markdown tables: a cell ends at an unescaped '|')."""
    text = (ROOT / "configs" / "README.md").read_text()
    tables, heading = {}, None
    for line in text.split("## Key reference", 1)[1].splitlines():
        if line.startswith("### "):
            heading = line[4:]
            assert heading not in tables, f"heading {heading!r} twice"
            tables[heading] = []
        elif line.startswith("| `") and heading is not None:
            tables[heading].append([c.strip() for c in re.split(r"(?<!\\)\|", line)[1:-1]])
    return tables


def test_readme_holds_each_table_once():
    import dataclasses

    from fusion.config import _sections

    tables = _readme_tables()
    for cells in (c for rows in tables.values() for c in rows):
        assert len(cells) == 5, cells         # key, type, unit, default, meaning: no stray '|'
    keys = {h: tuple(c[0].strip("`") for c in rows) for h, rows in tables.items()}
    for cls in (c for c in vars(_sections).values() if dataclasses.is_dataclass(c) and isinstance(c, type)):
        fields = tuple(f.name for f in dataclasses.fields(cls) if "key" in f.metadata)
        found = [h for h, k in keys.items() if k == fields]
        assert len(found) == 1, f"{cls.__name__}: documented {len(found)} times ({found})"
    # every table the config can hold is named where it sits
    for place in ("`laminate.coating`", "`run.registration`", "`registration`", "`diagnosis.regions[i]`",
                  "`run.thermal`", "`run.dic`", "`laminates.NAME`"):
        assert any(place in h for h in tables), place


# ---------------------------------------------------------------- property-based
_scalar = st.one_of(st.integers(-10**6, 10**6), st.floats(allow_nan=True, allow_infinity=True),
                    st.booleans(), st.text(string.printable, max_size=12),
                    st.sampled_from(["5 Hz", "0.25 mm", "135 GPa", "-1 K", "nan", "1e400 m", "[0/90]s"]))
_value = st.recursive(_scalar, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                         st.dictionaries(st.sampled_from(
                                                             ["layup", "name", "frames", "thermal", "dic",
                                                              "material", "thickness", "E1", "x", "method"]),
                                                             inner, max_size=4)), max_leaves=12)
_keys = st.sampled_from(["laminate", "run", "materials", "registration", "diagnosis", "compute",
                         "output", "plan", "campaign", "laminates", "material_library", "junk"])


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n").replace("\r", "\\r")\
            .replace("\t", "\\t").replace("\x0b", "\\u000b").replace("\x0c", "\\f") + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return "{" + ", ".join(f'"{k}" = {_toml_value(x)}' for k, x in v.items()) + "}"


@settings(max_examples=300, deadline=None)
@given(st.dictionaries(_keys, _value, max_size=5))
def test_random_documents_load_or_raise_config_error(doc):
    text = "\n".join(f'"{k}" = {_toml_value(v)}' for k, v in doc.items())
    try:
        tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        return
    try:
        loads_config(text)
    except ConfigError:
        pass


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(["layup", "ply_thickness", "zero_direction", "ply_material", "resin_layer",
                        "convection_front"]), _value)
def test_random_laminate_values_load_or_raise_config_error(field, value):
    doc = tomllib.loads(BASE)
    doc["laminate"][field] = value
    text = BASE.split("[laminate]")[0] + "[laminate]\n" + "\n".join(
        f'"{k}" = {_toml_value(v)}' for k, v in doc["laminate"].items()) + "\n" + BASE[BASE.index("[registration]"):]
    try:
        tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        return
    try:
        loads_config(text)
    except ConfigError:
        pass


def test_readme_example_config_is_valid():
    text = (ROOT / "configs" / "README.md").read_text()
    block = text.split("```toml", 1)[1].split("```", 1)[0]
    cfg = loads_config(block, base=ROOT / "configs")
    assert cfg.runs[0].name == "P1-10Hz"
    assert cfg.laminates["default"].angles == (0.0, 90.0, 0.0, 90.0, 90.0, 0.0, 90.0, 0.0)


def test_demo_config_is_valid():
    cfg = load_config(ROOT / "configs" / "demo.toml")
    assert len(cfg.runs) == 8 and set(cfg.laminates) == {"carbon_qi_resin", "carbon_cross", "glass_painted"}
    assert [cfg.lateral_heat_for(r) for r in cfg.runs].count("beside") == 1
