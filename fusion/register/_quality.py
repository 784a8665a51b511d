"""How far a registration can be trusted: its error where one can be estimated, each control
point checked against the others, and the orientation of the mapping."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.special import fdtrc

from ._camera import fit_camera
from ._transform import _as_points, fit_transform, min_points, n_parameters

__all__ = ["FitAssessment", "assess_fit", "handedness", "check_handedness"]

#: Family-wise false-alarm probability of the outlier test over all points of a fit.
OUTLIER_ALPHA = 0.05

# parameters of a camera fit with distortion: pose 6, distortion 4, and the focal length
# (coplanar points) or focal lengths and principal point (non-coplanar)
_CAMERA_PARAMETERS = {True: 11, False: 14}


@dataclass
class FitAssessment:
    """The error of a fitted registration, as far as its control points can tell.

    Attributes
    ----------
    method : str
        The model assessed.
    n_points, n_min : int
        Control points used, and the fewest the model can be fitted to.
    exact : bool
        ``n_points == n_min``: the model passes through every point whatever their errors, so
        the error cannot be estimated (residuals are zero up to round-off).
    rms : float or None
        RMS reprojection error of the points used, IR px; ``None`` for an exact fit.
    leave_one_out : (N,) ndarray or None
        Per point: distance between its IR position and where the fit to all other points puts
        it, IR px (NaN where the others cannot fix the model); ``None`` for an exact fit.
    worst : int or None
        Index (into the points given) of the largest leave-one-out error.
    scatter : float or None
        Standard deviation per coordinate of the points about the fit, IR px (of the others
        when the worst point is an outlier); ``None`` without enough points (n_min + 2).
    outlier : bool
        The worst point is off by more than the limit and farther than the scatter of the
        others allows (the test of :func:`assess_fit`).
    p_value : float or None
        Probability that a point as far off as the worst one arises from the scatter of the
        others alone, for one point (before the correction for testing every point).
    rms_without_worst : float or None
        RMS of the fit without the worst point, IR px.
    """

    method: str
    n_points: int
    n_min: int
    exact: bool
    rms: float | None = None
    leave_one_out: np.ndarray | None = None
    worst: int | None = None
    scatter: float | None = None
    outlier: bool = False
    rms_without_worst: float | None = None
    p_value: float | None = None
    index: np.ndarray = field(default_factory=lambda: np.zeros(0, np.intp))

    def to_dict(self) -> dict:
        """JSON-ready summary (lists and plain numbers, ``None`` where not estimable)."""
        loo = None if self.leave_one_out is None else [
            None if not np.isfinite(v) else float(v) for v in self.leave_one_out]
        return {"n_points": self.n_points, "n_min": self.n_min, "exact": self.exact, "rms": self.rms,
                "leave_one_out_px": loo, "worst_point": self.worst, "scatter_px": self.scatter,
                "outlier": self.outlier, "rms_without_worst": self.rms_without_worst,
                "p_value": self.p_value}


def _free(method, m):
    """The free parameters of a fitted plane matrix, and the matrix they make."""
    if method == "homography":
        return (m / m[2, 2]).ravel()[:8], lambda v: np.append(v, 1.0).reshape(3, 3)
    if method == "affine":
        return m[:2].ravel(), lambda v: np.vstack([v.reshape(2, 3), [0.0, 0.0, 1.0]])
    o = 1.0 if np.linalg.det(m[:2, :2]) > 0 else -1.0       # similarity, proper or reflected
    return (np.array([m[0, 0], m[1, 0], m[0, 2], m[1, 2]]),
            lambda v: np.array([[v[0], -o * v[1], v[2]], [v[1], o * v[0], v[3]], [0.0, 0.0, 1.0]]))


def _apply_m(m, pts):
    h = pts @ m[:2, :2].T + m[:2, 2]
    w = pts @ m[2, :2] + m[2, 2]
    return h / w[:, None]


def _prediction_cov(method, m, src_rest, src_i):
    """(2, 2) covariance of the fit's prediction at src_i in units of the point variance: the
    least-squares fit linearised at its solution, g (J^T J)^-1 g^T."""
    v, make = _free(method, m)
    h = 1e-6 * np.maximum(np.abs(v), 1e-3)
    jac_rest = np.empty((2 * len(src_rest), v.size))
    jac_i = np.empty((2, v.size))
    for k in range(v.size):
        dv = np.zeros_like(v)
        dv[k] = h[k]
        mp, mm = make(v + dv), make(v - dv)
        jac_rest[:, k] = ((_apply_m(mp, src_rest) - _apply_m(mm, src_rest)) / (2 * h[k])).ravel()
        jac_i[:, k] = ((_apply_m(mp, src_i) - _apply_m(mm, src_i)) / (2 * h[k])).ravel()
    return jac_i @ np.linalg.pinv(jac_rest.T @ jac_rest) @ jac_i.T


def _plane_fit(method):
    def fit(src, dst):
        return fit_transform(src, dst, method=method, warn_limit=None)
    return fit


def _camera_fit(image_shape, distortion):
    def fit(src, dst):
        return fit_camera(src, dst, image_shape, distortion=distortion)
    return fit


def _predict(model, pts):
    return model.project(pts) if hasattr(model, "project") else model.apply(pts)


def _rms(fit, src, dst):
    r = np.linalg.norm(_predict(fit(src, dst), src) - dst, axis=1)
    return float(np.sqrt(np.mean(r ** 2))), r


def assess_fit(src_points, dst_points, *, method, limit, inliers=None, image_shape=None,
               distortion=True) -> FitAssessment:
    """Error of a registration from its control points: RMS, leave-one-out, outlier.

    Parameters
    ----------
    src_points : (N, 2) or (N, 3) array_like
        Control points in the correlation frame ((N, 3) for ``method="camera"``).
    dst_points : (N, 2) array_like
        The same points in the IR image, (col, row) px.
    method : {"similarity", "affine", "homography", "camera"}
        The model the registration was fitted with.
    limit : float
        Registration error limit, IR px (``registration.max_error``): a point off by less is
        never called an outlier.
    inliers : (N,) bool array_like, optional
        Points the fit used (after RANSAC); the others are left out of the assessment.
    image_shape : tuple of int, optional
        (rows, cols) of the IR image; required for ``"camera"``.
    distortion : bool
        Camera only: the fit includes lens distortion.

    Returns
    -------
    FitAssessment

    Notes
    -----
    With exactly as many points as the model needs the fit passes through all of them and
    says nothing about their errors: such a fit is reported as exact, without a number. With
    more, every point is predicted from a fit to all the others (leave-one-out
    cross-validation), which unlike the fit's own residual is not shrunk by the point pulling
    the model towards itself. The point predicted worst is an outlier when it is off by more
    than ``limit`` and when its externally studentised miss (the miss over the scatter of the
    other points about their own fit, allowing for the uncertainty of their prediction at
    that point, the fit linearised at its solution) exceeds the F(2, dof) quantile at
    ``OUTLIER_ALPHA / n``: a good set is called bad with a probability of at most about
    ``OUTLIER_ALPHA``. This needs two points more than the model's minimum (with one more the
    leave-one-out errors are reported, but a single bad point cannot be told from the others).
    For the camera model the leave-one-out errors are reported without an outlier test.

    References
    ----------
    Stone, M., "Cross-validatory choice and assessment of statistical predictions",
    J. R. Stat. Soc. B 36(2), 111-147 (1974). Cook, R. D. and Weisberg, S., *Residuals and
    Influence in Regression*, Chapman & Hall 1982, sec. 2.2 (deleted residuals, Bonferroni).
    Hartley & Zisserman, *Multiple View Geometry in Computer Vision*, 2nd ed., CUP 2004, ch. 5.
    """
    camera = method == "camera"
    src = _as_points(src_points, "src_points", ndim=3 if camera else 2)
    dst = _as_points(dst_points, "dst_points")
    index = np.arange(len(src))
    if inliers is not None:
        keep = np.asarray(inliers, bool).ravel()
        src, dst, index = src[keep], dst[keep], index[keep]
    n = len(src)
    if camera:
        if image_shape is None:
            raise ValueError("method 'camera' needs image_shape")
        centred = src - src.mean(axis=0)
        s = np.linalg.svd(centred, compute_uv=False) if n else np.zeros(3)
        planar = bool(n and s[2] <= 1e-6 * s[0])
        n_min = min_points("camera", planar=planar, distortion=distortion)
        n_par = _CAMERA_PARAMETERS[planar] if distortion else _CAMERA_PARAMETERS[planar] - 4
        fit = _camera_fit(image_shape, distortion)
        exact = False   # a camera fit at its minimum still has more equations than parameters
    else:
        n_min, n_par = min_points(method), n_parameters(method)
        fit = _plane_fit(method)
        exact = n <= n_min
    out = FitAssessment(method, n, n_min, exact, index=index)
    if exact or n < n_min:
        return out
    out.rms, r_all = _rms(fit, src, dst)
    loo = np.full(n, np.nan)
    models = [None] * n
    if n - 1 >= n_min:
        for i in range(n):
            rest = np.arange(n) != i
            try:
                models[i] = fit(src[rest], dst[rest])
            except ValueError:   # the others are degenerate without this point
                continue
            loo[i] = float(np.linalg.norm(_predict(models[i], src[i:i + 1])[0] - dst[i]))
    out.leave_one_out = loo
    if not np.isfinite(loo).any():
        return out
    worst = int(np.nanargmax(loo))
    out.worst = int(index[worst])
    dof = 2 * (n - 1) - n_par
    if dof <= 0:
        return out
    rest = np.arange(n) != worst
    rms_rest, r = _rms(fit, src[rest], dst[rest])
    out.rms_without_worst = rms_rest
    s_rest = float(np.sqrt(np.sum(r ** 2) / dof))
    out.scatter = float(np.sqrt(np.sum(r_all ** 2) / (2 * n - n_par)))
    if camera:
        return out                       # leave-one-out errors reported, no outlier test
    # the deleted-residual test: the worst point's miss d, weighed by the spread of the others'
    # prediction there, against the others' own scatter, is F(2, dof) distributed for a good
    # point; testing all n points at once asks for alpha / n (Bonferroni)
    d = _predict(models[worst], src[worst:worst + 1])[0] - dst[worst]
    cov = np.eye(2) + _prediction_cov(method, models[worst].matrix, src[rest], src[worst:worst + 1])
    stat = float(d @ np.linalg.solve(cov, d)) / (2.0 * max(s_rest, 1e-12) ** 2)
    out.p_value = float(fdtrc(2, dof, stat))     # survival function of the F(2, dof) distribution
    out.outlier = bool(loo[worst] > float(limit) and out.p_value < OUTLIER_ALPHA / n)
    if out.outlier:
        out.scatter = s_rest
    return out


def handedness(jacobians) -> int:
    """Orientation of a mapping from the signs of its Jacobian determinants.

    Parameters
    ----------
    jacobians : (N, 2, 2) array_like
        d(col, row)/d(x, y) at N points.

    Returns
    -------
    int
        +1 where every determinant is positive (orientation kept), -1 where every one is
        negative (reversed: a y-up frame seen as rows-down pixels), 0 when they disagree or
        vanish (the mapping folds or collapses over the points).
    """
    j = np.asarray(jacobians, dtype=np.float64).reshape(-1, 2, 2)
    det = j[:, 0, 0] * j[:, 1, 1] - j[:, 0, 1] * j[:, 1, 0]
    det = det[np.isfinite(det)]
    if det.size == 0:
        return 0
    if np.all(det > 0):
        return 1
    if np.all(det < 0):
        return -1
    return 0


def check_handedness(jacobians, *, mirrored=False, method="transform"):
    """Refuse a registration of the wrong orientation, as :class:`ValueError`.

    Parameters
    ----------
    jacobians : (N, 2, 2) array_like
        d(col, row)/d(x, y) of the registration at points of the correlation data, x, y in
        the specimen frame (x right, y up).
    mirrored : bool
        The IR image is a mirror image of the visible camera's view.
    method : str
        Named in the message.

    Notes
    -----
    Seen as rows-down pixels, a y-up frame is reversed: a registration of the specimen frame
    must reverse orientation (keep it when the IR image is mirrored). Control points typed as
    (row, col) give the opposite, a mirrored field that no fit can tell from a good one by its
    residuals.
    """
    got = handedness(jacobians)
    if got == (1 if mirrored else -1):
        return
    if got == 0:
        raise ValueError(f"the fitted {method} folds over the correlation data (its orientation changes "
                         "sign inside them): control points far off, or too close together for the area "
                         "they must cover")
    how = ("but the IR image is mirrored (ir_mirrored = true), so it must keep it" if mirrored else
           "but a y-up field seen as rows-down IR pixels must reverse it")
    raise ValueError(f"the control points mirror the field: (row, col) swapped? The fitted {method} "
                     f"keeps the orientation of the correlation data, {how}; check that ir_points are "
                     "[col, row] and dic_points are in the data's own coordinates (dic.y_axis)"
                     + ("" if mirrored else ", or set ir_mirrored = true if the IR image is mirrored"))
