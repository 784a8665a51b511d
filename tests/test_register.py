"""Registration: transforms from control points, resampling onto the IR grid, ECC refinement.

Ground truth comes from independent forward models written here (a known homography applied to
a synthetic correlation grid in mm, analytic strain fields evaluated at the exact inverse
positions) and from scikit-image's and SciPy's implementations of the same operations.
"""

import numpy as np
import pytest
import skimage.transform as skt
import xarray as xr
from scipy.interpolate import RegularGridInterpolator

from fusion.register import (RegistrationWarning, Transform2D, edge_distance_map, fit_transform,
                             map_displacement, refine_with_signal, resample_to_grid)

SHAPE = (256, 320)  # IR rows, cols
# mm (x right, y up) -> IR (col, row): ~4.5 px/mm, rows flipped, mild perspective
H_TRUE = np.array([[4.6, 0.25, 20.0], [0.15, -4.4, 230.0], [4e-4, -3e-4, 1.0]])


def project(h, pts):
    """Homogeneous mapping, written here independently of the package."""
    q = np.column_stack([pts, np.ones(len(pts))]) @ h.T
    return q[:, :2] / q[:, 2:]


def control_points(rng, n):
    return np.column_stack([rng.uniform(0, 60, n), rng.uniform(0, 45, n)])


def dic_grid(step=0.5):
    ys = np.arange(0, 45 + 1e-9, step)[::-1]  # row-major, top row first, y up
    xs = np.arange(0, 60 + 1e-9, step)
    gx, gy = np.meshgrid(xs, ys)
    return np.column_stack([gx.ravel(), gy.ravel()]), (len(ys), len(xs))


def test_public_api():
    # not a physics check: the public names are listed once; nothing private leaks
    import fusion.register

    assert sorted(fusion.register.__all__) == [
        "CameraModel", "FOOTPRINT_FAIL", "FOOTPRINT_WARN", "FitAssessment", "RegistrationWarning",
        "Transform2D", "assess_fit", "check_handedness", "disk_mask", "edge_distance_map", "find_fiducials",
        "fit_camera", "fit_transform", "footprint_share", "handedness", "map_displacement", "match_fiducials",
        "min_points", "refine_with_signal", "resample_to_grid", "shape_contains", "shape_mask", "warp_support_ok"]


# ---------------------------------------------------------------- transforms

def test_homography_from_noisy_points(rng):
    n, sigma = 40, 0.15  # px: clicking or centroid noise of IR control points (common practice)
    src = control_points(rng, n)
    dst = project(H_TRUE, src) + rng.normal(0, sigma, (n, 2))
    t = fit_transform(src, dst)
    # expected residual of a least-squares fit with d = 8 parameters on 2n measurements:
    # rms = sigma * sqrt(2 (1 - d / 2n)) (Hartley & Zisserman 2004, result 5.2; from memory)
    expected = sigma * np.sqrt(2 * (1 - 8 / (2 * n)))
    assert 0.8 * expected < t.rms < 1.2 * expected  # 72 dof: rms spread ~ 8 %, so +-20 % is 2.5 sd
    assert t.inliers.all() and t.warnings == []
    grid, _ = dic_grid(2.0)
    err = np.linalg.norm(t.apply(grid) - project(H_TRUE, grid), axis=1)
    # mean prediction error of a least-squares fit ~ sigma * sqrt(d / n) = 0.067 px (the mean
    # leverage is d / n); corners of the region, outside most points, have a few times more
    pred = sigma * np.sqrt(8 / n)
    assert np.sqrt(np.mean(err ** 2)) < 1.5 * pred
    assert err.max() < 5 * pred
    np.testing.assert_allclose(t.inverse_apply(t.apply(grid)), grid, atol=1e-9)
    # cross-check: scikit-image's projective estimate on the same points
    sk = skt.ProjectiveTransform.from_estimate(src, dst)
    # algebraic (skimage) and geometric (OpenCV LM) minimisers differ by a fraction of the noise
    np.testing.assert_allclose(t.apply(grid), sk(grid), atol=0.05)
    sk_exact = skt.ProjectiveTransform.from_estimate(src, project(H_TRUE, src))
    t_exact = fit_transform(src, project(H_TRUE, src))
    # noise-free points: both recover H_TRUE; OpenCV's solver stops at ~1e-6 relative change
    np.testing.assert_allclose(t_exact.apply(grid), sk_exact(grid), atol=1e-4)
    np.testing.assert_allclose(sk_exact(grid), project(H_TRUE, grid), atol=1e-9)
    # the mean scale is ~4.5 IR px per mm by construction of H_TRUE
    assert 4.0 < t.scale < 5.0


