"""Calibration factor of the infrared measurement from a reference region of known source."""

from __future__ import annotations

import logging
import math

import numpy as np
from scipy.special import chdtrc

__all__ = ["calibration_factor", "apply_calibration", "CALIBRATION_RANGE"]

logger = logging.getLogger(__name__)

#: Plausible range of a calibration factor; outside it the reference is probably wrong.
CALIBRATION_RANGE = (0.5, 2.0)


def _same_shape(a, shape, name):
    arr = np.asarray(a)
    if arr.dtype.kind not in "fiu":
        raise TypeError(f"{name}: expected a real numeric array, got dtype {arr.dtype!r}")
    try:
        arr = np.broadcast_to(arr, shape)
    except ValueError:
        raise ValueError(f"{name}: shape {arr.shape!r} does not match measured {shape!r}") from None
    if np.any(arr < 0) and name.endswith("_std"):
        raise ValueError(f"{name}: standard deviations must be >= 0; found minimum "
                         f"{float(np.nanmin(arr))!r}")
    return arr


def _objective(k, m, p, sm2, sp2):
    """Profile chi-square S(k) and its first two derivatives (effective variance V)."""
    V = sp2 + k * k * sm2
    r = p - k * m
    S = np.sum(r * r / V)
    d1 = np.sum(-2 * m * r / V - 2 * k * sm2 * r * r / V ** 2)
    d2 = np.sum(2 * m * m / V + 8 * k * m * sm2 * r / V ** 2 - 2 * sm2 * r * r / V ** 2
                + 8 * k * k * sm2 * sm2 * r * r / V ** 3)
    return S, d1, d2


def calibration_factor(measured, predicted, mask, *, measured_std=None, predicted_std=None,
                       allow_large=False):
    """Factor k with ``k * measured ~= predicted`` over a reference region of known source.

    Parameters
    ----------
    measured : (Y, X) ndarray
        Measured ratio dT/T0 (dimensionless).
    predicted : (Y, X) ndarray
        Predicted ratio of the source known to act in the reference region.
    mask : (Y, X) bool ndarray
        The reference region (e.g. from :func:`region_mask`).
    measured_std, predicted_std : (Y, X) ndarray or float, optional
        Standard deviations of the two maps (dimensionless).
    allow_large : bool, default False
        Accept a factor outside 0.5..2.

    Returns
    -------
    factor : float
        k (dimensionless); multiply the measured ratio (and its std) by it.
    std : float
        Standard deviation of k.
    n : int
        Number of pixels used (finite inputs inside the mask).

    Raises
    ------
    ValueError
        No usable pixel in the region (or fewer than 2 without standard deviations);
        a measured map that is zero throughout the region; a factor outside 0.5..2
        without ``allow_large`` (usually a wrong reference region, a wrong source for it,
        or a sign convention mix-up).

    Notes
    -----
    Both maps carry noise, so k minimises the errors-in-variables chi-square
    ``S(k) = sum (p_i - k m_i)**2 / (sigma_p,i**2 + k**2 sigma_m,i**2)``, the profile of
    the full least-squares problem over the true measured values (the effective-variance
    form; for a straight line through the origin it is exact). The start is the
    effective-variance fixed point; Newton steps on ``dS/dk`` finish the minimum.
    ``std = sqrt(2 / S''(k))`` (the Delta chi-square = 1 interval), using the stated
    standard deviations as absolute; a chi-square far above its degrees of freedom is
    logged as a warning, since the std is then optimistic. With only
    ``predicted_std`` this is ordinary weighted least squares; with neither,
    ``k = sum(m p) / sum(m**2)`` and the std comes from the scatter of the residuals.

    The factor is logged at INFO level; callers record it in the run's provenance.
    Diagnosing the reference region after calibrating on it is circular: its source
    will fit by construction.

    References
    ----------
    .. [1] Orear, J., "Least squares when both variables have uncertainties",
       Am. J. Phys. 50, 912 (1982).
    .. [2] Press, W. H. et al., *Numerical Recipes*, 3rd ed., Cambridge University
       Press, 2007, section 15.3 (straight-line data with errors in both coordinates).
    """
    m = np.asarray(measured)
    if m.ndim != 2 or m.dtype.kind not in "fiu":
        raise ValueError(f"measured: expected a (Y, X) real array, got shape {m.shape!r}")
    shape = m.shape
    p = _same_shape(predicted, shape, "predicted")
    mk = np.asarray(mask)
    if mk.dtype != bool or mk.shape != shape:
        raise ValueError(f"mask: expected a {shape!r} boolean mask, got shape {mk.shape!r} "
                         f"dtype {mk.dtype!r}")
    weighted = measured_std is not None or predicted_std is not None
    sm = _same_shape(0.0 if measured_std is None else measured_std, shape, "measured_std")
    sp = _same_shape(0.0 if predicted_std is None else predicted_std, shape, "predicted_std")
    sel = mk & np.isfinite(m) & np.isfinite(p) & np.isfinite(sm) & np.isfinite(sp)
    if weighted:
        sel &= (sm > 0) | (sp > 0)
    n = int(np.count_nonzero(sel))
    if n == 0 or (not weighted and n < 2):
        raise ValueError(f"calibration: the reference region has {n} usable pixel(s) "
                         f"(finite measured and predicted values{' and stds' if weighted else ''}); "
                         "need at least " + ("1" if weighted else "2")
                         + " -- check the region against the valid mask")
    m = m[sel].astype(np.float64)
    p = p[sel].astype(np.float64)
    sm2 = sm[sel].astype(np.float64) ** 2
    sp2 = sp[sel].astype(np.float64) ** 2
    mm = np.sum(m * m)
    if mm == 0:
        raise ValueError("calibration: the measured ratio is zero throughout the reference region")
    k = float(np.sum(m * p) / mm)

    if not weighted:
        dof = n - 1
        std = math.sqrt(np.sum((p - k * m) ** 2) / dof / mm)
        chi2 = None
    else:
        if np.all(sp2 == 0) and k == 0:
            raise ValueError("calibration: the unweighted start factor is 0; the measured "
                             "and predicted maps look uncorrelated in the reference region")
        for _ in range(100):
            w = 1.0 / (sp2 + k * k * sm2)
            k_new = float(np.sum(w * m * p) / np.sum(w * m * m))
            done = abs(k_new - k) <= 1e-13 * max(abs(k_new), 1e-300)
            k = k_new
            if done:
                break
        S, d1, d2 = _objective(k, m, p, sm2, sp2)
        for _ in range(20):
            if d2 <= 0:
                break
            step = d1 / d2
            trial = k - step
            S_t, d1_t, d2_t = _objective(trial, m, p, sm2, sp2)
            while S_t > S and abs(step) > 1e-15 * abs(k):
                step /= 2
                trial = k - step
                S_t, d1_t, d2_t = _objective(trial, m, p, sm2, sp2)
            converged = abs(trial - k) <= 1e-14 * abs(k)
            k, S, d1, d2 = trial, S_t, d1_t, d2_t
            if converged:
                break
        if not d2 > 0:
            raise ValueError("calibration: the chi-square has no minimum near the start factor "
                             f"{k!r}; the reference region does not constrain the factor")
        std = math.sqrt(2.0 / d2)
        chi2, dof = float(S), n - 1

    lo, hi = CALIBRATION_RANGE
    if not (lo <= k <= hi) and not allow_large:
        raise ValueError(f"calibration factor {k!r} (std {std:.3g}, {n} px) is outside "
                         f"{lo}..{hi}: probably a wrong reference region, a wrong source for it "
                         "or a sign mix-up; pass allow_large=True only if you have checked")
    logger.info("calibration factor %.5g +- %.2g from %d reference pixels", k, std, n)
    if chi2 is not None and dof > 0:
        if chdtrc(dof, chi2) < 1e-3:       # survival function of the chi-square distribution
            logger.warning("calibration: chi-square %.4g over %d degrees of freedom; the scatter "
                           "exceeds the stated uncertainties, so the factor's std is optimistic",
                           chi2, dof)
    return k, std, n


