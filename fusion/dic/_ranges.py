"""Cyclic strain ranges (peak-to-peak, max load minus min load) and their noise."""

from __future__ import annotations

import math
from numbers import Real

import numpy as np

from ._field import DicField, StrainRanges
from ._resolution import resolution_attrs
from ._strain import data_edge_distance, strain_fit, vsg_attrs

__all__ = ["ranges_from_states", "ranges_from_displacement", "ranges_from_series",
           "ranges_from_time_series", "ranges_from_strain_table"]


def _check_field(name, f):
    if not isinstance(f, DicField):
        raise TypeError(f"{name}: expected a DicField, got {type(f).__name__}")


def _same_points(name, a, b):
    """Refuse fields whose points differ: ranges are taken point by point."""
    if a.size != b.size or a.units != b.units or a.grid_shape != b.grid_shape:
        raise ValueError(f"{name}: the fields differ in size, units or grid "
                         f"({a.size}, {a.units!r}, {a.grid_shape!r}) vs "
                         f"({b.size}, {b.units!r}, {b.grid_shape!r}); interpolate one onto "
                         "the other's points first")
    span = max(np.nanmax(np.abs(a.x)) if a.size else 0.0, np.nanmax(np.abs(a.y)) if a.size else 0.0, 1.0)
    for c in ("x", "y"):
        pa, pb = getattr(a, c), getattr(b, c)
        both = np.isfinite(pa) & np.isfinite(pb)
        if not np.array_equal(np.isfinite(pa), np.isfinite(pb)) \
                or np.any(np.abs(pa[both] - pb[both]) > 1e-9 * span):
            raise ValueError(f"{name}: the fields have different {c} coordinates; ranges are "
                             "taken point by point, so both must hold the same points")


def _noise_floor(stds, valid):
    out = []
    for s in stds:
        ok = valid & np.isfinite(s)
        out.append(float(np.median(s[ok])) if ok.any() else float("nan"))
    return tuple(out)


def _result(field, window, ranges, stds, valid, method, quadrature=None, extra=None, details=None):
    valid = valid & np.all(np.isfinite(ranges), axis=0)
    ranges = np.where(valid, ranges, np.nan)
    stds = np.where(valid, stds, np.nan)
    attrs = vsg_attrs(field, window)
    attrs.update(noise_floor=_noise_floor(stds, valid), method=method, units_strain="1",
                 pixel_size=field.attrs.get("pixel_size"))
    # imported strain tables (window 1) come from settings we do not know: no resolution claimed
    if attrs.get("step") and window >= 3:
        attrs.update(resolution_attrs(subset=attrs.get("subset") or 0, step=float(attrs["step"]),
                                      window=int(window), pixel_size=attrs.get("pixel_size")))
    if details is not None:
        attrs["noise_model"] = details["noise_model"]
        order = details["fit_order"]
        attrs["edge_fit_points"] = int(np.count_nonzero(valid & (order > details["order"])))
        attrs["edge_fit"] = ("where the strain window is cut by a hole, a mask or the edge of the data, "
                             "the fit keeps to the valid points and adds the quadratic terms, so its "
                             "slope is the derivative at the point; its standard deviation is larger")
    attrs.update(extra or {})
    q = {}
    if quadrature is not None:
        quadrature = np.where(valid, quadrature, np.nan)
        q = dict(exx_quadrature=quadrature[0], eyy_quadrature=quadrature[1],
                 gxy_quadrature=quadrature[2])
    return StrainRanges(x=field.x, y=field.y, units=field.units, exx=ranges[0], eyy=ranges[1],
                        gxy=ranges[2], exx_std=stds[0], eyy_std=stds[1], gxy_std=stds[2],
                        valid=valid, grid_shape=field.grid_shape, attrs=attrs,
                        edge_distance=data_edge_distance(field, valid), **q)


def _difference_noise(field_min, field_max):
    """Noise of max minus min: from the fields that carry it, as independent errors."""
    parts = [f for f in (field_min, field_max) if f.u_std is not None and f.v_std is not None]
    if not parts:
        return None, None
    u = np.sqrt(sum(np.asarray(f.u_std, dtype=np.float64) ** 2 for f in parts))
    v = np.sqrt(sum(np.asarray(f.v_std, dtype=np.float64) ** 2 for f in parts))
    return u, v


