"""Strain from a displacement field by local polynomial fits (virtual strain gauge)."""

from __future__ import annotations

import math
from numbers import Integral, Real

import numpy as np

from ._field import DicField
from ._gridfit import edge_distance_grid, exponents, grid_fit, lag_correlation

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
    valid = (field.valid & np.isfinite(uu) & np.isfinite(vv)).reshape(ny, nx)
    known = field.u_std is not None and field.v_std is not None
    rho = lag_correlation(window // 2, field.attrs.get("subset"), field.attrs.get("step"))
    coef, var, fit_order = grid_fit(
        valid, uu.reshape(ny, nx), vv.reshape(ny, nx), window=window, order=order,
        min_valid=min_valid, lag_rho=rho,
        u_std=field.u_std.reshape(ny, nx) if known else None,
        v_std=field.v_std.reshape(ny, nx) if known else None)
    # coefficients are per grid step; divide by the spacing for derivatives
    scale = np.array([dx, dy])
    grads = coef / scale[None, :, None]
    gvar = var / (scale[None, :, None] ** 2)
    return grads, gvar, fit_order


def _scattered_fit(field, window, order, min_valid, spacing, uu, vv):
    from scipy.spatial import cKDTree

    ok = field.valid & np.isfinite(uu) & np.isfinite(vv) & np.isfinite(field.x) & np.isfinite(field.y)
    npts = field.size
    exps = exponents(order)
    m = len(exps)
    grads = np.full((npts, 2, 2), np.nan)
    var = np.full((npts, 2, 2), np.nan)
    fit_order = np.zeros(npts, np.int8)
    src = np.flatnonzero(ok)
    if src.size < m + 2:
        return grads, var, fit_order
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
        # white noise: variance of slope d of component c is cvar[d] s2[c]
        var[centre] = cvar[:, 1:3, None] * s2c[:, None, :] / spacing ** 2
        fit_order[centre] = np.where(np.isfinite(s2c[:, 0]), order, 0)
    return grads, var, fit_order


def strain_fit(field, *, window=5, order=1, kind="small", min_valid=0.5):
    """Strains, their standard deviations and fit details; see :func:`strain_from_field`.

    Returns
    -------
    strains : (3, N) ndarray
        eps_xx, eps_yy, gamma_xy (1).
    stds : (3, N) ndarray
        Their standard deviations (1).
    details : dict
        ``fit_order`` (N,) int8 (0 where no fit), ``edge_distance`` (N,) distance to
        the nearest edge of the valid data (field units), ``noise_model`` (str).
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
    gridded = field.grid_shape is not None and _regular(field, dx, dy)
    if gridded:
        grads, var, fit_order = _grid_fit(field, window, order, min_valid, dx, dy, uu, vv)
    else:
        grads, var, fit_order = _scattered_fit(field, window, order, min_valid, math.sqrt(dx * dy),
                                               uu, vv)
    edge = data_edge_distance(field, ok)
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
    sxx = np.sqrt(var[:, 0, 0])
    syy = np.sqrt(var[:, 1, 1])
    sxy = np.sqrt(var[:, 1, 0] + var[:, 0, 1])
    details = {"fit_order": fit_order, "edge_distance": edge,
               "noise_model": _noise_model(field, gridded)}
    return np.vstack([exx, eyy, gxy]), np.vstack([sxx, syy, sxy]), details


def data_edge_distance(field, valid):
    """Distance of each point to the nearest edge of the points marked ``valid`` (field units)."""
    valid = np.asarray(valid, dtype=bool)
    try:
        dx, dy = field_spacing(field)
    except ValueError:
        return np.full(field.size, np.nan)
    if field.grid_shape is not None and _regular(field, dx, dy):
        return edge_distance_grid(valid.reshape(field.grid_shape), dx, dy).ravel()
    return _scattered_edge_distance(field, valid, math.sqrt(dx * dy))


def _noise_model(field, gridded):
    """One sentence: where the displacement noise and its correlation come from."""
    known = field.u_std is not None and field.v_std is not None
    subset, step = field.attrs.get("subset"), field.attrs.get("step")
    source = ("displacement noise from the correlation residual of each point" if known
              else "displacement noise estimated from the strain-fit residuals")
    if gridded and subset and step:
        corr = (f"neighbours correlated by the overlap of their subsets (subset {subset:g} px, "
                f"step {step:g} px)")
    elif gridded:
        corr = "neighbours taken as uncorrelated (subset and step unknown)"
    else:
        corr = "scattered points taken as uncorrelated"
    return f"{source}; {corr}"


def _scattered_edge_distance(field, ok, spacing):
    """Distance to the nearest invalid point or to the convex hull of the valid points, less
    half a spacing; a concave edge of scattered data is seen only where points mark it invalid."""
    from scipy.spatial import ConvexHull, QhullError, cKDTree

    out = np.full(field.size, np.nan)
    pts = np.column_stack([field.x, field.y])
    good = ok & np.all(np.isfinite(pts), axis=1)
    if good.sum() < 3:
        return out
    d = np.full(good.sum(), np.inf)
    bad = ~ok & np.all(np.isfinite(pts), axis=1)
    if bad.any():
        d = cKDTree(pts[bad]).query(pts[good])[0] - 0.5 * spacing
    try:
        hull = ConvexHull(pts[good])
        # facet equations n . x + c <= 0 inside: distance to the nearest facet
        eq = hull.equations
        d_hull = -(pts[good] @ eq[:, :2].T + eq[:, 2]).max(axis=1) + 0.5 * spacing
        d = np.minimum(d, d_hull)
    except QhullError:
        pass
    out[good] = np.maximum(d, 0.0)
    return out


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
        most half a window (with the default 0.5, hardly at all: a point on
        a straight edge keeps more than half its window).
    return_std : bool
        Also return the standard deviations of the three strains.

    Returns
    -------
    exx, eyy, gxy : (N,) ndarray
        Strains in the specimen frame (1); gxy is the engineering shear.
    exx_std, eyy_std, gxy_std : (N,) ndarray
        Only with ``return_std``: standard deviations of the strains from the
        displacement noise (1); see Notes.

    Notes
    -----
    On a grid the normal equations of every window are assembled with a few
    correlations of the validity mask and of the masked displacements. Where
    a point's window is complete the fit has the order asked for; where a
    hole, a mask or the edge of the data cuts it (window >= 5), the fit keeps
    to the valid points and takes the quadratic terms as well, so its slope
    is the derivative at the point (a plane fit to one side would return the
    strain at the centroid of the remaining points, farther from the edge).

    Standard deviation: the covariance of the displacement errors is
    propagated through each point's least-squares slope. The errors' standard
    deviations are the field's ``u_std``/``v_std`` (from
    :func:`fusion.dic.correlate`: Pan et al. 2008) or, without them, are
    estimated from the fit residuals pooled over the window's neighbourhood.
    Neighbours whose subsets overlap (``subset`` and ``step`` in the field's
    attributes) err alike: their correlation is the shared fraction of the
    subsets' area (:func:`fusion.dic._subset_noise.overlap_correlation`);
    ignoring it understates the strain noise two- to fourfold at steps
    below half the subset. Where the displacements scatter more than their
    stated noise explains (the pooled residual of the complete windows), the
    variances are scaled by that ratio, and an edge fit's by its own residual
    ratio as well (its extrapolation toward the edge meets the field's
    curvature). The std describes noise; the smoothing of the strain by the
    subset and the window is its spatial resolution
    (:func:`fusion.dic.strain_transfer`). Scattered points are taken as
    uncorrelated. The virtual strain gauge size is :func:`vsg_size`.

    References
    ----------
    Jones & Iadicola (eds.), *A Good Practices Guide for Digital Image
    Correlation*, iDICs 2018, doi:10.32720/idics/gpg.ed1 (strain calculation,
    the virtual strain gauge, the noise floor).
    B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, "Study on subset size selection
    in digital image correlation for speckle patterns", Optics Express 16(10)
    (2008) 7037-7048 (displacement noise).
    """
    strains, stds, _ = strain_fit(field, window=window, order=order, kind=kind, min_valid=min_valid)
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
