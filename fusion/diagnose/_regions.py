"""Named regions of the IR grid and the region table of a diagnosis."""

from __future__ import annotations

import math
from numbers import Real

import numpy as np

from .._conventions import as_mask

from ._map import NO_DATA, Diagnosis

__all__ = ["region_mask", "region_table", "WHOLE_FIELD"]

#: Name of the first row of every region table.
WHOLE_FIELD = "whole field"


def _int_index(v, name):
    if isinstance(v, bool) or not isinstance(v, Real) or not math.isfinite(v) or v != int(v):
        raise ValueError(f"{name}: expected an integer pixel index, got {v!r}")
    return int(v)


def region_mask(shape, *, rect=None, circle=None, mask=None):
    """Boolean mask of one region of the IR grid.

    Parameters
    ----------
    shape : (int, int)
        ``(Y, X)``: rows and columns of the IR grid.
    rect : (x0, y0, x1, y1), optional
        IR pixel columns ``x0 <= x < x1`` and rows ``y0 <= y < y1`` (inclusive start,
        exclusive end, as in array slicing). Must lie inside the frame.
    circle : (cx, cy, r), optional
        Centre column, centre row and radius in IR pixels; the pixels whose centres lie
        strictly inside the circle (the convention of ``skimage.draw.disk``). The circle
        must lie inside the frame (pixel ``i`` spans ``i - 0.5`` to ``i + 0.5``).
    mask : (Y, X) bool ndarray, optional
        An explicit mask (numbers holding only 0/1 or 0/255 are accepted, as
        :func:`fusion.io.read_image` returns a painted mask).

    Returns
    -------
    (Y, X) bool ndarray

    Raises
    ------
    ValueError
        Not exactly one of ``rect``, ``circle``, ``mask``; a region that is empty or
        reaches outside the frame; a mask of the wrong shape.

    Notes
    -----
    Rows count downward from the top of the IR image, as the camera delivers it (the
    ``y`` dimension of ``result.nc``); they are not the specimen's upward y axis.
    """
    try:
        ny, nx = (int(v) for v in shape)
    except (TypeError, ValueError):
        raise ValueError(f"shape: expected (rows, columns), got {shape!r}") from None
    if ny < 1 or nx < 1:
        raise ValueError(f"shape: expected positive (rows, columns), got {shape!r}")
    given = [k for k, v in (("rect", rect), ("circle", circle), ("mask", mask)) if v is not None]
    if len(given) != 1:
        raise ValueError(f"region_mask: give exactly one of rect, circle, mask; got {given or 'none'}")

    if rect is not None:
        if len(rect) != 4:
            raise ValueError(f"rect: expected (x0, y0, x1, y1), got {rect!r}")
        x0, y0, x1, y1 = (_int_index(v, "rect") for v in rect)
        if x1 <= x0 or y1 <= y0:
            raise ValueError(f"rect {tuple(rect)!r} is empty: need x0 < x1 and y0 < y1 "
                             "(end exclusive)")
        if x0 < 0 or y0 < 0 or x1 > nx or y1 > ny:
            raise ValueError(f"rect {tuple(rect)!r} reaches outside the {nx} x {ny} px frame: "
                             f"need 0 <= x0 < x1 <= {nx} and 0 <= y0 < y1 <= {ny}")
        out = np.zeros((ny, nx), bool)
        out[y0:y1, x0:x1] = True
        return out

    if circle is not None:
        if len(circle) != 3:
            raise ValueError(f"circle: expected (cx, cy, r), got {circle!r}")
        try:
            cx, cy, r = (float(v) for v in circle)
        except (TypeError, ValueError):
            raise ValueError(f"circle: expected three numbers (cx, cy, r), got {circle!r}") from None
        if not (math.isfinite(cx) and math.isfinite(cy) and math.isfinite(r)) or r <= 0:
            raise ValueError(f"circle {tuple(circle)!r}: need a finite centre and a radius > 0")
        if cx - r < -0.5 or cy - r < -0.5 or cx + r > nx - 0.5 or cy + r > ny - 0.5:
            raise ValueError(f"circle {tuple(circle)!r} reaches outside the {nx} x {ny} px frame")
        yy, xx = np.ogrid[0:ny, 0:nx]
        out = (xx - cx) ** 2 + (yy - cy) ** 2 < r * r
        if not out.any():
            raise ValueError(f"circle {tuple(circle)!r} is empty: no pixel centre lies inside it")
        return out

    arr = as_mask(mask, "mask")
    if arr.shape != (ny, nx):
        raise ValueError(f"mask: shape {arr.shape!r} does not match the IR grid {(ny, nx)!r}")
    if not arr.any():
        raise ValueError("mask is empty: it selects no pixel")
    return arr.copy()


def _mean(a):
    return float(np.mean(a, dtype=np.float64)) if a.size else math.nan


def _spread(a):
    return float(np.std(a, dtype=np.float64, ddof=1)) if a.size > 1 else math.nan