def ranges_from_states(field_min, field_max, *, window=5, order=1, kind="small", min_valid=0.5):
    """Strain ranges from the displacement fields at minimum and maximum load.

    Parameters
    ----------
    field_min, field_max : DicField
        Displacements (from one reference state) at the two load extremes,
        on the same points.
    window, order, kind, min_valid
        As in :func:`strain_from_field`.

    Returns
    -------
    StrainRanges
        ``d eps = eps(max) - eps(min)`` per point (1), with standard deviations.

    Notes
    -----
    Small strain is linear in the displacement, so the range is the strain of
    the displacement difference. Its standard deviation is the image noise
    propagated through the local fit (:func:`fusion.dic.strain_from_field`):
    the displacement noise of each point, and the correlation of neighbours
    whose subsets overlap (from the ``subset`` and ``step`` attributes).
    The displacement noise is the fields' own ``u_std``/``v_std`` where they
    carry it (from :func:`fusion.dic.correlate`; the two fields' errors are
    taken as independent, which overstates the noise by up to sqrt(2) when
    both were correlated against one reference image: correlate the maximum
    against the minimum instead), otherwise it is estimated from the fit
    residuals, which then also hold any displacement curvature the fit does
    not follow. It describes noise only: the smoothing of the strain by the
    subset and the window is stated by the spatial-resolution attributes.
    Green-Lagrange ranges subtract the two strains and add their variances.
    """
    _check_field("field_min", field_min)
    _check_field("field_max", field_max)
    _same_points("field_max", field_min, field_max)
    valid = field_min.valid & field_max.valid
    if kind == "small":
        u_std, v_std = _difference_noise(field_min, field_max)
        diff = DicField(x=field_max.x, y=field_max.y, u=field_max.u - field_min.u,
                        v=field_max.v - field_min.v, valid=valid, grid_shape=field_max.grid_shape,
                        units=field_max.units, attrs=field_max.attrs, u_std=u_std, v_std=v_std)
        ranges, stds, details = strain_fit(diff, window=window, order=order, kind=kind,
                                           min_valid=min_valid)
    else:
        e1, s1, details = strain_fit(field_max, window=window, order=order, kind=kind,
                                     min_valid=min_valid)
        e0, s0, _ = strain_fit(field_min, window=window, order=order, kind=kind, min_valid=min_valid)
        ranges, stds = e1 - e0, np.hypot(s1, s0)
    details["order"] = order
    return _result(field_max, window, ranges, stds, valid,
                   f"two states (max minus min load), {kind} strain, order-{order} fit",
                   details=details)


def ranges_from_displacement(field, *, window=5, order=1, kind="small", min_valid=0.5):
    """Strain ranges from one displacement field taken from minimum to maximum load.

    Parameters
    ----------
    field : DicField
        Displacements of the state at maximum load measured from the state at minimum
        load, e.g. one speckle image pair correlated by :func:`fusion.dic.correlate`
        (reference image at minimum load) and turned into the specimen frame by
        :meth:`~fusion.dic.CorrelationResult.to_field`.
    window, order, kind, min_valid
        As in :func:`strain_from_field`.

    Returns
    -------
    StrainRanges
        ``d eps`` per point (1), with standard deviations.

    Notes
    -----
    The same as :func:`ranges_from_states` with the minimum-load state as the reference
    (zero displacement, no noise of its own): the field's own ``u_std``/``v_std`` carry
    the noise of the pair.
    """
    _check_field("field", field)
    reference = DicField(x=field.x, y=field.y, u=np.zeros_like(field.u), v=np.zeros_like(field.v),
                         valid=field.valid, grid_shape=field.grid_shape, units=field.units,
                         attrs=field.attrs)
    return ranges_from_states(reference, field, window=window, order=order, kind=kind,
                              min_valid=min_valid)