def test_affine_and_similarity_match_scikit_image(rng):
    src = control_points(rng, 12)
    a = np.array([[3.0, 0.4, 12.0], [-0.2, 2.8, 30.0], [0, 0, 1]])
    dst = project(a, src) + rng.normal(0, 0.1, (12, 2))
    t = fit_transform(src, dst, method="affine")
    sk = skt.AffineTransform.from_estimate(src, dst)
    # skimage solves the normalised homogeneous system (total least squares), we minimise the
    # IR-image error (ordinary least squares): they differ by a small fraction of the 0.1 px noise
    np.testing.assert_allclose(t.apply(src), sk(src), atol=0.01)
    exact = fit_transform(src, project(a, src), method="affine")
    np.testing.assert_allclose(exact.matrix, skt.AffineTransform.from_estimate(src, project(a, src)).params,
                               atol=1e-9)
    rot = np.radians(7.0)
    s = 4.2 * np.array([[np.cos(rot), -np.sin(rot)], [np.sin(rot), np.cos(rot)]])
    dst = src @ s.T + [40, 15] + rng.normal(0, 0.1, (12, 2))
    t = fit_transform(src, dst, method="similarity")
    sk = skt.SimilarityTransform.from_estimate(src, dst)  # Umeyama (1991) least squares
    np.testing.assert_allclose(t.matrix, sk.params, rtol=1e-9, atol=1e-9)
    # a y-up frame seen with rows down: the similarity must reverse orientation
    flip = src * [1, -1]
    dst = flip @ s.T + [40, 300]
    t = fit_transform(src, dst, method="similarity")
    assert np.linalg.det(t.matrix[:2, :2]) < 0
    np.testing.assert_allclose(t.apply(src), dst, atol=1e-9)
    assert t.scale == pytest.approx(4.2, rel=1e-9)


def test_ransac_rejects_outliers_and_limit_warns(rng):
    # RANSAC (Fischler & Bolles 1981): the three mis-clicked points built in are the outliers;
    # the homography is the independent forward model ``project``.
    n = 25
    src = control_points(rng, n)
    dst = project(H_TRUE, src) + rng.normal(0, 0.1, (n, 2))
    bad = [3, 11, 19]
    dst[bad] += [[15.0, -8.0], [-20.0, 5.0], [9.0, 30.0]]  # mis-clicked points
    t = fit_transform(src, dst, ransac_threshold=1.0)
    assert np.flatnonzero(~t.inliers).tolist() == bad
    assert t.rms < 0.2 and t.max_error < 0.5
    assert t.residuals[bad].min() > 8
    assert "rejected as outliers" in t.warnings[0]
    with pytest.warns(RegistrationWarning, match="exceeds the limit 0.5 px"):
        t_ls = fit_transform(src, dst)
    assert t_ls.rms > 1 and "exceeds" in t_ls.warnings[-1]
    # the limit is configurable
    with pytest.warns(RegistrationWarning, match="limit 2.0 px"):
        fit_transform(src, dst, warn_limit=2.0)
    assert fit_transform(src, dst, warn_limit=None).warnings == []
    # the other models reject the same outliers (a y-flipped similarity and an affine)
    sim = src * [4.5, -4.5] + [20, 230] + rng.normal(0, 0.1, (n, 2))
    sim[bad] += [[15.0, -8.0], [-20.0, 5.0], [9.0, 30.0]]
    for method in ("similarity", "affine"):
        t = fit_transform(src, sim, method=method, ransac_threshold=1.0)
        assert np.flatnonzero(~t.inliers).tolist() == bad, method
        assert t.rms < 0.2


