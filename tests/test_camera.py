"""Pinhole camera with lens distortion: curved and flat parts seen by a distorted IR camera.

The ground truth is an independent forward model written here in numpy: a pinhole camera with
Brown-Conrady distortion ([Brown1966], docs/references.md; the same equations are printed in
OpenCV's calib3d documentation), looking at a cylinder section or a plane.
"""

import numpy as np
import pytest

from fusion.register import CameraModel, fit_camera

SHAPE = (512, 640)  # rows, cols of a common IR detector format (common practice)
K_TRUE = np.array([[700.0, 0.0, 330.0], [0.0, 700.0, 250.0], [0.0, 0.0, 1.0]])
DIST_TRUE = np.array([-0.30, 0.15, 5e-4, -8e-4, 0.0])  # k1 k2 p1 p2 k3, a short wide IR lens


def _rot(ax, deg):
    c, s = np.cos(np.radians(deg)), np.sin(np.radians(deg))
    i, j = [(1, 2), (2, 0), (0, 1)][ax]
    r = np.eye(3)
    r[i, i] = r[j, j] = c
    r[i, j], r[j, i] = -s, s
    return r


# specimen frame x right, y up, z toward the camera; camera frame x right, y down, z forward
R_TRUE = _rot(0, 6.0) @ _rot(1, -12.0) @ np.diag([1.0, -1.0, -1.0])
T_TRUE = np.array([4.0, -3.0, 250.0])  # mm


def forward(points, k=K_TRUE, dist=DIST_TRUE, r=R_TRUE, t=T_TRUE):
    """Brown-Conrady pinhole projection (Brown 1966), written independently of OpenCV."""
    pc = points @ r.T + t
    x, y = pc[:, 0] / pc[:, 2], pc[:, 1] / pc[:, 2]
    k1, k2, p1, p2, k3 = dist
    r2 = x * x + y * y
    radial = 1 + k1 * r2 + k2 * r2 ** 2 + k3 * r2 ** 3
    xd = x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
    yd = y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
    return np.column_stack([k[0, 0] * xd + k[0, 2], k[1, 1] * yd + k[1, 2]])


def cylinder_points(rng, n, radius=60.0, half_angle=55.0, half_height=60.0):
    """Random points on a convex cylinder section, axis along y, apex at z = 0 (mm)."""
    phi = np.radians(rng.uniform(-half_angle, half_angle, n))
    y = rng.uniform(-half_height, half_height, n)
    return np.column_stack([radius * np.sin(phi), y, radius * (np.cos(phi) - 1.0)])


def test_projection_matches_brown_model():
    # OpenCV's projection with our parameter order must equal the model as published (Brown 1966)
    rvec = np.array([0.1, -0.2, 0.05])
    import cv2

    r, _ = cv2.Rodrigues(rvec)
    cam = CameraModel(K_TRUE, DIST_TRUE, rvec, T_TRUE, SHAPE)
    pts = cylinder_points(np.random.default_rng(1), 50)
    # float64 arithmetic both ways: agreement to 1e-8 px is far below any fitting tolerance
    np.testing.assert_allclose(cam.project(pts), forward(pts, r=r), atol=1e-8)


def test_cylinder_held_out_points_within_0p2px(rng):
    fit_pts = cylinder_points(rng, 40)
    held = cylinder_points(rng, 25)
    truth_fit = forward(fit_pts)
    assert truth_fit[:, 0].min() > 0 and truth_fit[:, 0].max() < SHAPE[1]  # all in view
    noise = 0.05  # px: centroid noise of good fiducial markers (common practice)
    cam = fit_camera(fit_pts, truth_fit + rng.normal(0, noise, truth_fit.shape), SHAPE)
    err = np.linalg.norm(cam.project(held) - forward(held), axis=1)
    # accuracy target 0.2 px; the fit's prediction error should be ~noise (0.05 px) here
    assert np.sqrt(np.mean(err ** 2)) < 0.2
    assert err.max() < 0.3
    # the fit's own residual is consistent with the injected noise: E[rms] = noise*sqrt(2(1-p/2N))
    # with p = 14 parameters (Hartley & Zisserman 2004, result 5.2; from memory)
    expected = noise * np.sqrt(2 * (1 - 14 / 80))
    assert 0.6 * expected < cam.rms < 1.4 * expected  # 40 points: chi-square spread ~ +-12 %
    # the distortion matters: without it the held-out error is ~0.5 px, 15x worse (measured)
    plain = fit_camera(fit_pts, truth_fit, SHAPE, distortion=False)
    err_plain = np.linalg.norm(plain.project(held) - forward(held), axis=1)
    assert np.sqrt(np.mean(err_plain ** 2)) > 5 * np.sqrt(np.mean(err ** 2))
    # intrinsics land near the truth (single view: loose, 3 %)
    np.testing.assert_allclose(cam.camera_matrix[[0, 1], [0, 1]], [700, 700], rtol=0.03)


def test_cylinder_with_offset_frame(rng):
    # a stereo system's origin is arbitrary: shifting the 3D frame must not change the fit; the
    # truth is the independent forward model (Brown 1966 distortion written here)
    pts = cylinder_points(rng, 40)
    shift = np.array([500.0, -300.0, 1000.0])
    img = forward(pts)
    cam = fit_camera(pts + shift, img, SHAPE)
    held = cylinder_points(rng, 20)
    err = np.linalg.norm(cam.project(held + shift) - forward(held), axis=1)
    assert err.max() < 0.05  # noise-free: only the solver tolerance remains


def test_planar_part_with_distortion(rng):
    # flat coupon, z = 0, seen at an angle; square pixels and centred principal point as in the
    # planar single-view case (Zhang 2000); truth from the independent forward model
    k = np.array([[700.0, 0, 320.0], [0, 700.0, 256.0], [0, 0, 1]])
    plate = lambda n: np.column_stack([rng.uniform(-70, 70, n), rng.uniform(-60, 60, n), np.zeros(n)])
    fit_pts, held = plate(40), plate(25)
    img = forward(fit_pts, k=k) + rng.normal(0, 0.05, (40, 2))
    cam = fit_camera(fit_pts, img, SHAPE)
    assert cam.planar
    err = np.linalg.norm(cam.project(held) - forward(held, k=k), axis=1)
    assert np.sqrt(np.mean(err ** 2)) < 0.2  # accuracy target for held-out points


def test_round_trip_and_errors(rng):
    # not a physics check: dictionary round trip, error text, points behind the camera
    pts = cylinder_points(rng, 30)
    cam = fit_camera(pts, forward(pts), SHAPE)
    back = CameraModel.from_dict(cam.to_dict())
    np.testing.assert_allclose(back.project(pts), cam.project(pts), atol=1e-9)
    with pytest.raises(ValueError, match="at least 10 control points; got 7"):
        fit_camera(pts[:7], forward(pts[:7]), SHAPE)
    with pytest.raises(ValueError, match=r"points3d must have shape \(N, 3\)"):
        fit_camera(pts[:, :2], forward(pts), SHAPE)
    with pytest.raises(ValueError, match="differ in length"):
        fit_camera(pts, forward(pts)[:-1], SHAPE)
    dup = pts.copy()
    dup[3] = dup[0]
    with pytest.raises(ValueError, match="repeated"):
        fit_camera(dup, forward(dup), SHAPE)
    # points behind the camera project to NaN rather than to a mirrored position
    behind = np.array([[0.0, 0.0, 400.0]])  # z toward the camera: 400 mm is past it
    assert np.isnan(cam.project(behind)).all()