def _state_strains(fields, window, order, kind, min_valid):
    for k, f in enumerate(fields):
        _check_field(f"fields[{k}]", f)
        if k:
            _same_points(f"fields[{k}]", fields[0], f)
    out = np.empty((len(fields), 3, fields[0].size))
    for k, f in enumerate(fields):
        out[k] = strain_fit(f, window=window, order=order, kind=kind, min_valid=min_valid)[0]
    return out


def _weighted_lsq(design, values, weights):
    """Per-point weighted least squares: coefficients and their standard deviations.

    design (K, P); values (K, C, N); weights (K, N) of 0/1. Returns coef (P, C, N),
    std (P, C, N), dof (N,).
    """
    a = np.einsum("kn,ki,kj->nij", weights, design, design)
    b = np.einsum("kn,ki,kcn->nic", weights, design, np.nan_to_num(values))
    n = weights.sum(axis=0)
    p = design.shape[1]
    coef = np.full((p, values.shape[1], values.shape[2]), np.nan)
    std = np.full_like(coef, np.nan)
    ok = n >= p + 1
    with np.errstate(all="ignore"):
        cond = np.full(n.shape, np.inf)
        if ok.any():
            cond[ok] = np.linalg.cond(a[ok])
    ok &= cond < 1e10
    if ok.any():
        ainv = np.linalg.inv(a[ok])
        c = np.einsum("nij,njc->nic", ainv, b[ok])  # (n, P, C)
        fitted = np.einsum("ki,nic->kcn", design, c)
        resid = (np.nan_to_num(values[:, :, ok]) - fitted) * weights[:, None, ok]
        s2 = np.sum(resid ** 2, axis=0) / (n[ok] - p)  # (C, n)
        diag = np.einsum("nii->ni", ainv)  # (n, P)
        coef[:, :, ok] = np.transpose(c, (1, 2, 0))
        std[:, :, ok] = np.sqrt(diag.T[:, None, :] * s2[None, :, :])
    return coef, std, ok


def _finite_vector(name, value, n=None):
    a = np.asarray(value, dtype=np.float64)
    if a.ndim != 1 or (n is not None and a.size != n) or not np.all(np.isfinite(a)):
        want = f"{n} finite values" if n is not None else "finite values"
        raise ValueError(f"{name}: expected a 1-D array of {want}, got {value!r}")
    return a


def ranges_from_series(fields, loads, *, load_range, window=5, order=1, kind="small",
                       min_valid=0.5):
    """Strain ranges from states at several loads: least-squares slope times the load range.

    Parameters
    ----------
    fields : sequence of DicField
        Three or more displacement fields on the same points.
    loads : (K,) array_like
        The load of each state (any unit, e.g. N).
    load_range : float
        Peak-to-peak load of the thermal run, same unit as ``loads``.
    window, order, kind, min_valid
        As in :func:`strain_from_field`.

    Returns
    -------
    StrainRanges
        ``slope * load_range`` per point; the standard deviation is that of
        the slope from the regression residuals, times ``load_range``.

    Notes
    -----
    Assumes a linear elastic response over the load span. A point enters the
    fit where at least three states are valid there.
    """
    fields = list(fields)
    if len(fields) < 3:
        raise ValueError(f"fields: expected three or more states, got {len(fields)}; "
                         "with two use ranges_from_states")
    loads = _finite_vector("loads", loads, len(fields))
    if np.ptp(loads) <= 0:
        raise ValueError(f"loads: expected at least two different loads, got {loads.tolist()!r}")
    if isinstance(load_range, bool) or not isinstance(load_range, Real) \
            or not (math.isfinite(load_range) and load_range > 0):
        raise ValueError(f"load_range: expected a positive peak-to-peak load, got {load_range!r}")
    strains = _state_strains(fields, window, order, kind, min_valid)
    weights = np.all(np.isfinite(strains), axis=1).astype(np.float64)
    for k, f in enumerate(fields):
        weights[k] *= f.valid
    centre = loads.mean()
    scale = max(float(np.max(np.abs(loads - centre))), 1e-300)
    design = np.column_stack([np.ones(loads.size), (loads - centre) / scale])
    coef, std, ok = _weighted_lsq(design, strains, weights)
    ranges = coef[1] / scale * load_range
    stds = std[1] / scale * load_range
    scatter = _fit_scatter(design, strains, weights, coef, ok)
    return _result(fields[-1], window, ranges, stds, ok,
                   f"least-squares slope over {len(fields)} states times the load range, "
                   f"{kind} strain, order-{order} fit",
                   extra={"load_range": float(load_range), "states": len(fields),
                          **{f"fit_scatter_{c}": v for c, v in zip(("exx", "eyy", "gxy"), scatter)}})


