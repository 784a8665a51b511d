"""The demo campaign run whole: outputs, their contract, and self-consistency.

The demo data are synthetic (fusion/demo/, sample_data/README.md), generated with the
package's own forward models (its heat model, its speckle rendering). Recovering the sources
built in is therefore a self-consistency check, not a reference: a sign error shared by the
generator and the predictor would pass here. The outside check of the same chain is
tests/test_end_to_end.py, whose data are made by code of its own.
"""

import json
import os
import re
from pathlib import Path

import jsonschema
import numpy as np
import pytest
import skimage.transform as skt
import xarray as xr

from fusion.datamodel import RESULT_VARIABLES
from fusion.demo import DEMO_RUNS, generate
from fusion.campaign import run_campaign

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    data = tmp_path_factory.mktemp("demo_data")
    cfg = generate(data)
    out = tmp_path_factory.mktemp("demo_out")
    outcome = run_campaign(cfg, out=out, workers=2)
    return cfg, out, outcome


def _open(out, name):
    with xr.open_dataset(out / name / "result.nc") as ds:
        return ds.load()


def test_every_run_succeeds(demo):
    # not a physics check: every demo run completes and the campaign files exist
    _, out, outcome = demo
    assert outcome.ok, outcome.describe()
    assert {r.name for r in outcome.runs} == {r.name for r in DEMO_RUNS}
    assert (out / "report.html").is_file() and (out / "frequency.nc").is_file()


@pytest.mark.parametrize("run", DEMO_RUNS, ids=lambda r: r.name)
def test_source_map_matches_built_in_source(demo, run):
    # not a physics check: self-consistency on the package's own demo data (see the module
    # docstring); the independent check is tests/test_end_to_end.py
    _, out, _ = demo
    ds = _open(out, run.name)
    valid = ds["valid"].values.astype(bool)
    meanings = ds["source_layer"].attrs["flag_meanings"].split()
    values = list(np.atleast_1d(ds["source_layer"].attrs["flag_values"]))
    code = values[meanings.index(run.expected)]
    share = np.mean(ds["source_layer"].values[valid] == code)
    assert valid.sum() > 500
    assert share >= 0.95, f"{run.name}: {run.expected} in {share:.1%} of the valid pixels"


@pytest.mark.parametrize("run", DEMO_RUNS, ids=lambda r: r.name)
def test_residual_of_true_source_centred_on_zero(demo, run):
    # not a physics check: self-consistency on the package's own demo data (see the module
    # docstring)
    _, out, _ = demo
    ds = _open(out, run.name)
    valid = ds["valid"].values.astype(bool)
    z = ds[f"zscore_{run.expected}"].values[valid]
    r = ds[f"residual_{run.expected}"].values[valid]
    sigma = np.sqrt(ds["ratio_measured_std"].values[valid] ** 2 + ds[f"ratio_{run.expected}_std"].values[valid] ** 2)
    # centred within its uncertainty: the median residual is a small fraction of one sigma
    assert abs(np.median(z)) < 0.5
    assert abs(np.median(r)) < 0.5 * np.median(sigma)


def test_carbon_cross_ply_moves_from_laminate_to_surface_ply(demo):
    # fact of the trade (common practice): heat flow between the plies homogenises the response
    # at low loading frequency; at high frequency the surface ply is adiabatic
    _, out, _ = demo
    share = {}
    for name in ("CX-0p05Hz", "CX-100Hz"):
        ds = _open(out, name)
        v = ds["valid"].values.astype(bool)
        m = ds["source_layer"].attrs["flag_meanings"].split()
        fv = list(np.atleast_1d(ds["source_layer"].attrs["flag_values"]))
        share[name] = {k: np.mean(ds["source_layer"].values[v] == fv[m.index(k)]) for k in ("laminate", "surface_ply")}
    assert share["CX-0p05Hz"]["laminate"] > 0.9 and share["CX-100Hz"]["surface_ply"] > 0.9


def test_markers_and_hole_edge_leave_no_artefact(demo):
    # the fiducial dots (2 mm, 4 IR px) and the hole are sharp temperature edges; moving under load
    # they once left stripes (-370 to -49e-6 against -200e-6 around them, |z| up to 9) and
    # crescents classified as sources. Near them the built-in source must now fit (|z| within the
    # demo's fit_threshold of 3), and the dots themselves be no data. Geometry from the demo's truth: the marker
    # centres in the IR image, and the hole (origin, 4 mm) mapped by a homography scikit-image
    # fits to the truth's marker pairs.
    cfg, out, _ = demo
    truth = json.loads((cfg.parent / "truth.json").read_text())["_registration"]
    ir = np.array(truth["ir_points"])
    h = skt.ProjectiveTransform.from_estimate(np.array(truth["dic_points_mm"]), ir)
    rows, cols = np.mgrid[0:96, 0:80]
    mm = h.inverse(np.column_stack([cols.ravel(), rows.ravel()])).reshape(96, 80, 2)
    to_marker = np.min([np.hypot(cols - c, rows - r) for c, r in ir], axis=0)
    to_hole = np.hypot(mm[..., 0], mm[..., 1]) - 4.0                   # mm from the hole edge
    for run in DEMO_RUNS:
        ds = _open(out, run.name)
        valid = ds["valid"].values.astype(bool)
        z = np.abs(ds[f"zscore_{run.expected}"].values)
        assert not valid[to_marker <= 4.5].any(), run.name      # radius 4 px + 1 px margin - clicks
        near = valid & ((to_marker <= 10.0) | (to_hole <= 3.0))
        if "lateral_edge" in ds and run.expected == "lateral":
            # the lateral model flags the band where it cannot know the boundary condition
            near &= ds["lateral_edge"].values == 0
        if near.any() and run.expected == "lateral":
            # the in-plane run's z-scores are noise-dominated (no property share hides them): among
            # ~1000 pixels a few beyond 3 are expected (0.27 % for a normal z), a stripe is not
            assert np.mean(z[near] > 3.0) <= 0.01, (run.name, np.mean(z[near] > 3.0))
        elif near.any():
            assert z[near].max() <= 3.0, (run.name, z[near].max())


