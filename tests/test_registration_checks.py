"""What a run says about its registration, and what it leaves out, end to end.

Runs are built by the independent forward model of tests/_registration_cases.py (a known map from
specimen mm to infrared pixels, an analytic strain field, thermal maps from lamination theory
written in the tests). Each failure once reported by a user is reproduced and must now give the
right numbers or a clear message: an exact 4-point fit shown with an "RMS error" of 1.9e-6 px, a
mis-clicked point reported three times in three wordings, a field covering ~10 % of the infrared
data without a word about registration, markers and excluded areas kept in the statistics.
"""

import json
import re

import numpy as np
import pytest
import skimage.draw
import skimage.transform as skt
import xarray as xr
from scipy.optimize import least_squares

from fusion.campaign import CampaignOutcome, RunOutcome
from fusion.config import load_config, loads_config
from fusion.errors import ConfigError
from fusion.io import write_netcdf
from fusion.report import render_report, summarize_run
from fusion.run import compute_run

import _registration_cases as rc


def _case(tmp_path, reg, dic=None, *, half=None):
    if dic is None:
        dic = rc.table_mm(tmp_path) if half is None else _small_table(tmp_path, half)
    return rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(), reg, dic)


def _small_table(folder, half):
    x, y = rc._mm_grid(half=half)
    rc._csv(folder / "strain.csv", ["x", "y", "exx", "eyy", "gxy"], [x, y, *rc.strain(x, y)])
    return {"strain_ranges": "strain.csv", "coordinates": "mm"}


def _run(case, *, maps_change=None):
    """The run of ``case`` and its summary; ``maps_change(maps)`` edits its thermal maps first."""
    cfg = load_config(rc.ROOT / "configs" / "demo.toml")
    path = case.write(cfg.materials["carbon_epoxy"], 45.0)
    if maps_change is not None:
        maps = xr.load_dataset(case.folder / "maps.nc")
        maps_change(maps)
        write_netcdf(maps, case.folder / "maps.nc", overwrite=True)
    cfg = load_config(path)
    result = compute_run(cfg, cfg.runs[0])
    summary = summarize_run(result.dataset, warnings=result.warnings, meta=result.meta,
                            registration_limit_px=cfg.registration_for(cfg.runs[0]).max_error)
    return result, summary


def _codes(summary):
    return [w["code"] for w in summary["warnings"]]


def _terminal(summary):
    return CampaignOutcome(out=rc.ROOT, runs=[RunOutcome("R", "done", summary=summary)]).describe()


def _html(summary, tmp_path):
    return render_report(campaign={"name": "c"}, runs=[{"summary": summary}])


# ---------------------------------------------------------------- the registration error
def test_four_point_homography_is_an_exact_fit_without_a_number(tmp_path):
    # [HartleyZisserman2004]: four points fix a homography exactly; independent forward model (_registration_cases.py)
    # one of the four points is 2 px off: four points fix a homography whatever their errors,
    # so nothing can be told about them, and no RMS is shown as if it were a precision
    reg = rc.control("table_mm", "homography", n=4)
    reg["ir_points"][2][0] += 2.0
    result, summary = _run(_case(tmp_path, reg))
    assert summary["registration_rms_px"] is None
    rep = summary["meta"]["registration"]
    assert rep["error_estimate"] == "not estimable (exact fit)"
    assert rep["registration_rms_px"] is None and rep["assessment"]["leave_one_out_px"] is None
    assert [c for c in _codes(summary) if c.startswith("registration")] == ["registration_exact_fit"]
    text = json.dumps(summary)
    assert not re.search(r"RMS error \d", text)
    assert "warning (registration_exact_fit): registration error not estimable (exact fit)" in _terminal(summary)
    assert "not estimable (exact fit)" in _html(summary, tmp_path)
    assert np.isnan(result.dataset.attrs["registration_rms"])
    # runs sharing the control points share the warning: the terminal says it once, not per run
    both = CampaignOutcome(out=rc.ROOT, runs=[RunOutcome("R", "done", summary=summary),
                                              RunOutcome("S", "done", summary=summary)]).describe()
    assert both.count("registration error not estimable") == 1
    assert "warning (registration_exact_fit) in every run:" in both


