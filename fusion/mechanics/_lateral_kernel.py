"""Compiled kernel of the lateral heat model: the layered solution at every wavevector.

Kept in its own module so that importing :mod:`fusion.mechanics` does not import numba;
:mod:`fusion.mechanics._lateral` imports it on first use.

For each wavevector ``q`` of a half spectrum (``rfft2`` layout) the kernel runs the
admittance recursion of :mod:`fusion.mechanics._heat` from the back face to the viewed
face with each layer's exponent ``lambda = sqrt((i omega rho c + q.K q) / k3)`` and each
layer's particular solution ``g theta_ad`` with ``g = i omega rho c / (i omega rho c + q.K q)``.
The flux obeys ``q = Y theta + c`` at every interface: the admittance ``Y`` is carried from
the back face to the viewed face, and each layer's weight in the surface value is
``-(prod of the D above it) own g / (Y(0) + h_front)``, contracted with the coefficients.

Layout, for speed (a few hundred operations per wavevector and layer):

* complex numbers as real and imaginary parts, one division per layer; rows of
  wavevectors in parallel (the row's work inlined: as a call it ran half as fast);
* layers that share thickness, heat capacity and conductivities (a laminate has few
  distinct plies) share one set of square roots, exponentials and sines per wavevector;
* the recursion starts at the first layer below which the thermal wave has decayed by
  ``exp(-40)`` (the sum of ``Re(lambda d)`` from the viewed face): what lies deeper
  changes the surface value by less than ``2**N exp(-40)`` of it, below double precision
  for the stacks of the trade. Short wavelengths seldom reach past a few plies.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

__all__ = ["surface_spectrum", "ATTENUATION_CUTOFF"]

#: Sum of Re(lambda d) from the viewed face beyond which deeper layers are left out.
ATTENUATION_CUTOFF = 40.0

# Fast-math without reassociation: the order of the sums is the documented one.
_FM = {"nnan", "ninf", "nsz", "arcp", "contract", "afn"}


# inlined into the parallel loop: as a separate call it ran about half as fast
@njit(nogil=True, fastmath=_FM, inline="always")
def _transfer_row(qx, ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega, h_front, h_back,
                  spec, out_re, out_im):  # pragma: no cover - compiled
    """One row of wavevectors ``(qx, ky)`` (rad/px): ``out_re = sum_c Re(H_c) spec_c`` and
    ``out_im = sum_c Im(H_c) spec_c`` for the row's spectra ``spec`` (C, len(qx))."""
    nx = qx.shape[0]
    n = kind.shape[0]
    n_types = thick.shape[0]
    n_chan = coef.shape[1]
    zr = np.empty((n_types, nx))
    zi = np.empty((n_types, nx))
    tr = np.empty((n_types, nx))
    ti = np.empty((n_types, nx))
    sr = np.empty((n_types, nx))
    si = np.empty((n_types, nx))
    gr = np.empty((n_types, nx))
    gi = np.empty((n_types, nx))
    att = np.empty((n_types, nx))
    dr = np.empty((n, nx))
    di = np.empty((n, nx))
    wr = np.empty((n, nx))
    wi = np.empty((n, nx))
    ybr = np.empty(nx)
    ybi = np.empty(nx)
    stop = np.empty(nx, np.int64)
    # per layer type: Z = k3 lambda, g, tanh and sech of x = lambda d, Re(x)
    for u in range(n_types):
        cap = omega * rhoc[u]
        ik = 1.0 / k3[u]
        for ix in range(nx):
            kx = qx[ix]
            quad = kxx[u] * kx * kx + 2.0 * kxy[u] * kx * ky + kyy[u] * ky * ky
            ar = quad * ik
            ai = cap * ik
            r = math.sqrt(ar * ar + ai * ai)
            lr = math.sqrt(0.5 * (r + ar))              # principal root: Re > 0 as ai > 0
            li = ai / (2.0 * lr)
            zr[u, ix] = k3[u] * lr
            zi[u, ix] = k3[u] * li
            den = 1.0 / (quad * quad + cap * cap)
            gr[u, ix] = cap * cap * den
            gi[u, ix] = cap * quad * den
            xr = lr * thick[u]
            xi = li * thick[u]
            att[u, ix] = xr
            m = math.exp(-xr)
            if -0.8 < xi < 0.8:
                # Im(lambda d) is small over most of the spectrum: Taylor series to degree 16,
                # within an ulp there and cheaper than the library's sine and cosine
                x2 = xi * xi
                sn = xi * (1.0 + x2 * (-1.0 / 6 + x2 * (1.0 / 120 + x2 * (-1.0 / 5040 + x2 * (1.0 / 362880 + x2 * (
                    -1.0 / 39916800 + x2 * (1.0 / 6227020800 + x2 * (-1.0 / 1307674368000))))))))
                cs = 1.0 + x2 * (-0.5 + x2 * (1.0 / 24 + x2 * (-1.0 / 720 + x2 * (1.0 / 40320 + x2 * (
                    -1.0 / 3628800 + x2 * (1.0 / 479001600 + x2 * (-1.0 / 87178291200 + x2 / 20922789888000)))))))
            else:
                sn = math.sin(xi)
                cs = math.cos(xi)
            er = m * cs
            ei = -m * sn
            e2r = er * er - ei * ei
            e2i = 2.0 * er * ei
            dd = 1.0 / ((1.0 + e2r) * (1.0 + e2r) + e2i * e2i)
            inr = (1.0 + e2r) * dd                      # 1 / (1 + e^-2x)
            ini = -e2i * dd
            if xr * xr + xi * xi < 0.0025:
                # much thinner than its diffusion length: the series (1 - e^-2x would cancel)
                x2r = xr * xr - xi * xi
                x2i = 2.0 * xr * xi
                pr_ = 62.0 / 2835.0 * x2r - 17.0 / 315.0
                pi_ = 62.0 / 2835.0 * x2i
                tmp = pr_ * x2r - pi_ * x2i + 2.0 / 15.0
                pi_ = pr_ * x2i + pi_ * x2r
                pr_ = tmp
                tmp = pr_ * x2r - pi_ * x2i - 1.0 / 3.0
                pi_ = pr_ * x2i + pi_ * x2r
                pr_ = tmp
                tmp = pr_ * x2r - pi_ * x2i + 1.0
                pi_ = pr_ * x2i + pi_ * x2r
                pr_ = tmp
                tr[u, ix] = pr_ * xr - pi_ * xi
                ti[u, ix] = pr_ * xi + pi_ * xr
            else:
                tr[u, ix] = (1.0 - e2r) * inr + e2i * ini
                ti[u, ix] = (1.0 - e2r) * ini - e2i * inr
            sr[u, ix] = 2.0 * (er * inr - ei * ini)
            si[u, ix] = 2.0 * (er * ini + ei * inr)
    # the deepest layer the wave reaches: below it the sum of Re(x) exceeds the cut-off
    jmax = 0
    for ix in range(nx):
        acc = 0.0
        last = n - 1
        for j in range(n):
            acc += att[kind[j], ix]
            if acc > ATTENUATION_CUTOFF:
                last = j
                break
        stop[ix] = last
        jmax = max(jmax, last)
        if last == n - 1:
            ybr[ix] = h_back
            ybi[ix] = 0.0
        else:                                        # what lies below looks semi-infinite
            ybr[ix] = zr[kind[last + 1], ix]
            ybi[ix] = zi[kind[last + 1], ix]
    # admittance recursion from there to the viewed face: Y <- Z (Z T + Y) / (Z + Y T)
    for j in range(jmax, -1, -1):
        u = kind[j]
        for ix in range(nx):
            if j > stop[ix]:
                continue
            a_r = zr[u, ix]
            a_i = zi[u, ix]
            t_r = tr[u, ix]
            t_i = ti[u, ix]
            b_r = ybr[ix]
            b_i = ybi[ix]
            den_r = a_r + b_r * t_r - b_i * t_i
            den_i = a_i + b_r * t_i + b_i * t_r
            q = 1.0 / (den_r * den_r + den_i * den_i)
            w_r = (a_r * den_r + a_i * den_i) * q        # Z / (Z + Y tanh)
            w_i = (a_i * den_r - a_r * den_i) * q
            p_r = a_r * t_r - a_i * t_i + b_r
            p_i = a_r * t_i + a_i * t_r + b_i
            yt_r = w_r * p_r - w_i * p_i
            yt_i = w_r * p_i + w_i * p_r
            d_r = sr[u, ix] * w_r - si[u, ix] * w_i
            d_i = sr[u, ix] * w_i + si[u, ix] * w_r
            o_r = d_r * b_r - d_i * b_i - yt_r
            o_i = d_r * b_i + d_i * b_r - yt_i
            dr[j, ix] = d_r
            di[j, ix] = d_i
            wr[j, ix] = o_r * gr[u, ix] - o_i * gi[u, ix]  # own contribution times g
            wi[j, ix] = o_r * gi[u, ix] + o_i * gr[u, ix]
            ybr[ix] = yt_r
            ybi[ix] = yt_i
    # weights -(prod D) own g / (Y(0) + h_front), contracted with the coefficients
    for ix in range(nx):
        s_r = ybr[ix] + h_front
        s_i = ybi[ix]
        q = -1.0 / (s_r * s_r + s_i * s_i)
        pr = s_r * q
        pi = -s_i * q
        # H_c = sum_j a_j coef[j, c], so sum_c H_c spec_c = sum_j a_j S_j, S_j = sum_c coef[j, c] spec_c
        rr = 0.0
        ri = 0.0
        ir = 0.0
        ii = 0.0
        for j in range(stop[ix] + 1):
            a_r = pr * wr[j, ix] - pi * wi[j, ix]
            a_i = pr * wi[j, ix] + pi * wr[j, ix]
            s_r = 0.0
            s_i = 0.0
            for c in range(n_chan):
                v = spec[c, ix]
                s_r += coef[j, c] * v.real
                s_i += coef[j, c] * v.imag
            rr += a_r * s_r
            ri += a_r * s_i
            ir += a_i * s_r
            ii += a_i * s_i
            npr = pr * dr[j, ix] - pi * di[j, ix]
            pi = pr * di[j, ix] + pi * dr[j, ix]
            pr = npr
        out_re[ix] = complex(rr, ri)
        out_im[ix] = complex(ir, ii)


