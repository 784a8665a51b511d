"""The loading frequency of a sampled signal, its standard uncertainty and its aliases.

A load signal gives the frequency the machine really ran at; a configured frequency
is what somebody typed. :func:`estimate_frequency` finds the dominant sinusoid and,
on request, its standard uncertainty from the least-squares fit (the Cramér-Rao bound
for white noise, widened for residuals that are correlated in time).
:func:`alias_frequency` and :func:`alias_candidates` say where a frequency appears when
it is sampled too slowly and which true frequencies share one appearance.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize_scalar

__all__ = ["estimate_frequency", "alias_frequency", "alias_candidates"]


def _rss_at(t, v, f):
    """Residual sum of squares of the fit [1, t, cos, sin] at frequency f (normal equations)."""
    w = 2.0 * math.pi * f * t
    M = np.stack([np.ones_like(t), t, np.cos(w), np.sin(w)])
    G = M @ M.T
    r = M @ v
    try:
        return float(v @ v - r @ np.linalg.solve(G, r))
    except np.linalg.LinAlgError:
        return float(v @ v)


def _jacobian(t, f, coef=None):
    """Columns [1, tau, cos, sin, cos 2, sin 2] at f and, with ``coef``, d(model)/df."""
    tc = t - 0.5 * (t[0] + t[-1])
    w = 2.0 * math.pi * f * t
    cols = [np.ones_like(t), tc / max(abs(tc[0]), 1e-300), np.cos(w), np.sin(w), np.cos(2 * w),
            np.sin(2 * w)]
    if coef is not None:
        # model a cos w + b sin w + a2 cos 2w + b2 sin 2w; its derivative with respect to f
        _, _, a, b, a2, b2 = coef
        dw = 2.0 * math.pi * t
        cols.append(dw * (-a * np.sin(w) + b * np.cos(w)) + 2.0 * dw * (-a2 * np.sin(2 * w) + b2 * np.cos(2 * w)))
    return np.column_stack(cols)


def _polish(t, v, f):
    """Gauss-Newton steps on the frequency of the full model; returns f, coefficients, residual."""
    for _ in range(3):
        coef, *_ = np.linalg.lstsq(_jacobian(t, f), v, rcond=None)
        J = _jacobian(t, f, coef)
        r = v - J[:, :6] @ coef
        scale = np.linalg.norm(J, axis=0)
        scale[scale == 0] = 1.0
        step, *_ = np.linalg.lstsq(J / scale, r, rcond=None)
        df = step[-1] / scale[-1]
        f += df
        if abs(df) <= 1e-13 * f:
            break
    coef, *_ = np.linalg.lstsq(_jacobian(t, f), v, rcond=None)
    return f, coef, v - _jacobian(t, f) @ coef


#: Periodogram ordinates either side of the frequency averaged for the residual noise there.
_BAND = 20


def _colour(t, r, f):
    """How much more residual noise sits near ``f`` than white noise of the same variance would put.

    The larger of two estimates, and never below one (residuals should not make the
    estimate look better than white noise would): the residual periodogram averaged over
    :data:`_BAND` ordinates either side of ``f`` (the two next to it left out, where the
    fit took its share), and the spectral density at ``f`` of an AR(1) series with the
    residuals' lag-one autocorrelation, over that of white noise.
    """
    rr = float(r @ r)
    n = r.size
    if rr <= 0 or n < 8:
        return 1.0
    span = float(t[-1] - t[0])
    k = np.concatenate([np.arange(-_BAND, -1), np.arange(2, _BAND + 1)])
    freqs = np.abs(f + k / span)
    # one ordinate at a time: a long load record times 38 frequencies would be a large array
    band = float(np.mean([abs(np.exp(-2j * math.pi * fk * t) @ r) ** 2 for fk in freqs])) / rr
    rho = min(max(float(r[1:] @ r[:-1]) / rr, -0.98), 0.98)
    w0 = 2.0 * math.pi * f * span / (n - 1)
    ar1 = (1.0 - rho * rho) / (1.0 - 2.0 * rho * math.cos(w0) + rho * rho)
    return max(1.0, band, ar1)


def _frequency_std(t, v, f):
    """Standard uncertainty of ``f`` (Hz) and the polished f.

    Linearised least squares: ``s^2 (J^T J)^-1`` for the frequency, with J the Jacobian of
    the model (mean, drift, fundamental and second harmonic, frequency) and s^2 the
    residual variance; for white noise this is the Cramér-Rao bound. Residuals correlated
    from sample to sample (a wandering frequency, an unmodelled slow drift) may put more of
    their variance near the frequency than white noise would: the variance is widened by
    that excess (:func:`_colour`).
    """
    f, coef, r = _polish(t, v, f)
    J = _jacobian(t, f, coef)
    n, p = J.shape
    s2 = float(r @ r) / max(n - p, 1)
    scale = np.linalg.norm(J, axis=0)
    scale[scale == 0] = 1.0
    Js = J / scale
    cov = np.linalg.pinv(Js.T @ Js)
    var = s2 * cov[-1, -1] / scale[-1] ** 2
    var *= _colour(t, r, f)
    # a noise-free signal still carries the rounding of its samples (1e-12 of the
    # frequency is far below any effect on a lock-in)
    return f, max(math.sqrt(max(var, 0.0)), 1e-12 * f)


def estimate_frequency(times, values, *, return_std=False):
    """Loading frequency of a sampled signal: periodogram peak refined by a sine fit.

    Parameters
    ----------
    times : (N,) array_like
        Sample times, s (strictly increasing; uniform or not).
    values : (N,) array_like
        Signal (the load), N >= 8.
    return_std : bool
        Also return the standard uncertainty of the frequency.

    Returns
    -------
    frequency : float
        Frequency of the dominant sinusoid, Hz.
    std : float
        Its standard uncertainty, Hz (only with ``return_std``).

    Notes
    -----
    A linear trend is removed, then the peak of a zero-padded, Hann-windowed
    periodogram (of the signal linearly resampled onto a uniform clock when the
    sampling is uneven) is refined by minimising the residual of a least-squares fit of
    ``[1, t, cos 2 pi f t, sin 2 pi f t]`` within one periodogram bin either side, which
    for a clean sine is the maximum-likelihood estimate. With ``return_std`` the
    estimate is polished by Gauss-Newton steps on a model that also holds the second
    harmonic (a distorted load), and its uncertainty is the linearised least-squares
    one, ``s^2 (J^T J)^-1``; for white noise that is the Cramér-Rao bound
    ``var f = 12 / ((2 pi)^2 eta N (N^2 - 1))`` in cycles per sample, with
    ``eta = A^2 / (2 sigma^2)``. Residuals with more noise near the frequency than white
    noise of their variance (their periodogram there, or an AR(1) model of them) widen it
    by that ratio; it never narrows. A signal sampled
    below twice its frequency returns its alias (:func:`alias_frequency`): give the
    frequency explicitly then.

    References
    ----------
    .. [1] D. C. Rife and R. R. Boorstyn, "Single-tone parameter estimation from
       discrete-time observations", IEEE Trans. Inf. Theory 20(5), 591-598, 1974.
    .. [2] S. M. Kay, *Fundamentals of Statistical Signal Processing: Estimation Theory*,
       Prentice Hall, 1993, Example 3.14 (the bound) and ch. 8 (nonlinear least squares).
    .. [3] G. E. P. Box, G. M. Jenkins, G. C. Reinsel, *Time Series Analysis: Forecasting
       and Control*, 4th ed., Wiley, 2008, sec. 3.2 (spectrum of an AR(1) process).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 50.0
    >>> f, s = estimate_frequency(t, np.cos(2 * np.pi * 2.0 * t) + 1e-3 * np.sin(7 * t ** 2),
    ...                           return_std=True)
    >>> abs(f - 2.0) < 5 * s < 1e-4
    True
    """
    t = np.asarray(times, dtype=np.float64).ravel()
    v = np.asarray(values, dtype=np.float64).ravel()
    if t.shape != v.shape or t.size < 8:
        raise ValueError(f"times and values must be 1-D of equal length >= 8, got {t.shape!r} and {v.shape!r}")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(v))) or np.any(np.diff(t) <= 0):
        raise ValueError("times must be finite and strictly increasing, values finite")
    if not np.ptp(v) > 1e-12 * max(1.0, float(np.max(np.abs(v)))):
        raise ValueError("the signal is constant: no loading cycle to find a frequency in")
    t = t - t[0]
    span = t[-1]
    v = v - np.polyval(np.polyfit(t, v, 1), t)
    dt = np.diff(t)
    step = float(np.median(dt))
    lo = 1.0 / span  # below one cycle per record a "frequency" is a trend
    n = t.size
    # the coarse peak only has to fall within a bin: an uneven clock is resampled for it,
    # while the refinement below fits the actual samples
    vu = v if np.ptp(dt) <= 1e-3 * step else np.interp(np.linspace(0.0, span, n), t, v)
    step = span / (n - 1) if vu is not v else step
    nfft = 1 << int(math.ceil(math.log2(8 * n)))
    power = np.abs(np.fft.rfft(vu * np.hanning(n), nfft)) ** 2
    freqs = np.fft.rfftfreq(nfft, step)
    keep = freqs >= lo
    if not np.any(keep):
        raise ValueError("the signal is too short to hold one cycle")
    freqs, power = freqs[keep], power[keep]
    k = int(np.argmax(power))
    if not power[k] > 10.0 * np.median(power):
        raise ValueError("no dominant periodic component found in the signal")
    fp = float(freqs[k])
    half_bin = 1.0 / span
    res = minimize_scalar(lambda f: _rss_at(t, v, f), bounds=(max(fp - half_bin, 0.5 * lo), fp + half_bin),
                          method="bounded", options={"xatol": 1e-7 / span})
    f = float(res.x)
    if not return_std:
        return f
    f_polished, std = _frequency_std(t, v, f)
    # the polish moves within the uncertainty; a jump means it left the peak (never kept)
    if abs(f_polished - f) <= max(5.0 * std, 1e-7 / span):
        f = f_polished
    return float(f), float(std)


def alias_frequency(frequency, sample_rate):
    """Where a sinusoid of ``frequency`` appears when sampled at ``sample_rate`` (Hz, in [0, rate/2])."""
    f, r = float(frequency), float(sample_rate)
    return abs(f - round(f / r) * r)


def alias_candidates(apparent, sample_rate, *, up_to=None, count=4):
    """True frequencies that a sampled sinusoid seen at ``apparent`` Hz may have, lowest first.

    Parameters
    ----------
    apparent : float
        Frequency found in the samples, Hz (at most half the sample rate).
    sample_rate : float
        Samples per second, Hz.
    up_to : float, optional
        Largest candidate, Hz; default: ``count`` candidates.
    count : int
        Number of candidates when ``up_to`` is not given.

    Returns
    -------
    list of float
        ``apparent`` itself and ``k rate -+ apparent`` for k = 1, 2, ...

    Examples
    --------
    >>> [round(f, 1) for f in alias_candidates(22.3, 127.7, count=4)]
    [22.3, 105.4, 150.0, 233.1]
    """
    a, r = float(apparent), float(sample_rate)
    out = [a]
    k = 1
    while True:
        for c in (k * r - a, k * r + a):
            if (up_to is not None and c > up_to) or (up_to is None and len(out) >= count):
                return out
            if c > 0 and all(abs(c - o) > 1e-9 * r for o in out):
                out.append(c)
        k += 1
