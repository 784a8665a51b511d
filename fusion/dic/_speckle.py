"""Synthetic speckle images: a band-limited random pattern, shifted or deformed exactly.

The pattern is a periodic sum of Gaussian dots, ``S(X) = sum_k A_k exp(-|X - c_k|^2 / R^2)``
(the Gaussian speckle model used in correlation studies such as Pan et al.
2008; from memory), with dot radius ``R = speckle_size / 2``. Because it is
periodic with the image period and its spectrum falls as
``exp(-k^2 R^2 / 4)`` (5e-5 of the peak at the Nyquist frequency for
R = 2 px), the sampled image is band-limited for practical purposes, so a
translation applied in Fourier space is exact (the method of the DIC Challenge
images; Reu 2011; Reu et al. 2018). The same analytic pattern can also be
evaluated at any positions, which renders a deformed image of any smooth
displacement field without interpolating the reference image.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

__all__ = ["speckle_image", "fourier_shift"]

_CUTOFF = 4.0  # dot truncated at 4 R, where exp(-16) = 1e-7 of its peak
_FILL = 1.0  # summed dot area / image area
_CONTRAST = 0.135  # grey-level standard deviation as a fraction of full scale
_BACKGROUND = 0.15  # grey level between dots; the sum of dots is skewed upward


def fourier_shift(image, shift):
    """Translate an image exactly by a sub-pixel shift in Fourier space.

    Parameters
    ----------
    image : (H, W) array_like
        A periodic, band-limited image (e.g. from :func:`speckle_image`).
    shift : (dy, dx) tuple of float
        Shift in pixels along rows (down) and columns (right); the content
        moves toward larger row and column indices: ``out[r, c] = image(r - dy, c - dx)``.

    Returns
    -------
    (H, W) ndarray of float64
        The shifted image, same grey-level scale.

    Notes
    -----
    Multiplies the discrete Fourier transform by ``exp(-2 pi i (k_y dy + k_x dx))``
    and keeps the real part, which splits the Nyquist bin of even sizes
    symmetrically. Exact for periodic band-limited content; images with edges
    wrap around and ring. Same operation as :func:`scipy.ndimage.fourier_shift`.

    References
    ----------
    P. L. Reu, "Experimental and numerical methods for exact subpixel shifting",
    Experimental Mechanics 51 (2011), doi:10.1007/s11340-010-9417-4.
    """
    a = np.asarray(image, dtype=np.float64)
    if a.ndim != 2:
        raise ValueError(f"image: expected a 2-D array, got shape {a.shape!r}")
    try:
        dy, dx = (float(s) for s in shift)
    except (TypeError, ValueError):
        raise ValueError(f"shift: expected (dy, dx) in pixels, got {shift!r}") from None
    if not (math.isfinite(dy) and math.isfinite(dx)):
        raise ValueError(f"shift: expected finite values, got {shift!r}")
    ky = np.fft.fftfreq(a.shape[0])[:, None]
    kx = np.fft.fftfreq(a.shape[1])[None, :]
    phase = np.exp(-2j * np.pi * (ky * dy + kx * dx))
    return np.fft.ifft2(np.fft.fft2(a) * phase).real


def _dots(shape, speckle_size, seed):
    """Dot centres, amplitudes and a periodic cell list (CSR) for fast evaluation."""
    h, w = shape
    radius = speckle_size / (2.0 * math.sqrt(math.log(2.0)))  # FWHM = speckle_size
    rng = np.random.default_rng(seed)
    n = max(1, int(round(_FILL * h * w / (math.pi * radius * radius))))
    cy = rng.uniform(0.0, h, n)
    cx = rng.uniform(0.0, w, n)
    amp = rng.uniform(0.5, 1.0, n)
    cut = _CUTOFF * radius
    ncy = max(1, int(h // cut))
    ncx = max(1, int(w // cut))
    cell = (np.minimum((cy * ncy / h).astype(np.int64), ncy - 1) * ncx
            + np.minimum((cx * ncx / w).astype(np.int64), ncx - 1))
    order = np.argsort(cell, kind="stable")
    start = np.searchsorted(cell[order], np.arange(ncy * ncx + 1))
    # Campbell's theorem gives the variance of a sum of randomly placed pulses;
    # fixing the grey scale from it (not from one rendering) keeps every
    # rendering of the pattern on one exact intensity scale.
    density = n / (h * w)
    var = density * np.mean(amp ** 2) * math.pi * radius ** 2 / 2.0
    return (cy[order], cx[order], amp[order], start.astype(np.int64), ncy, ncx,
            radius, math.sqrt(var))


@njit(cache=True, parallel=True)
def _evaluate(ys, xs, cy, cx, amp, start, ncy, ncx, h, w, radius):
    out = np.empty(ys.size)
    inv_r2 = 1.0 / (radius * radius)
    cut2 = (_CUTOFF * radius) ** 2
    ry = min(ncy, 3)
    rx = min(ncx, 3)
    for i in prange(ys.size):
        y = ys[i] % h
        x = xs[i] % w
        iy = min(int(y * ncy / h), ncy - 1)
        ix = min(int(x * ncx / w), ncx - 1)
        s = 0.0
        for a in range(ry):
            jy = (iy + a - 1) % ncy if ncy >= 3 else a
            for b in range(rx):
                jx = (ix + b - 1) % ncx if ncx >= 3 else b
                c = jy * ncx + jx
                for k in range(start[c], start[c + 1]):
                    dy = y - cy[k]
                    dy -= h * np.floor(dy / h + 0.5)  # nearest periodic image
                    dx = x - cx[k]
                    dx -= w * np.floor(dx / w + 0.5)
                    d2 = dx * dx + dy * dy
                    if d2 < cut2:
                        s += amp[k] * np.exp(-d2 * inv_r2)
        out[i] = s
    return out


def _inverse_map(displacement, rows, cols, shape):
    """Reference positions X with X + u(X) = x, by fixed-point iteration."""
    xr, yr = cols.copy(), rows.copy()
    for _ in range(60):
        out = displacement(xr, yr)
        try:
            du, dv = out
        except (TypeError, ValueError):
            raise TypeError("displacement: expected a callable returning (u, v) arrays, "
                            f"got {type(out).__name__}") from None
        du = np.broadcast_to(np.asarray(du, dtype=np.float64), shape)
        dv = np.broadcast_to(np.asarray(dv, dtype=np.float64), shape)
        if not (np.all(np.isfinite(du)) and np.all(np.isfinite(dv))):
            raise ValueError("displacement: the callable returned non-finite values")
        xn, yn = cols - du, rows - dv
        change = max(np.max(np.abs(xn - xr)), np.max(np.abs(yn - yr)))
        xr, yr = xn, yn
        if change < 1e-11:
            return xr, yr
    raise ValueError("displacement: the inverse map did not converge; the field must be "
                     "smooth with gradients well below 1")


def speckle_image(shape, *, speckle_size=4.0, seed=0, displacement=None, bits=8, noise=0.0,
                  noise_seed=None):
    """A synthetic speckle image, optionally translated or deformed exactly.

    Parameters
    ----------
    shape : (H, W) tuple of int
        Image size in pixels (each at least ``4 * speckle_size``).
    speckle_size : float
        Dot diameter ``2 R`` in pixels (intensity ``exp(-r^2 / R^2)``); 3 to 5 px
        is the range recommended for correlation (common practice). Below 3 px
        the pattern is no longer band-limited and exact shifts lose accuracy.
    seed : int
        Seed of the dot positions: the same seed gives the same pattern.
    displacement : None, (u, v) or callable
        ``None``: the reference pattern. ``(u, v)``: a translation by u pixels
        along columns and v along rows, applied exactly in Fourier space
        (:func:`fourier_shift`) before noise and quantisation. A callable
        ``f(x, y) -> (u, v)`` taking column and row coordinates (px, arrays)
        of the reference state: the pattern is evaluated exactly at the
        reference positions ``X`` that move to each pixel, ``X + u(X) = x``
        (fixed-point iteration; smooth fields with gradients well below 1).
    bits : int or None
        Quantise to ``bits`` (1 to 16) and return uint8 (bits <= 8) or uint16;
        ``None`` returns float64 on a 0..1 scale without rounding.
    noise : float
        Standard deviation of additive Gaussian noise, in grey levels of the
        output scale (added before quantisation).
    noise_seed : int, optional
        Seed of the noise; give different seeds to a reference and a deformed
        image so that their noise is independent. ``None`` draws fresh entropy.

    Returns
    -------
    (H, W) ndarray
        uint8/uint16 grey levels, or float64 in 0..1 when ``bits`` is None.

    Notes
    -----
    The grey mapping is fixed from the pattern's statistics: 0.15 of full
    scale between dots, a standard deviation of 0.135 of full scale (mean
    about 0.34; the sum of dots is skewed toward bright), clipped to the output
    range (about 0.04 % of pixels saturate), so all renderings of one seed
    share one intensity scale. The image content wraps around: the pattern is
    periodic with period (H, W).

    References
    ----------
    P. L. Reu et al., "DIC Challenge: developing images and guidelines for
    evaluating accuracy and resolution of 2D analyses", Experimental Mechanics
    58 (2018), doi:10.1007/s11340-017-0349-0.

    Examples
    --------
    >>> ref = speckle_image((64, 64), seed=1, bits=None)
    >>> moved = speckle_image((64, 64), seed=1, bits=None, displacement=(1.0, 0.0))
    >>> bool(abs(moved[10, 11] - ref[10, 10]) < 1e-9)
    True
    """
    try:
        h, w = (int(s) for s in shape)
    except (TypeError, ValueError):
        raise ValueError(f"shape: expected (H, W), got {shape!r}") from None
    speckle_size = float(speckle_size)
    if not (math.isfinite(speckle_size) and speckle_size > 0):
        raise ValueError(f"speckle_size: expected a positive size in pixels, got {speckle_size!r}")
    if min(h, w) < 4 * speckle_size:
        raise ValueError(f"shape: {shape!r} is too small for speckle_size {speckle_size!r} "
                         "(each side at least 4 speckle sizes)")
    if bits is not None and (isinstance(bits, bool) or not isinstance(bits, (int, np.integer))
                             or not 1 <= bits <= 16):
        raise ValueError(f"bits: expected an integer 1..16 or None, got {bits!r}")
    noise = float(noise)
    if not (math.isfinite(noise) and noise >= 0):
        raise ValueError(f"noise: expected a non-negative standard deviation, got {noise!r}")

    cy, cx, amp, start, ncy, ncx, radius, std = _dots((h, w), speckle_size, seed)
    rows, cols = np.mgrid[0:h, 0:w].astype(np.float64)
    shift = None
    if callable(displacement):
        cols, rows = _inverse_map(displacement, rows, cols, (h, w))
    elif displacement is not None:
        try:
            du, dv = (float(s) for s in displacement)
        except (TypeError, ValueError):
            raise ValueError("displacement: expected None, (u, v) in pixels or a callable, "
                             f"got {displacement!r}") from None
        shift = (dv, du)
    s = _evaluate(rows.ravel(), cols.ravel(), cy, cx, amp, start, ncy, ncx,
                  float(h), float(w), radius).reshape(h, w)
    img = _BACKGROUND + _CONTRAST * s / std
    if shift is not None:
        img = fourier_shift(img, shift)
    full = 1.0 if bits is None else float(2 ** bits - 1)
    img *= full
    if noise > 0:
        img += np.random.default_rng(noise_seed).normal(0.0, noise, img.shape)
    np.clip(img, 0.0, full, out=img)
    if bits is None:
        return img
    return np.rint(img).astype(np.uint8 if bits <= 8 else np.uint16)
