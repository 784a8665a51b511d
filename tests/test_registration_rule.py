"""One coordinate rule for every input and method, end to end through ``compute_run``.

Each run is built by an independent forward model (tests/_registration_cases.py): a known map
from specimen mm to infrared pixels, an analytic displacement and strain field written in the
input's own coordinates (strain tables in mm with y up or in visible pixels with rows down,
displacement states and series, speckle images), thermal maps computed from that field at the
true position of every infrared pixel by lamination theory written in the test (Kaw, *Mechanics
of Composite Materials*, 2nd ed., CRC 2006). A run is right when its registered strain equals the
field at each pixel's true position and its predicted surface-ply dT/T0 equals the independent one
(which needs the shear sign right: the surface ply lies at 45 degrees).
"""

import numpy as np
import pytest

from fusion.config import load_config
from fusion.errors import ConfigError
from fusion.run import compute_run

import _registration_cases as rc

TABLE_METHODS = ["similarity", "affine", "homography"]


def _laminate():
    cfg = load_config(rc.ROOT / "configs" / "demo.toml")   # only for the shipped material record
    mat = cfg.materials["carbon_epoxy"]
    return mat, 45.0                                        # layup [45/-45]s, zero_direction 0


def _run(case):
    mat, angle = _laminate()
    cfg = load_config(case.write(mat, angle))
    return compute_run(cfg, cfg.runs[0]), mat, angle


def _check(result, case, mat, angle, *, strain_tol, min_valid):
    ds = result.dataset
    valid = ds["valid"].values.astype(bool)
    x, y = (a.reshape(case.ir_shape) for a in case.positions)
    ex, ey, gx = rc.strain(x, y)
    assert valid.sum() >= min_valid, f"{valid.sum()} valid pixels"
    got = [ds[k].values[valid] for k in ("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")]
    stds = [ds[f"{k}_std"].values[valid] for k in ("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")]
    for g, want, s, name in zip(got, (ex[valid], ey[valid], gx[valid]), stds, ("exx", "eyy", "gxy")):
        err = np.abs(g - want)
        # correlated images carry noise: the median |error| of a normal error is 0.67 std, so
        # 1.5 reported stds bounds it with room for a small bias; exact tables keep strain_tol
        tol = max(strain_tol, 1.5 * float(np.median(s)))
        assert np.median(err) < tol, (name, np.median(err), tol)
    truth = rc.surface_ply_ratio(mat, angle, ex, ey, gx)[valid]
    pred = ds["ratio_surface_ply"].values[valid]
    # the law is linear in the strain: a strain error e moves dT/T0 by at most sum|c| e
    coef = np.abs([rc.surface_ply_ratio(mat, angle, *np.eye(3)[k]) for k in range(3)]).sum()
    ratio_tol = 2.0 * coef * strain_tol + 1e-6 * np.abs(truth).max()   # + float32 maps
    assert np.median(np.abs(pred - truth)) < ratio_tol
    # the check can fail: with the opposite shear sign the 45 degree ply sees other strains
    flipped = rc.surface_ply_ratio(mat, angle, ex, ey, -gx)[valid]
    assert np.median(np.abs(flipped - truth)) > 10 * ratio_tol


# ---------------------------------------------------------------- point methods, every input
@pytest.mark.parametrize("method", TABLE_METHODS)
@pytest.mark.parametrize("kind", ["table_mm", "table_px", "states", "series"])
def test_control_points_in_the_data_own_coordinates(tmp_path, kind, method):
    # independent forward model (_registration_cases.py) and surface-ply lamination theory ([Kaw2006])
    dic = rc.INPUTS[kind](tmp_path)
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(), rc.control(kind, method), dic)
    result, mat, angle = _run(case)
    # linear strain under a similarity is interpolated exactly (tables); the displacement inputs
    # go through the strain fit (exact for this quadratic displacement away from the edges)
    tol = 1e-7 if kind.startswith("table") else 2e-6
    _check(result, case, mat, angle, strain_tol=tol, min_valid=900)
    assert not [w for w in result.warnings if isinstance(w, dict) and w["code"] != "registration_exact_fit"]