def _fit_scatter(design, strains, weights, coef, ok):
    """Median over the points of the residual standard deviation of the straight-line fit
    (strain, per component; None where no point has more states than fit parameters).

    It tells how far the states stray from a linear response (noise, slip, non-linearity)."""
    dof = weights.sum(axis=0) - design.shape[1]
    use = ok & (dof > 0)
    if not use.any():
        return (None, None, None)
    fitted = np.einsum("ki,icn->kcn", design, coef[:, :, use])
    resid = (np.nan_to_num(strains[:, :, use]) - fitted) * weights[:, None, use]
    sd = np.sqrt(np.sum(resid ** 2, axis=0) / dof[use])
    return tuple(float(np.nanmedian(c)) for c in sd)


def ranges_from_time_series(fields, times, frequency, *, window=5, order=1, kind="small",
                            load=None, min_valid=0.5):
    """Strain ranges by lock-in on a strain time series.

    Parameters
    ----------
    fields : sequence of DicField
        Displacement fields at ``times`` (five or more), same points.
    times : (K,) array_like
        Acquisition times, s.
    frequency : float
        Loading frequency, Hz.
    load : (K,) array_like, optional
        The load at ``times``: its fundamental sets the phase reference.
        Without it the load is taken as ``L0 + (dL/2) cos(2 pi f t)`` (maximum
        at t = 0).
    window, order, kind, min_valid
        As in :func:`strain_from_field`.

    Returns
    -------
    StrainRanges
        In-phase peak-to-peak ranges ``Re C`` (shared convention: a quantity
        ``q0 + Re(C/2 exp(i theta))`` with the load ``L0 + (dL/2) cos theta``),
        their standard deviations, and the quadrature ranges ``Im C``.

    Notes
    -----
    Each point's strain series is fitted by least squares on ``[1, t, cos
    theta, sin theta]`` (linear drift kept out of the amplitude); the standard
    deviation of ``Re C`` follows from the residuals (``sigma sqrt(2/N)`` per
    component for N samples over whole cycles).
    """
    fields = list(fields)
    if len(fields) < 5:
        raise ValueError(f"fields: expected five or more states for a lock-in, got {len(fields)}")
    times = _finite_vector("times", times, len(fields))
    if isinstance(frequency, bool) or not isinstance(frequency, Real) \
            or not (math.isfinite(frequency) and frequency > 0):
        raise ValueError(f"frequency: expected a positive frequency in Hz, got {frequency!r}")
    omega = 2.0 * math.pi * float(frequency)
    tc = times - times.mean()
    span = max(float(np.ptp(times)), 1e-300)
    phase0 = 0.0
    if load is not None:
        lv = _finite_vector("load", load, len(fields))
        d = np.column_stack([np.ones(times.size), tc / span, np.cos(omega * times),
                             np.sin(omega * times)])
        sol, *_ = np.linalg.lstsq(d, lv, rcond=None)
        # c cos(wt) + s sin(wt) = A cos(wt + phi) with A cos phi = c, -A sin phi = s
        phase0 = math.atan2(-sol[3], sol[2])
    theta = omega * times + phase0
    strains = _state_strains(fields, window, order, kind, min_valid)
    weights = np.all(np.isfinite(strains), axis=1).astype(np.float64)
    for k, f in enumerate(fields):
        weights[k] *= f.valid
    design = np.column_stack([np.ones(times.size), tc / span, np.cos(theta), np.sin(theta)])
    coef, std, ok = _weighted_lsq(design, strains, weights)
    # q = q0 + Re(C/2 e^{i theta}) = q0 + (Re C / 2) cos theta - (Im C / 2) sin theta
    in_phase = 2.0 * coef[2]
    quadrature = -2.0 * coef[3]
    return _result(fields[-1], window, in_phase, 2.0 * std[2], ok,
                   f"lock-in on the strain series at {float(frequency):g} Hz, {kind} strain, "
                   f"order-{order} fit", quadrature=quadrature,
                   extra={"frequency": float(frequency), "load_phase_deg": math.degrees(phase0)})


