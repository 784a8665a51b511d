"""Pinhole model of the infrared camera with lens distortion, fitted to 3D-to-2D control points."""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np
import scipy.linalg

from ._transform import _as_points, _check_repeated, min_points

__all__ = ["CameraModel", "fit_camera"]

#: Coplanarity test: smallest over largest singular value of the centred points.
_PLANAR_RATIO = 1e-6


@dataclass
class CameraModel:
    """A calibrated pinhole camera with Brown-Conrady distortion.

    Attributes
    ----------
    camera_matrix : (3, 3) ndarray
        ``[[fx, 0, cx], [0, fy, cy], [0, 0, 1]]``, px.
    dist_coeffs : (5,) ndarray
        ``(k1, k2, p1, p2, k3)``, OpenCV order; zeros without distortion.
    rvec, tvec : (3,) ndarray
        Rotation (Rodrigues vector, rad) and translation (source length unit) from the source
        frame of the 3D points to the camera frame.
    image_shape : tuple of int
        (rows, cols) of the IR image.
    residuals : (N,) ndarray
        Reprojection error of each control point, IR px.
    planar : bool
        The control points were coplanar (principal point and aspect ratio then held fixed).
    """

    camera_matrix: np.ndarray
    dist_coeffs: np.ndarray
    rvec: np.ndarray
    tvec: np.ndarray
    image_shape: tuple
    residuals: np.ndarray = field(default_factory=lambda: np.zeros(0))
    planar: bool = False

    def project(self, points3d):
        """Project 3D points (N, 3), source units, to IR pixel coordinates (N, 2) (col, row), px.

        Points at or behind the camera centre come back as NaN.
        """
        pts = np.asarray(points3d, dtype=np.float64)
        if pts.ndim != 2 or pts.shape[1] != 3:
            raise ValueError(f"points3d must have shape (N, 3); got shape {pts.shape!r}")
        if len(pts) == 0:
            return np.zeros((0, 2))
        out, _ = cv2.projectPoints(pts.reshape(-1, 1, 3), self.rvec, self.tvec, self.camera_matrix,
                                   self.dist_coeffs)
        out = out.reshape(-1, 2)
        out[self.depth(pts) <= 0] = np.nan
        return out

    def depth(self, points3d):
        """Distance of points along the optical axis, source units (N,)."""
        r, _ = cv2.Rodrigues(self.rvec)
        return np.asarray(points3d, dtype=np.float64) @ r[2] + self.tvec[2]

    @property
    def rms(self) -> float:
        """RMS reprojection error of the control points, IR px."""
        return float(np.sqrt(np.mean(self.residuals ** 2))) if self.residuals.size else 0.0

    @property
    def max_error(self) -> float:
        """Largest reprojection error of the control points, IR px."""
        return float(self.residuals.max()) if self.residuals.size else 0.0

    def to_dict(self) -> dict:
        """Flat dictionary of NetCDF-safe values."""
        return {
            "camera_matrix": [float(v) for v in self.camera_matrix.ravel()],
            "camera_dist_coeffs": [float(v) for v in self.dist_coeffs.ravel()],
            "camera_rvec": [float(v) for v in self.rvec.ravel()],
            "camera_tvec": [float(v) for v in self.tvec.ravel()],
            "camera_image_shape": [int(v) for v in self.image_shape],
            "camera_rms_px": self.rms,
            "camera_max_error_px": self.max_error,
            "camera_n_points": int(self.residuals.size),
            "camera_planar": int(self.planar),
        }

    @classmethod
    def from_dict(cls, d) -> "CameraModel":
        """Rebuild from :meth:`to_dict` output (residuals are not kept)."""
        return cls(np.asarray(d["camera_matrix"], float).reshape(3, 3),
                   np.asarray(d["camera_dist_coeffs"], float).ravel(),
                   np.asarray(d["camera_rvec"], float).ravel(),
                   np.asarray(d["camera_tvec"], float).ravel(),
                   tuple(int(v) for v in np.ravel(d["camera_image_shape"])),
                   np.zeros(0), bool(int(d.get("camera_planar", 0))))


def _hartley(points):
    c = points.mean(axis=0)
    d = np.linalg.norm(points - c, axis=1).mean()
    s = np.sqrt(points.shape[1]) / d
    t = np.eye(points.shape[1] + 1)
    t[:-1, :-1] *= s
    t[:-1, -1] = -s * c
    return (points - c) * s, t


def _dlt_intrinsics(obj, img):
    """Camera matrix guess from the direct linear transform of non-coplanar points.

    P = K [R | t] is solved linearly and K taken from the RQ decomposition of its left 3x3 block
    (Hartley & Zisserman 2004, sections 7.1 and 6.1); skew is dropped since OpenCV has none.
    """
    xn, tx = _hartley(obj)
    un, tu = _hartley(img)
    n = len(obj)
    a = np.zeros((2 * n, 12))
    xh = np.column_stack([xn, np.ones(n)])
    a[0::2, 0:4] = xh
    a[0::2, 8:12] = -un[:, :1] * xh
    a[1::2, 4:8] = xh
    a[1::2, 8:12] = -un[:, 1:2] * xh
    p = np.linalg.svd(a)[2][-1].reshape(3, 4)
    p = np.linalg.inv(tu) @ p @ tx
    k, _ = scipy.linalg.rq(p[:, :3])
    k = k @ np.diag(np.sign(np.diag(k)))
    k = k / k[2, 2]
    k[0, 1] = 0.0
    return k


