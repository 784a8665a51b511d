"""Compiled kernel of the lateral heat model: the layered solution at every wavevector.

Kept in its own module so that importing :mod:`fusion.mechanics` does not import numba;
:mod:`fusion.mechanics._lateral` imports it on first use.

For each wavevector ``q`` of a half spectrum (``rfft2`` layout) the kernel runs the
admittance recursion of :mod:`fusion.mechanics._heat` from the back face to the viewed
face with each layer's exponent ``lambda = sqrt((i omega rho c + q.K q) / k3)`` and each
layer's particular solution ``g theta_ad`` with ``g = i omega rho c / (i omega rho c + q.K q)``.
The flux obeys ``q = Y theta + c`` at every interface; ``Y`` (the admittance) and ``c``
(linear in the sources, one value per source field) are carried from the back face to
the viewed face in one pass, and the surface value is ``-c / (Y + h_front)``.

Layout, for speed (a few hundred operations per wavevector and layer):

* complex numbers are carried as real and imaginary parts and every step runs over a
  whole row of wavevectors without branches, so the compiler uses vector instructions;
  the exponential, sine and cosine are polynomial kernels written for that
  (:func:`_sincos`, :func:`_exp_neg`; within a few units in the last place of the C
  library's);
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

# Fast-math without reassociation: the two- and three-part range reductions below rely on
# the order of their subtractions.
_FM = {"nnan", "ninf", "nsz", "arcp", "contract", "afn"}


@njit(fastmath=_FM, inline="always")
def _sincos(v):  # pragma: no cover - compiled
    """sin(v), cos(v): Cody-Waite reduction by pi/2 (three parts), Taylor to degree 15."""
    n = math.floor(v * 0.6366197723675814 + 0.5)
    r = v - n * 1.5707963267341256
    r = r - n * 6.077100506506192e-11
    r = r - n * 2.0222662487959506e-21
    r2 = r * r
    sp = r + r * r2 * (-1.6666666666666666e-01 + r2 * (8.3333333333333333e-03 + r2 * (
        -1.9841269841269841e-04 + r2 * (2.7557319223985891e-06 + r2 * (-2.5052108385441720e-08 + r2 * (
            1.6059043836821615e-10 + r2 * (-7.6471637318198165e-13)))))))
    cp = 1.0 + r2 * (-0.5 + r2 * (4.1666666666666664e-02 + r2 * (-1.3888888888888889e-03 + r2 * (
        2.4801587301587302e-05 + r2 * (-2.7557319223985888e-07 + r2 * (2.0876756987868100e-09 + r2 * (
            -1.1470745597729725e-11)))))))
    # quadrant n mod 4 without branches: odd quadrants swap sine and cosine
    h = n * 0.5
    odd = 2.0 * (h - math.floor(h))
    m = 4.0 * (n * 0.25 - math.floor(n * 0.25))
    s_sign = 1.0 - 2.0 * math.floor(m * 0.5)
    m1 = m + 1.0
    c_sign = 1.0 - 2.0 * math.floor((m1 - 4.0 * math.floor(m1 * 0.25)) * 0.5)
    return s_sign * (sp + odd * (cp - sp)), c_sign * (cp + odd * (sp - cp))


@njit(fastmath=_FM, inline="always")
def _exp_neg(x):  # pragma: no cover - compiled
    """exp(-x) for 0 <= x < 88: exp(-r) 2**-n with |r| <= ln2 / 2, Taylor to degree 13."""
    n = math.floor(x * 1.4426950408889634 + 0.5)
    r = x - n * 0.6931471803691238
    r = r - n * 1.9082149292705877e-10
    p = 1.0 + r * (-1.0 + r * (0.5 + r * (-1.6666666666666666e-01 + r * (4.1666666666666664e-02 + r * (
        -8.3333333333333333e-03 + r * (1.3888888888888889e-03 + r * (-1.9841269841269841e-04 + r * (
            2.4801587301587302e-05 + r * (-2.7557319223985888e-06 + r * (2.7557319223985890e-07 + r * (
                -2.5052108385441720e-08 + r * (2.0876756987868100e-09 + r * (-1.6059043836821613e-10)))))))))))))
    # 2**-n from the seven bits of n (exact powers of two)
    scale = 1.0
    b = 0.5
    for _ in range(7):
        bit = n - 2.0 * math.floor(n * 0.5)
        scale *= b if bit > 0.5 else 1.0
        n = math.floor(n * 0.5)
        b = b * b
    return p * scale


@njit(cache=True, nogil=True, fastmath=_FM)
def _transfer_row(qx, ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega, h_front, h_back,
                  h_re, h_im):  # pragma: no cover - compiled
    """Transfer ``H_c(q)`` (C, len(qx)) of one row of wavevectors ``(qx, ky)`` (rad/px)."""
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
    ybr = np.empty(nx)
    ybi = np.empty(nx)
    stop = np.empty(nx, np.int64)
    dvr = np.empty(nx)
    dvi = np.empty(nx)
    ogr = np.empty(nx)
    ogi = np.empty(nx)
    cr = h_re
    ci = h_im
    for c in range(n_chan):
        for ix in range(nx):
            cr[c, ix] = 0.0
            ci[c, ix] = 0.0
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
            lr = math.sqrt(0.5 * (r + ar))          # principal root: Re > 0 as ai > 0
            li = ai / (2.0 * lr)
            zr[u, ix] = k3[u] * lr
            zi[u, ix] = k3[u] * li
            den = 1.0 / (quad * quad + cap * cap)
            gr[u, ix] = cap * cap * den
            gi[u, ix] = cap * quad * den
            xr = lr * thick[u]
            xi = li * thick[u]
            att[u, ix] = xr
            m = _exp_neg(min(xr, 80.0))
            sn, cs = _sincos(xi)
            er = m * cs
            ei = -m * sn
            e2r = er * er - ei * ei
            e2i = 2.0 * er * ei
            dd = 1.0 / ((1.0 + e2r) * (1.0 + e2r) + e2i * e2i)
            inr = (1.0 + e2r) * dd                  # 1 / (1 + e^-2x)
            ini = -e2i * dd
            fr = (1.0 - e2r) * inr + e2i * ini      # tanh x = (1 - e^-2x) / (1 + e^-2x)
            fi = (1.0 - e2r) * ini - e2i * inr
            # a layer much thinner than its diffusion length: the series (1 - e^-2x cancels)
            x2r = xr * xr - xi * xi
            x2i = 2.0 * xr * xi
            pr_ = 62.0 / 2835.0
            pi_ = 0.0
            for cval in (-17.0 / 315.0, 2.0 / 15.0, -1.0 / 3.0, 1.0):
                tmp = pr_ * x2r - pi_ * x2i + cval
                pi_ = pr_ * x2i + pi_ * x2r
                pr_ = tmp
            sr_ = pr_ * xr - pi_ * xi
            si_ = pr_ * xi + pi_ * xr
            small = 1.0 if xr * xr + xi * xi < 0.0025 else 0.0
            tr[u, ix] = fr + small * (sr_ - fr)
            ti[u, ix] = fi + small * (si_ - fi)
            sr[u, ix] = 2.0 * (er * inr - ei * ini)
            si[u, ix] = 2.0 * (er * ini + ei * inr)
    # deepest layer that still matters, per wavevector
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
        else:                                    # what lies below looks semi-infinite
            ybr[ix] = zr[kind[last + 1], ix]
            ybi[ix] = zi[kind[last + 1], ix]
    # one pass from the back: Y <- Z (Z T + Y) / (Z + Y T); c <- D c + (D Y - Y_top) g s
    for j in range(jmax, -1, -1):
        u = kind[j]
        for ix in range(nx):
            keep = 1.0 if j <= stop[ix] else 0.0
            a_r = zr[u, ix]
            a_i = zi[u, ix]
            t_r = tr[u, ix]
            t_i = ti[u, ix]
            b_r = ybr[ix]
            b_i = ybi[ix]
            den_r = a_r + b_r * t_r - b_i * t_i
            den_i = a_i + b_r * t_i + b_i * t_r
            q = 1.0 / (den_r * den_r + den_i * den_i)
            w_r = (a_r * den_r + a_i * den_i) * q    # Z / (Z + Y tanh)
            w_i = (a_i * den_r - a_r * den_i) * q
            p_r = a_r * t_r - a_i * t_i + b_r
            p_i = a_r * t_i + a_i * t_r + b_i
            yt_r = w_r * p_r - w_i * p_i
            yt_i = w_r * p_i + w_i * p_r
            d_r = sr[u, ix] * w_r - si[u, ix] * w_i
            d_i = sr[u, ix] * w_i + si[u, ix] * w_r
            o_r = d_r * b_r - d_i * b_i - yt_r
            o_i = d_r * b_i + d_i * b_r - yt_i
            # below the cut-off: c unchanged (D = 1, source 0), Y unchanged
            dvr[ix] = 1.0 + keep * (d_r - 1.0)
            dvi[ix] = keep * d_i
            ogr[ix] = keep * (o_r * gr[u, ix] - o_i * gi[u, ix])
            ogi[ix] = keep * (o_r * gi[u, ix] + o_i * gr[u, ix])
            ybr[ix] = b_r + keep * (yt_r - b_r)
            ybi[ix] = b_i + keep * (yt_i - b_i)
        for c in range(n_chan):
            k = coef[j, c]
            for ix in range(nx):
                c_r = cr[c, ix]
                c_i = ci[c, ix]
                cr[c, ix] = dvr[ix] * c_r - dvi[ix] * c_i + ogr[ix] * k
                ci[c, ix] = dvr[ix] * c_i + dvi[ix] * c_r + ogi[ix] * k
    # H = -c / (Y + h_front)
    for ix in range(nx):
        s_r = ybr[ix] + h_front
        s_i = ybi[ix]
        q = -1.0 / (s_r * s_r + s_i * s_i)
        sc_r = s_r * q
        sc_i = -s_i * q
        for c in range(n_chan):
            h_r = cr[c, ix] * sc_r - ci[c, ix] * sc_i
            h_i = cr[c, ix] * sc_i + ci[c, ix] * sc_r
            cr[c, ix] = h_r
            ci[c, ix] = h_i


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
    n_chan = coef.shape[1]
    for iy in prange(ny):
        ky = qy[iy]
        h_re = np.empty((n_chan, nx))
        h_im = np.empty((n_chan, nx))
        _transfer_row(qx, ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega, h_front, h_back,
                      h_re, h_im)
        signs_y = 2 if iy == nyquist_row else 1
        if signs_y == 2:
            a_re = np.empty((n_chan, nx))
            a_im = np.empty((n_chan, nx))
            _transfer_row(qx, -ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef, omega, h_front, h_back,
                          a_re, a_im)
            for c in range(n_chan):
                for ix in range(nx):
                    h_re[c, ix] = 0.5 * (h_re[c, ix] + a_re[c, ix])
                    h_im[c, ix] = 0.5 * (h_im[c, ix] + a_im[c, ix])
        if nyquist_x:
            last = nx - 1
            b_re = np.empty((n_chan, 1))
            b_im = np.empty((n_chan, 1))
            mx = np.empty(1)
            mx[0] = -qx[last]
            acc_r = np.zeros(n_chan)
            acc_i = np.zeros(n_chan)
            for sy in range(signs_y):
                _transfer_row(mx, ky if sy == 0 else -ky, kind, thick, rhoc, k3, kxx, kxy, kyy, coef,
                              omega, h_front, h_back, b_re, b_im)
                for c in range(n_chan):
                    acc_r[c] += b_re[c, 0]
                    acc_i[c] += b_im[c, 0]
            for c in range(n_chan):
                h_re[c, last] = 0.5 * (h_re[c, last] + acc_r[c] / signs_y)
                h_im[c, last] = 0.5 * (h_im[c, last] + acc_i[c] / signs_y)
        for ix in range(nx):
            acc_re = complex(0.0, 0.0)
            acc_im = complex(0.0, 0.0)
            for c in range(n_chan):
                s = spec[c, iy, ix]
                acc_re += h_re[c, ix] * s
                acc_im += h_im[c, ix] * s
            out_re[iy, ix] = acc_re
            out_im[iy, ix] = acc_im
