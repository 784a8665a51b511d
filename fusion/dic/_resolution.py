"""Spatial resolution and noise floor of a strain map: the model of subset, step and window.

The strain at a grid point passes two stages: each subset returns (about) the
mean displacement over its ``subset x subset`` pixels, a box average; the strain
window then fits a plane to ``window x window`` of those points, ``step`` pixels
apart, and takes its slope. For a sinusoidal displacement of wavelength
``lambda`` along the derivative's direction the strain is scaled by

    H1 = sinc(subset / lambda)                       (box average)
    H2 = sum_k k sin(2 pi k step / lambda) / (sum_k k^2 2 pi step / lambda)
                                                     (least-squares slope, k = -h..h)

and the model's gain is ``H1 H2`` (a complete, symmetric window; the quadratic
terms of an order-2 fit leave the slope of a symmetric window unchanged).
"""

from __future__ import annotations

import math
from numbers import Real

import numpy as np
from scipy.optimize import brentq

from ._gridfit import window_basis, window_covariance, lag_correlation

__all__ = ["strain_transfer", "gain_wavelength", "strain_noise_factor", "resolution_attrs",
           "WAVELENGTH_MULTIPLES"]

#: Wavelengths, as multiples of the VSG, at which result files state the modelled gain.
WAVELENGTH_MULTIPLES = (1.0, 1.5, 2.0, 3.0, 5.0)


def _check(subset, step, window):
    for name, value, low in (("subset", subset, 0.0), ("step", step, 1e-12)):
        if isinstance(value, bool) or not isinstance(value, Real) or not (math.isfinite(value)
                                                                          and value >= low):
            raise ValueError(f"{name}: expected a {'non-negative' if low == 0 else 'positive'} "
                             f"size in px, got {value!r}")
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 3 \
            or window % 2 == 0:
        raise ValueError(f"window: expected an odd number of points >= 3, got {window!r}")


def strain_transfer(wavelength, *, subset, step, window):
    """Modelled gain of the strain for a sinusoidal field of the given wavelength.

    Parameters
    ----------
    wavelength : float or array_like
        Wavelength of the displacement (and strain) field, px (> 0).
    subset : float
        Subset side, px (0 when the strain window works on point data alone).
    step : float
        Grid step, px.
    window : int
        Strain window, points per side (odd).

    Returns
    -------
    ndarray or float
        Measured over true strain amplitude (1), the product of the subset's box
        average and the window's least-squares slope; it can change sign below
        about one VSG.

    References
    ----------
    E. M. C. Jones, M. A. Iadicola (eds.), *A Good Practices Guide for Digital Image
    Correlation*, International Digital Image Correlation Society, 2018,
    doi:10.32720/idics/gpg.ed1 (spatial resolution by the response to sinusoidal fields).

    Examples
    --------
    >>> round(float(strain_transfer(1e6, subset=21, step=7, window=5)), 6)
    1.0
    """
    _check(subset, step, window)
    lam = np.asarray(wavelength, dtype=np.float64)
    if np.any(~(lam > 0)):
        raise ValueError(f"wavelength: expected positive lengths in px, got {wavelength!r}")
    h = window // 2
    k = np.arange(1, h + 1, dtype=np.float64)
    theta = 2.0 * np.pi * float(step) / lam
    num = np.sum(k * np.sin(np.multiply.outer(theta, k)), axis=-1)
    h2 = num / (np.sum(k * k) * theta)
    h1 = np.sinc(float(subset) / lam)
    out = h1 * h2
    return float(out) if np.ndim(out) == 0 else out


def gain_wavelength(gain, *, subset, step, window):
    """The longest wavelength (px) at which the modelled strain gain equals ``gain``.

    Above it the gain stays above ``gain``: with ``gain = 0.9`` this is the shortest
    wavelength measured to within 10 %.
    """
    if isinstance(gain, bool) or not isinstance(gain, Real) or not 0 < gain < 1:
        raise ValueError(f"gain: expected a fraction in (0, 1), got {gain!r}")
    _check(subset, step, window)
    vsg = (window - 1) * step + subset

    def f(lam):
        return strain_transfer(lam, subset=subset, step=step, window=window) - gain

    hi = 1000.0 * vsg
    lam = np.geomspace(0.5 * vsg, hi, 2000)
    below = np.flatnonzero(f(lam) < 0)
    if below.size == 0:
        return 0.5 * vsg
    i = below[-1]
    return float(brentq(f, lam[i], lam[i + 1], xtol=1e-9 * vsg))


def strain_noise_factor(*, subset, step, window, order=1):
    """Strain standard deviation per unit displacement noise, times the step (full window).

    The strain's standard deviation of a complete window is ``sigma_u * factor /
    step`` (``sigma_u`` in px, strain in 1) when neighbours' displacement errors are
    correlated by the overlap of their subsets (the shared fraction of their area).
    """
    _check(subset, step, window)
    if order not in (1, 2):
        raise ValueError(f"order: expected 1 or 2, got {order!r}")
    h = window // 2
    phi = window_basis(h, order)
    ones = np.ones((window, window))
    centre = np.array([h * window + h], np.intp)
    cov = window_covariance(ones, centre, h, lag_correlation(h, subset or None, step), phi)[0]
    a = np.einsum("pij,qij->pq", phi, phi)
    beta = np.linalg.inv(a)[1]
    return float(math.sqrt(beta @ cov @ beta))


def resolution_attrs(*, subset, step, window, pixel_size=None):
    """Spatial-resolution attributes of a strain map (the model of this module).

    Returns
    -------
    dict
        ``vsg_px``; ``transfer_wavelength_px`` (the wavelengths of
        :data:`WAVELENGTH_MULTIPLES` times the VSG) with ``transfer_gain``;
        ``wavelength_gain50_px`` and ``wavelength_gain90_px``; the same lengths in mm
        (``*_mm``) when ``pixel_size`` (mm/px) is known; ``transfer_model``.
    """
    subset = subset or 0
    vsg = (window - 1) * step + subset
    lams = [m * vsg for m in WAVELENGTH_MULTIPLES]
    gains = [float(g) for g in strain_transfer(np.array(lams), subset=subset, step=step,
                                               window=window)]
    out = {"vsg_px": float(vsg), "transfer_wavelength_px": [float(x) for x in lams],
           "transfer_gain": gains,
           "wavelength_gain50_px": gain_wavelength(0.5, subset=subset, step=step, window=window),
           "wavelength_gain90_px": gain_wavelength(0.9, subset=subset, step=step, window=window),
           "transfer_model": "box average over the subset, then the least-squares slope over the "
                             "strain window (sinusoidal field along the derivative)"}
    if pixel_size:
        out["transfer_wavelength_mm"] = [x * pixel_size for x in out["transfer_wavelength_px"]]
        out["wavelength_gain50_mm"] = out["wavelength_gain50_px"] * pixel_size
        out["wavelength_gain90_mm"] = out["wavelength_gain90_px"] * pixel_size
    return out