def _independent_loo(src, dst, k):
    """Leave-one-out error of point k: the homography of least reprojection error in the IR image
    (Hartley & Zisserman 2004, sec. 4.2.4) fitted to the other points by scipy.optimize from
    scikit-image's linear estimate, then point k projected (reference libraries only)."""
    rest = np.arange(len(src)) != k
    start = skt.ProjectiveTransform.from_estimate(src[rest], dst[rest])
    assert start

    def residual(h):
        return (rc.project(np.append(h, 1.0).reshape(3, 3), src[rest]) - dst[rest]).ravel()

    h0 = start.params / start.params[2, 2]
    h = least_squares(residual, h0.ravel()[:8], xtol=1e-15, ftol=1e-15, gtol=1e-15).x
    return float(np.linalg.norm(rc.project(np.append(h, 1.0).reshape(3, 3), src[k:k + 1])[0] - dst[k]))


@pytest.mark.parametrize("miss", [2.5, 5.0])
def test_six_point_fit_names_the_bad_point_once(tmp_path, miss):
    reg = rc.control("table_mm", "homography", n=6)
    reg["ir_points"][3][1] += miss           # a mis-click of some rows on point 3
    result, summary = _run(_case(tmp_path, reg))
    a = summary["meta"]["registration"]["assessment"]
    src, dst = rc.CONTROL_MM, np.asarray(reg["ir_points"])
    loo = [_independent_loo(src, dst, k) for k in range(6)]
    # OpenCV's Levenberg-Marquardt stops at its own tolerance: 1e-4 (px and relative), far below
    # any click error
    np.testing.assert_allclose(a["leave_one_out_px"], loo, rtol=1e-4, atol=1e-4)
    assert a["worst_point"] == 3 and a["outlier"]
    reg_warnings = [w for w in summary["warnings"] if w["code"].startswith("registration")]
    # one cause, one warning: not the fit's, the step's and the summary's own wordings of it
    assert [w["code"] for w in reg_warnings] == ["registration_outlier"]
    msg = reg_warnings[0]["message"]
    assert msg.startswith("control point 3 (dic [-10.0, -7.5], IR ")
    assert f"{loo[3]:.2f} IR px from where the other 5 points put it" in msg
    assert "registration_outlier" in _terminal(summary)
    # the RMS is still reported: below the 0.5 px limit for a 2.5 px miss (the RMS alone would
    # not warn), above it for 5 px (and then not warned about a second time)
    assert summary["registration_rms_px"] == pytest.approx(a["rms"])
    assert (a["rms"] < 0.5) == (miss < 3)


def test_six_good_points_give_an_rms_and_no_warning(tmp_path):
    # independent forward model (_registration_cases.py) with a known scatter of the points
    reg = rc.control("table_mm", "homography", n=6)
    reg["ir_points"] = (np.asarray(reg["ir_points"]) + np.random.default_rng(1).normal(0, 0.05, (6, 2))).tolist()
    _, summary = _run(_case(tmp_path, reg))
    assert not [c for c in _codes(summary) if c.startswith("registration")]
    a = summary["meta"]["registration"]["assessment"]
    assert 0 < summary["registration_rms_px"] < 0.1 and not a["outlier"] and a["scatter_px"] < 0.2


