"""The strain step: cyclic strain ranges from a table, two states, a load series or images."""

from __future__ import annotations

import dataclasses
import math
from numbers import Real

import numpy as np

from .._bounds import check_pixel_size, check_strain
from ..dic import (DEFAULT_STEP, DEFAULT_SUBSET, DEFAULT_WINDOW, DicField, correlate, ranges_from_displacement,
                   ranges_from_series, ranges_from_states, ranges_from_strain_table)
from ..errors import ArgumentError
from ._labels import strain_dataset

__all__ = ["strain_ranges"]

_COMPUTED = ("check the coordinate units (mm or px), pixel_size and that the fields hold "
             "displacements u, v in those units")


def _field(value, parameter):
    if not isinstance(value, DicField):
        raise ArgumentError(parameter, f"expected a fusion.dic.DicField (fusion.io.read_dic_field reads one), "
                            f"got {type(value).__name__}")
    return value


def _positive(value, parameter, what):
    if isinstance(value, bool) or not isinstance(value, Real) or not (math.isfinite(value) and value > 0):
        raise ArgumentError(parameter, f"expected {what}, got {value!r}")
    return float(value)


def _loads(loads, n, parameter="loads"):
    a = np.asarray(loads, dtype=np.float64).ravel()
    if a.size != n or not np.all(np.isfinite(a)) or np.ptp(a) <= 0:
        raise ArgumentError(parameter, f"expected {n} finite loads, at least two of them different, "
                            f"one per state; got {loads!r}")
    return a


def _scaled(r, factor):
    """Ranges and their standard deviations times ``factor`` (two states at other loads than the cycle's)."""
    if factor == 1.0:
        return r
    kw = {n: np.asarray(getattr(r, n)) * factor for n in ("exx", "eyy", "gxy", "exx_std", "eyy_std", "gxy_std")}
    attrs = dict(r.attrs, load_scaling=f"ranges scaled by {factor:.6g}: the load range over the span of the "
                                       "two states' loads")
    return dataclasses.replace(r, attrs=attrs, **kw)


def _pair_factor(loads, load_range):
    """Load range of the cycle over the span of two states (1 when either is unknown)."""
    if loads is None or load_range is None:
        return 1.0
    a = _loads(loads, 2)
    return _positive(load_range, "load_range", "a positive peak-to-peak load") / float(a[1] - a[0])


