"""Plane-to-plane transforms from control-point pairs (correlation frame -> IR pixels)."""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass, field

import cv2
import numpy as np

__all__ = ["Transform2D", "RegistrationWarning", "fit_transform", "map_displacement", "min_points"]

logger = logging.getLogger(__name__)

# control-point pairs that fix each plane model exactly, and its number of parameters
_PLANE = {"identity": (0, 0), "similarity": (2, 4), "affine": (3, 6), "homography": (4, 8)}


def min_points(method: str, *, planar: bool = True, distortion: bool = True) -> int:
    """Fewest control-point pairs a registration model can be fitted to.

    Parameters
    ----------
    method : {"identity", "similarity", "affine", "homography", "camera"}
    planar, distortion : bool
        Camera only: coplanar 3D points, and a fit with lens distortion.

    Returns
    -------
    int
        identity 0, similarity 2, affine 3, homography 4 (each then fits its points exactly);
        camera: coplanar 4 (8 with distortion), non-coplanar 6 (10 with distortion).

    Raises
    ------
    ValueError
        An unknown method.
    """
    if method == "camera":
        return (8 if distortion else 4) if planar else (10 if distortion else 6)
    if method not in _PLANE:
        raise ValueError(f"method must be one of {sorted([*_PLANE, 'camera'])!r}; got {method!r}")
    return _PLANE[method][0]


def n_parameters(method: str) -> int:
    """Free parameters of a plane model (similarity 4, affine 6, homography 8)."""
    return _PLANE[method][1]


class RegistrationWarning(UserWarning):
    """The registration fit is worse than the configured limit."""


def _as_points(points, name, *, ndim=2):
    arr = np.asarray(points, dtype=np.float64)
    if arr.ndim != 2 or arr.shape[1] != ndim:
        raise ValueError(f"{name} must have shape (N, {ndim}); got shape {arr.shape!r}")
    if not np.all(np.isfinite(arr)):
        bad = np.flatnonzero(~np.all(np.isfinite(arr), axis=1))
        raise ValueError(f"{name} holds non-finite values at rows {bad.tolist()!r}")
    return arr


def _check_repeated(points, name):
    """Refuse coincident points: they add no information and make the fit singular."""
    n = len(points)
    if n < 2:
        return
    extent = float(np.ptp(points, axis=0).max())
    tol = max(1e-9 * extent, 1e-12)
    d = np.linalg.norm(points[:, None, :] - points[None, :, :], axis=-1) if n <= 2000 else None
    if d is None:  # large sets: a tree keeps memory bounded
        from scipy.spatial import cKDTree

        pairs = sorted(cKDTree(points).query_pairs(tol))
        if pairs:
            i, j = pairs[0]
            raise ValueError(f"{name}: points {i} and {j} are repeated ({points[i].tolist()!r}); "
                             "each control point must be distinct")
        return
    d[np.tril_indices(n)] = np.inf
    i, j = np.unravel_index(np.argmin(d), d.shape)
    if d[i, j] <= tol:
        raise ValueError(f"{name}: points {i} and {j} are repeated ({points[i].tolist()!r}); "
                         "each control point must be distinct")


def _collinear(points, rel=1e-6):
    centred = points - points.mean(axis=0)
    s = np.linalg.svd(centred, compute_uv=False)
    return s[0] == 0 or s[1] <= rel * s[0]


def _check_geometry(src, dst, method):
    need = min_points(method)
    n = len(src)
    if n < need:
        raise ValueError(f"method {method!r} needs at least {need} control-point pairs; got {n}")
    _check_repeated(src, "src_points")
    _check_repeated(dst, "dst_points")
    if method in ("affine", "homography"):
        for pts, name in ((src, "src_points"), (dst, "dst_points")):
            if _collinear(pts):
                raise ValueError(f"{name} are collinear; method {method!r} needs points spread in two "
                                 "directions (e.g. the corners of the region)")
    if method == "homography":
        # A homography is fixed by four points only if no three of them share a line; for more
        # points the rank of the direct linear transform system decides (Hartley & Zisserman 4.1).
        if n == 4:
            for skip in range(4):
                idx = [k for k in range(4) if k != skip]
                for pts, name in ((src, "src_points"), (dst, "dst_points")):
                    if _collinear(pts[idx], rel=1e-4):
                        raise ValueError(f"{name}: points {idx!r} are collinear; a homography from "
                                         "four points needs no three on one line")
        a = _dlt_matrix(_normalise(src)[0], _normalise(dst)[0])
        s = np.linalg.svd(a, compute_uv=False)
        if s[7] <= 1e-8 * s[0]:
            raise ValueError("control points are in a degenerate configuration for a homography "
                             "(too many on one line); add points off that line")


