"""Strain from a displacement field by local polynomial fits (virtual strain gauge)."""

from __future__ import annotations

import math
from numbers import Integral, Real

import numpy as np
from scipy import ndimage

from ._field import DicField

__all__ = ["strain_from_field", "vsg_size", "strain_fit", "field_spacing", "vsg_attrs"]

_KINDS = ("small", "green")


def vsg_size(window, step, subset):
    """Virtual strain gauge size: ``(window - 1) * step + subset``.

    Parameters
    ----------
    window : int
        Strain window in grid points (points per side).
    step : float
        Grid spacing (px).
    subset : float
        Subset size (px).

    Returns
    -------
    float
        The side of the image region that contributes to one strain value, px.

    References
    ----------
    E. M. C. Jones, M. A. Iadicola (eds.), *A Good Practices Guide for Digital
    Image Correlation*, International Digital Image Correlation Society, 2018,
    doi:10.32720/idics/gpg.ed1 (definition of the VSG; from memory).

    Examples
    --------
    >>> vsg_size(5, 10, 21)
    61
    """
    for name, value in (("window", window), ("step", step), ("subset", subset)):
        if isinstance(value, bool) or not isinstance(value, Real) or not value > 0:
            raise ValueError(f"{name}: expected a positive number, got {value!r}")
    return (window - 1) * step + subset


def _check_options(window, order, kind, min_valid):
    if isinstance(window, bool) or not isinstance(window, Integral) or window < 3 or window % 2 == 0:
        raise ValueError(f"window: expected an odd number of points >= 3, got {window!r}")
    if order not in (1, 2):
        raise ValueError(f"order: expected 1 (plane) or 2 (quadratic), got {order!r}")
    if order == 2 and window < 5:
        raise ValueError(f"window: a quadratic fit needs window >= 5, got {window!r}")
    if kind not in _KINDS:
        raise ValueError(f"kind: expected one of {_KINDS!r}, got {kind!r}")
    if isinstance(min_valid, bool) or not isinstance(min_valid, Real) or not 0 < min_valid <= 1:
        raise ValueError(f"min_valid: expected a fraction in (0, 1], got {min_valid!r}")


def _exponents(order):
    """Monomial exponents (p, q) of x^p y^q of a polynomial of the given order."""
    return [(p, d - p) for d in range(order + 1) for p in range(d, -1, -1)]


def field_spacing(field: DicField):
    """Grid spacing (dx, dy) of a gridded field; for scattered points the square
    root of the mean area per point (hull area / N), the spacing of a lattice of
    the same density."""
    ok = np.isfinite(field.x) & np.isfinite(field.y)
    if field.grid_shape is not None:
        ny, nx = field.grid_shape
        xg = field.x.reshape(ny, nx)
        yg = field.y.reshape(ny, nx)
        dx = np.nanmedian(np.diff(xg, axis=1)) if nx > 1 else np.nan
        dy = np.nanmedian(-np.diff(yg, axis=0)) if ny > 1 else np.nan
        if not np.isfinite(dx):
            dx = dy
        if not np.isfinite(dy):
            dy = dx
        return float(dx), float(dy)
    from scipy.spatial import ConvexHull, QhullError

    pts = np.column_stack([field.x[ok], field.y[ok]])
    if pts.shape[0] < 3:
        raise ValueError("field: fewer than three points with coordinates")
    try:
        area = ConvexHull(pts).volume  # in 2-D the "volume" is the area
    except QhullError:
        raise ValueError("field: the points are collinear; a strain needs a 2-D spread") from None
    s = math.sqrt(area / pts.shape[0])
    return s, s


def _regular(field, dx, dy):
    """True when the gridded coordinates sit on the lattice within 1 % of a spacing."""
    ny, nx = field.grid_shape
    j = np.arange(nx)[None, :]
    i = np.arange(ny)[:, None]
    xg = field.x.reshape(ny, nx)
    yg = field.y.reshape(ny, nx)
    x0 = np.nanmedian(xg - j * dx)
    y0 = np.nanmedian(yg + i * dy)
    ex = np.nanmax(np.abs(xg - (x0 + j * dx))) if np.isfinite(xg).any() else 0.0
    ey = np.nanmax(np.abs(yg - (y0 - i * dy))) if np.isfinite(yg).any() else 0.0
    return dx > 0 and dy > 0 and ex <= 0.01 * dx and ey <= 0.01 * dy