def test_five_points_report_the_error_but_not_which_point(tmp_path):
    # [HartleyZisserman2004]: one point beyond the minimum gives an error estimate but cannot isolate a bad point; independent forward model
    # one point more than a homography needs: the RMS exists, a single bad point cannot be isolated
    reg = rc.control("table_mm", "homography", n=5)
    reg["ir_points"][1][0] -= 3.0
    _, summary = _run(_case(tmp_path, reg))
    reg_warnings = [w for w in summary["warnings"] if w["code"].startswith("registration")]
    assert [w["code"] for w in reg_warnings] == ["registration_error"]
    assert "cannot be told from the others: add points" in reg_warnings[0]["message"]
    assert summary["meta"]["registration"]["assessment"]["scatter_px"] is None


# ---------------------------------------------------------------- footprint
def test_a_footprint_of_ten_percent_warns_naming_registration(tmp_path):
    # independent forward model (_registration_cases.py): a field of known extent on the IR grid
    # the failure reported: a field covering ~12 % of the infrared data raised no warning
    _, summary = _run(_case(tmp_path, rc.control("table_mm", "affine"), half=(5.0, 3.5)))
    fp = summary["meta"]["footprint"]
    assert 0.07 < fp["share"] < 0.13
    assert fp["thermal_pixels"] > 0.99 * rc.IR_SHAPE[0] * rc.IR_SHAPE[1]   # maps usable nearly everywhere
    w = [w for w in summary["warnings"] if w["code"] == "registration_footprint"]
    assert len(w) == 1 and "low_valid_area" not in _codes(summary)
    assert re.search(rf"land on {100 * fp['share']:.0f} % of the {fp['thermal_pixels']} IR pixels", w[0]["message"])
    assert f"correlation footprint {fp['footprint_pixels']} px" in w[0]["message"]
    assert "registration (method 'affine'" in w[0]["message"] and "likely cause" in w[0]["message"]
    assert "registration_footprint" in _terminal(summary)


def test_a_weak_thermal_signal_is_named_and_the_registration_not_blamed(tmp_path):
    # independent forward model (_registration_cases.py), then the maps' noise raised 10^4 times:
    # few pixels reach the signal-to-noise floor, so the usable thermal area shrinks to scattered
    # pixels; before, the run blamed the registration for the small overlap (a frame rate typed
    # ten times too high ends the same way: the lock-in finds little signal at the load frequency)
    def noisier(maps):
        maps["delta_T_std"] = np.abs(maps["delta_T"]) * (0.3 + np.random.default_rng(1).random(maps["delta_T"].shape))

    _, summary = _run(_case(tmp_path, rc.control("table_mm", "affine")), maps_change=noisier)
    codes = _codes(summary)
    assert "registration_footprint" not in codes
    w = [w["message"] for w in summary["warnings"] if w["code"] == "low_snr" and "under the correlation" in w["message"]]
    assert len(w) == 1 and "the thermal signal is weak there" in w[0] and "delta_T and its std" in w[0]
    assert "low_snr" in _terminal(summary)


def test_maps_with_the_temperature_range_turned_over_are_named(tmp_path):
    # independent forward model (_registration_cases.py) with delta_T written with the other
    # sign (T at minimum load minus T at maximum): before, the run said only that no source fits
    def turned_over(maps):
        maps["delta_T"] = -maps["delta_T"]

    _, summary = _run(_case(tmp_path, rc.control("table_mm", "affine")), maps_change=turned_over)
    w = [w["message"] for w in summary["warnings"] if w["code"] == "sign_reversed"]
    assert len(w) == 1 and re.search(r"measured = -1\.00 x predicted surface ply, explaining 100% of it; with "
                                     r"their own sign the predictions explain \d+% at best", w[0])
    assert "sign_reversed" in _terminal(summary) and "dic.images: the reference at minimum load first" in w[0]


def test_a_footprint_below_five_percent_fails(tmp_path):
    with pytest.raises(ConfigError, match=r"registration\.dic_points / ir_points: the correlation data land "
                                          r"on [0-4] % .* below 5 %: registration .* is the likely cause"):
        _run(_case(tmp_path, rc.control("table_mm", "affine"), half=(3.0, 2.0)))