def _normalise(points):
    """Hartley normalisation: centroid at 0, mean distance sqrt(2)."""
    c = points.mean(axis=0)
    d = np.linalg.norm(points - c, axis=1).mean()
    s = np.sqrt(2.0) / d if d > 0 else 1.0
    t = np.array([[s, 0, -s * c[0]], [0, s, -s * c[1]], [0, 0, 1.0]])
    return points * s - s * c, t


def _dlt_matrix(src, dst):
    x, y = src[:, 0], src[:, 1]
    u, v = dst[:, 0], dst[:, 1]
    z, o = np.zeros_like(x), np.ones_like(x)
    r1 = np.column_stack([x, y, o, z, z, z, -u * x, -u * y, -u])
    r2 = np.column_stack([z, z, z, x, y, o, -v * x, -v * y, -v])
    return np.vstack([r1, r2])


def _apply_matrix(matrix, points):
    # element-wise: a matrix product with an inner dimension of two is several times slower
    x, y = points[:, 0], points[:, 1]
    m = matrix
    w = m[2, 0] * x + m[2, 1] * y + m[2, 2]
    out = np.empty((len(points), 2))
    with np.errstate(divide="ignore", invalid="ignore"):
        np.divide(m[0, 0] * x + m[0, 1] * y + m[0, 2], w, out=out[:, 0])
        np.divide(m[1, 0] * x + m[1, 1] * y + m[1, 2], w, out=out[:, 1])
    return out


def _fit_affine_ls(src, dst):
    a = np.column_stack([src, np.ones(len(src))])
    coef, *_ = np.linalg.lstsq(a, dst, rcond=None)
    return np.vstack([coef.T, [0.0, 0.0, 1.0]])


def _fit_similarity_ls(src, dst, orientation=None):
    """Closed-form least-squares similarity, optionally orientation-reversing.

    With complex coordinates z the model is w = a z + b (proper) or w = a conj(z) + b
    (reflected: the specimen y axis points up, image rows down). Returns the matrix and the
    orientation (+1 or -1) of the better fit.
    """
    zs = src[:, 0] + 1j * src[:, 1]
    zd = dst[:, 0] + 1j * dst[:, 1]
    best = None
    for o in ((+1, -1) if orientation is None else (orientation,)):
        z = zs if o > 0 else np.conj(zs)
        zc, wc = z - z.mean(), zd - zd.mean()
        den = float(np.sum(np.abs(zc) ** 2))
        a = np.sum(np.conj(zc) * wc) / den if den > 0 else 1.0 + 0j
        b = zd.mean() - a * z.mean()
        rss = float(np.sum(np.abs(a * z + b - zd) ** 2))
        p, q = a.real, a.imag
        lin = np.array([[p, -q], [q, p]]) if o > 0 else np.array([[p, q], [q, -p]])
        m = np.array([[lin[0, 0], lin[0, 1], b.real], [lin[1, 0], lin[1, 1], b.imag], [0, 0, 1.0]])
        if best is None or rss < best[0]:
            best = (rss, m, o)
    return best[1], best[2]


def _fit_homography_ls(src, dst):
    h, _ = cv2.findHomography(src, dst, 0)
    if h is None:
        raise ValueError("homography estimation failed: control points are degenerate")
    return h / h[2, 2]


