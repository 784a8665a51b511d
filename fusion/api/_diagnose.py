"""The diagnosis step: which source explains each pixel, labelled on the IR grid."""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._bounds import check_ratio
from ..datamodel import SOURCES, result_dataset
from ..diagnose import diagnose
from ..errors import ArgumentError
from ..register import warp_support_ok
from ._labels import COMPONENTS

__all__ = ["diagnosis"]



def _measured(measured, measured_std):
    if isinstance(measured, xr.Dataset):
        if "ratio_measured" not in measured:
            raise ArgumentError("measured", "expected the dataset of fusion.lockin_maps (with ratio_measured)")
        get = measured.get
        lag = get("phase_lag_measured")
        lag_std = get("phase_lag_measured_std")
        ok = get("thermal_valid")
        return (np.asarray(measured["ratio_measured"].values), np.asarray(measured["ratio_measured_std"].values),
                np.asarray(measured["snr"].values) if "snr" in measured else None,
                None if lag is None else np.asarray(lag.values), None if lag_std is None else np.asarray(lag_std.values),
                None if ok is None else np.asarray(ok.values).astype(bool))
    if measured_std is None:
        raise ArgumentError("measured_std", "an array of measured ratios needs its standard deviations")
    m = np.asarray(measured.values if isinstance(measured, xr.DataArray) else measured)
    s = np.broadcast_to(np.asarray(measured_std, dtype=m.dtype if m.dtype.kind == "f" else float), m.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        snr = np.abs(m) / s
    return m, s, snr, None, None, None


def diagnosis(measured, predicted, *, strain=None, valid=None, measured_std=None, min_snr=3.0,
              fit_threshold=3.0, distinguish=1.0):
    """Which candidate source explains each pixel's measured dT/T0, labelled on the IR grid.

    Parameters
    ----------
    measured : xarray.Dataset or (Y, X) array_like
        The lock-in maps of :func:`fusion.lockin_maps` (ratio, its noise, signal-to-noise
        ratio, phase lag), or the measured ratio dT/T0 itself (dimensionless; with
        ``measured_std``).
    predicted : xarray.Dataset
        The predictions of :func:`fusion.predictions` on the same grid.
    strain : xarray.Dataset, optional
        The registered strain of :func:`fusion.registered_strain`: pixels outside its
        footprint or without strain are left out, as in a run; with motion-compensated lock-in
        maps, so are pixels whose warp reaches pixels without correlation data.
    valid : (Y, X) bool array_like, optional
        Further pixels to leave out (False).
    measured_std : (Y, X) array_like or float, optional
        Standard deviation of an array ``measured``.
    min_snr : float
        Pixels whose signal-to-noise ratio ``|delta_T| / delta_T_std`` is lower are left out.
    fit_threshold, distinguish : float
        As in :func:`fusion.diagnose.diagnose`.

    Returns
    -------
    xarray.Dataset
        Dims ``(y, x)``: ``residual_<source>``, ``zscore_<source>``, ``source_layer`` (CF
        flags), ``source_probability`` (``source``, y, x), ``surface_fraction`` and ``valid``,
        named and NaN outside the valid area as in result.nc. ``attrs``: ``area_fraction``,
        ``n_valid``, ``uses_lag`` and the settings.

    Raises
    ------
    ArgumentError
        Measured values that are no ratio (a temperature range in kelvin where dT/T0 is
        meant); no pixel left to diagnose.

    Notes
    -----
    The diagnosis of a run (:func:`fusion.diagnose.diagnose`) with its valid area: thermal
    data fitted, inside the strain footprint, finite strain and ratio, and a
    signal-to-noise ratio of at least ``min_snr``.
    """
    if not isinstance(predicted, xr.Dataset) or not any(f"ratio_{s}" in predicted for s in SOURCES):
        raise ArgumentError("predicted", "expected the dataset of fusion.predictions")
    m, ms, snr, lag, lag_std, ok = _measured(measured, measured_std)
    good = np.ones(m.shape, bool) if ok is None else ok.copy()
    if strain is not None:
        if "footprint" in strain:
            good &= np.asarray(strain["footprint"].values).astype(bool)
        if isinstance(measured, xr.Dataset) and "motion_per_load" in measured and "masked" in strain:
            # motion-compensated frames: a pixel whose warp over the load swing reaches pixels
            # without correlation data (or markers) mixes in an edge the data do not describe
            half = 0.5 * np.asarray(measured["motion_per_load"].values, float) * float(measured.attrs["load_range"])
            known = ~(np.asarray(strain["missing"].values).astype(bool) | np.asarray(strain["masked"].values).astype(bool))
            good &= warp_support_ok(known, -np.abs(half), np.abs(half), reach=(1, 2))
        for name, _ in COMPONENTS:
            good &= np.isfinite(np.asarray(strain[name].values))
    if valid is not None:
        good &= np.asarray(valid, bool)
    with np.errstate(invalid="ignore"):
        good &= np.isfinite(m) & np.isfinite(ms) & (snr >= min_snr if snr is not None else True)
    check_ratio(m[good] if good.any() else m, "measured")
    if not good.any():
        raise ArgumentError("measured", "no pixel has both usable thermal data and strain data: check the "
                            "registration and the signal-to-noise ratio")
    sources = [s for s in SOURCES if f"ratio_{s}" in predicted]
    pred = {s: np.asarray(predicted[f"ratio_{s}"].values) for s in sources}
    pstd = {s: np.asarray(predicted[f"ratio_{s}_std"].values) for s in sources}
    plag = {s: 0.0 for s in sources}
    if "model" in sources:
        plag["model"] = np.asarray(predicted["phase_model"].values)
    diag = diagnose(m, ms, pred, pstd, valid=good, measured_lag=lag, measured_lag_std=lag_std,
                    predicted_lag=plag, fit_threshold=fit_threshold, distinguish=distinguish)
    maps = diag.to_maps()
    maps["valid"] = good.astype(np.int8)
    # as in result.nc: float maps are NaN outside the valid area, flag maps keep their own
    # no-data coding there
    for k, v in list(maps.items()):
        v = np.asarray(v)
        if v.dtype.kind == "f":
            v = v.astype(np.float32, copy=True)
            v[..., ~good] = np.nan
            maps[k] = v
    ds = result_dataset(maps, sources=diag.sources)
    ds.attrs.update(area_fraction=dict(diag.area_fraction), n_valid=int(diag.n_valid), uses_lag=bool(diag.uses_lag),
                    min_snr=float(min_snr), **diag.settings)
    return ds