def test_degenerate_point_sets_fail_clearly():
    # not a physics check: error text of degenerate control points
    sq = np.array([[0, 0], [10, 0], [10, 10], [0, 10.0]])
    with pytest.raises(ValueError, match="needs at least 4 control-point pairs; got 3"):
        fit_transform(sq[:3], sq[:3])
    with pytest.raises(ValueError, match="needs at least 3 control-point pairs; got 2"):
        fit_transform(sq[:2], sq[:2], method="affine")
    rep = sq.copy()
    rep[2] = rep[0]
    with pytest.raises(ValueError, match="points 0 and 2 are repeated"):
        fit_transform(rep, sq)
    line = np.column_stack([np.arange(5.0), 2 * np.arange(5.0)])
    with pytest.raises(ValueError, match="src_points are collinear"):
        fit_transform(line, line, method="affine")
    three = np.array([[0, 0], [5, 0], [10, 0], [3, 8.0]])
    with pytest.raises(ValueError, match=r"points \[0, 1, 2\] are collinear"):
        fit_transform(three, sq)
    with pytest.raises(ValueError, match="method must be one of"):
        fit_transform(sq, sq, method="spline")
    with pytest.raises(ValueError, match=r"src_points must have shape \(N, 2\)"):
        fit_transform(np.zeros((4, 3)), sq)
    assert fit_transform(np.zeros((0, 2)), np.zeros((0, 2)), method="identity").rms == 0.0


def test_netcdf_attribute_round_trip(rng, tmp_path):
    # not a physics check: the transform survives a NetCDF attribute round trip
    src = control_points(rng, 10)
    t = fit_transform(src, project(H_TRUE, src) + rng.normal(0, 0.1, (10, 2)))
    ds = xr.Dataset({"a": ("x", np.zeros(2, np.float32))}, attrs=t.to_dict())
    ds.to_netcdf(tmp_path / "r.nc")
    with xr.open_dataset(tmp_path / "r.nc") as back:
        t2 = Transform2D.from_dict(back.attrs)
    np.testing.assert_allclose(t2.matrix, t.matrix, rtol=1e-15)
    assert t2.rms == pytest.approx(t.rms, rel=1e-12) and t2.method == "homography"


def test_map_displacement_is_jacobian_for_small_motion(rng):
    # A small motion maps through the transform's Jacobian (first-order Taylor expansion, common
    # practice); the Jacobian's orientation follows from the y-up / rows-down flip.
    src = control_points(rng, 10)
    t = fit_transform(src, project(H_TRUE, src))
    u = rng.normal(0, 1e-4, src.shape)  # mm, strain-sized motion
    np.testing.assert_allclose(map_displacement(t, src, u),
                               np.einsum("nij,nj->ni", t.jacobian(src), u), rtol=1e-3, atol=1e-12)
    # y up in mm, rows down in IR: an upward motion moves to smaller rows
    assert map_displacement(t, src[:1], [[0.0, 1.0]])[0, 1] < 0


# ---------------------------------------------------------------- resampling

def _placement_error(maps, inside, b):
    """Position error, IR px: invert the linear field to mm, map with the true homography."""
    rows, cols = np.nonzero(inside)
    est = np.column_stack([maps[0][inside], maps[1][inside]]) / b
    return np.linalg.norm(project(H_TRUE, est) - np.column_stack([cols, rows]), axis=1)