def test_points_misplaced_by_a_shift_fail_on_the_footprint(tmp_path):
    # control points of another specimen position: the field lands beside the thermal data
    reg = rc.control("table_mm", "similarity")
    reg["ir_points"] = (np.asarray(reg["ir_points"]) + [70.0, 0.0]).tolist()
    with pytest.raises(ConfigError, match="below 5 %"):
        _run(_case(tmp_path, reg))


# ---------------------------------------------------------------- masks
def test_markers_at_the_control_points_are_no_data(tmp_path):
    # independent forward model (_registration_cases.py): marker discs of known centre and radius
    reg = dict(rc.control("table_mm", "homography"), marker_radius=2.5, marker_margin=1.0)
    result, summary = _run(_case(tmp_path, reg))
    ds = result.dataset
    rows, cols = np.mgrid[0:rc.IR_SHAPE[0], 0:rc.IR_SHAPE[1]]
    near = np.zeros(rc.IR_SHAPE, bool)
    for c, r in reg["ir_points"]:
        near |= np.hypot(cols - c, rows - r) <= 3.5
    valid = ds["valid"].values.astype(bool)
    assert near.sum() > 150 and not valid[near].any()
    for name in ("delta_eps_xx", "ratio_measured", "ratio_surface_ply", "zscore_surface_ply"):
        assert np.isnan(ds[name].values[near]).all(), name
    assert summary["valid_pixels"] == valid.sum() and summary["measured"]["n"] == valid.sum()
    assert result.meta["registration"]["marker_pixels"] == near.sum()


def test_exclusions_in_ir_pixels_and_in_correlation_coordinates(tmp_path):
    poly = [[31.3, 12.2], [44.7, 14.9], [40.2, 22.6]]
    reg = dict(rc.control("table_mm", "affine"), exclude=[
        {"rect": [8.5, 30.5, 16.5, 40.5]},                       # IR px
        {"polygon": poly},                                      # IR px
        {"circle": [6.0, -2.0, 1.6], "frame": "dic"},           # mm of the strain file
    ])
    result, _ = _run(_case(tmp_path, reg))
    valid = result.dataset["valid"].values.astype(bool)
    rows, cols = np.mgrid[0:rc.IR_SHAPE[0], 0:rc.IR_SHAPE[1]]
    rect = (cols >= 8.5) & (cols <= 16.5) & (rows >= 30.5) & (rows <= 40.5)
    # scikit-image rasterises the polygon (pixel centres inside), a reference implementation
    tri = skimage.draw.polygon2mask(rc.IR_SHAPE, np.asarray(poly)[:, ::-1])
    assert rect.sum() > 50 and tri.sum() > 30
    assert not valid[rect].any() and not valid[tri].any()
    x, y = (a.reshape(rc.IR_SHAPE) for a in rc.ir_positions())
    d = np.hypot(x - 6.0, y + 2.0)
    assert not valid[d < 1.6].any()
    # outside, pixels keep their data beyond one correlation step (0.5 mm) and one IR pixel (0.5 mm)
    far = (d > 1.6 + 1.0) & ~rect & ~tri & (np.abs(x) < 11) & (np.abs(y) < 8)
    grown = np.zeros_like(rect)
    for m in (rect, tri):
        grown |= np.hypot(*np.gradient(m.astype(float))) > 0
    assert valid[far & ~grown].all()


