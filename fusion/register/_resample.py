"""Resampling of correlation-point values onto the infrared pixel centres."""

from __future__ import annotations

import numpy as np
import scipy.ndimage as ndi
from scipy.interpolate import LinearNDInterpolator
from scipy.spatial import Delaunay, QhullError, cKDTree

__all__ = ["resample_to_grid", "edge_distance_map"]

_NEWTON_STEPS = 12
_NEWTON_TOL = 1e-4  # px: far below the 0.1 px placement target, cheap to reach


def _pixel_centres(shape, bbox):
    """Pixel centres (integers) inside the bounding box of the data, and their flat indices."""
    ny, nx = shape
    c0 = max(int(np.floor(bbox[0])), 0)
    c1 = min(int(np.ceil(bbox[1])), nx - 1)
    r0 = max(int(np.floor(bbox[2])), 0)
    r1 = min(int(np.ceil(bbox[3])), ny - 1)
    if c1 < c0 or r1 < r0:
        return np.zeros((0, 2)), np.zeros(0, np.intp)
    rr, cc = np.mgrid[r0:r1 + 1, c0:c1 + 1]
    q = np.column_stack([cc.ravel(), rr.ravel()]).astype(np.float64)
    return q, (rr * nx + cc).ravel()


def _bbox(points):
    return (points[:, 0].min(), points[:, 0].max(), points[:, 1].min(), points[:, 1].max())


def _bilinear(p, i, j):
    """Positions, cell corners and derivatives of the bilinear grid map at parameters (i, j).

    Outside the grid the boundary cell is extended (a, b beyond [0, 1]).
    """
    gy, gx = p.shape[:2]
    i0 = np.clip(np.floor(i).astype(np.intp), 0, gy - 2)
    j0 = np.clip(np.floor(j).astype(np.intp), 0, gx - 2)
    a, b = (i - i0)[:, None], (j - j0)[:, None]
    flat = p.reshape(-1, 2)
    k = i0 * gx + j0                    # one flat gather per corner: faster than two index arrays
    p00, p01, p10, p11 = flat[k], flat[k + 1], flat[k + gx], flat[k + gx + 1]
    x = (1 - a) * (1 - b) * p00 + (1 - a) * b * p01 + a * (1 - b) * p10 + a * b * p11
    da_ = (1 - b) * (p10 - p00) + b * (p11 - p01)
    db_ = (1 - a) * (p01 - p00) + a * (p11 - p10)
    return x, da_, db_, i0, j0, a, b


def _invert(p, q, i, j):
    """Grid parameters (i, j) of IR positions q by Newton's method from a first guess."""
    for _ in range(_NEWTON_STEPS):
        x, da_, db_, *_ = _bilinear(p, i, j)
        r = q - x
        det = da_[:, 0] * db_[:, 1] - da_[:, 1] * db_[:, 0]
        with np.errstate(divide="ignore", invalid="ignore"):
            step_a = (r[:, 0] * db_[:, 1] - r[:, 1] * db_[:, 0]) / det
            step_b = (da_[:, 0] * r[:, 1] - da_[:, 1] * r[:, 0]) / det
        i = i + np.clip(step_a, -1, 1)  # a bounded step keeps cell jumps from overshooting
        j = j + np.clip(step_b, -1, 1)
        if np.nanmax(np.abs(r), initial=0.0) < _NEWTON_TOL:
            break
    return i, j


# pixel corners a hair inside the pixel: on an identity grid a corner then belongs to its own node
_CORNERS = 0.5 * (1.0 - 1e-6) * np.array([[-1, -1], [-1, 1], [1, -1], [1, 1]], np.float64)
# a source grid is a regular lattice when every node lies this close to it, in units of its spacing
# (text files keep about nine digits; far below what moves an interpolated value)
_LATTICE_TOL = 1e-6