@pytest.mark.parametrize("regular", [True, False])
def test_linear_gradient_lands_within_0p1px(rng, regular):
    grid, gshape = dic_grid(0.5)
    # control points spread over the region (markers at its edges and inside, common practice)
    # with 0.05 px centroid noise
    cx, cy = np.meshgrid(np.linspace(0, 60, 6), np.linspace(0, 45, 5))
    src = np.column_stack([cx.ravel(), cy.ravel()])
    t = fit_transform(src, project(H_TRUE, src) + rng.normal(0, 0.05, src.shape))
    b = 1e-4  # strain per mm: a linear gradient, exx = b x, eyy = b y
    if not regular:  # scattered points: a shuffled, jittered point list
        grid = grid[rng.permutation(len(grid))] + rng.uniform(-0.1, 0.1, grid.shape)
    values = np.column_stack([b * grid[:, 0], b * grid[:, 1]])
    maps, inside = resample_to_grid(t.apply(grid), values, SHAPE,
                                    grid_shape=gshape if regular else None)
    assert maps.dtype == np.float32 and maps.shape == (2,) + SHAPE
    assert np.isnan(maps[0][~inside]).all() and np.isfinite(maps[:, inside]).all()
    # the registration's accuracy target: 0.1 px, registration error included
    err = _placement_error(maps, inside, b)
    assert err.max() < 0.1
    # the resampling alone (exact homography) is far better: float32 values of 1e-4 * x
    # resolve ~5e-6 mm and bilinear cells of 2.3 px follow the perspective to ~1e-3 px
    exact = Transform2D(H_TRUE)
    maps, inside = resample_to_grid(exact.apply(grid), values, SHAPE,
                                    grid_shape=gshape if regular else None)
    assert _placement_error(maps, inside, b).max() < 0.01
    # the footprint is the mapped grid rectangle: compare with its exact area (shoelace)
    corners = project(H_TRUE, np.array([[0, 0], [60, 0], [60, 45], [0, 45.0]]))
    x, y = corners[:, 0], corners[:, 1]
    area = 0.5 * abs(np.dot(x, np.roll(y, 1)) - np.dot(y, np.roll(x, 1)))
    assert abs(inside.sum() - area) < 2 * (np.ptp(x) + np.ptp(y))  # boundary pixels only


def test_grid_interpolation_matches_scipy_regular_grid():
    # affine registration: bilinear in grid parameter space equals SciPy's bilinear
    # RegularGridInterpolator at the exact inverse positions, for any field
    grid, gshape = dic_grid(1.5)
    a = np.array([[4.1, 0.6, 25.0], [0.4, -3.9, 220.0], [0, 0, 1]])
    f = np.sin(grid[:, 0] / 7.0) * np.cos(grid[:, 1] / 5.0)
    maps, inside = resample_to_grid(project(a, grid), f, SHAPE, grid_shape=gshape)
    rows, cols = np.nonzero(inside)
    back = project(np.linalg.inv(a), np.column_stack([cols, rows]))
    ys = grid[::gshape[1], 1][::-1]
    xs = grid[: gshape[1], 0]
    rgi = RegularGridInterpolator((ys, xs), f.reshape(gshape)[::-1], method="linear")
    # pixels on the footprint edge can fall 1e-12 mm outside by rounding
    yx = np.column_stack([np.clip(back[:, 1], ys[0], ys[-1]), np.clip(back[:, 0], xs[0], xs[-1])])
    np.testing.assert_allclose(maps[0][inside], rgi(yx), atol=1e-6)  # float32 output