def fit_camera(points3d, image_points, image_shape, *, distortion=True):
    """Fit a pinhole camera with lens distortion to 3D-to-2D control points.

    Parameters
    ----------
    points3d : (N, 3) array_like
        Control points in the correlation system's 3D frame (x, y, z; e.g. mm from a stereo
        correlation). Coplanar points (a flat part, z = 0) are accepted.
    image_points : (N, 2) array_like
        The same points in the IR image, (col, row) px.
    image_shape : tuple of int
        (rows, cols) of the IR image.
    distortion : bool
        Fit radial (k1, k2) and tangential (p1, p2) distortion; k3 stays 0.

    Returns
    -------
    CameraModel
        With ``rms`` and ``max_error`` of the control points in IR px.

    Raises
    ------
    ValueError
        Bad shapes, non-finite values, repeated points, or fewer points than the model needs:
        non-coplanar 6 (10 with distortion), coplanar 4 (8 with distortion).

    Notes
    -----
    One view of a 3D target fixes all intrinsics (linear DLT start, Hartley & Zisserman
    ch. 7); for coplanar points one view fixes only the focal length and the pose, so the
    principal point is held at the image centre and the pixels square (OpenCV's planar start,
    Zhang 2000). Everything is then refined together by OpenCV's Levenberg-Marquardt
    ``calibrateCamera`` minimising the reprojection error. The distortion model is
    Brown-Conrady as OpenCV implements it; with distortion, points should cover the area the
    model will be used on, since the polynomial extrapolates badly outside it. Report the RMS of
    points held out of the fit when judging accuracy: the fit's own RMS is optimistic.

    References
    ----------
    Brown, Photogramm. Eng. 32(3), 444-462 (1966). Zhang, IEEE TPAMI 22(11), 1330-1334 (2000).
    Hartley & Zisserman, *Multiple View Geometry in Computer Vision*, 2nd ed., CUP 2004.
    """
    obj = _as_points(points3d, "points3d", ndim=3)
    img = _as_points(image_points, "image_points")
    if len(obj) != len(img):
        raise ValueError(f"points3d and image_points differ in length: {len(obj)} != {len(img)}")
    try:
        rows, cols = (int(v) for v in image_shape)
    except (TypeError, ValueError) as e:
        raise ValueError(f"image_shape must be (rows, cols); got {image_shape!r}") from e
    if rows <= 0 or cols <= 0:
        raise ValueError(f"image_shape must be positive; got {image_shape!r}")
    _check_repeated(obj, "points3d")
    _check_repeated(img, "image_points")
    centre = obj.mean(axis=0)
    _, s, vt = np.linalg.svd(obj - centre)
    planar = s[2] <= _PLANAR_RATIO * s[0]
    need = min_points("camera", planar=bool(planar), distortion=distortion)
    if len(obj) < need:
        kind = "coplanar" if planar else "non-coplanar"
        raise ValueError(f"fitting a camera{' with distortion' if distortion else ''} to {kind} "
                         f"points needs at least {need} control points; got {len(obj)}")
    if planar and s[1] <= 1e-6 * s[0]:
        raise ValueError("points3d are collinear; a camera fit needs points spread over an area")
    flags = cv2.CALIB_USE_INTRINSIC_GUESS | cv2.CALIB_FIX_K3
    if not distortion:
        flags |= cv2.CALIB_FIX_K1 | cv2.CALIB_FIX_K2 | cv2.CALIB_ZERO_TANGENT_DIST
    if planar:
        # work in the plane's own axes (z = 0), as the planar calibration requires
        basis = vt if np.linalg.det(vt) > 0 else vt * [[1], [1], [-1]]
        fit_obj = (obj - centre) @ basis.T
        fit_obj[:, 2] = 0.0
        k0 = cv2.initCameraMatrix2D([fit_obj.astype(np.float32)], [img.astype(np.float32)],
                                    (cols, rows))
        flags |= cv2.CALIB_FIX_PRINCIPAL_POINT | cv2.CALIB_FIX_ASPECT_RATIO
    else:
        basis = np.eye(3)
        fit_obj = obj - centre  # centring keeps float32 precision for offsets of the 3D frame
        k0 = _dlt_intrinsics(fit_obj, img)
        if not (k0[0, 0] > 0 and k0[1, 1] > 0 and np.all(np.isfinite(k0))):
            k0 = np.array([[max(rows, cols), 0, cols / 2], [0, max(rows, cols), rows / 2], [0, 0, 1.0]])
    criteria = (cv2.TERM_CRITERIA_COUNT + cv2.TERM_CRITERIA_EPS, 300, 1e-14)
    try:
        _, k, dist, rvecs, tvecs = cv2.calibrateCamera(
            [fit_obj.astype(np.float32).reshape(-1, 1, 3)], [img.astype(np.float32).reshape(-1, 1, 2)],
            (cols, rows), k0.astype(np.float64), np.zeros(5), flags=flags, criteria=criteria)
    except cv2.error as e:
        raise ValueError(f"camera fit failed for these control points: {e.msg if hasattr(e, 'msg') else e}") from e
    r_fit, _ = cv2.Rodrigues(rvecs[0])
    t_fit = tvecs[0].ravel()
    # back to the caller's frame: X_cam = R B (X - c) + t
    r = r_fit @ basis
    t = t_fit - r @ centre
    rvec, _ = cv2.Rodrigues(r)
    model = CameraModel(np.asarray(k, float), np.asarray(dist, float).ravel()[:5], rvec.ravel(), t,
                        (rows, cols), np.zeros(0), bool(planar))
    proj = model.project(obj)
    model.residuals = np.linalg.norm(proj - img, axis=1)
    if not np.all(np.isfinite(model.residuals)):
        raise ValueError("camera fit placed control points behind the camera; check the 3D and "
                         "image points belong together")
    return model