def _ransac(src, dst, method, threshold):
    """Inlier mask from OpenCV's RANSAC estimators (Fischler & Bolles 1981)."""
    s32, d32 = src.astype(np.float64), dst.astype(np.float64)
    if method == "homography":
        _, mask = cv2.findHomography(s32, d32, cv2.RANSAC, float(threshold), maxIters=5000,
                                     confidence=0.999)
        return None if mask is None else mask.ravel().astype(bool), None
    if method == "affine":
        _, mask = cv2.estimateAffine2D(s32, d32, method=cv2.RANSAC,
                                       ransacReprojThreshold=float(threshold), maxIters=5000,
                                       confidence=0.999)
        return None if mask is None else mask.ravel().astype(bool), None
    # similarity: OpenCV's partial affine has no reflection, so try the y-flipped source too
    best = (None, None)
    for o in (+1, -1):
        _, mask = cv2.estimateAffinePartial2D(s32 * [1.0, o], d32, method=cv2.RANSAC,
                                              ransacReprojThreshold=float(threshold),
                                              maxIters=5000, confidence=0.999)
        if mask is not None and (best[0] is None or mask.sum() > best[0].sum()):
            best = (mask.ravel().astype(bool), o)
    return best


@dataclass
class Transform2D:
    """A plane projective transform from source coordinates to IR pixel (col, row).

    Attributes
    ----------
    matrix : (3, 3) ndarray
        Homogeneous matrix: ``[col, row, 1]^T ~ matrix @ [x, y, 1]^T``.
    method : str
        ``"identity"``, ``"similarity"``, ``"affine"`` or ``"homography"`` (``"+ecc"`` appended
        after a signal-based correction).
    src_points, dst_points : (N, 2) ndarray
        The control points the transform was fitted to (may be empty).
    inliers : (N,) bool ndarray
        Points used in the final least-squares fit.
    residuals : (N,) ndarray
        Reprojection error of every control point, IR px (outliers included).
    warnings : list of str
        Quality warnings raised during the fit.
    """

    matrix: np.ndarray
    method: str = "homography"
    src_points: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    dst_points: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    inliers: np.ndarray = field(default_factory=lambda: np.zeros(0, bool))
    residuals: np.ndarray = field(default_factory=lambda: np.zeros(0))
    warnings: list = field(default_factory=list)

    def apply(self, points):
        """Map source points (N, 2) to IR pixel coordinates (N, 2) (col, row), px."""
        pts = np.asarray(points, dtype=np.float64)
        single = pts.ndim == 1
        out = _apply_matrix(self.matrix, np.atleast_2d(pts))
        return out[0] if single else out

    def inverse_apply(self, points):
        """Map IR pixel coordinates (N, 2) back to source coordinates (N, 2)."""
        pts = np.asarray(points, dtype=np.float64)
        single = pts.ndim == 1
        out = _apply_matrix(np.linalg.inv(self.matrix), np.atleast_2d(pts))
        return out[0] if single else out

    def jacobian(self, points):
        """Local derivative d(col, row)/d(x, y) at source points, (N, 2, 2), IR px per unit."""
        pts = np.atleast_2d(np.asarray(points, dtype=np.float64))
        h = self.matrix
        w = pts @ h[2, :2] + h[2, 2]
        mapped = _apply_matrix(h, pts)
        return (h[None, :2, :2] - mapped[:, :, None] * h[None, 2, :2][:, None, :]) / w[:, None, None]

    @property
    def rms(self) -> float:
        """Root-mean-square reprojection error of the inliers, IR px (0 without points)."""
        r = self.residuals[self.inliers]
        return float(np.sqrt(np.mean(r ** 2))) if r.size else 0.0

    @property
    def max_error(self) -> float:
        """Largest reprojection error of the inliers, IR px."""
        r = self.residuals[self.inliers]
        return float(r.max()) if r.size else 0.0

    @property
    def scale(self) -> float:
        """Mean linear scale, IR px per source unit (sqrt of the local area ratio)."""
        pts = self.src_points[self.inliers] if self.inliers.any() else np.zeros((1, 2))
        det = np.abs(np.linalg.det(self.jacobian(pts)))
        return float(np.mean(np.sqrt(det)))

    def corrected(self, warp):
        """The transform after a signal-based correction from :func:`refine_with_signal`.

        ``warp`` (2, 3) maps measured-map pixels to predicted-map pixels, so the corrected
        transform is ``inv(W) @ matrix``; residuals are recomputed on the stored points.
        """
        w = np.vstack([np.asarray(warp, dtype=np.float64).reshape(2, 3), [0.0, 0.0, 1.0]])
        m = np.linalg.inv(w) @ self.matrix
        m = m / m[2, 2]
        res = (np.linalg.norm(_apply_matrix(m, self.src_points) - self.dst_points, axis=1)
               if len(self.src_points) else np.zeros(0))
        method = self.method if self.method.endswith("+ecc") else self.method + "+ecc"
        return Transform2D(m, method, self.src_points.copy(), self.dst_points.copy(),
                           self.inliers.copy(), res, list(self.warnings))

    def to_dict(self) -> dict:
        """Flat dictionary of NetCDF-safe values (str, float, int, lists of numbers)."""
        return {
            "registration_method": self.method,
            "registration_matrix": [float(v) for v in self.matrix.ravel()],
            "registration_rms_px": self.rms,
            "registration_max_error_px": self.max_error,
            "registration_scale": self.scale,
            "registration_n_points": int(len(self.src_points)),
            "registration_n_inliers": int(self.inliers.sum()),
            "registration_src_points": [float(v) for v in self.src_points.ravel()],
            "registration_dst_points": [float(v) for v in self.dst_points.ravel()],
            "registration_inliers": [int(v) for v in self.inliers],
            "registration_warnings": "; ".join(self.warnings),
        }

    @classmethod
    def from_dict(cls, d) -> "Transform2D":
        """Rebuild from :meth:`to_dict` output (also after a NetCDF attribute round trip)."""
        try:
            m = np.asarray(d["registration_matrix"], dtype=np.float64).reshape(3, 3)
            method = str(d["registration_method"])
        except (KeyError, ValueError) as e:
            raise ValueError(f"not a registration dictionary: {sorted(d)!r}") from e
        src = np.asarray(d.get("registration_src_points", []), dtype=np.float64).reshape(-1, 2)
        dst = np.asarray(d.get("registration_dst_points", []), dtype=np.float64).reshape(-1, 2)
        inl = np.asarray(d.get("registration_inliers", np.ones(len(src))), dtype=bool).reshape(-1)
        if len(inl) != len(src):
            inl = np.ones(len(src), bool)
        res = np.linalg.norm(_apply_matrix(m, src) - dst, axis=1) if len(src) else np.zeros(0)
        text = str(d.get("registration_warnings", ""))
        return cls(m, method, src, dst, inl, res, [w for w in text.split("; ") if w])