def test_grid_located_through_the_inverse_matches_scipy_and_the_iterative_path(rng):
    # pixels located through the registration's inverse (a regular source lattice): under an
    # affine registration the values are SciPy's bilinear RegularGridInterpolator at the exact
    # inverse positions; under a homography the footprint, the whole-pixel test around a hole
    # and the values are those of the path that solves the grid positions without the inverse
    grid, gshape = dic_grid(0.7)
    f = np.column_stack([np.sin(grid[:, 0] / 7.0) * np.cos(grid[:, 1] / 5.0), grid[:, 1] ** 2 / 100.0])
    valid = (np.hypot(grid[:, 0] - 30, grid[:, 1] - 22) > 6.0) & (rng.random(len(grid)) > 0.02)
    a = np.array([[4.1, 0.6, 25.0], [0.4, -3.9, 220.0], [0, 0, 1]])
    affine = Transform2D(a, "affine")
    maps, inside = resample_to_grid(affine.apply(grid), f, SHAPE, grid_shape=gshape,
                                    source_points=grid, inverse=affine.inverse_apply)
    rows, cols = np.nonzero(inside)
    back = project(np.linalg.inv(a), np.column_stack([cols, rows]))
    ys, xs = grid[::gshape[1], 1][::-1], grid[: gshape[1], 0]
    yx = np.column_stack([np.clip(back[:, 1], ys[0], ys[-1]), np.clip(back[:, 0], xs[0], xs[-1])])
    for k in range(2):
        rgi = RegularGridInterpolator((ys, xs), f[:, k].reshape(gshape)[::-1], method="linear")
        np.testing.assert_allclose(maps[k][inside], rgi(yx), rtol=1e-6, atol=1e-6)  # float32 output
    homography = Transform2D(H_TRUE, "homography")
    for whole in (False, True):
        kw = dict(grid_shape=gshape, valid=valid, whole_pixels=whole)
        direct = resample_to_grid(homography.apply(grid), f, SHAPE, source_points=grid,
                                  inverse=homography.inverse_apply, **kw)
        solved = resample_to_grid(homography.apply(grid), f, SHAPE, **kw)
        np.testing.assert_array_equal(direct[1], solved[1])
        np.testing.assert_allclose(direct[0], solved[0], rtol=1e-6, atol=1e-7)
    # points that are no lattice (jittered) fall back to the iterative path: the same result
    jitter = grid + rng.uniform(-0.05, 0.05, grid.shape)
    direct = resample_to_grid(homography.apply(jitter), f, SHAPE, grid_shape=gshape, source_points=jitter,
                              inverse=homography.inverse_apply)
    solved = resample_to_grid(homography.apply(jitter), f, SHAPE, grid_shape=gshape)
    np.testing.assert_array_equal(direct[1], solved[1])
    np.testing.assert_array_equal(direct[0], solved[0])


@pytest.mark.parametrize("regular", [True, False])
def test_hole_and_edge_margin(regular):
    # open-hole coupon: correlation has no data in the hole (radius 6 mm at (30, 22) mm); the
    # truth is the exact inverse of the similarity written here (independent forward model)
    grid, gshape = dic_grid(1.0)
    r = np.hypot(grid[:, 0] - 30, grid[:, 1] - 22)
    valid = r > 6.0
    s = 4.0  # px/mm, rows down
    sim = np.array([[s, 0, 20.0], [0, -s, 220.0], [0, 0, 1]])
    pts = project(sim, grid)
    if regular:
        maps, inside = resample_to_grid(pts, grid[:, :1], SHAPE, grid_shape=gshape, valid=valid)
    else:
        maps, inside = resample_to_grid(pts[valid], grid[valid, :1], SHAPE)
    rows, cols = np.mgrid[0:SHAPE[0], 0:SHAPE[1]]
    mm = project(np.linalg.inv(sim), np.column_stack([cols.ravel(), rows.ravel()]))
    rad = np.hypot(mm[:, 0] - 30, mm[:, 1] - 22).reshape(SHAPE)
    in_rect = ((mm[:, 0] >= 0) & (mm[:, 0] <= 60) & (mm[:, 1] >= 0) & (mm[:, 1] <= 45)).reshape(SHAPE)
    # a convex hull would fill the hole; the footprint must not
    assert not inside[rad < 6.0].any()
    # data cells reach within one grid diagonal (1.42 mm) of the hole edge
    assert inside[(rad > 6.0 + 1.5) & in_rect].all()
    margin_px = 8.0  # e.g. half of a 4 mm virtual strain gauge at 4 px/mm
    _, inner = resample_to_grid(pts if regular else pts[valid],
                                grid[:, :1] if regular else grid[valid, :1], SHAPE,
                                grid_shape=gshape if regular else None,
                                valid=valid if regular else None, edge_margin=margin_px)
    m = margin_px / s
    # the distance transform is good to ~half a pixel (0.125 mm): allow 0.2 mm either side
    assert not inner[rad < 6.0 + m - 0.2].any()
    edge_dist = np.minimum.reduce([mm[:, 0], 60 - mm[:, 0], mm[:, 1], 45 - mm[:, 1]]).reshape(SHAPE)
    assert not inner[in_rect & (edge_dist < m - 0.2)].any()
    assert inner[(rad > 6.0 + 1.5 + m + 0.2) & (edge_dist > m + 0.2)].all()
    assert np.isnan(maps[0][~inside]).all()


