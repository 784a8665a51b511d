"""Reach of the lateral heat model: where it can be trusted, what it resolves.

:func:`lateral_edge_mask` flags the pixels too close to a no-data boundary (a hole, a free
edge, the border of the grid) for the model to know what happens there;
:func:`contrast_wavelength` gives, per frequency, the shortest wavelength of a strain
variation the surface response still passes (what ``fusion plan`` reports). See
:mod:`fusion.mechanics._lateral` for the model.

References
----------
Carslaw, H. S. & Jaeger, J. C., *Conduction of Heat in Solids*, 2nd ed., Oxford, 1959:
sec. 2.6 (the diffusion length of a thermal wave), ch. 1 (anisotropic solids, the conductivity tensor).
"""

from __future__ import annotations

import math
from numbers import Real

import numpy as np

from ._heat import _check_h
from ._lateral import _check_frequency, _grid_tensors, _layer_data, _pixel_axes, _weights

__all__ = ["lateral_edge_mask", "contrast_wavelength"]


def _surface_layers(d, rc, k3, omega):
    """Indices of the layers whose top lies within one through-thickness diffusion length."""
    depth = np.concatenate([[0.0], np.cumsum(d / np.sqrt(2.0 * k3 / (rc * omega)))[:-1]])
    return np.flatnonzero(depth < 1.0)


def lateral_edge_mask(layers, frequency, valid, *, pixel_size, lengths=1.0):
    """Pixels where the lateral model cannot know the boundary: near no-data or the grid's border.

    Parameters
    ----------
    layers : sequence of ThermalLayer
        Viewed face first.
    frequency : float
        Hz.
    valid : (Y, X) bool ndarray
        Pixels with data (strain known).
    pixel_size : float or (2, 2) array_like
        As :func:`lateral_response`.
    lengths : float
        Reach in in-plane diffusion lengths (default 1).

    Returns
    -------
    (Y, X) bool ndarray
        True at no-data pixels and at every pixel closer than ``lengths`` in-plane diffusion
        lengths of the surface layers to a no-data pixel or to the grid's border (beyond
        which the field is unknown too).

    Notes
    -----
    The surface layers are those whose top lies within one through-thickness diffusion
    length of the viewed face (the ones the surface response feels). Distance is measured
    in each layer's own metric: a pixel is flagged when a no-data point lies inside the
    ellipse ``r . K^-1 r <= lengths**2 2 / (rho c omega)`` of one of them (semi-axes
    ``sqrt(2 k / (rho c omega))`` along and across the fibres). The union of the ellipses
    dilates the no-data mask by one FFT convolution.
    """
    from scipy import fft

    layers, d, rc, k3, _, k_in = _layer_data(layers)
    omega = 2.0 * math.pi * _check_frequency(frequency)
    if isinstance(lengths, bool) or not (isinstance(lengths, Real) and 0 <= lengths < 1e3):
        raise ValueError(f"lengths must be a number of diffusion lengths >= 0, got {lengths!r}")
    ok = np.asarray(valid)
    if ok.ndim != 2 or ok.dtype != bool:
        raise ValueError(f"valid must be a boolean (Y, X) map, got shape {ok.shape} dtype {ok.dtype}")
    k_grid = _grid_tensors(k_in, _pixel_axes(pixel_size))
    pick = _surface_layers(d, rc, k3, omega)
    reach = [math.ceil(lengths * float(np.max(np.sqrt(2.0 * k_grid[pick, a, a] / (rc[pick] * omega)))))
             for a in (1, 0)]
    ry, rx = reach
    if ry == 0 and rx == 0:
        return ~ok
    yy, xx = np.mgrid[-ry:ry + 1, -rx:rx + 1]
    r = np.stack([xx.ravel(), yy.ravel()], axis=1).astype(float)
    inside = np.zeros(r.shape[0], bool)
    for j in pick:
        limit = lengths ** 2 * 2.0 / (rc[j] * omega)
        inside |= np.einsum("pa,ab,pb->p", r, np.linalg.inv(k_grid[j]), r) <= limit
    kernel = inside.reshape(yy.shape).astype(float)
    ny, nx = ok.shape
    NY = fft.next_fast_len(ny + 2 * ry + 1, real=True)
    NX = fft.next_fast_len(nx + 2 * rx + 1, real=True)
    nodata = np.ones((NY, NX))
    nodata[ry:ry + ny, rx:rx + nx] = ~ok
    wrapped = np.zeros((NY, NX))
    wrapped[np.mod(yy, NY), np.mod(xx, NX)] = kernel
    conv = fft.irfft2(fft.rfft2(nodata) * fft.rfft2(wrapped), s=(NY, NX))
    return (conv[ry:ry + ny, rx:rx + nx] > 0.5) | ~ok