class _Locator:
    """Grid parameters (i, j) of IR positions: the parameters whose bilinear blend of the four node
    positions of their cell is the position, by Newton's method.

    The first guess comes from the registration's inverse when the source points form a regular
    lattice (``lattice`` = (origin, axes), ``inverse``): then one or two Newton steps remain, the
    curvature of the map over a cell. Otherwise (an irregular grid, or a camera model with lens
    distortion, which has no closed inverse) from a piecewise-linear interpolation over the
    Delaunay triangulation of the nodes' IR positions.
    """

    def __init__(self, pts, grid_shape, lattice=None, inverse=None):
        self.pts = pts
        self.grid_shape = grid_shape
        self.p = pts.reshape(*grid_shape, 2)
        self.lattice = lattice if inverse is not None else None
        self.inverse = inverse

    def _guess(self, q):
        if self.lattice is not None:
            origin, axes = self.lattice
            s = np.asarray(self.inverse(q), dtype=np.float64)
            m = np.linalg.inv(axes)
            dx, dy = s[:, 0] - origin[0], s[:, 1] - origin[1]
            return np.column_stack([m[0, 0] * dx + m[0, 1] * dy, m[1, 0] * dx + m[1, 1] * dy])
        gy, gx = self.grid_shape
        ii, jj = np.mgrid[0:gy, 0:gx]
        return LinearNDInterpolator(self.pts, np.column_stack([ii.ravel(), jj.ravel()]).astype(np.float64))(q)

    def __call__(self, q, start=None):
        """(i, j, found) of positions ``q``; ``start``: parameters near them (pixel corners)."""
        if start is not None and self.lattice is None:
            i, j = _invert(self.p, q, start[0].copy(), start[1].copy())
            return i, j, np.isfinite(i) & np.isfinite(j)
        guess = self._guess(q)
        hit = np.all(np.isfinite(guess), axis=1)
        i = np.full(len(q), np.nan)
        j = np.full(len(q), np.nan)
        i[hit], j[hit] = _invert(self.p, q[hit], guess[hit, 0].copy(), guess[hit, 1].copy())
        if start is not None:
            return i, j, np.isfinite(i) & np.isfinite(j)
        found = hit.copy()
        found[hit] = np.all(np.abs(q[hit] - _bilinear(self.p, i[hit], j[hit])[0]) < 1e-3, axis=1)
        return i, j, found


def _lattice(source, grid_shape):
    """(origin, axes) of a regular lattice through the source points, or None when they are not one.

    ``axes`` (2, 2) has the step along grid rows (i) and along grid columns (j) as its columns.
    """
    gy, gx = grid_shape
    s = np.asarray(source, dtype=np.float64).reshape(gy, gx, 2)
    if not np.all(np.isfinite(s)):
        return None
    origin = s[0, 0]
    step_i = (s[-1, 0] - origin) / (gy - 1)
    step_j = (s[0, -1] - origin) / (gx - 1)
    axes = np.column_stack([step_i, step_j])
    spacing = min(np.hypot(*step_i), np.hypot(*step_j))
    if not spacing > 0 or abs(np.linalg.det(axes)) < 1e-12 * spacing ** 2:
        return None
    ii, jj = np.mgrid[0:gy, 0:gx]
    model = origin + ii[..., None] * step_i + jj[..., None] * step_j
    if np.max(np.abs(s - model)) > _LATTICE_TOL * spacing:
        return None
    return origin, axes


def _grid_resample(pts, vals, ok, grid_shape, q, whole_pixels=False, locate=None):
    """Bilinear interpolation in the source grid's (row, col) parameter space.

    ``locate(q)`` gives the grid parameters of IR positions (:class:`_Locator`; the IR position of
    a parameter is the bilinear blend of the four node positions of its cell: exact for an affine
    registration, and for a homography off by the curvature of the map over one cell, negligible
    at correlation grid steps). The values are blended with the same weights.
    """
    gy, gx = grid_shape
    v = vals.reshape(gy, gx, -1)
    cell_ok = ok[:-1, :-1] & ok[1:, :-1] & ok[:-1, 1:] & ok[1:, 1:]
    if locate is None:
        locate = _Locator(pts, grid_shape)
    i, j, found = locate(q)
    q, idx, i, j = q[found], np.flatnonzero(found), i[found], j[found]
    i0 = np.clip(np.floor(i).astype(np.intp), 0, gy - 2)
    j0 = np.clip(np.floor(j).astype(np.intp), 0, gx - 2)
    a, b = (i - i0)[:, None], (j - j0)[:, None]
    eps = 1e-9
    inside = ((i >= -eps) & (i <= gy - 1 + eps) & (j >= -eps) & (j <= gx - 1 + eps) & cell_ok[i0, j0])
    if whole_pixels and inside.any():
        # every part of the pixel nearer to a valid node than to a missing one; past the grid's
        # outer rows and columns the nearest node is the outermost one (unmeasured, not missing)
        sel = np.flatnonzero(inside)
        for corner in _CORNERS:
            ci, cj, _ = locate(q[sel] + corner, start=(i[sel], j[sel]))
            ni = np.clip(np.rint(np.nan_to_num(ci, nan=-1.0)), 0, gy - 1).astype(np.intp)
            nj = np.clip(np.rint(np.nan_to_num(cj, nan=-1.0)), 0, gx - 1).astype(np.intp)
            inside[sel] &= ok[ni, nj] & np.isfinite(ci) & np.isfinite(cj)
    out = ((1 - a) * (1 - b) * v[i0, j0] + (1 - a) * b * v[i0, j0 + 1] + a * (1 - b) * v[i0 + 1, j0]
           + a * b * v[i0 + 1, j0 + 1])
    return idx[inside], out[inside]