def apply_calibration(measured, factor, *, measured_std=None, factor_std=0.0):
    """Scale a measured ratio map by a calibration factor, propagating its uncertainty.

    Parameters
    ----------
    measured : (Y, X) ndarray
        Measured ratio dT/T0 (dimensionless).
    factor : float
        From :func:`calibration_factor`.
    measured_std : (Y, X) ndarray or float, optional
        Standard deviation of ``measured``.
    factor_std : float, default 0.0
        Standard deviation of the factor.

    Returns
    -------
    calibrated : ndarray
        ``factor * measured`` (float32 input stays float32).
    calibrated_std : ndarray or None
        ``sqrt(factor**2 measured_std**2 + measured**2 factor_std**2)`` (first-order
        propagation, Taylor 1997 section 3.11); None without ``measured_std``. The
        factor's error is common to every pixel: it shifts all ratios together, so do not
        average it down over a region.
    """
    k = float(factor)
    ks = float(factor_std)
    if not math.isfinite(k) or k == 0:
        raise ValueError(f"factor: expected a finite non-zero number, got {factor!r}")
    if not math.isfinite(ks) or ks < 0:
        raise ValueError(f"factor_std: expected a finite number >= 0, got {factor_std!r}")
    m = np.asarray(measured)
    dtype = np.result_type(m.dtype, np.float32)
    out = (k * m.astype(np.float64)).astype(dtype)
    if measured_std is None:
        return out, None
    s = np.asarray(measured_std, dtype=np.float64)
    std = np.sqrt((k * s) ** 2 + (m.astype(np.float64) * ks) ** 2).astype(dtype)
    return out, std