def test_lateral_heat_model_explains_the_residuals_at_the_hole(demo):
    # not a physics check: self-consistency on the package's own demo data. CL-2Hz carries heat
    # flowing along the surface (the lateral heat model on a grid twice as fine, driven by the
    # Kirsch field); near the hole, outside the band where the model cannot know the boundary,
    # the lateral model leaves less than the through-thickness one, and fewer pixels unfitted.
    from fusion.report._spread import hole_distance

    _, out, _ = demo
    ds = _open(out, "CL-2Hz")
    valid = ds["valid"].values.astype(bool)
    dist, from_holes = hole_distance(valid)
    near = valid & (ds["lateral_edge"].values == 0) & (dist < 4)        # within 2 mm of the hole
    assert from_holes and near.sum() > 150
    rms = {s: float(np.sqrt(np.mean(ds[f"residual_{s}"].values[near] ** 2))) for s in ("model", "lateral")}
    assert rms["lateral"] < 0.8 * rms["model"], rms
    unfit = {s: int(np.sum(np.abs(ds[f"zscore_{s}"].values[valid]) > 3)) for s in ("model", "lateral")}
    assert unfit["lateral"] * 2 < unfit["model"], unfit
    summary = json.loads((out / "CL-2Hz" / "summary.json").read_text())
    assert "heat_spread" in summary["figures"]
    assert "Heat flowing along the surface" in (out / "report.html").read_text()


def test_every_variable_has_units_and_long_name(demo):
    # not a physics check: CF attributes of result.nc
    _, out, _ = demo
    ds = _open(out, DEMO_RUNS[0].name)
    for name, var in ds.data_vars.items():
        assert name in RESULT_VARIABLES
        assert "long_name" in var.attrs, name
        if "flag_values" not in var.attrs and "flag_masks" not in var.attrs:   # CF flag variables: no units
            assert "units" in var.attrs, name
    for key in ("config_text", "fusion_version", "input_digests", "input_digest_algorithm", "frequency",
                "registration_rms"):
        assert key in ds.attrs
    assert ds["T0"].dtype == np.float32 and ds["source_layer"].dtype == np.int8
    # NaN outside the valid mask
    assert np.all(np.isnan(ds["ratio_measured"].values[ds["valid"].values == 0]))


def test_summaries_validate_against_schema(demo):
    # not a physics check: summary.json against its schema
    _, out, _ = demo
    schema = json.loads((ROOT / "fusion" / "schema" / "summary.schema.json").read_text())
    for run in DEMO_RUNS:
        summary = json.loads((out / run.name / "summary.json").read_text())
        jsonschema.validate(summary, schema)
        assert re.fullmatch(r"[0-9a-f]{64}", summary["provenance"]["stamp"])


def test_summaries_hold_input_digests_and_step_timings(demo):
    # not a physics check: provenance and timings. Each input's digest is XXH3-128 of its bytes,
    # computed here with the xxhash library; result.nc holds the same digests
    import xxhash

    from fusion._timing import STEP_ORDER

    _, out, outcome = demo
    for run in DEMO_RUNS:
        summary = json.loads((out / run.name / "summary.json").read_text())
        prov = summary["provenance"]
        assert prov["input_digest"] == "xxh3-128" and prov["inputs"]
        for path, digest in prov["inputs"].items():
            assert digest == xxhash.xxh3_128(Path(path).read_bytes()).hexdigest(), path
        assert json.loads(_open(out, run.name).attrs["input_digests"]) == prov["inputs"]
        t = summary["timings"]
        assert set(t["steps"]) <= set(STEP_ORDER)
        assert {"lock-in" if run.thermal != "maps" else "thermal maps", "registration", "result.nc",
                "figures"} <= set(t["steps"])
        # the steps and what no step claims make up the run until its summary (rounded to 1 ms)
        assert sum(t["steps"].values()) + t["other"] == pytest.approx(t["total"], abs=0.002 * len(t["steps"]) + 0.002)
    assert outcome.describe().count("\n          time: ") == len(DEMO_RUNS)


