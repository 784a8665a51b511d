"""The measured thermoelastic ratio, its noise and its phase lag, from lock-in maps."""

from __future__ import annotations

import numpy as np

__all__ = ["measured_ratio"]


def measured_ratio(T0, delta_T, delta_T_std, delta_T_quadrature=None):
    """Measured ratio dT/T0 with its standard deviation, the signal-to-noise ratio and the lag.

    Parameters
    ----------
    T0 : (Y, X) array_like
        Mean temperature, K.
    delta_T : (Y, X) array_like
        Signed temperature range in phase with the load (``Re C``), K.
    delta_T_std : (Y, X) array_like
        Standard deviation of ``delta_T``, K.
    delta_T_quadrature : (Y, X) array_like, optional
        Range in quadrature with the load (``Im C``), K.

    Returns
    -------
    ratio, ratio_std, snr : (Y, X) ndarray
        ``delta_T / T0`` and ``delta_T_std / |T0|`` (dimensionless), ``|delta_T| / delta_T_std``.
    lag, lag_std : (Y, X) float32 ndarray or None
        Phase lag ``-degrees(arctan(Im C / Re C))`` in degrees (positive when the response is
        delayed, 0 for an adiabatic source: the convention :func:`diagnose` expects) and its
        standard deviation ``degrees(delta_T_std / |C|)`` (equal noise in both quadratures);
        None without ``delta_T_quadrature``.
    """
    T0 = np.asarray(T0)
    dT = np.asarray(delta_T)
    std = np.asarray(delta_T_std)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = dT / T0
        ratio_std = std / np.abs(T0)
        snr = np.abs(dT) / std
    lag = lag_std = None
    if delta_T_quadrature is not None:
        quad = np.asarray(delta_T_quadrature)
        with np.errstate(invalid="ignore", divide="ignore"):
            lag = -np.degrees(np.arctan(quad / dT)).astype(np.float32)
            mag = np.hypot(dT, quad)
            lag_std = np.degrees(std / mag).astype(np.float32)
    return ratio, ratio_std, snr, lag, lag_std