def _solve(a_mat, rhs, quad, n, m, usable):
    """Least-squares coefficients, residual variances and coefficient variances per point."""
    npts = a_mat.shape[0]
    coef = np.full((npts, m, 2), np.nan)
    cvar = np.full((npts, m), np.nan)
    s2 = np.full((npts, 2), np.nan)
    idx = np.flatnonzero(usable)
    if idx.size:
        a = a_mat[idx]
        # scale to unit diagonal before the condition test and the inverse
        d = np.sqrt(np.einsum("kii->ki", a))
        an = a / (d[:, :, None] * d[:, None, :])
        cond = np.linalg.cond(an)
        good = np.isfinite(cond) & (cond < 1e8)
        idx = idx[good]
        ainv = np.linalg.inv(an[good]) / (d[good][:, :, None] * d[good][:, None, :])
        c = np.einsum("kij,kjc->kic", ainv, rhs[idx])
        ssr = quad[idx] - np.einsum("kic,kic->kc", c, rhs[idx])
        dof = (n[idx] - m)[:, None]
        s2[idx] = np.maximum(ssr, 0.0) / np.maximum(dof, 1)
        coef[idx] = c
        cvar[idx] = np.einsum("kii->ki", ainv)
    return coef, s2, cvar


def _grid_fit(field, window, order, min_valid, dx, dy, uu, vv):
    ny, nx = field.grid_shape
    h = window // 2
    w = (field.valid & np.isfinite(uu) & np.isfinite(vv)).reshape(ny, nx).astype(np.float64)
    ug = np.where(w > 0, uu.reshape(ny, nx), 0.0)
    vg = np.where(w > 0, vv.reshape(ny, nx), 0.0)
    # kernel coordinates: column offset k (x grows right), row offset l grows down so y = -l
    kk, ll = np.meshgrid(np.arange(-h, h + 1), np.arange(-h, h + 1))
    yy = -ll
    exps = _exponents(order)
    m = len(exps)

    def corr(img, p, q):
        return ndimage.correlate(img, (kk ** p * yy ** q).astype(np.float64), mode="constant")

    moments = {}
    for p in range(2 * order + 1):
        for q in range(2 * order + 1 - p):
            moments[p, q] = corr(w, p, q).ravel()
    a_mat = np.empty((ny * nx, m, m))
    for i, (pi, qi) in enumerate(exps):
        for j, (pj, qj) in enumerate(exps):
            a_mat[:, i, j] = moments[pi + pj, qi + qj]
    rhs = np.empty((ny * nx, m, 2))
    for i, (pi, qi) in enumerate(exps):
        rhs[:, i, 0] = corr(w * ug, pi, qi).ravel()
        rhs[:, i, 1] = corr(w * vg, pi, qi).ravel()
    box = np.ones((window, window))
    quad = np.column_stack([ndimage.correlate(w * ug * ug, box, mode="constant").ravel(),
                            ndimage.correlate(w * vg * vg, box, mode="constant").ravel()])
    n = moments[0, 0]
    usable = (w.ravel() > 0) & (n >= max(min_valid * window * window, m + 2) - 1e-9)
    coef, s2, cvar = _solve(a_mat, rhs, quad, n, m, usable)
    # coefficients are per grid step; divide by the spacing for derivatives
    scale = np.array([dx, dy])
    grads = coef[:, 1:3, :] / scale[None, :, None]
    gvar = cvar[:, 1:3] / (scale[None, :] ** 2)
    return grads, s2, gvar