def _scattered_resample(pts, vals, q, max_edge, missing=None):
    """Delaunay linear interpolation, without triangles that bridge holes or concave edges.

    ``missing`` (M, 2): positions of unusable points; a pixel is then kept only when each of
    its corners is nearer to a usable point than to any of them.
    """
    try:
        tri = Delaunay(pts)
    except QhullError as e:
        raise ValueError("cannot triangulate the correlation points (too few, or all on one line)") from e
    if max_edge is None:
        nn = cKDTree(pts).query(pts, k=2)[0][:, 1]
        max_edge = 3.0 * float(np.median(nn))
    corners = pts[tri.simplices]
    edges = np.linalg.norm(corners - np.roll(corners, 1, axis=1), axis=2).max(axis=1)
    keep = edges <= max_edge
    simplex = tri.find_simplex(q)
    inside = simplex >= 0
    inside[inside] = keep[simplex[inside]]
    if missing is not None and len(missing) and inside.any():
        sel = np.flatnonzero(inside)
        good, bad = cKDTree(pts), cKDTree(missing)
        for corner in _CORNERS:
            c = q[sel] + corner
            inside[sel] &= good.query(c)[0] < bad.query(c)[0]
    out = LinearNDInterpolator(tri, vals)(q[inside])
    return np.flatnonzero(inside), out