def test_frequency_file_has_a_group_per_specimen(demo):
    # not a physics check: the layout of frequency.nc
    _, out, _ = demo
    for spec in ("CQ", "CX", "GP"):
        with xr.open_dataset(out / "frequency.nc", group=spec) as g:
            assert g.attrs["specimen"] == spec
            assert "units" in g[list(g.data_vars)[0]].attrs or "long_name" in g[list(g.data_vars)[0]].attrs


def test_rerun_skips_unchanged_runs(demo):
    # not a physics check: unchanged runs are skipped
    cfg, out, _ = demo
    again = run_campaign(cfg, out=out, workers=1)
    assert again.ok and all(r.status == "skipped" for r in again.runs)


def test_bad_runs_fail_alone(demo, tmp_path):
    # not a physics check: broken runs fail alone, with the file named
    cfg, _, _ = demo
    data = cfg.parent
    text = cfg.read_text()
    # three broken runs appended: a missing file, a stack of the wrong shape, a NaN-only stack
    np.save(data / "nan_stack.npy", np.full((64, 96, 80), np.nan, np.float32))
    np.save(data / "bad_shape.npy", np.zeros((64, 10), np.float32))
    broken = ""
    for name, frames in (("BAD-missing", "no_such_stack.npy"), ("BAD-shape", "bad_shape.npy"),
                         ("BAD-nan", "nan_stack.npy")):
        broken += f'''
[[run]]
name = "{name}"
specimen = "BAD"
laminate = "carbon_cross"
frequency = "2 Hz"
[run.thermal]
frames = "{frames}"
frame_rate = "50 Hz"
[run.dic]
strain_ranges = "CX-2Hz_strain.csv"
'''
    bad_cfg = data / "with_bad_runs.toml"
    bad_cfg.write_text(text + broken)
    out = tmp_path / "out"
    res = run_campaign(bad_cfg, out=out, only=["CX-2Hz", "BAD-missing", "BAD-shape", "BAD-nan"], workers=1)
    status = {r.name: r for r in res.runs}
    assert status["CX-2Hz"].status == "done"
    for name, needle in (("BAD-missing", "no_such_stack.npy"), ("BAD-shape", "bad_shape.npy"),
                         ("BAD-nan", "nan_stack.npy")):
        assert status[name].status == "failed"
        assert needle in status[name].error, status[name].error
        assert "internal error" not in status[name].error
        assert not (out / name).exists()
    assert not res.ok
    assert not list(out.glob(".*partial*"))
    report = (out / "report.html").read_text()
    assert "BAD-missing" in report


# ------------------------------------------------------------------------ unchanged results
# A change detector, not a reference: the digest of every demo map as the code computed it when
# the digest was written (tests/data/demo_digest.json). A change that is meant to alter results
# rewrites it (FUSION_WRITE_DEMO_DIGEST=1 python3 -m pytest tests/test_demo.py -k digest) and says
# in its commit message which maps moved and why; any other change must leave every map as it was.
DIGEST = ROOT / "tests" / "data" / "demo_digest.json"


def _digest(out):
    digest = {}
    for run in DEMO_RUNS:
        ds = _open(out, run.name)
        entry = {}
        for name, var in ds.data_vars.items():
            a = np.asarray(var.values)
            if a.dtype.kind in "iu":
                vals, counts = np.unique(a, return_counts=True)
                entry[name] = {"counts": {str(int(v)): int(c) for v, c in zip(vals, counts)}}
            else:
                a = a.astype(np.float64)
                ok = np.isfinite(a)
                entry[name] = {"finite": int(ok.sum()), "mean": float(a[ok].mean()) if ok.any() else None,
                               "std": float(a[ok].std()) if ok.any() else None}
        digest[run.name] = entry
    return digest


def test_demo_maps_match_their_digest(demo):
    # not a physics check: a regression pin of the demo's maps (a digest), not a reference
    _, out, _ = demo
    now = _digest(out)
    if os.environ.get("FUSION_WRITE_DEMO_DIGEST"):
        DIGEST.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
    then = json.loads(DIGEST.read_text())
    assert sorted(now) == sorted(then)
    moved = []
    for run, maps in then.items():
        assert sorted(now[run]) == sorted(maps), f"{run}: variables changed"
        for name, d in maps.items():
            n = now[run][name]
            if "counts" in d:
                total = sum(d["counts"].values())
                # a pixel or two may change class on another CPU (last-bit rounding of float32 sums)
                if any(abs(n["counts"].get(k, 0) - c) > 2 + 0.002 * total for k, c in d["counts"].items()):
                    moved.append(f"{run}.{name}: {d['counts']} -> {n['counts']}")
                continue
            if abs(n["finite"] - d["finite"]) > 2 + 0.002 * d["finite"]:
                moved.append(f"{run}.{name}: {d['finite']} -> {n['finite']} finite values")
            for k in ("mean", "std"):
                if d[k] is not None and not np.isclose(n[k], d[k], rtol=1e-4, atol=1e-12 + 1e-4 * abs(d["std"] or 0)):
                    moved.append(f"{run}.{name}.{k}: {d[k]!r} -> {n[k]!r}")
    assert not moved, "demo results changed:\n" + "\n".join(moved)