def test_edge_distance_map_against_the_exact_distance_to_a_hole():
    # independent computation (plane geometry): a disc hole of radius 9.3 px centred off the pixel lattice: the distance of a pixel
    # centre to its edge is |centre - c| - R (plane geometry); the map (distance transform
    # less half a pixel) is good to half a pixel; the image border is not an edge
    rows, cols = np.mgrid[0:60, 0:70]
    rad = np.hypot(rows - 30.4, cols - 33.7)
    inside = rad > 9.3
    d = edge_distance_map(inside)
    assert d.dtype == np.float32 and np.isnan(d[~inside]).all()
    near = inside & (rad < 25)
    assert np.max(np.abs(d[near] - (rad[near] - 9.3))) <= 0.5 + 1e-6
    assert d[0, 0] == pytest.approx(rad[0, 0] - 9.3, abs=0.5)
    with pytest.raises(ValueError, match="2-D"):
        edge_distance_map(np.ones(5, bool))


def test_resample_errors():
    with pytest.raises(ValueError, match="grid_shape"):
        resample_to_grid(np.zeros((6, 2)), np.zeros(6), SHAPE, grid_shape=(2, 2))
    with pytest.raises(ValueError, match=r"values must have shape \(N, K\)"):
        resample_to_grid(np.zeros((6, 2)), np.zeros(5), SHAPE)
    with pytest.raises(ValueError, match="edge_margin"):
        resample_to_grid(np.zeros((6, 2)), np.zeros(6), SHAPE, edge_margin=-1)
    grid, gshape = dic_grid(15.0)
    with pytest.raises(ValueError, match=r"source_points must have shape \(20, 2\)"):
        resample_to_grid(grid, np.zeros(len(grid)), SHAPE, grid_shape=gshape, source_points=grid[:5],
                         inverse=lambda q: q)


# ---------------------------------------------------------------- ECC refinement

def strain_field(x, y):
    """Smooth analytic field: a gradient plus strain concentrations spread over the region.

    A gradient alone carries no position information for a gain- and offset-invariant
    criterion; the concentrations (holes, notches, ply drops in a real part) do.
    """
    bumps = [(12, 10, 4e-4, 20.0), (25, 20, 4e-4, 30.0), (42, 30, -3e-4, 18.0),
             (50, 12, 3e-4, 25.0), (10, 36, -2.5e-4, 22.0)]
    f = 1e-3 + 2e-5 * x
    for x0, y0, amp, w in bumps:
        f = f + amp * np.exp(-((x - x0) ** 2 + (y - y0) ** 2) / w)
    return f


