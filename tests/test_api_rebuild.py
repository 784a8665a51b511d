"""Demo runs rebuilt through the public Python API match the command line's result.nc.

Not a physics check: two code paths of the package compared with each other (the step calls
of ``fusion.api`` against ``fusion run``), on the demo's synthetic data. Only public names are
imported here (``test_only_public_names_are_imported`` holds this module to it), so a user
can do the same in a notebook.
"""

import ast
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

import fusion
from fusion.config import load_config
from fusion.demo import cache_folder, generate
from fusion.io import open_frames, read_dic_field, read_load_signal, read_netcdf
from fusion.register import fit_transform

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
RUNS = ("CX-2Hz", "CX-0p05Hz")
# result.nc keeps T0 and the flag maps (integers) outside the valid area; every other map is NaN there
KEEP_OUTSIDE = ("T0",)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo inputs in the default cache folder of a fresh FUSION_CACHE, and two runs of ``fusion run``."""
    cache = tmp_path_factory.mktemp("cache")
    mp = pytest.MonkeyPatch()
    mp.setenv("FUSION_CACHE", str(cache))
    try:
        config = generate()
        assert config.parent == cache_folder()
        out = tmp_path_factory.mktemp("out")
        argv = [sys.executable, "-m", "fusion.cli", "-q", "run", str(config), "--out", str(out)]
        for name in RUNS:
            argv += ["--only", name]
        # the command line in a process of its own (it sets up logging for itself)
        done = subprocess.run(argv, capture_output=True, text=True)
        assert done.returncode == 0, done.stderr
        yield config, out
    finally:
        mp.undo()


def _compare(reference, steps, rtol):
    """Every variable of result.nc against the step products, on the valid pixels."""
    valid = reference["valid"].values.astype(bool)
    merged = xr.merge(steps, compat="override", combine_attrs="override")
    missing = sorted(set(reference.data_vars) - set(merged.data_vars))
    assert not missing, f"the steps do not give {missing}"
    assert np.array_equal(merged["valid"].values.astype(bool), valid)
    for name, ref in reference.data_vars.items():
        a, b = ref.values, merged[name].values
        assert b.shape == a.shape, name
        if name not in KEEP_OUTSIDE and a.dtype.kind == "f":
            a, b = np.where(valid, a, np.nan), np.where(valid, b, np.nan)
        # float tolerance: the same float32 arithmetic in another order may differ in the last bits
        np.testing.assert_allclose(b, a, rtol=rtol, atol=0, equal_nan=True, err_msg=name)
        assert merged[name].attrs.get("units") == ref.attrs.get("units"), name
        assert merged[name].attrs.get("long_name") == ref.attrs.get("long_name"), name


def test_compute_is_result_nc(demo):
    config, out = demo
    for name in RUNS:
        ds = fusion.compute(config, name)
        xr.testing.assert_identical(ds, read_netcdf(out / name / "result.nc"))


def test_strain_table_run_rebuilt_step_by_step(demo):
    # CX-2Hz: a strain-range table, raw frames with a load signal, a homography from the
    # config's control points, every source including the heat model at 2 Hz
    config, out = demo
    cfg = load_config(config)
    run = next(r for r in cfg.runs if r.name == "CX-2Hz")
    thermal = fusion.lockin_maps(open_frames(run.thermal.frames), frequency=run.frequency,
                                 frame_rate=run.thermal.frame_rate, load=read_load_signal(run.thermal.load))
    strain = fusion.strain_ranges(table=read_dic_field(run.dic.strain_ranges))
    reg = cfg.registration_for(run)
    transform = fit_transform(reg.dic_points, reg.ir_points, method=reg.method)
    markers = [(c, r, reg.marker_radius + reg.marker_margin) for c, r in reg.ir_points]
    on_ir = fusion.registered_strain(strain, transform, thermal, markers=markers)
    dg = cfg.diagnosis
    predicted = fusion.predictions(cfg.laminate_for(run), on_ir, frequency=run.frequency,
                                   property_uncertainty=dg.property_uncertainty)
    assert "model" in predicted["source"].values
    found = fusion.diagnosis(thermal, predicted, strain=on_ir, min_snr=dg.min_snr,
                             fit_threshold=dg.fit_threshold, distinguish=dg.distinguish)
    _compare(read_netcdf(out / "CX-2Hz" / "result.nc"), [thermal, on_ir, predicted, found], rtol=1e-6)


def test_motion_compensated_run_rebuilt_step_by_step(demo):
    # CX-0p05Hz: displacement fields at two states in visible px (rows down), the motion field
    # of the command line, the lock-in of the frames warped back by it
    config, out = demo
    cfg = load_config(config)
    run = next(r for r in cfg.runs if r.name == "CX-0p05Hz")
    frames = open_frames(run.thermal.frames)
    load = read_load_signal(run.thermal.load)
    thermal = fusion.lockin_maps(frames, frequency=run.frequency, frame_rate=run.thermal.frame_rate, load=load)
    dic = run.dic
    states = [read_dic_field(p, columns=dic.columns, coordinates=dic.coordinates, y_axis=dic.effective_y_axis)
              for p in dic.states]
    strain = fusion.strain_ranges(states=states, window=dic.strain_window)
    reg = cfg.registration_for(run)
    # control points as written in the config, in the file's rows-down px: to the specimen frame
    points = np.asarray(reg.dic_points, float)[:, :2] * [1.0, -1.0]
    transform = fit_transform(points, reg.ir_points, method=reg.method)
    motion = fusion.motion_field(strain, transform, thermal)
    assert motion.dims == ("component", "y", "x") and np.abs(motion).max() > 0
    thermal = fusion.lockin_maps(frames, frequency=run.frequency, frame_rate=run.thermal.frame_rate, load=load,
                                 motion=motion)
    markers = [(c, r, reg.marker_radius + reg.marker_margin) for c, r in reg.ir_points]
    on_ir = fusion.registered_strain(strain, transform, thermal, markers=markers)
    predicted = fusion.predictions(cfg.laminate_for(run), on_ir, frequency=run.frequency)
    found = fusion.diagnosis(thermal, predicted, strain=on_ir)
    _compare(read_netcdf(out / "CX-0p05Hz" / "result.nc"), [thermal, on_ir, predicted, found], rtol=1e-6)


def test_readme_example_runs(demo, tmp_path, monkeypatch, capsys):
    # not a physics check: the README's "reproduce a run from Python" example, as written
    config, _ = demo
    monkeypatch.setenv("FUSION_CACHE", str(config.parent.parent))
    monkeypatch.chdir(tmp_path)
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks, "README.md has no python example"
    for block in blocks:
        exec(compile(block, "README.md", "exec"), {"__name__": "readme"})
    assert capsys.readouterr().out.strip()


def test_only_public_names_are_imported():
    # not a physics check: this module uses the public API only, as a user would
    tree = ast.parse(Path(__file__).read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module:
            assert not any(part.startswith("_") for part in node.module.split(".")), node.module
            assert not any(a.name.startswith("_") for a in node.names), node.module
        elif isinstance(node, ast.Import):
            assert not any(p.startswith("_") for a in node.names for p in a.name.split(".")), ast.dump(node)
        elif isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id == "fusion":
            assert not node.attr.startswith("_"), node.attr
