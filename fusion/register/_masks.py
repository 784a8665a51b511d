"""Areas of the infrared grid: markers, excluded shapes, the footprint of the correlation data
against the thermal data, and pixels whose motion-compensated value reaches past the data."""

from __future__ import annotations

import numpy as np
from skimage.measure import points_in_poly

__all__ = ["FOOTPRINT_WARN", "FOOTPRINT_FAIL", "footprint_share", "disk_mask", "shape_contains",
           "shape_mask", "warp_support_ok"]

#: Share of the usable thermal area the correlation footprint should cover: below it a run warns
#: (registration is the likely cause); below ``FOOTPRINT_FAIL`` it fails. Project defaults, not
#: values from a standard.
FOOTPRINT_WARN = 0.5
FOOTPRINT_FAIL = 0.05


def footprint_share(footprint, thermal_ok) -> dict:
    """How much of the usable thermal area the correlation data cover.

    Parameters
    ----------
    footprint : (Y, X) bool array_like
        IR pixels that received correlation data.
    thermal_ok : (Y, X) bool array_like
        IR pixels whose thermal data are usable (and not masked on purpose).

    Returns
    -------
    dict
        ``thermal_pixels``, ``footprint_pixels``, ``overlap_pixels`` (counts) and ``share`` =
        overlap / thermal (0 to 1; 0 without usable thermal pixels).
    """
    f = np.asarray(footprint, bool)
    t = np.asarray(thermal_ok, bool)
    if f.shape != t.shape:
        raise ValueError(f"footprint {f.shape!r} and thermal_ok {t.shape!r} differ in shape")
    n_t, n_o = int(t.sum()), int((f & t).sum())
    return {"thermal_pixels": n_t, "footprint_pixels": int(f.sum()), "overlap_pixels": n_o,
            "share": n_o / n_t if n_t else 0.0}


def _centres(shape):
    rows, cols = np.mgrid[0:shape[0], 0:shape[1]]
    return np.column_stack([cols.ravel(), rows.ravel()]).astype(np.float64)


def disk_mask(shape, centres, radii) -> np.ndarray:
    """Pixels whose centre lies within any of the disks, (Y, X) bool.

    ``centres`` (K, 2) are (col, row) px and ``radii`` (K,) or a scalar, px.
    """
    c = np.asarray(centres, dtype=np.float64).reshape(-1, 2)
    r = np.broadcast_to(np.asarray(radii, dtype=np.float64), (len(c),))
    q = _centres(shape)
    out = np.zeros(len(q), bool)
    for (cx, cy), rad in zip(c, r):
        out |= np.hypot(q[:, 0] - cx, q[:, 1] - cy) <= rad
    return out.reshape(shape)


def shape_contains(points, *, rect=None, circle=None, polygon=None) -> np.ndarray:
    """Which points lie in a shape, (N,) bool.

    Parameters
    ----------
    points : (N, 2) array_like
        (x, y) in the shape's own coordinates.
    rect : (x0, y0, x1, y1), optional
        Corners of an axis-aligned rectangle.
    circle : (cx, cy, r), optional
    polygon : (M, 2) array_like, optional
        Vertices in order (M >= 3), closed automatically.

    Notes
    -----
    Rectangle and circle include their boundary; a point exactly on a polygon's edge may fall
    either way (even-odd rule of ``skimage.measure.points_in_poly``).
    """
    p = np.asarray(points, dtype=np.float64).reshape(-1, 2)
    given = [k for k, v in (("rect", rect), ("circle", circle), ("polygon", polygon)) if v is not None]
    if len(given) != 1:
        raise ValueError(f"give exactly one of rect, circle, polygon; got {given or 'none'}")
    if rect is not None:
        x0, y0, x1, y1 = (float(v) for v in rect)
        return ((p[:, 0] >= min(x0, x1)) & (p[:, 0] <= max(x0, x1))
                & (p[:, 1] >= min(y0, y1)) & (p[:, 1] <= max(y0, y1)))
    if circle is not None:
        cx, cy, r = (float(v) for v in circle)
        return np.hypot(p[:, 0] - cx, p[:, 1] - cy) <= r
    return points_in_poly(p, np.asarray(polygon, dtype=np.float64).reshape(-1, 2))


def shape_mask(shape, **kw) -> np.ndarray:
    """IR pixels whose centre lies in a shape given in (col, row) px, (Y, X) bool (see
    :func:`shape_contains` for the shapes)."""
    return shape_contains(_centres(shape), **kw).reshape(shape)


def warp_support_ok(known, shift_low, shift_high, *, reach=(1, 2)) -> np.ndarray:
    """Pixels whose warped samples are interpolated from known pixels only, (Y, X) bool.

    Parameters
    ----------
    known : (Y, X) bool array_like
        Pixels with correlation data (the motion there is measured, and the surface there is
        the part's).
    shift_low, shift_high : (2, Y, X) array_like
        Smallest and largest sampling offset of each pixel over the record, (d col, d row) px:
        frame ``i`` samples pixel ``p`` at ``p + shift_i(p)``.
    reach : (int, int)
        Pixels the interpolation kernel reaches before and after ``floor(position)``: (1, 2)
        for a cubic B-spline (a 4 x 4 stencil), (0, 1) for bilinear.

    Returns
    -------
    (Y, X) bool ndarray
        True where every pixel of every stencil lies in ``known`` or outside the image (the
        image border is not an edge of the data: the warp repeats the border pixel there).

    Notes
    -----
    The stencils of all offsets between the two extremes form one rectangle per pixel, so one
    summed-area table of the unknown pixels answers each pixel in constant time.
    """
    k = np.asarray(known, bool)
    ny, nx = k.shape
    lo = np.asarray(shift_low, np.float64)
    hi = np.asarray(shift_high, np.float64)
    rows, cols = np.mgrid[0:ny, 0:nx]
    before, after = reach
    c0 = np.floor(cols + np.nan_to_num(lo[0])).astype(np.int64) - before
    c1 = np.floor(cols + np.nan_to_num(hi[0])).astype(np.int64) + after
    r0 = np.floor(rows + np.nan_to_num(lo[1])).astype(np.int64) - before
    r1 = np.floor(rows + np.nan_to_num(hi[1])).astype(np.int64) + after
    c0, c1 = np.clip(c0, 0, nx - 1), np.clip(c1, 0, nx - 1)
    r0, r1 = np.clip(r0, 0, ny - 1), np.clip(r1, 0, ny - 1)
    sat = np.zeros((ny + 1, nx + 1), np.int64)
    sat[1:, 1:] = np.cumsum(np.cumsum(~k, axis=0), axis=1)
    unknown = sat[r1 + 1, c1 + 1] - sat[r0, c1 + 1] - sat[r1 + 1, c0] + sat[r0, c0]
    return unknown == 0
