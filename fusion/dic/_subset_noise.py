"""Noise of subset displacements: their standard deviation and the correlation of neighbours."""

from __future__ import annotations

import functools

import numpy as np
from scipy import ndimage

__all__ = ["translation_std", "overlap_correlation", "interpolated_noise_factor"]

_AFFINE_PARAMETERS = 8  # six of the shape function, plus offset and scale of the criterion


@functools.lru_cache(maxsize=1)
def _spline_weights_table():
    """Sum of squared weights of cubic B-spline interpolation at fractions t = 0..1 (101 values)."""
    n = 64
    coef = ndimage.spline_filter1d(np.eye(n), order=3, axis=0, mode="mirror")
    t = np.linspace(0.0, 1.0, 101)
    out = np.empty(t.size)
    for k, tk in enumerate(t):
        x = n // 2 + tk
        i = int(np.floor(x))
        s = x - i
        # cubic B-spline taps at i-1 .. i+2 for the fraction s
        taps = np.array([(1 - s) ** 3, 4 - 6 * s ** 2 + 3 * s ** 3,
                         1 + 3 * s + 3 * s ** 2 - 3 * s ** 3, s ** 3]) / 6.0
        weights = taps @ coef[i - 1:i + 3]
        out[k] = float(np.sum(weights ** 2))
    return t, out


def interpolated_noise_factor(frac_x, frac_y):
    """Variance of white noise after cubic B-spline interpolation at sub-pixel fractions, over
    the variance before (1 at whole pixels, smallest half-way between them); separable.

    Parameters
    ----------
    frac_x, frac_y : array_like
        Fractional pixel positions (any real numbers; only the fraction counts).

    Returns
    -------
    ndarray
        The factor (0 < f <= 1).
    """
    t, table = _spline_weights_table()
    fx = np.interp(np.mod(np.asarray(frac_x, dtype=np.float64), 1.0), t, table)
    fy = np.interp(np.mod(np.asarray(frac_y, dtype=np.float64), 1.0), t, table)
    return fx * fy


def translation_std(zncc, grey_ss, pixels, hinv_uu, hinv_vv, u, v):
    """Standard deviations of the subset translations from the correlation residual.

    Parameters
    ----------
    zncc : ndarray
        Zero-normalised cross-correlation at the solution.
    grey_ss : ndarray
        Sum of squared grey-level deviations from the mean of the reference subset.
    pixels : ndarray
        Pixels in the subset.
    hinv_uu, hinv_vv : ndarray
        Diagonal elements of the inverse Gauss-Newton Hessian for the two translations
        (px^2 per grey level^2).
    u, v : ndarray
        The translations (px): their fractions set how much interpolation smooths the
        deformed image's noise.

    Returns
    -------
    u_std, v_std : ndarray
        px; NaN where an input is.

    Notes
    -----
    The residual of the zero-normalised criterion in reference grey levels is
    ``2 grey_ss (1 - zncc)`` over ``pixels - 8`` degrees of freedom. It holds the
    reference noise and the deformed image's noise after interpolation, whose variance
    the cubic B-spline lowers by :func:`interpolated_noise_factor`; with equal noise
    ``sigma`` in both images the residual variance is ``sigma^2 (1 + factor)``. The
    translation errors are linear in the noise difference of the two images, whose
    variance over the intensity gradients' band is ``2 sigma^2`` (interpolation leaves
    the speckle's band almost whole), so ``var(u) = 2 sigma^2 (H^-1)_uu``: the
    least-squares covariance of all six shape parameters. Its ``(H^-1)_uu`` is at least
    ``1 / SSSIG``; with it the estimate reduces to ``sqrt(2) sigma / sqrt(SSSIG)`` of Pan
    et al. (2008) when the translation is uncoupled from the gradient terms.

    References
    ----------
    B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, "Study on subset size selection in digital
    image correlation for speckle patterns", Optics Express 16(10) (2008) 7037-7048.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        dof = np.maximum(np.asarray(pixels, dtype=np.float64) - _AFFINE_PARAMETERS, 1.0)
        resid = 2.0 * np.asarray(grey_ss) * np.maximum(1.0 - np.asarray(zncc), 0.0) / dof
        sigma2 = resid / (1.0 + interpolated_noise_factor(u, v))
        return np.sqrt(2.0 * sigma2 * hinv_uu), np.sqrt(2.0 * sigma2 * hinv_vv)


def overlap_correlation(offset_px, subset):
    """Correlation of the translation errors of two square subsets whose centres are
    ``offset_px = (dx, dy)`` apart: the shared fraction of their area.

    With homogeneous speckle each subset's translation error is a gradient-weighted sum
    of the pixel noise over the subset, so two subsets share the noise of their common
    pixels: ``(1 - |dx| / S)+ (1 - |dy| / S)+`` for subset side ``S`` (a separable
    triangle).

    Parameters
    ----------
    offset_px : (2, ...) array_like
        Offsets along the two axes, px.
    subset : float
        Subset side, px.

    Returns
    -------
    ndarray
        Correlation coefficient, 0 to 1.
    """
    d = np.abs(np.asarray(offset_px, dtype=np.float64)) / float(subset)
    return np.maximum(1.0 - d[0], 0.0) * np.maximum(1.0 - d[1], 0.0)