def _scattered_fit(field, window, order, min_valid, spacing, uu, vv):
    from scipy.spatial import cKDTree

    ok = field.valid & np.isfinite(uu) & np.isfinite(vv) & np.isfinite(field.x) & np.isfinite(field.y)
    npts = field.size
    exps = _exponents(order)
    m = len(exps)
    grads = np.full((npts, 2, 2), np.nan)
    s2 = np.full((npts, 2), np.nan)
    gvar = np.full((npts, 2), np.nan)
    src = np.flatnonzero(ok)
    if src.size < m + 2:
        return grads, s2, gvar
    # a disc with the area of the square window holds about window^2 points
    radius = window * spacing / math.sqrt(math.pi)
    tree = cKDTree(np.column_stack([field.x[src], field.y[src]]))
    need = max(min_valid * window * window, m + 2)
    chunk = 4096
    for start in range(0, src.size, chunk):
        centre = src[start:start + chunk]
        lists = tree.query_ball_point(np.column_stack([field.x[centre], field.y[centre]]), radius)
        counts = np.array([len(li) for li in lists])
        kmax = max(int(counts.max()), 1)
        nb = np.zeros((centre.size, kmax), dtype=np.int64)
        wt = np.zeros((centre.size, kmax))
        for r, li in enumerate(lists):
            nb[r, :len(li)] = li
            wt[r, :len(li)] = 1.0
        gi = src[nb]
        lx = (field.x[gi] - field.x[centre][:, None]) / spacing
        ly = (field.y[gi] - field.y[centre][:, None]) / spacing
        basis = np.stack([lx ** p * ly ** q for p, q in exps], axis=-1) * wt[..., None]
        a_mat = np.einsum("kni,knj->kij", basis, basis)
        uv = np.stack([uu[gi], vv[gi]], axis=-1) * wt[..., None]
        rhs = np.einsum("kni,knc->kic", basis, uv)
        quad = np.einsum("knc,knc->kc", uv, uv)
        coef, s2c, cvar = _solve(a_mat, rhs, quad, counts.astype(np.float64), m, counts >= need)
        grads[centre] = coef[:, 1:3, :] / spacing
        s2[centre] = s2c
        gvar[centre] = cvar[:, 1:3] / spacing ** 2
    return grads, s2, gvar


def strain_fit(field, *, window=5, order=1, kind="small", min_valid=0.5):
    """Strains and their fit standard deviations; see :func:`strain_from_field`.

    Returns
    -------
    strains : (3, N) ndarray
        eps_xx, eps_yy, gamma_xy (1).
    stds : (3, N) ndarray
        Their standard deviations from the local fit residuals (1).
    """
    if not isinstance(field, DicField):
        raise TypeError(f"field: expected a DicField, got {type(field).__name__}")
    _check_options(window, order, kind, min_valid)
    # subtract one global plane first: it keeps the local sums of squares small and exact
    ok = field.valid & np.isfinite(field.u) & np.isfinite(field.v) \
        & np.isfinite(field.x) & np.isfinite(field.y)
    base = np.zeros((2, 3))
    uu, vv = field.u.copy(), field.v.copy()
    if ok.sum() >= 3:
        xm, ym = field.x[ok].mean(), field.y[ok].mean()
        design = np.column_stack([np.ones(ok.sum()), field.x[ok] - xm, field.y[ok] - ym])
        sol, *_ = np.linalg.lstsq(design, np.column_stack([field.u[ok], field.v[ok]]), rcond=None)
        base = sol.T
        uu = field.u - (base[0, 0] + base[0, 1] * (field.x - xm) + base[0, 2] * (field.y - ym))
        vv = field.v - (base[1, 0] + base[1, 1] * (field.x - xm) + base[1, 2] * (field.y - ym))
    dx, dy = field_spacing(field)
    if field.grid_shape is not None and _regular(field, dx, dy):
        grads, s2, gvar = _grid_fit(field, window, order, min_valid, dx, dy, uu, vv)
    else:
        grads, s2, gvar = _scattered_fit(field, window, order, min_valid, math.sqrt(dx * dy), uu, vv)
    # grads[:, d, c]: derivative along d (0 = x, 1 = y) of component c (0 = u, 1 = v)
    ux = grads[:, 0, 0] + base[0, 1]
    uy = grads[:, 1, 0] + base[0, 2]
    vx = grads[:, 0, 1] + base[1, 1]
    vy = grads[:, 1, 1] + base[1, 2]
    if kind == "small":
        exx, eyy, gxy = ux, vy, uy + vx
    else:
        exx = ux + 0.5 * (ux * ux + vx * vx)
        eyy = vy + 0.5 * (uy * uy + vy * vy)
        gxy = uy + vx + ux * uy + vx * vy
    # first-order variances; u and v noise taken as independent
    sxx = np.sqrt(s2[:, 0] * gvar[:, 0])
    syy = np.sqrt(s2[:, 1] * gvar[:, 1])
    sxy = np.sqrt(s2[:, 0] * gvar[:, 1] + s2[:, 1] * gvar[:, 0])
    return np.vstack([exx, eyy, gxy]), np.vstack([sxx, syy, sxy])