@pytest.mark.parametrize("method, units", [(m, "px") for m in TABLE_METHODS] + [("homography", "mm")])
def test_image_control_points_are_reference_image_col_row(tmp_path, method, units):
    # the failure reported: points in the reference image's (col, row) gave an empty overlap
    dic = rc.images(tmp_path)
    reg = rc.control("images", method)
    if units == "mm":
        dic["pixel_size"] = f"{rc.PS} mm"
        reg["dic_points"] = (np.asarray(reg["dic_points"]) * rc.PS).tolist()
        reg["dic_points_units"] = "mm"
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(), reg, dic)
    result, mat, angle = _run(case)
    # correlation noise of synthetic speckle: strain to ~1e-5 (Pan et al. 2008 order; from memory)
    _check(result, case, mat, angle, strain_tol=3e-5, min_valid=700)


# ---------------------------------------------------------------- identity
def _identity_table(folder, kind):
    """A correlation file on the IR grid itself: x = col, y = row, in px (rows down)."""
    t_id = np.array([[2.0, 0, 30.0], [0, -2.0, 24.0], [0, 0, 1.0]])      # mm -> IR px
    rows, cols = np.mgrid[0:rc.IR_SHAPE[0], 0:rc.IR_SHAPE[1]]
    col, row = cols.ravel().astype(float), rows.ravel().astype(float)
    x, y = (col - 30.0) / 2.0, (24.0 - row) / 2.0
    if kind == "table_px":
        exx, eyy, gxy = rc.strain(x, y)
        rc._csv(folder / "strain.csv", ["x", "y", "exx", "eyy", "gxy"], [col, row, exx, eyy, -gxy])
        dic = {"strain_ranges": "strain.csv", "coordinates": "px"}
    elif kind == "states":
        u, v = rc.displacement(x, y)
        rc._csv(folder / "d_min.csv", ["x", "y", "u", "v"], [col, row, 0 * u, 0 * v])
        rc._csv(folder / "d_max.csv", ["x", "y", "u", "v"], [col, row, 2.0 * u, -2.0 * v])
        dic = {"states": ["d_min.csv", "d_max.csv"], "coordinates": "px"}
    else:
        u, v = rc.displacement(x, y)
        loads = [1.0, 3.0, 5.0]
        for k, load in enumerate(loads):
            f = (load - 3.0) / 4.0                    # the range over 4 kN is the field
            rc._csv(folder / f"s{k}.csv", ["x", "y", "u", "v"], [col, row, 2.0 * f * u, -2.0 * f * v])
        dic = {"series": [f"s{k}.csv" for k in range(3)], "coordinates": "px",
               "loads": [f"{v} kN" for v in loads]}
    return dic, rc.ir_positions(m=t_id)


def test_identity_on_pixel_data_covers_the_grid_with_the_right_shear_sign(tmp_path):
    # the failure reported: 'identity' with a px file put the field on negative rows (60 of
    # 2400 pixels got data) and y_axis = "up" mirrored it; now every pixel has data and the
    # surface ply's dT/T0 matches the independent lamination-theory value (Kaw 2006, sec. 2.6)
    dic, pos = _identity_table(tmp_path, "table_px")
    case = rc.Case(tmp_path, rc.IR_SHAPE, pos, {"method": "identity"}, dic)
    result, mat, angle = _run(case)
    valid = result.dataset["valid"].values.astype(bool)
    assert valid.all(), f"{valid.sum()} of {valid.size} pixels"
    _check(result, case, mat, angle, strain_tol=1e-9, min_valid=valid.size)