# ---------------------------------------------------------------- plan
def contrast_wavelength(layers, strain_range, frequencies, direction, *, level=0.5, convection_front=0.0,
                        convection_back=0.0):
    """Shortest wavelength of a strain variation the surface response still passes, per frequency.

    Parameters
    ----------
    layers : sequence of ThermalLayer
        Viewed face first.
    strain_range : (3,) array_like
        The strain state (d eps_xx, d eps_yy, d gamma_xy) whose amplitude varies sinusoidally.
    frequencies : (F,) array_like
        Hz.
    direction : float
        Direction of the variation (the wavevector) in degrees CCW from specimen x.
    level : float
        Fraction of the uniform-field modulus still passed (default 0.5).

    Returns
    -------
    (F,) ndarray
        Wavelength in m at which ``|surface response|`` of ``strain_range * cos(q . r)`` first
        falls to ``level`` times that of the uniform field, going from long to short
        wavelengths (interpolated in log q); NaN where the uniform response is 0 or the
        modulus never falls that far. A feature much smaller than it is blurred out.

    Notes
    -----
    For one thick isotropic layer the 50 % wavelength is ``2 pi mu / 3**0.25 / sqrt(2)`` ~
    3.4 mu, with mu the in-plane diffusion length (from ``|i omega / (i omega + kappa q**2)|``).
    """
    layers = list(layers)
    _, d, rc, k3, coef, k_in = _layer_data(layers)
    e = np.asarray(strain_range, dtype=float)
    if e.shape != (3,) or not np.all(np.isfinite(e)):
        raise ValueError(f"strain_range must be three finite numbers, got {strain_range!r}")
    f = np.atleast_1d(np.asarray(frequencies, dtype=float))
    if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f) & (f > 0)):
        raise ValueError(f"frequencies must be positive Hz values, got {frequencies!r}")
    if not (isinstance(level, Real) and 0 < level < 1):
        raise ValueError(f"level must be a fraction between 0 and 1, got {level!r}")
    hf = _check_h(convection_front, "convection_front")
    hb = _check_h(convection_back, "convection_back")
    u = np.array([math.cos(math.radians(direction)), math.sin(math.radians(direction))])
    k_u = np.einsum("a,nab,b->n", u, k_in, u)
    s = coef @ e
    out = np.full(f.size, np.nan)
    for i, fi in enumerate(f):
        omega = 2.0 * math.pi * fi
        mu = np.sqrt(2.0 * k_u / (rc * omega))
        q = np.concatenate([[0.0], np.geomspace(1e-3 / mu.max(), 1e3 / mu.min(), 400)])
        resp = _weights(d, rc, k3, q[:, None] ** 2 * k_u[None, :], omega, hf, hb) @ s
        ref = abs(resp[0])
        if ref == 0:
            continue
        rel = np.abs(resp[1:]) / ref - level
        below = np.flatnonzero(rel <= 0)
        if below.size == 0 or below[0] == 0:
            continue
        j = below[0]
        t = rel[j - 1] / (rel[j - 1] - rel[j])
        lq = np.log(q[j]) + t * (np.log(q[j + 1]) - np.log(q[j]))
        out[i] = 2.0 * math.pi / math.exp(lq)
    return out