def strain_from_field(field, *, window=5, order=1, kind="small", min_valid=0.5, return_std=False):
    """Strain by local polynomial fits of the displacement (virtual strain gauge).

    Parameters
    ----------
    field : DicField
        Displacements; regular grids use the fast path, scattered points a
        local least-squares fit over neighbours within a radius.
    window : int
        Points per side of the square fitting window (odd, >= 3). For
        scattered points the neighbours lie within ``window * s / sqrt(pi)``
        of the centre (``s`` the median neighbour spacing), a disc of the
        window's area.
    order : {1, 2}
        Plane or quadratic fit of u and v.
    kind : {"small", "green"}
        Small strain, or Green-Lagrange strain (engineering shear 2 E_xy) from
        the same gradients; positions are taken as reference positions.
    min_valid : float
        Fraction of the window's points that must be valid; the centre must
        be valid too. Elsewhere the strain is NaN, so a hole widens by at
        most half a window.
    return_std : bool
        Also return the standard deviations of the three strains.

    Returns
    -------
    exx, eyy, gxy : (N,) ndarray
        Strains in the specimen frame (1); gxy is the engineering shear.
    exx_std, eyy_std, gxy_std : (N,) ndarray
        Only with ``return_std``: first-order standard deviations from the
        local fit residuals (1).

    Notes
    -----
    On a grid the normal equations of every window are assembled with a few
    correlations of the validity mask and of the masked displacements, so
    holes and edges need no special case. The fit residual includes any
    displacement curvature the polynomial cannot follow, so the standard
    deviation is an upper bound where strain varies within the window. The
    virtual strain gauge size is :func:`vsg_size`.

    References
    ----------
    Jones & Iadicola (eds.), *A Good Practices Guide for Digital Image
    Correlation*, iDICs 2018, doi:10.32720/idics/gpg.ed1 (strain calculation
    and the virtual strain gauge).
    """
    strains, stds = strain_fit(field, window=window, order=order, kind=kind, min_valid=min_valid)
    if return_std:
        return (*strains, *stds)
    return tuple(strains)


def vsg_attrs(field: DicField, window: int):
    """Good Practices Guide reporting quantities of a strain computed on ``field``.

    The step in pixels comes from the field's attributes, or from its spacing
    (in px, or in mm over ``pixel_size``); the VSG in mm from the VSG in pixels
    times ``pixel_size``, or for a field in mm without a pixel size from the
    spacing in mm. An unknown subset counts as zero and is said so.
    """
    attrs = field.attrs
    subset = attrs.get("subset")
    pixel_size = attrs.get("pixel_size")
    dx, dy = field_spacing(field)
    spacing = math.sqrt(dx * dy)
    step = attrs.get("step")
    if step is None:
        step = spacing if field.units == "px" else (spacing / pixel_size if pixel_size else None)
    out = {"strain_window": int(window), "step": step, "subset": subset}
    if step is not None:
        out["vsg_px"] = (window - 1) * step + (subset or 0)
        if pixel_size:
            out["vsg_mm"] = out["vsg_px"] * pixel_size
        elif field.units == "mm":
            out["vsg_mm"] = (window - 1) * spacing
        else:
            out["vsg_mm"] = None
    else:
        out["vsg_px"] = None
        out["vsg_mm"] = (window - 1) * spacing
    if not subset:
        out["vsg_note"] = "subset size unknown: the VSG covers the strain window only"
    return out