def strain_ranges(*, table=None, states=None, series=None, images=None, loads=None, load_range=None,
                  window=None, order=1, noise=None, pixel_size=None, subset=DEFAULT_SUBSET,
                  step=DEFAULT_STEP, region=None):
    """Cyclic strain ranges on the correlation grid, labelled, from one kind of correlation data.

    Give exactly one of ``table``, ``states``, ``series`` or ``images`` (the keys of a run's
    ``[run.dic]`` table).

    Parameters
    ----------
    table : DicField
        Peak-to-peak strain ranges given directly (``exx``, ``eyy``, ``gxy`` of the field,
        dimensionless plain strain).
    states : (DicField, DicField)
        Displacement fields at minimum and maximum load, on the same points.
    series : sequence of DicField
        Displacement fields at three or more loads (``loads``): least-squares slope times
        ``load_range``.
    images : sequence of (H, W) array_like
        Speckle images, the reference (minimum load) first: correlated here
        (:func:`fusion.dic.correlate`). One pair gives the ranges of the displacement
        between them; three or more images a load series.
    loads : (K,) array_like, optional
        Load of each state, series entry or image (any unit, that of ``load_range``). With
        two states or images and ``load_range``, the ranges are scaled to the cycle's range.
    load_range : float, optional
        Peak-to-peak load of the infrared run (``attrs["load_range"]`` of
        :func:`fusion.lockin_maps`); default for a series: the span of ``loads``.
    window : int, optional
        Strain window in points (default 7, as the config's ``strain_window``; for a table,
        the window it was computed with, default 1 = unknown).
    order : int
        Polynomial order of the strain fit (1 or 2).
    noise : float or array_like, optional
        Known standard deviations of a table (see :func:`fusion.dic.ranges_from_strain_table`).
    pixel_size : float, optional
        Images: mm of specimen per image pixel (coordinates then in mm, else in px).
    subset, step : int
        Images: subset size and grid step in px.
    region : (x0, y0, x1, y1) or (H, W) mask, optional
        Images: region of interest, (column, row) px, or a mask (bool, 0/1, 0/255).

    Returns
    -------
    xarray.Dataset
        On dims ``(row, col)`` (a grid, first row at the top) or ``(point,)``, with the
        specimen-frame coordinates ``x`` and ``y`` (mm or pixel, see ``coordinate_units``):
        ``delta_eps_xx``, ``delta_eps_yy``, ``delta_gamma_xy`` and their ``_std``
        (dimensionless, with the metrology attributes of each map), ``valid``,
        ``edge_distance``, and for displacement data ``delta_u``, ``delta_v``: the
        displacement range used for motion compensation (:func:`fusion.motion_field`).
        ``attrs`` hold the strain settings and reporting quantities (VSG, resolution,
        noise floor, method).

    Raises
    ------
    ArgumentError
        Not exactly one kind of data; strains outside the plausible range of a strain range
        (microstrain, percent, mixed units); a pixel size in metres.

    Notes
    -----
    The same computation as a run's strain step (``fusion run``): the functions of
    :mod:`fusion.dic` with the run's settings. Ranges are peak-to-peak and signed (max
    load minus min load), specimen frame (x right, y up), engineering shear.

    Examples
    --------
    >>> import numpy as np, fusion
    >>> from fusion.dic import DicField
    >>> x, y = np.meshgrid(np.arange(10.0), -np.arange(8.0))
    >>> f = DicField(x=x.ravel(), y=y.ravel(), u=0 * x.ravel(), v=0 * x.ravel(),
    ...              exx=np.full(80, 1e-3), eyy=np.full(80, -3e-4), gxy=np.zeros(80),
    ...              grid_shape=(8, 10))
    >>> ds = fusion.strain_ranges(table=f, noise=2e-5)
    >>> float(ds["delta_eps_xx"].mean()), ds["delta_eps_xx"].attrs["units"]
    (0.001, '1')
    """
    given = [k for k, v in (("table", table), ("states", states), ("series", series), ("images", images))
             if v is not None]
    if len(given) != 1:
        raise ArgumentError("strain_ranges", f"give exactly one of table, states, series or images; got "
                            f"{given or 'none'}")
    w = DEFAULT_WINDOW if window is None else window
    if table is not None:
        f = _field(table, "table")
        if f.exx is None or f.eyy is None or f.gxy is None:
            raise ArgumentError("table", "the field holds no strain ranges (exx, eyy, gxy); for "
                                "displacements use states=, series= or images=")
        ok = f.valid
        check_strain([f.exx[ok], f.eyy[ok], f.gxy[ok]], "table")
        r = ranges_from_strain_table(f, noise=noise, window=1 if window is None else window)
        return strain_dataset(r)
    if states is not None:
        if len(states) != 2:
            raise ArgumentError("states", f"expected (field at minimum load, field at maximum load), got "
                                f"{len(states)} fields")
        fmin, fmax = _field(states[0], "states[0]"), _field(states[1], "states[1]")
        factor = _pair_factor(loads, load_range)
        r = _scaled(ranges_from_states(fmin, fmax, window=w, order=order), factor)
        disp = ((fmax.u - fmin.u) * factor, (fmax.v - fmin.v) * factor)
        return _checked(r, "states", disp)
    if series is not None:
        fields = [_field(f, f"series[{i}]") for i, f in enumerate(series)]
        if loads is None:
            raise ArgumentError("loads", "a series needs the load of each state")
        return _series(fields, _loads(loads, len(fields)), load_range, w, order, "series")

    imgs = [np.asarray(im) for im in images]
    if len(imgs) < 2:
        raise ArgumentError("images", f"expected the reference image and at least one loaded image, got "
                            f"{len(imgs)}")
    if pixel_size is not None:
        _positive(pixel_size, "pixel_size", "mm of specimen per image pixel")
        check_pixel_size(pixel_size, "pixel_size")      # before the correlation, not after it
    fields = []
    for i, img in enumerate(imgs[1:], 1):
        res = correlate(imgs[0], img, subset=subset, step=step, region=region)
        ok = np.asarray(res.converged).mean() if np.size(res.converged) else 0.0
        if ok < 0.5:
            raise ArgumentError(f"images[{i}]", f"correlation with the reference converged at only "
                                f"{100 * ok:.0f} % of the points; check the images, subset and region")
        fields.append(res.to_field(pixel_size=pixel_size))
    if len(fields) == 1:
        factor = _pair_factor(loads, load_range)
        r = _scaled(ranges_from_displacement(fields[0], window=w, order=order), factor)
        return _checked(r, "images", (fields[0].u * factor, fields[0].v * factor))
    if loads is None:
        raise ArgumentError("loads", "three or more images need the load of each image")
    zero = dataclasses.replace(fields[0], u=np.zeros_like(fields[0].u), v=np.zeros_like(fields[0].v),
                               u_std=None, v_std=None)
    return _series([zero] + fields, _loads(loads, len(imgs)), load_range, w, order, "images")


def _series(fields, loads, load_range, window, order, parameter):
    lr = float(loads.max() - loads.min()) if load_range is None else \
        _positive(load_range, "load_range", "a positive peak-to-peak load")
    r = ranges_from_series(fields, loads, load_range=lr, window=window, order=order)
    slope_u = np.polyfit(loads, np.stack([f.u for f in fields]), 1)[0] * lr
    slope_v = np.polyfit(loads, np.stack([f.v for f in fields]), 1)[0] * lr
    return _checked(r, parameter, (slope_u, slope_v))


def _checked(r, parameter, displacement):
    ok = np.asarray(r.valid, bool)
    check_strain([np.asarray(r.exx)[ok], np.asarray(r.eyy)[ok], np.asarray(r.gxy)[ok]], parameter, fix=_COMPUTED)
    return strain_dataset(r, displacement)