def _table_noise(field, values):
    """White-noise standard deviation from the departure of each point from its neighbours' mean."""
    from scipy import ndimage

    out = []
    valid = field.valid & np.all(np.isfinite(values), axis=0)
    if field.grid_shape is not None:
        w = valid.reshape(field.grid_shape).astype(np.float64)
        n = ndimage.correlate(w, np.ones((3, 3)), mode="constant").ravel()
        for val in values:
            vg = np.where(w > 0, val.reshape(field.grid_shape), 0.0)
            mean = ndimage.correlate(vg, np.ones((3, 3)), mode="constant").ravel() / np.maximum(n, 1)
            out.append((val - mean, n))
    else:
        from scipy.spatial import cKDTree

        idx = np.flatnonzero(valid)
        k = min(9, idx.size)
        _, nb = cKDTree(np.column_stack([field.x[idx], field.y[idx]])).query(
            np.column_stack([field.x[idx], field.y[idx]]), k=k)
        for val in values:
            r = np.full(field.size, np.nan)
            r[idx] = val[idx] - val[idx][nb].mean(axis=1)
            out.append((r, np.full(field.size, float(k))))
    sig = []
    for r, n in out:
        # for white noise var(x0 - mean of n incl. x0) = sigma^2 (1 - 1/n)
        ok = valid & (n >= 4) & np.isfinite(r)
        z = r[ok] / np.sqrt(1.0 - 1.0 / n[ok])
        sig.append(1.4826 * float(np.median(np.abs(z - np.median(z)))) if z.size else float("nan"))
    return sig


def ranges_from_strain_table(field, *, noise=None, window=1):
    """Strain ranges given directly (an imported table of peak-to-peak ranges).

    Parameters
    ----------
    field : DicField
        Points with ``exx``, ``eyy``, ``gxy`` holding ranges (1), specimen frame.
    noise : float, (3,) or (3, N) array_like, optional
        Known standard deviations (per component, or per component and point).
        Default: estimated from the departure of each point from the mean of
        its 3 x 3 neighbourhood (nine nearest neighbours when scattered),
        robustly (median absolute deviation), one value per component.
    window : int
        Strain window (points) the table was computed with, for the VSG
        report; 1 when unknown.

    Returns
    -------
    StrainRanges

    Notes
    -----
    The default estimate assumes spatially white noise. Strain maps smoothed
    by a virtual strain gauge have correlated noise, for which it is low;
    pass ``noise`` when the producer of the table reports it.
    """
    _check_field("field", field)
    if field.exx is None or field.eyy is None or field.gxy is None:
        raise ValueError("field: expected exx, eyy and gxy ranges on the field")
    values = np.vstack([field.exx, field.eyy, field.gxy])
    if noise is None:
        stds = np.asarray(_table_noise(field, values))[:, None] * np.ones((1, field.size))
        how = "estimated from neighbour differences (white-noise assumption)"
    else:
        a = np.asarray(noise, dtype=np.float64)
        try:
            stds = np.broadcast_to(a.reshape(-1, 1) if a.ndim == 1 else a, (3, field.size)).copy()
        except ValueError:
            raise ValueError(f"noise: expected a scalar, 3 values or a (3, N) array, got shape "
                             f"{a.shape!r}") from None
        if not np.all(np.isfinite(stds) & (stds >= 0)):
            raise ValueError("noise: expected finite non-negative standard deviations")
        how = "given"
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 1:
        raise ValueError(f"window: expected a positive number of points, got {window!r}")
    return _result(field, int(window), values, stds, field.valid.copy(),
                   f"imported strain ranges; noise {how}")