def _measured_map(rng):
    """dT on the IR grid from the exact inverse mapping of every pixel (the truth)."""
    rows, cols = np.mgrid[0:SHAPE[0], 0:SHAPE[1]]
    mm = project(np.linalg.inv(H_TRUE), np.column_stack([cols.ravel(), rows.ravel()]))
    inside = ((mm[:, 0] > 1) & (mm[:, 0] < 59) & (mm[:, 1] > 1) & (mm[:, 1] < 44)).reshape(SHAPE)
    dT = -0.9 * strain_field(mm[:, 0], mm[:, 1]).reshape(SHAPE) + 3e-4  # gain and offset unknown
    dT += rng.normal(0, 5e-6, SHAPE)  # noise ~2 % of the structure's contrast
    return np.where(inside, dT, np.nan).astype(np.float32)


def _predicted_map(t):
    grid, gshape = dic_grid(0.5)
    maps, _ = resample_to_grid(t.apply(grid), -strain_field(grid[:, 0], grid[:, 1]), SHAPE,
                               grid_shape=gshape)
    return maps[0]


@pytest.mark.parametrize("motion,offset", [("translation", (0.8, -0.5)), ("affine", (-0.6, 0.7))])
def test_ecc_refinement_recovers_registration_error(rng, motion, offset):
    # Enhanced correlation (Evangelidis & Psarakis 2008) must undo a known error of the
    # registration; the truth is the independent forward model (H_TRUE, exact inverse mapping).
    shift = np.array([[1, 0, offset[0]], [0, 1, offset[1]], [0, 0, 1.0]])
    if motion == "affine":  # a small rotation about the IR centre as well
        c, s = np.cos(np.radians(0.3)), np.sin(np.radians(0.3))
        rot = np.array([[c, -s, 0], [s, c, 0], [0, 0, 1.0]])
        ctr = np.array([[1, 0, 160], [0, 1, 128], [0, 0, 1.0]])
        shift = shift @ ctr @ rot @ np.linalg.inv(ctr)
    wrong = Transform2D(shift @ H_TRUE, "homography")  # as if the control points were off
    warp, info = refine_with_signal(_measured_map(rng), _predicted_map(wrong), motion=motion)
    assert info["accepted"] and info["converged"]
    assert info["ecc"] > info["ecc_initial"]
    fixed = wrong.corrected(warp)
    grid, _ = dic_grid(2.0)
    before = np.linalg.norm(wrong.apply(grid) - project(H_TRUE, grid), axis=1)
    after = np.linalg.norm(fixed.apply(grid) - project(H_TRUE, grid), axis=1)
    assert 0.5 < info["correction_px"] < 2.0
    # truth: the forward model. Measured here over seeds 0-3: translation 0.005-0.011 px,
    # affine 0.03-0.05 px (0.027 px without noise: the prediction's bilinear resampling on a
    # 0.5 mm grid, which the six affine parameters pick up at the region corners)
    limit = 0.03 if motion == "translation" else 0.08
    assert after.max() < limit, (before.max(), after.max())


def test_ecc_correction_beyond_bound_is_refused(rng):
    # A known offset of 3.35 px (independent forward model) is larger than the bound: refused,
    # and its size reported within 0.1 px.
    wrong = Transform2D(np.array([[1, 0, 3.0], [0, 1, -1.5], [0, 0, 1]]) @ H_TRUE)
    warp, info = refine_with_signal(_measured_map(rng), _predicted_map(wrong), max_correction=2.0)
    assert not info["accepted"] and "refused" in info["message"]
    np.testing.assert_array_equal(warp, np.eye(2, 3))
    assert info["correction_px"] == pytest.approx(np.hypot(3.0, 1.5), abs=0.1)
    # a flat prediction carries no position information
    flat = np.where(np.isfinite(_measured_map(rng)), 1.0, np.nan)
    warp, info = refine_with_signal(_measured_map(rng), flat)
    assert not info["accepted"] and "constant" in info["message"]