def fit_transform(src_points, dst_points, *, method="homography", ransac_threshold=None,
                  warn_limit=0.5):
    """Fit a transform from correlation coordinates to IR pixel coordinates.

    Parameters
    ----------
    src_points : (N, 2) array_like
        Control points in the correlation frame (mm or px; x right, y up or down as given).
    dst_points : (N, 2) array_like
        The same points in the IR image, (col, row) px, pixel centres at integers.
    method : {"homography", "affine", "similarity", "identity"}
        Transform model. ``"similarity"`` (rotation, uniform scale, translation) may reverse
        orientation, which is what a y-up specimen frame seen as rows-down pixels needs.
    ransac_threshold : float, optional
        Inlier threshold, IR px. ``None`` fits all points by least squares; otherwise OpenCV's
        RANSAC selects inliers and the final fit is least squares on them.
    warn_limit : float or None
        RMS reprojection error (IR px) above which a :class:`RegistrationWarning` is issued and
        recorded in ``Transform2D.warnings``. ``None`` disables the check.

    Returns
    -------
    Transform2D
        With ``rms`` and ``max_error`` in IR px and ``scale`` in IR px per source unit.

    Raises
    ------
    ValueError
        Fewer points than the method needs (identity 0, similarity 2, affine 3, homography 4),
        repeated points, collinear points (affine, homography) or a degenerate homography set.

    Notes
    -----
    The homography is OpenCV's normalised direct linear transform refined by Levenberg-Marquardt
    on the reprojection error in the IR image; the affine fit is linear least squares in the IR
    image; the similarity fit is the closed-form least-squares solution (Umeyama 1991) in both
    orientations, keeping the better one. Residuals are Euclidean distances in the IR image, so
    they assume the IR points carry the error (clicking, marker centroids). Only positions move:
    strain components stay in the specimen frame even though a homography rotates and scales.

    References
    ----------
    Hartley & Zisserman, *Multiple View Geometry in Computer Vision*, 2nd ed., CUP 2004, ch. 4.
    Umeyama, IEEE TPAMI 13(4), 376-380 (1991). Fischler & Bolles, Comm. ACM 24(6) (1981).

    Examples
    --------
    >>> import numpy as np
    >>> src = np.array([[0, 0], [40, 0], [40, 20], [0, 20.0]])
    >>> dst = src * [5, -5] + [10, 200]
    >>> t = fit_transform(src, dst, method="affine")
    >>> bool(np.allclose(t.apply([[20, 10]]), [[110, 150]]))
    True
    """
    if method not in _PLANE:
        raise ValueError(f"method must be one of {sorted(_PLANE)!r}; got {method!r}")
    src = _as_points(src_points, "src_points")
    dst = _as_points(dst_points, "dst_points")
    if len(src) != len(dst):
        raise ValueError(f"src_points and dst_points differ in length: {len(src)} != {len(dst)}")
    if ransac_threshold is not None and not (np.isfinite(ransac_threshold) and ransac_threshold > 0):
        raise ValueError(f"ransac_threshold must be a positive number of IR px; got {ransac_threshold!r}")
    _check_geometry(src, dst, method)
    n = len(src)
    inliers = np.ones(n, bool)
    orientation = None
    if method != "identity" and ransac_threshold is not None and n > min_points(method):
        mask, orientation = _ransac(src, dst, method, ransac_threshold)
        if mask is None or mask.sum() < min_points(method):
            raise ValueError(f"RANSAC found fewer than {min_points(method)} inliers at threshold "
                             f"{ransac_threshold!r} px; check the control points or raise the threshold")
        inliers = mask
        _check_geometry(src[inliers], dst[inliers], method)
    s, d = src[inliers], dst[inliers]
    if method == "identity":
        matrix = np.eye(3)
    elif method == "similarity":
        matrix, _ = _fit_similarity_ls(s, d, orientation)
    elif method == "affine":
        matrix = _fit_affine_ls(s, d)
    else:
        matrix = _fit_homography_ls(s, d)
    residuals = np.linalg.norm(_apply_matrix(matrix, src) - dst, axis=1) if n else np.zeros(0)
    t = Transform2D(matrix, method, src, dst, inliers, residuals, [])
    if n and (~inliers).any():
        msg = f"{int((~inliers).sum())} of {n} control points rejected as outliers: " \
              f"indices {np.flatnonzero(~inliers).tolist()!r}"
        t.warnings.append(msg)
        logger.info("%s", msg)
    if warn_limit is not None and t.rms > warn_limit:
        msg = (f"registration RMS error {t.rms:.3g} px exceeds the limit {warn_limit!r} px "
               f"(max {t.max_error:.3g} px); check the control points")
        t.warnings.append(msg)
        warnings.warn(msg, RegistrationWarning, stacklevel=2)
    return t


def map_displacement(transform, points, displacement):
    """Express displacements at source points as IR pixel displacements.

    Parameters
    ----------
    transform : Transform2D
    points : (N, 2) array_like
        Reference positions in source coordinates.
    displacement : (N, 2) array_like
        Displacement (u, v) in source units and axes.

    Returns
    -------
    (N, 2) ndarray
        (d col, d row) IR px: ``T(x + u) - T(x)``, exact for any transform size of motion.
    """
    p = _as_points(points, "points")
    u = np.asarray(displacement, dtype=np.float64)
    if u.shape != p.shape:
        raise ValueError(f"displacement must have shape {p.shape!r}; got {u.shape!r}")
    return transform.apply(p + u) - transform.apply(p)
