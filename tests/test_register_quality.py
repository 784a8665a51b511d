"""The registration's own judgement: exact fits, leave-one-out errors, outliers, orientation, and the
areas of the infrared grid (whole pixels on usable data, markers, shapes, motion stencils).

References are written here independently (least squares by numpy, brute-force loops over pixels)
or come from scikit-image; the scatter a fit reports is checked by Monte Carlo.
"""

import numpy as np
import pytest
import skimage.draw

from fusion.register import (assess_fit, disk_mask, fit_transform, footprint_share, handedness, min_points,
                             resample_to_grid, shape_mask, warp_support_ok)

A_TRUE = np.array([[3.9, 0.6, 40.0], [0.5, -4.1, 220.0], [0.0, 0.0, 1.0]])   # mm (y up) -> IR px
S_TRUE = np.array([[3.9, 0.6, 40.0], [0.6, -3.9, 220.0], [0.0, 0.0, 1.0]])   # a similarity of it


def affine(pts, m=A_TRUE):
    return pts @ m[:2, :2].T + m[:2, 2]


def spread_points(rng, n):
    return np.column_stack([rng.uniform(0, 50, n), rng.uniform(0, 40, n)])


def test_min_points_per_method():
    # the counts that fix each model exactly (Hartley & Zisserman 2004, ch. 2 and 4; from memory)
    assert [min_points(m) for m in ("identity", "similarity", "affine", "homography")] == [0, 2, 3, 4]
    assert min_points("camera", planar=True, distortion=True) == 8
    assert min_points("camera", planar=False, distortion=False) == 6
    with pytest.raises(ValueError, match="method must be one of"):
        min_points("projective")


@pytest.mark.parametrize("method, n", [("similarity", 2), ("affine", 3), ("homography", 4)])
def test_the_minimum_number_of_points_is_an_exact_fit(rng, method, n):
    # [HartleyZisserman2004]: at the minimum number of points a model fits any points exactly (zero degrees of freedom)
    src = spread_points(rng, n)
    dst = affine(src) + rng.normal(0, 0.5, (n, 2))     # errors the fit cannot see
    a = assess_fit(src, dst, method=method, limit=0.5)
    assert a.exact and a.rms is None and a.leave_one_out is None and not a.outlier
    a = assess_fit(np.vstack([src, [[25.0, 21.0]]]), np.vstack([dst, affine(np.array([[25.0, 21.0]]))]),
                   method=method, limit=0.5)
    assert not a.exact and a.rms is not None and a.scatter is None   # one spare point: no scatter


def test_leave_one_out_matches_an_independent_least_squares(rng):
    # independent implementation: least squares by numpy on the points left in ([DraperSmith1998])
    src = spread_points(rng, 7)
    dst = affine(src) + rng.normal(0, 0.2, (7, 2))
    a = assess_fit(src, dst, method="affine", limit=0.5)
    for k in range(7):
        rest = np.arange(7) != k
        design = np.column_stack([src[rest], np.ones(6)])
        coef, *_ = np.linalg.lstsq(design, dst[rest], rcond=None)
        want = np.linalg.norm(np.r_[src[k], 1.0] @ coef - dst[k])
        assert a.leave_one_out[k] == pytest.approx(want, rel=1e-9)
    t = fit_transform(src, dst, method="affine", warn_limit=None)
    assert a.rms == pytest.approx(t.rms, rel=1e-12)


def test_scatter_and_false_alarms_by_monte_carlo(rng):
    # Monte Carlo against the deleted-residual outlier test's nominal level ([DraperSmith1998])
    # the reported scatter is a standard deviation per coordinate: its mean square over many
    # sets must be the variance of the points (Monte Carlo); and good sets must be called bad
    # at most at the test's level (OUTLIER_ALPHA = 5 %) by the statistics alone (limit 0)
    sigma, trials = 0.1, 300
    for method, n in (("affine", 10), ("homography", 7), ("similarity", 5)):
        scatter, alarms, real_alarms = [], 0, 0
        for _ in range(trials):
            src = spread_points(rng, n)
            dst = affine(src, S_TRUE if method == "similarity" else A_TRUE) + rng.normal(0, sigma, (n, 2))
            a = assess_fit(src, dst, method=method, limit=0.0)
            scatter.append(a.scatter)
            alarms += a.outlier
            if a.outlier:        # the limit can only take calls away
                real_alarms += assess_fit(src, dst, method=method, limit=0.5).outlier
        # 300 sets of >= 6 degrees of freedom: the mean of scatter^2 is good to ~5 % (2 sd)
        assert np.sqrt(np.mean(np.square(scatter))) == pytest.approx(sigma, rel=0.05), method
        assert alarms <= 0.05 * trials + 2 * np.sqrt(0.05 * trials), method     # binomial, 2 sd
        assert real_alarms <= 0.02 * trials, method


def test_one_bad_point_among_eight_is_named(rng):
    # independent forward model: one point moved by a known amount ([DraperSmith1998] deleted residuals)
    src = spread_points(rng, 8)
    dst = affine(src) + rng.normal(0, 0.05, (8, 2))
    dst[5] += [0.0, 1.2]
    a = assess_fit(src, dst, method="homography", limit=0.5)
    assert a.outlier and a.worst == 5 and a.leave_one_out[5] > 0.7
    assert a.rms_without_worst < 0.5 * a.rms
    # the same point off by less than the limit is not called an outlier, however clear
    dst[5] -= [0.0, 0.9]
    assert not assess_fit(src, dst, method="homography", limit=0.5).outlier