@pytest.mark.parametrize("kind", ["states", "series"])
def test_identity_on_displacement_fields(tmp_path, kind):
    # independent forward model (_registration_cases.py) and surface-ply lamination theory ([Kaw2006])
    dic, pos = _identity_table(tmp_path, kind)
    case = rc.Case(tmp_path, rc.IR_SHAPE, pos, {"method": "identity"}, dic)
    result, mat, angle = _run(case)
    _check(result, case, mat, angle, strain_tol=1e-6, min_valid=1500)


def test_identity_on_images_of_the_ir_grid(tmp_path):
    # independent forward model (_registration_cases.py) and surface-ply lamination theory ([Kaw2006])
    # speckle images whose pixels are the IR pixels (no pixel_size): (col, row) = IR (col, row)
    shape = rc.VIS_SHAPE
    to_mm = lambda c, r: ((c - 130.0) * 0.1, (100.0 - r) * 0.1)     # noqa: E731
    dic = rc.images(tmp_path, shape=shape, to_mm=to_mm)
    m = np.array([[10.0, 0, 130.0], [0, -10.0, 100.0], [0, 0, 1.0]])
    case = rc.Case(tmp_path, shape, rc.ir_positions(shape, m), {"method": "identity"}, dic)
    result, mat, angle = _run(case)
    _check(result, case, mat, angle, strain_tol=3e-5, min_valid=20000)


@pytest.mark.parametrize("kind, key, match", [
    ("table_mm", r"dic\.coordinates", "takes the file's x, y as IR pixels"),
    ("y_up", r"dic\.y_axis", "would mirror the field"),
])
def test_identity_refuses_data_that_cannot_be_on_the_pixel_grid(tmp_path, kind, key, match):
    dic = rc.table_mm(tmp_path) if kind == "table_mm" else dict(rc.table_px(tmp_path), y_axis="up")
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(), {"method": "identity"}, dic)
    mat, angle = _laminate()
    with pytest.raises(ConfigError, match=f"{key}: .*{match}"):
        load_config(case.write(mat, angle))


# ---------------------------------------------------------------- orientation
@pytest.mark.parametrize("method", TABLE_METHODS)
def test_row_col_swapped_points_are_refused(tmp_path, method):
    # the failure reported: (row, col) points gave a mirrored homography, a gradient turned by
    # 90 degrees and a confident verdict
    dic = rc.table_mm(tmp_path)
    reg = rc.control("table_mm", method)
    reg["ir_points"] = [[r, c] for c, r in reg["ir_points"]]
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(), reg, dic)
    with pytest.raises(ConfigError, match=r"the control points mirror the field: \(row, col\) swapped\?"):
        _run(case)


def test_a_mirrored_ir_image_is_accepted_when_stated(tmp_path):
    # a mirror in the IR optical path: columns run the other way; said so, the run is right
    mirror = np.array([[-1.0, 0, rc.IR_SHAPE[1] - 1.0], [0, 1, 0], [0, 0, 1]])
    m = mirror @ rc.T_TRUE
    dic = rc.table_mm(tmp_path)
    reg = rc.control("table_mm", "affine")
    reg["ir_points"] = np.round(rc.project(m, rc.CONTROL_MM), 6).tolist()
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(m=m), reg, dic)
    with pytest.raises(ConfigError, match="mirror the field"):
        _run(case)
    case.registration["ir_mirrored"] = True
    result, mat, angle = _run(case)
    _check(result, case, mat, angle, strain_tol=1e-7, min_valid=900)