def _row(name, sel, measured, diagnosis, predictions):
    n = int(np.count_nonzero(sel))
    m = measured[sel]
    row = {"name": name, "n_pixels": n, "measured_mean": _mean(m), "measured_std": _spread(m),
           "predicted_mean": {}, "predicted_std": {}, "residual_mean": {}, "abs_z_mean": {},
           "probability_mean": {}}
    for i, s in enumerate(diagnosis.sources):
        p = np.asarray(predictions[s])[sel] if np.ndim(predictions[s]) else np.full(n, float(predictions[s]))
        row["predicted_mean"][s] = _mean(p)
        row["predicted_std"][s] = _spread(p)
        row["residual_mean"][s] = _mean(diagnosis.residual[s][sel])
        row["abs_z_mean"][s] = _mean(np.abs(diagnosis.zscore[s][sel]))
        row["probability_mean"][s] = _mean(diagnosis.probability[i][sel])
    layer = diagnosis.source_layer[sel]
    shares = {meaning: (float(np.count_nonzero(layer == v) / n) if n else 0.0)
              for v, meaning in zip(diagnosis.flag_values, diagnosis.flag_meanings) if v != NO_DATA}
    row["category_fraction"] = shares
    if n:
        # Ties go to the first category in flag order (sources before the extra flags).
        winner = max(shares, key=shares.get)
        row["winner"], row["winner_share"] = winner, shares[winner]
    else:
        row["winner"], row["winner_share"] = None, math.nan
    return row


def region_table(measured, diagnosis, predictions, *, regions=None, valid=None):
    """Statistics of the diagnosis over the whole field and over named regions.

    Parameters
    ----------
    measured : (Y, X) ndarray
        Measured ratio dT/T0 (dimensionless), the map given to :func:`diagnose`.
    diagnosis : Diagnosis
        The result of :func:`diagnose` on that map.
    predictions : dict of str to (Y, X) ndarray or float
        The predicted ratios given to :func:`diagnose` (one per ``diagnosis.sources``).
    regions : dict of str to (Y, X) bool ndarray, optional
        Named masks, e.g. from :func:`region_mask`; rows follow the dict's order.
    valid : (Y, X) bool ndarray, optional
        Further restricts every row (the diagnosis' own ``valid`` always applies).

    Returns
    -------
    list of dict
        One row per region, ``"whole field"`` first. Keys: ``name``, ``n_pixels`` (valid
        pixels in the region), ``measured_mean`` and ``measured_std`` (mean and spatial
        standard deviation, ddof=1, of the measured ratio over the pixels -- the spread,
        not the measurement uncertainty), ``predicted_mean`` / ``predicted_std`` /
        ``residual_mean`` / ``abs_z_mean`` / ``probability_mean`` (dicts by source),
        ``category_fraction`` (share of each source-map category), ``winner`` (the
        majority category: a source, ``"indistinguishable"`` or ``"no_source_fits"``)
        and ``winner_share``. Ratios are dimensionless. Statistics of a region without
        valid pixels are NaN and its ``winner`` is None.

    Notes
    -----
    For the true source with correct uncertainties, ``abs_z_mean`` tends to
    ``sqrt(2 / pi) = 0.798``, the mean absolute value of a standard normal variable; a
    clearly larger value says the source, or the stated uncertainties, do not match.
    """
    if not isinstance(diagnosis, Diagnosis):
        raise TypeError(f"diagnosis: expected a Diagnosis from diagnose(), got "
                        f"{type(diagnosis).__name__}")
    m = np.asarray(measured)
    shape = diagnosis.source_layer.shape
    if m.shape != shape:
        raise ValueError(f"measured: shape {m.shape!r} does not match the diagnosis {shape!r}")
    missing = [s for s in diagnosis.sources if s not in predictions]
    if missing:
        raise ValueError(f"predictions: missing source(s) {missing!r} of the diagnosis")
    base = diagnosis.valid & np.isfinite(m)
    if valid is not None:
        v = np.asarray(valid)
        if v.dtype != bool or v.shape != shape:
            raise ValueError(f"valid: expected a {shape!r} boolean mask, got shape {v.shape!r} "
                             f"dtype {v.dtype!r}")
        base &= v
    rows = [_row(WHOLE_FIELD, base, m, diagnosis, predictions)]
    for name, mask in (regions or {}).items():
        if not isinstance(name, str) or not name.strip():
            raise ValueError(f"regions: names must be non-empty strings, got {name!r}")
        if name == WHOLE_FIELD:
            raise ValueError(f"regions: {WHOLE_FIELD!r} is reserved for the first row; "
                             "rename the region")
        mk = np.asarray(mask)
        if mk.dtype != bool or mk.shape != shape:
            raise ValueError(f"regions[{name!r}]: expected a {shape!r} boolean mask, got shape "
                             f"{mk.shape!r} dtype {mk.dtype!r}; build it with region_mask()")
        rows.append(_row(name, base & mk, m, diagnosis, predictions))
    return rows