def resample_to_grid(points_ir, values, shape, *, grid_shape=None, valid=None, edge_margin=0.0,
                     max_edge=None, whole_pixels=False, source_points=None, inverse=None):
    """Resample values at correlation points onto every IR pixel centre.

    Parameters
    ----------
    points_ir : (N, 2) array_like
        Positions of the correlation points in the IR image, (col, row) px, e.g. from
        ``Transform2D.apply`` or ``CameraModel.project``.
    values : (N, K) or (N,) array_like
        Values at the points (strain ranges, their standard deviations, displacements).
        Strain components are specimen-frame values: only their positions move.
    shape : tuple of int
        (Y, X) = (rows, cols) of the IR grid.
    grid_shape : tuple of int, optional
        (rows, cols) of the source grid when the points form one, in row-major order: bilinear
        interpolation in the grid's parameter space. Otherwise Delaunay linear interpolation.
    valid : (N,) bool array_like, optional
        Usable points. Points with a non-finite position or value are unusable as well.
    edge_margin : float
        Pixels nearer than this to the edge of the data footprint are excluded, IR px. Default
        0: strain fits near holes and edges keep to the valid data
        (:func:`fusion.dic.strain_from_field`), so their values hold up to the edge;
        :func:`edge_distance_map` tells how near each pixel is.
    max_edge : float, optional
        Scattered points only: triangles with an edge longer than this (IR px) are not part of
        the footprint; default 3 x the median nearest-neighbour spacing.
    whole_pixels : bool
        Keep a pixel only when all of it lies on usable data: each corner of the pixel must be
        nearer to a usable point than to an unusable one (past the outermost points of a grid,
        the outermost point counts). An infrared pixel averages the surface over its area, so
        one that reaches over a hole or a masked marker mixes in what the strain does not
        describe.
    source_points : (N, 2) array_like, optional
        With ``grid_shape`` and ``inverse``: the points before registration (e.g. correlation
        coordinates), of which ``points_ir`` are the images.
    inverse : callable, optional
        Maps IR positions (M, 2) (col, row) back to the coordinates of ``source_points``, e.g.
        ``Transform2D.inverse_apply``. When the source points form a regular lattice, each IR
        pixel is located on the grid through it directly; otherwise (and without it, as for a
        camera model with lens distortion) from a triangulation of ``points_ir``; either way the
        position is then solved on the grid of ``points_ir`` by Newton's method.

    Returns
    -------
    maps : (K, Y, X) float32 ndarray
        Resampled values, NaN outside ``inside``.
    inside : (Y, X) bool ndarray
        Pixel centres inside the footprint of the valid points (whole pixels with
        ``whole_pixels``) and at least ``edge_margin`` from its edge.

    Notes
    -----
    The footprint is the union of grid cells whose four nodes are valid, or of Delaunay
    triangles no longer than ``max_edge``, so holes (an open-hole coupon, lost subsets) stay out
    of it, unlike a convex hull. The margin uses the Euclidean distance transform of the
    footprint mask, counting the half pixel between a boundary pixel centre and the edge;
    it is therefore good to about half a pixel. The image border is not an edge. Linear
    interpolation of standard deviations is an approximation that ignores the correlation of
    neighbouring points' errors. Interpolation is linear in values, hence exact for linear
    fields under an affine registration.

    References
    ----------
    Delaunay triangulation: Barber, Dobkin & Huhdanpaa, ACM TOMS 22(4) (1996) (Qhull, through
    SciPy). Distance transform: Maurer et al., IEEE TPAMI 25(2) (2003) (through SciPy).
    """
    edge_margin = float(edge_margin)
    pts = np.asarray(points_ir, dtype=np.float64)
    if pts.ndim != 2 or pts.shape[1] != 2:
        raise ValueError(f"points_ir must have shape (N, 2); got shape {pts.shape!r}")
    vals = np.asarray(values, dtype=np.float64)
    if vals.ndim == 1:
        vals = vals[:, None]
    if vals.ndim != 2 or vals.shape[0] != len(pts):
        raise ValueError(f"values must have shape (N, K) with N = {len(pts)}; got {vals.shape!r}")
    try:
        ny, nx = (int(s) for s in shape)
    except (TypeError, ValueError) as e:
        raise ValueError(f"shape must be (rows, cols); got {shape!r}") from e
    if ny < 1 or nx < 1:
        raise ValueError(f"shape must be positive; got {shape!r}")
    if edge_margin < 0 or not np.isfinite(edge_margin):
        raise ValueError(f"edge_margin must be a non-negative number of px; got {edge_margin!r}")
    ok = np.all(np.isfinite(vals), axis=1) & np.all(np.isfinite(pts), axis=1)
    if valid is not None:
        v = np.asarray(valid, dtype=bool).ravel()
        if v.shape != (len(pts),):
            raise ValueError(f"valid must have shape ({len(pts)},); got {np.shape(valid)!r}")
        ok &= v
    k = vals.shape[1]
    maps = np.full((k, ny * nx), np.nan, np.float32)
    inside = np.zeros(ny * nx, bool)
    if ok.sum() >= 3:
        if grid_shape is not None:
            gy, gx = (int(s) for s in grid_shape)
            if gy * gx != len(pts) or gy < 2 or gx < 2:
                raise ValueError(f"grid_shape {grid_shape!r} does not match {len(pts)} points "
                                 "(rows x cols, both at least 2)")
            if not np.all(np.isfinite(pts)):
                raise ValueError("points_ir must be finite on a regular grid; mark missing points "
                                 "with valid=False instead")
            q, flat = _pixel_centres((ny, nx), _bbox(pts))
            lattice = None
            if inverse is not None and source_points is not None:
                src = np.asarray(source_points, dtype=np.float64)
                if src.shape != pts.shape:
                    raise ValueError(f"source_points must have shape {pts.shape!r}; got {src.shape!r}")
                lattice = _lattice(src, (gy, gx))
            locate = _Locator(pts, (gy, gx), lattice, inverse)
            sel, out = _grid_resample(pts, vals, ok.reshape(gy, gx), (gy, gx), q, whole_pixels, locate)
        else:
            q, flat = _pixel_centres((ny, nx), _bbox(pts[ok]))
            located = np.all(np.isfinite(pts), axis=1)
            missing = pts[located & ~ok] if whole_pixels else None
            sel, out = _scattered_resample(pts[ok], vals[ok], q, max_edge, missing)
        maps[:, flat[sel]] = out.T.astype(np.float32)
        inside[flat[sel]] = True
    inside = inside.reshape(ny, nx)
    maps = maps.reshape(k, ny, nx)
    if edge_margin > 0 and inside.any():
        inside &= edge_distance_map(inside) >= edge_margin
        maps[:, ~inside] = np.nan
    return maps, inside


def edge_distance_map(inside):
    """Distance of every pixel of a data footprint to its nearest edge, in pixels.

    Parameters
    ----------
    inside : (Y, X) bool array_like
        The footprint (e.g. from :func:`resample_to_grid`).

    Returns
    -------
    (Y, X) float32 ndarray
        Euclidean distance from the pixel centre to the edge of the footprint (the
        boundary half a pixel beyond its outermost pixel centres), NaN outside it. The
        border of the image is not an edge of the data.

    Notes
    -----
    The exact Euclidean distance transform to the nearest pixel outside, less half a
    pixel: good to about half a pixel.

    References
    ----------
    Maurer, Qi & Raghavan, IEEE TPAMI 25(2) (2003) (through ``scipy.ndimage``).
    """
    inside = np.asarray(inside, dtype=bool)
    if inside.ndim != 2:
        raise ValueError(f"inside must be a 2-D mask; got shape {inside.shape!r}")
    # border of the image is not an edge of the data: pad with "inside"
    dist = ndi.distance_transform_edt(np.pad(inside, 1, constant_values=True))[1:-1, 1:-1] - 0.5
    return np.where(inside, np.maximum(dist, 0.0), np.nan).astype(np.float32)
