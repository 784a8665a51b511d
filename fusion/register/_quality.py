"""How far a registration can be trusted: its error where one can be estimated, each control
point checked against the others, and the orientation of the mapping."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ._camera import fit_camera
from ._transform import _as_points, fit_transform, min_points, n_parameters

__all__ = ["FitAssessment", "assess_fit", "handedness"]

#: A point is called an outlier when the others place it farther off than this many standard
#: deviations of their own scatter (and farther than the configured error limit): a good point
#: lands that far with a probability of a few in a million (Rayleigh tail exp(-k^2 / 2)).
OUTLIER_SIGMAS = 5.0

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
        Standard deviation per coordinate of the other points about their own fit once the
        worst point is left out, IR px; ``None`` without enough points for it (n_min + 2).
    outlier : bool
        The worst point is off by more than the limit and by more than ``OUTLIER_SIGMAS``
        times ``scatter``.
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
    index: np.ndarray = field(default_factory=lambda: np.zeros(0, np.intp))

    def to_dict(self) -> dict:
        """JSON-ready summary (lists and plain numbers, ``None`` where not estimable)."""
        loo = None if self.leave_one_out is None else [
            None if not np.isfinite(v) else float(v) for v in self.leave_one_out]
        return {"n_points": self.n_points, "n_min": self.n_min, "exact": self.exact, "rms": self.rms,
                "leave_one_out_px": loo, "worst_point": self.worst, "scatter_px": self.scatter,
                "outlier": self.outlier, "rms_without_worst": self.rms_without_worst}


def _plane_fit(method):
    def fit(src, dst):
        return fit_transform(src, dst, method=method, warn_limit=None).apply
    return fit


def _camera_fit(image_shape, distortion):
    def fit(src, dst):
        return fit_camera(src, dst, image_shape, distortion=distortion).project
    return fit


def _rms(fit, src, dst):
    r = np.linalg.norm(fit(src, dst)(src) - dst, axis=1)
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
    than ``limit`` and by more than ``OUTLIER_SIGMAS`` standard deviations of the scatter of
    the remaining points about their own fit; this needs two points more than the model's
    minimum (with one more, the leave-one-out errors are reported but a single bad point
    cannot be told from the others).

    References
    ----------
    Stone, M., "Cross-validatory choice and assessment of statistical predictions",
    J. R. Stat. Soc. B 36(2), 111-147 (1974). Hartley & Zisserman, *Multiple View Geometry in
    Computer Vision*, 2nd ed., CUP 2004, ch. 5 (residual and estimation error).
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
    out.rms, _ = _rms(fit, src, dst)
    loo = np.full(n, np.nan)
    if n - 1 >= n_min:
        for i in range(n):
            rest = np.arange(n) != i
            try:
                loo[i] = float(np.linalg.norm(fit(src[rest], dst[rest])(src[i:i + 1])[0] - dst[i]))
            except ValueError:   # the others are degenerate without this point
                continue
    out.leave_one_out = loo
    if not np.isfinite(loo).any():
        return out
    worst = int(np.nanargmax(loo))
    out.worst = int(index[worst])
    dof = 2 * (n - 1) - n_par
    if dof > 0:
        rest = np.arange(n) != worst
        try:
            rms_rest, r = _rms(fit, src[rest], dst[rest])
        except ValueError:
            return out
        out.rms_without_worst = rms_rest
        out.scatter = float(np.sqrt(np.sum(r ** 2) / dof))
        out.outlier = bool(loo[worst] > max(float(limit), OUTLIER_SIGMAS * out.scatter))
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