@njit(cache=True, nogil=True, parallel=True, fastmath=_FM)
def surface_spectrum(qx, qy, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega, h_front, h_back,
                     nyquist_x, nyquist_row, spec, out_re, out_im):  # pragma: no cover - compiled
    """Half spectra of the in-phase and quadrature surface response.

    ``qx`` (NXh,), ``qy`` (NY,) wavenumbers in rad/px; ``kind`` (N,) the distinct layer
    type of each layer (viewed face first); per type (U,): thickness m, rho c J/(m3 K),
    k3 W/(m K) and the in-plane tensor on the grid ``kxx, kxy, kyy`` in W/(m K) px2/m2;
    ``coef`` (N, C) each layer's adiabatic value per unit of the C source fields; ``spec``
    (C, NY, NXh) their spectra. Writes ``out_re = sum_c Re(H_c) spec_c`` and
    ``out_im = sum_c Im(H_c) spec_c`` (NY, NXh): both are spectra of real fields because
    ``H(q) = H(-q)``.

    A Nyquist bin of an even-sized axis stands for both ``+pi`` and ``-pi``; with an
    in-plane cross term ``H`` differs there, so the bin gets the mean over its aliases
    (which keeps the spectra Hermitian). ``nyquist_x``: the last column is such a bin;
    ``nyquist_row``: the row that is (-1 for none).
    """
    ny = qy.shape[0]
    nx = qx.shape[0]
    for iy in prange(ny):
        ky = qy[iy]
        _transfer_row(qx, ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega, h_front, h_back,
                      spec[:, iy, :], out_re[iy], out_im[iy])
        if iy == nyquist_row:
            a_re = np.empty(nx, np.complex128)
            a_im = np.empty(nx, np.complex128)
            _transfer_row(qx, -ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega, h_front, h_back,
                          spec[:, iy, :], a_re, a_im)
            for ix in range(nx):
                out_re[iy, ix] = 0.5 * (out_re[iy, ix] + a_re[ix])
                out_im[iy, ix] = 0.5 * (out_im[iy, ix] + a_im[ix])
        if nyquist_x:
            # the last column stands for +pi and -pi: the mean over every alias of the bin
            last = nx - 1
            mx = np.empty(1)
            mx[0] = -qx[last]
            b_re = np.empty(1, np.complex128)
            b_im = np.empty(1, np.complex128)
            n_signs = 2 if iy == nyquist_row else 1
            sum_re = complex(0.0, 0.0)
            sum_im = complex(0.0, 0.0)
            for k in range(n_signs):
                _transfer_row(mx, ky if k == 0 else -ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega,
                              h_front, h_back, spec[:, iy, last:], b_re, b_im)
                sum_re += b_re[0]
                sum_im += b_im[0]
            out_re[iy, last] = 0.5 * (out_re[iy, last] + sum_re / n_signs)
            out_im[iy, last] = 0.5 * (out_im[iy, last] + sum_im / n_signs)