@pytest.mark.parametrize("entry, key, match", [
    ({"rect": [40, 0, 30, 10]}, r"exclude\[0\]\.rect", "x1 > x0"),
    ({"circle": [1, 1, 0]}, r"exclude\[0\]\.circle", "positive radius"),
    ({"polygon": [[0, 0], [1, 1], [2, 2]]}, r"exclude\[0\]\.polygon", "enclose no area"),
    ({"rect": [0, 0, 1, 1], "circle": [1, 1, 1]}, r"exclude\[0\]", "exactly one of"),
    ({"rect": [0, 0, 1, 1], "frame": "mm"}, r"exclude\[0\]\.frame", "expected one of 'ir', 'dic'"),
    ({"rect": [0, 0, 1, 1], "shape": "x"}, r"exclude\[0\]\.shape", "unknown key"),
])
def test_exclusion_keys_are_validated(entry, key, match):
    body = ", ".join(f"{k} = {rc._toml(v)}" for k, v in entry.items())
    text = (rc.LAMINATE.format(lib=(rc.ROOT / "configs" / "materials.toml").as_posix())
            + f'[registration]\nmethod = "identity"\nexclude = [{{ {body} }}]\n'
            + '[[run]]\nname = "R"\nfrequency = "5 Hz"\n[run.thermal]\nmaps = "m.nc"\ndelta_T_convention = "peak-to-peak"\n'
              '[run.dic]\nstrain_ranges = "s.csv"\ncoordinates = "px"\n')
    with pytest.raises(ConfigError, match=f"registration\\.{key}: .*{match}"):
        loads_config(text)


@pytest.mark.parametrize("frame, match", [("ir", "covers no pixel of the 48 x 60 IR image"),
                                           ("dic", "covers no correlation point")])
def test_an_exclusion_that_misses_everything_names_the_frame(tmp_path, frame, match):
    reg = dict(rc.control("table_mm", "affine"), exclude=[{"circle": [500.0, 500.0, 3.0], "frame": frame}])
    with pytest.raises(ConfigError, match=rf"registration\.exclude\[0\]: {match}.*frame ="):
        _run(_case(tmp_path, reg))


# ---------------------------------------------------------------- config cross-checks
@pytest.mark.parametrize("reg, dic, key, match", [
    ('dic_points_units = "px"', 'strain_ranges = "s.csv"', r"registration\.dic_points_units",
     "is 'px' but the correlation file of run 'R' is in 'mm'"),
    ('dic_points_units = "mm"', 'images = ["a.png", "b.png"]\nloads = [1, 2]', r"registration\.dic_points_units",
     "needs|which is not given"),
])
def test_points_units_must_match_the_data(reg, dic, key, match):
    text = (rc.LAMINATE.format(lib=(rc.ROOT / "configs" / "materials.toml").as_posix())
            + '[registration]\nmethod = "affine"\ndic_points = [[0, 0], [1, 0], [0, 1]]\n'
              f'ir_points = [[0, 0], [1, 0], [0, 1]]\n{reg}\n'
            + f'[[run]]\nname = "R"\nfrequency = "5 Hz"\n[run.thermal]\nmaps = "m.nc"\ndelta_T_convention = "peak-to-peak"\n[run.dic]\n{dic}\n')
    with pytest.raises(ConfigError, match=f"{key}: .*({match})"):
        loads_config(text)


def test_fusion_check_refuses_swapped_points_before_reading_data(tmp_path):
    # the config alone shows it: no data file exists here
    reg = rc.control("table_mm", "homography", n=4)
    points = "\n".join(f"{k} = {rc._toml(v)}" for k, v in reg.items() if k != "ir_points")
    swapped = [[r, c] for c, r in reg["ir_points"]]
    text = (rc.LAMINATE.format(lib=(rc.ROOT / "configs" / "materials.toml").as_posix())
            + f"[registration]\n{points}\nir_points = {rc._toml(swapped)}\n"
            + '[[run]]\nname = "R"\nfrequency = "5 Hz"\n[run.thermal]\nmaps = "m.nc"\ndelta_T_convention = "peak-to-peak"\n'
              '[run.dic]\nstrain_ranges = "s.csv"\n')
    with pytest.raises(ConfigError, match=r"registration\.ir_points: the control points mirror the field"):
        loads_config(text)
    loads_config(text.replace(f"ir_points = {rc._toml(swapped)}", f"ir_points = {rc._toml(reg['ir_points'])}"))
