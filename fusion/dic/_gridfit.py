"""Local polynomial fits of a gridded displacement field, with correlated-noise propagation.

Every grid point gets a least-squares polynomial over the valid points of the
``window x window`` points around it. Where that window is complete the fit has
the order asked for; where it is cut by a hole, a mask or the edge of the data,
the fit keeps to the valid points on one side and takes the quadratic terms as
well (when the window allows), so the slope is the derivative at the point and
not at the centroid of the remaining points. The standard deviation of each
slope propagates the covariance of the displacement errors: their standard
deviations (given per point, or estimated from the fit residuals) and the
correlation of neighbours whose subsets overlap.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange
from scipy import ndimage

from ._subset_noise import overlap_correlation

__all__ = ["grid_fit", "exponents", "lag_correlation", "edge_distance_grid"]

_COND_LIMIT = 1e8


def exponents(order):
    """Monomial exponents (p, q) of x^p y^q of a polynomial of the given order."""
    return [(p, d - p) for d in range(order + 1) for p in range(d, -1, -1)]


def lag_correlation(half, subset, step):
    """Correlation of displacement errors at grid lags (rows, cols) of -2h..2h points.

    ``subset`` and ``step`` in px; without them (None) the errors are taken as
    independent (1 at lag 0 only).
    """
    lag = np.arange(-2 * half, 2 * half + 1, dtype=np.float64)
    if not subset or not step:
        out = np.zeros((lag.size, lag.size))
        out[2 * half, 2 * half] = 1.0
        return out
    ll, kk = np.meshgrid(lag, lag, indexing="ij")
    return overlap_correlation((ll * float(step), kk * float(step)), float(subset))


def window_basis(half, order):
    """(m, w, w) values of x^p y^q at window offsets: x = column offset, y = -row offset."""
    k = np.arange(-half, half + 1, dtype=np.float64)
    rows, cols = np.meshgrid(k, k, indexing="ij")
    return np.stack([cols ** p * (-rows) ** q for p, q in exponents(order)])


@njit(cache=True, parallel=True)
def window_covariance(s, points, half, rho, phi):
    """At each grid point of ``points`` (flat indices), the sum over window offsets k, l of
    s(k) s(l) rho(k - l) phi(k) phi(l)^T; (len(points), m, m)."""
    ny, nx = s.shape
    m = phi.shape[0]
    out = np.zeros((points.size, m, m))
    for t in prange(points.size):
        vec = np.empty(m)
        i = points[t] // nx
        j = points[t] % nx
        for a1 in range(-half, half + 1):
            ia = i + a1
            if ia < 0 or ia >= ny:
                continue
            for b1 in range(-half, half + 1):
                jb = j + b1
                if jb < 0 or jb >= nx:
                    continue
                s1 = s[ia, jb]
                if s1 == 0.0:
                    continue
                for q in range(m):
                    vec[q] = 0.0
                for a2 in range(-half, half + 1):
                    ia2 = i + a2
                    if ia2 < 0 or ia2 >= ny:
                        continue
                    for b2 in range(-half, half + 1):
                        jb2 = j + b2
                        if jb2 < 0 or jb2 >= nx:
                            continue
                        r = rho[a1 - a2 + 2 * half, b1 - b2 + 2 * half]
                        s2 = s[ia2, jb2]
                        if r == 0.0 or s2 == 0.0:
                            continue
                        c = r * s2
                        for q in range(m):
                            vec[q] += c * phi[q, a2 + half, b2 + half]
                for p in range(m):
                    fp = s1 * phi[p, a1 + half, b1 + half]
                    for q in range(m):
                        out[t, p, q] += fp * vec[q]
    return out


class _Covariance:
    """``window_covariance`` of every usable point, held compactly: in full at the edge points,
    and at ``interior`` points (complete windows, all of one order) as one complete window's
    matrix times the window's mean of ``s^2`` (exact when ``s`` is uniform there, and ``s``, a
    noise level, varies slowly from point to point)."""

    def __init__(self, s, usable, interior, half, rho, phi):
        w = 2 * half + 1
        self.edge = np.flatnonzero(usable & ~interior)
        self.at_edge = np.full(usable.size, -1, np.intp)
        self.at_edge[self.edge] = np.arange(self.edge.size)
        self.cov = window_covariance(s, self.edge, half, rho, phi)
        self.unit = window_covariance(np.ones((w, w)), np.array([half * w + half], np.intp), half, rho, phi)[0]
        self.scale = ndimage.uniform_filter(s * s, size=w, mode="constant").ravel()

    def quadratic(self, idx, beta):
        """``beta_k^T C_k beta_k`` at points ``idx`` ((K, m) rows ``beta``, m <= the matrices' size)."""
        m = beta.shape[1]
        out = np.empty(idx.size)
        pos = self.at_edge[idx]
        e = pos >= 0
        if e.any():
            b = beta[e]
            out[e] = np.einsum("ki,kij,kj->k", b, self.cov[pos[e], :m, :m], b, optimize=True)
        if not e.all():
            b = beta[~e]
            out[~e] = self.scale[idx[~e]] * np.einsum("ki,ij,kj->k", b, self.unit[:m, :m], b, optimize=True)
        return out

    def trace(self, idx, inv):
        """``trace(inv_k C_k)`` at points ``idx`` ((K, m, m) ``inv``, m <= the matrices' size)."""
        m = inv.shape[1]
        pos = self.at_edge[idx]
        e = pos >= 0
        unit = self.unit[:m, :m]
        if not e.any() and inv.strides[0] == 0:
            # one inverse for every point (complete windows): one trace
            return self.scale[idx] * np.einsum("ij,ji->", inv[0], unit)
        out = np.empty(idx.size)
        if e.any():
            out[e] = np.einsum("kij,kji->k", inv[e], self.cov[pos[e], :m, :m])
        if not e.all():
            out[~e] = self.scale[idx[~e]] * np.einsum("kij,ji->k", inv[~e], unit)
        return out


def _moments(img, half, order):
    """Correlations of ``img`` with every monomial of degree <= ``order`` over the window."""
    k = np.arange(-half, half + 1, dtype=np.float64)
    out = {}
    # x^p y^q = cols^p (-rows)^q is separable: along the rows with (-rows)^q, then along the
    # columns with cols^p (2 w taps per point instead of w^2)
    for q in range(order + 1):
        down = ndimage.correlate1d(img, (-k) ** q, axis=0, mode="constant")
        for p in range(order + 1 - q):
            out[p, q] = ndimage.correlate1d(down, k ** p, axis=1, mode="constant").ravel()
    return out


def _normal(mom, exps, idx):
    """The normal matrices (K, m, m) of the fits at points ``idx`` from the window moments."""
    m = len(exps)
    a = np.empty((idx.size, m, m))
    for i, (pi, qi) in enumerate(exps):
        for j, (pj, qj) in enumerate(exps):
            a[:, i, j] = mom[pi + pj, qi + qj][idx]
    return a


def _inverse(a):
    """Inverses of normal matrices (scaled to unit diagonal first): which are well conditioned,
    and their inverses."""
    d = np.sqrt(np.einsum("kii->ki", a))
    with np.errstate(divide="ignore", invalid="ignore"):
        an = a / (d[:, :, None] * d[:, None, :])
    finite = np.all(np.isfinite(an), axis=(1, 2))
    cond = np.full(a.shape[0], np.inf)
    if finite.any():
        cond[finite] = np.linalg.cond(an[finite])
    good = np.isfinite(cond) & (cond < _COND_LIMIT)
    inv = np.linalg.inv(an[good]) / (d[good][:, :, None] * d[good][:, None, :])
    return good, inv


def _inverses(mom, exps, idx, complete):
    """The well-conditioned fits among ``idx``: [(indices, inverses)] groups. Complete windows
    all have the same matrix (sums of the same monomials over a whole window): one of them is
    inverted for all (a broadcast view, no copy per point)."""
    groups = []
    full = complete[idx]
    if full.any():
        one = idx[full][:1]
        good, inv = _inverse(_normal(mom, exps, one))
        if good[0]:
            groups.append((idx[full], np.broadcast_to(inv, (int(full.sum()),) + inv.shape[1:])))
    rest = idx[~full]
    if rest.size:
        good, inv = _inverse(_normal(mom, exps, rest))
        if good.any():
            groups.append((rest[good], inv))
    return groups


def grid_fit(valid, ug, vg, *, window, order, min_valid, lag_rho, u_std=None, v_std=None,
             edge_quadratic=True):
    """Slopes of u and v per grid point and their variances (unit grid spacing).

    Parameters
    ----------
    valid : (ny, nx) bool ndarray
    ug, vg : (ny, nx) ndarray
        Displacements (anything where not valid).
    window, order, min_valid
        As in :func:`fusion.dic.strain_from_field`.
    lag_rho : (4h+1, 4h+1) ndarray
        Correlation of displacement errors at grid lags (:func:`lag_correlation`).
    u_std, v_std : (ny, nx) ndarray, optional
        Standard deviations of the displacements; without them each point's noise
        is estimated from the fit residuals of its neighbourhood.
    edge_quadratic : bool
        Fit the quadratic terms where the window is incomplete (window >= 5).

    Returns
    -------
    slopes : (N, 2, 2) ndarray
        ``slopes[:, d, c]``: derivative along d (0 = x, 1 = y, per grid step) of
        component c (0 = u, 1 = v); NaN where no fit.
    variances : (N, 2, 2) ndarray
        Their variances.
    fit_order : (N,) int8 ndarray
        Order of each point's fit (0: none).
    """
    ny, nx = valid.shape
    h = window // 2
    w = valid.astype(np.float64)
    ug = np.where(valid, ug, 0.0)
    vg = np.where(valid, vg, 0.0)
    quad_edges = edge_quadratic and window >= 5
    top = 2 if (order == 2 or quad_edges) else 1
    exps = exponents(top)
    m_top = len(exps)
    mom = _moments(w, h, 2 * top)           # the normal matrices take the products of two monomials
    mu, mv = _moments(ug, h, top), _moments(vg, h, top)
    rhs = np.stack([np.column_stack([mu[e] for e in exps]), np.column_stack([mv[e] for e in exps])],
                   axis=-1)
    del mu, mv
    box = np.ones((window, window))
    quad = np.column_stack([ndimage.correlate(ug * ug, box, mode="constant").ravel(),
                            ndimage.correlate(vg * vg, box, mode="constant").ravel()])
    n = mom[0, 0]
    centre = valid.ravel()
    complete = n >= window * window - 0.5
    want = np.where(complete, order, 2 if quad_edges else order)
    want = np.maximum(want, order)
    m_of = {1: 3, 2: 6}
    fit_order = np.zeros(ny * nx, np.int8)
    beta = np.zeros((ny * nx, 2, m_top))    # rows of the inverse for the x and y slopes
    coef = np.full((ny * nx, 2, 2), np.nan)
    ssr = np.full((ny * nx, 2), np.nan)
    trace_ainv_a = np.zeros(ny * nx)          # the fit's parameter count (m), for white noise
    inv_store = {}
    for k in (2, 1):
        m = m_of[k]
        need = np.maximum(min_valid * window * window, m + 2) - 1e-9
        cand = centre & (fit_order == 0) & (want >= k) & (n >= need)
        if k == 1 and order == 1:
            # an edge window too sparse (or too thin) for the quadratic keeps the plane
            cand = centre & (fit_order == 0) & (n >= need)
        groups = _inverses(mom, exps[:m], np.flatnonzero(cand), complete)
        for idx, inv in groups:
            c = np.einsum("kij,kjc->kic", inv, rhs[idx, :m, :])
            fit_order[idx] = k
            beta[idx, 0, :m] = inv[:, 1, :]
            beta[idx, 1, :m] = inv[:, 2, :]
            coef[idx] = c[:, 1:3, :]
            ssr[idx] = np.maximum(quad[idx] - np.einsum("kic,kic->kc", c, rhs[idx, :m, :]), 0.0)
            trace_ainv_a[idx] = m
        if groups:
            inv_store[k] = groups
    usable = fit_order > 0
    interior = usable & complete & (fit_order == order)
    points = np.flatnonzero(usable)
    phi = window_basis(h, top)
    variances = np.full((ny * nx, 2, 2), np.nan)
    if u_std is not None and v_std is not None:
        edge = usable & ~complete
        for comp, sd in ((0, u_std), (1, v_std)):
            sd = np.where(valid & np.isfinite(sd), sd, np.nan)
            fill = np.nanmedian(sd) if np.isfinite(sd).any() else 0.0
            s = np.where(valid, np.where(np.isfinite(sd), sd, fill), 0.0)
            cov = _Covariance(np.ascontiguousarray(s), usable, interior, h, lag_rho, phi)
            for d in (0, 1):
                variances[points, d, comp] = cov.quadratic(points, beta[points, d])
            # an edge fit extrapolates toward the edge: where its residual exceeds what the
            # noise explains (the field curves more than the polynomial follows), the
            # variance is scaled by that ratio (the Birge ratio squared)
            expected = ndimage.correlate(s * s, box, mode="constant").ravel()
            for groups in inv_store.values():
                for idx, inv in groups:
                    expected[idx] -= cov.trace(idx, inv)
            # errors the residual of the correlation does not see (interpolation bias of the
            # pattern, shape-function misfit) scatter the displacements beyond the stated
            # noise: where the complete windows' pooled residual exceeds what the noise
            # explains, every variance is scaled by that ratio
            inner = usable & complete & (expected > 0)
            pooled = (float(np.sum(ssr[inner, comp]) / np.sum(expected[inner]))
                      if inner.any() else 1.0)
            scale = max(pooled, 1.0)
            with np.errstate(invalid="ignore", divide="ignore"):
                ratio = np.where(edge & (expected > 0), ssr[:, comp] / (scale * expected), 1.0)
            variances[:, :, comp] *= scale * np.maximum(ratio, 1.0)[:, None]
    else:
        cov1 = _Covariance(np.ascontiguousarray(w), usable, interior, h, lag_rho, phi)
        # residual degrees of freedom of correlated errors: E[SSR] = sigma^2 (n - tr(A^-1 M))
        dof = np.zeros(ny * nx)
        for groups in inv_store.values():
            for idx, inv in groups:
                dof[idx] = n[idx] - cov1.trace(idx, inv)
        # pooled over the window's neighbourhood: a few degrees of freedom per point are
        # too few when neighbours are strongly correlated
        okp = usable & (dof > 0)
        pool_dof = ndimage.correlate(np.where(okp, dof, 0.0).reshape(ny, nx), box, mode="constant")
        for comp in (0, 1):
            pool_ssr = ndimage.correlate(np.where(okp, ssr[:, comp], 0.0).reshape(ny, nx), box,
                                         mode="constant")
            with np.errstate(invalid="ignore", divide="ignore"):
                s2 = (pool_ssr / pool_dof).ravel()
            for d in (0, 1):
                variances[points, d, comp] = s2[points] * cov1.quadratic(points, beta[points, d])
    variances[~usable] = np.nan
    return coef, variances, fit_order


def edge_distance_grid(valid, dx, dy):
    """Distance of every grid point to the nearest edge of the valid data (units of dx, dy).

    The edge lies half-way between a valid point and an invalid one, or half a
    spacing beyond the outermost points of the grid; NaN at invalid points.
    """
    padded = np.pad(valid, 1, constant_values=False)
    dist = ndimage.distance_transform_edt(padded, sampling=(dy, dx))[1:-1, 1:-1]
    # from a point to the nearest invalid node, minus the half spacing to the edge between
    out = dist - 0.5 * min(dx, dy)
    return np.where(valid, np.maximum(out, 0.0), np.nan)