# ---------------------------------------------------------------- fiducials and camera
def test_fiducials_found_in_the_reference_image_and_t0(tmp_path):
    from scipy.ndimage import gaussian_filter

    import cv2

    # four bright dots, asymmetric, left out of the correlation by a mask (as a user paints it)
    centres_mm = np.array([[-8.0, 5.5], [8.5, 5.0], [8.0, -5.5], [-7.5, -4.6]])
    col, row = rc.vis_px(centres_mm[:, 0], centres_mm[:, 1])
    dic = rc.images(tmp_path, markers=[(c, r, 15.0) for c, r in zip(col, row)])
    vr, vc = np.mgrid[0:rc.VIS_SHAPE[0], 0:rc.VIS_SHAPE[1]]
    keep = np.ones(rc.VIS_SHAPE, bool)
    for c, r in zip(col, row):
        keep &= np.hypot(vc - c, vr - r) > 20.0
    cv2.imwrite(str(tmp_path / "mask.png"), (keep * 255).astype(np.uint8))
    dic["mask"] = "mask.png"
    ir = rc.project(rc.T_TRUE, centres_mm)
    rows, cols = np.mgrid[0:rc.IR_SHAPE[0], 0:rc.IR_SHAPE[1]]
    hot = np.zeros(rc.IR_SHAPE)
    for c, r in ir:
        hot[np.hypot(cols - c, rows - r) < 3.0] = 8.0
    reg = {"method": "fiducials", "fiducials": 4, "fiducial_radius_ir": [2.0, 5.0],
           "fiducial_radius_visible": [10.0, 22.0], "fiducial_polarity_ir": "bright",
           "fiducial_polarity_visible": "bright"}
    # blurred by the optics, over a camera noise of 20 mK (a typical detector, from memory)
    scene = gaussian_filter(hot, 0.7) + np.random.default_rng(3).normal(0.0, 0.02, rc.IR_SHAPE)
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(), reg, dic, hot=scene)
    result, mat, angle = _run(case)
    _check(result, case, mat, angle, strain_tol=3e-5, min_valid=300)
    rep = result.meta["registration"]
    # the markers found are the ones drawn (their centroid within a tenth of a pixel), and masked
    found = np.array(rep["markers_ir"])[:, :2]
    assert np.sort(np.linalg.norm(found[:, None] - ir[None], axis=2).min(axis=0)).max() < 0.15
    valid = result.dataset["valid"].values.astype(bool)
    assert not valid[hot > 0].any()
    assert rep["error_estimate"] == "not estimable (exact fit)"


def test_camera_fitted_to_3d_points(tmp_path):
    import cv2

    # a pinhole IR camera 200 mm from the face, slightly tilted (OpenCV projects the truth)
    k = np.array([[400.0, 0, 30.0], [0, 400.0, 24.0], [0, 0, 1]])
    tilt, _ = cv2.Rodrigues(np.array([0.05, -0.03, 0.02]))
    r = tilt @ np.diag([1.0, -1.0, -1.0])           # specimen y up, z out of the face
    t = np.array([0.0, 0.0, 200.0])
    plane = k @ np.column_stack([r[:, 0], r[:, 1], t])   # z = 0: a homography
    x, y = rc._mm_grid()
    exx, eyy, gxy = rc.strain(x, y)
    rc._csv(tmp_path / "strain.csv", ["x", "y", "z", "exx", "eyy", "gxy"], [x, y, 0 * x, exx, eyy, gxy])
    pts = np.array([[a, b, 0.0] for a in (-11.0, -4.0, 4.0, 11.0) for b in (-8.0, 0.5, 8.0)])
    ir, _ = cv2.projectPoints(pts.reshape(-1, 1, 3), cv2.Rodrigues(r)[0], t, k, np.zeros(5))
    reg = {"method": "camera", "dic_points": pts.tolist(), "ir_points": ir.reshape(-1, 2).tolist()}
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(m=plane / plane[2, 2]), reg,
                   {"strain_ranges": "strain.csv", "coordinates": "mm"})
    result, mat, angle = _run(case)
    _check(result, case, mat, angle, strain_tol=1e-6, min_valid=700)
    a = result.meta["registration"]["assessment"]
    assert a["rms"] < 1e-3 and max(a["leave_one_out_px"]) < 0.05
    # swapped (row, col) image points are refused by the camera too
    case.registration["ir_points"] = [[b, a] for a, b in case.registration["ir_points"]]
    with pytest.raises(ConfigError, match=r"\(row, col\) swapped"):
        _run(case)