def test_indices_refer_to_the_points_given_when_ransac_left_some_out(rng):
    # not a physics check: point indices refer to the points as given
    src = spread_points(rng, 9)
    dst = affine(src) + rng.normal(0, 0.03, (9, 2))
    dst[2] += 5.0
    dst[7] += [0.0, 1.5]
    inliers = np.ones(9, bool)
    inliers[2] = False
    a = assess_fit(src, dst, method="affine", limit=0.5, inliers=inliers)
    assert a.n_points == 8 and a.worst == 7 and a.outlier


def test_handedness():
    # independent computation: the sign of a known Jacobian determinant (a reflection reverses orientation)
    reflect = np.array([[1.0, 0], [0, -1.0]])
    assert handedness(np.broadcast_to(A_TRUE[:2, :2], (5, 2, 2))) == -1   # y up -> rows down
    assert handedness(np.broadcast_to(A_TRUE[:2, :2] @ reflect, (5, 2, 2))) == 1
    assert handedness(np.stack([A_TRUE[:2, :2], A_TRUE[:2, :2] @ reflect])) == 0   # folds
    assert handedness(np.zeros((3, 2, 2))) == 0


# ---------------------------------------------------------------- areas
def test_whole_pixels_against_a_pixel_by_pixel_reference():
    # independent implementation: a brute-force loop over pixel areas
    # correlation 4x denser than the IR pixels, with a hole of unusable points: a pixel keeps its
    # value only when every point of its area is nearer to a usable node than to an unusable one
    step = 0.25                                   # IR px between nodes
    xs = np.arange(2.0, 38.0 + 1e-9, step)
    ys = np.arange(2.0, 30.0 + 1e-9, step)
    X, Y = np.meshgrid(xs, ys)
    pts = np.column_stack([X.ravel(), Y.ravel()])
    ok = np.hypot(pts[:, 0] - 20.3, pts[:, 1] - 15.6) > 6.2
    _, centre_only = resample_to_grid(pts, pts[:, :1], (32, 40), grid_shape=X.shape, valid=ok)
    _, whole = resample_to_grid(pts, pts[:, :1], (32, 40), grid_shape=X.shape, valid=ok, whole_pixels=True)
    # 9 x 9 samples over the area of every pixel, each taking its nearest node (grid = identity)
    sub = np.linspace(-0.5, 0.5, 9)
    r, c = np.nonzero(centre_only)
    sy = r[:, None, None] + sub[None, :, None]
    sx = c[:, None, None] + sub[None, None, :]
    i = np.clip(np.rint((sy - 2.0) / step), 0, len(ys) - 1).astype(int)
    j = np.clip(np.rint((sx - 2.0) / step), 0, len(xs) - 1).astype(int)
    ref = centre_only.copy()
    ref[r, c] = ok.reshape(X.shape)[i, j].all(axis=(1, 2))
    # the corners decide (the unusable area is convex); samples on a tie may fall either way
    assert (whole != ref).sum() <= 4
    assert (centre_only & ~whole).sum() > 10          # the rule removes the ring, not nothing
    assert whole[4:28, 4:8].all()                     # and leaves the data far from the hole


def test_whole_pixels_keep_an_identity_grid_whole():
    # independent computation: an identity grid covers every pixel whole
    rows, cols = np.mgrid[0:20, 0:30]
    pts = np.column_stack([cols.ravel(), rows.ravel()]).astype(float)
    _, inside = resample_to_grid(pts, pts[:, :1], (20, 30), grid_shape=(20, 30), whole_pixels=True)
    assert inside.all()


def test_warp_support_against_a_loop():
    # independent implementation: a brute-force loop over each pixel's cubic B-spline stencil ([Unser1999])
    rng = np.random.default_rng(4)
    known = np.ones((25, 30), bool)
    known[10:13, 14:18] = False
    known[0, 5] = False
    lo = rng.uniform(-0.8, 0.0, (2, 25, 30))
    hi = rng.uniform(0.0, 0.8, (2, 25, 30))
    got = warp_support_ok(known, lo, hi, reach=(1, 2))
    want = np.ones_like(known)
    for r in range(25):
        for c in range(30):
            c0, c1 = int(np.floor(c + lo[0, r, c])) - 1, int(np.floor(c + hi[0, r, c])) + 2
            r0, r1 = int(np.floor(r + lo[1, r, c])) - 1, int(np.floor(r + hi[1, r, c])) + 2
            block = known[max(r0, 0):min(r1, 24) + 1, max(c0, 0):min(c1, 29) + 1]
            want[r, c] = block.all()
    np.testing.assert_array_equal(got, want)


def test_shapes_against_scikit_image():
    # reference library: scikit-image (skimage.draw)
    disk = disk_mask((40, 50), [[20.3, 17.6]], 6.4)
    rr, cc = skimage.draw.disk((17.6, 20.3), 6.4, shape=(40, 50))
    ref = np.zeros((40, 50), bool)
    ref[rr, cc] = True
    np.testing.assert_array_equal(disk, ref)       # no pixel centre lies on the circle here
    poly = np.array([[3.2, 4.1], [30.7, 8.3], [22.4, 35.9], [6.6, 28.2]])
    np.testing.assert_array_equal(shape_mask((40, 50), polygon=poly),
                                  skimage.draw.polygon2mask((40, 50), poly[:, ::-1]))
    rect = shape_mask((40, 50), rect=[4.5, 2.5, 9.5, 6.5])
    assert rect.sum() == 5 * 4 and rect[3:7, 5:10].all()


def test_footprint_share():
    # independent computation: shares counted by hand on boolean masks
    f = np.zeros((10, 10), bool)
    f[:, :3] = True
    t = np.zeros((10, 10), bool)
    t[:5] = True
    assert footprint_share(f, t) == {"thermal_pixels": 50, "footprint_pixels": 30, "overlap_pixels": 15,
                                     "share": 0.3}
    assert footprint_share(f, np.zeros_like(t))["share"] == 0.0
