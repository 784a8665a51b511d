"""Compiled kernel of the lateral heat model: the layered solution at every wavevector.

Kept in its own module so that importing :mod:`fusion.mechanics` does not import numba;
:mod:`fusion.mechanics._lateral` imports it on first use.

For each wavevector ``q`` of a half spectrum (``rfft2`` layout) the kernel runs the
admittance recursion of :mod:`fusion.mechanics._heat` from the back face to the viewed
face with each layer's exponent ``lambda = sqrt((i omega rho c + q.K q) / k3)`` and each
layer's particular solution ``g theta_ad`` with ``g = i omega rho c / (i omega rho c + q.K q)``.
The flux obeys ``q = Y theta + c`` at every interface: the admittance ``Y`` and the
source term ``c`` are carried together from the back face to the viewed face
(``c <- D c + own g s`` with ``s`` the layer's source spectrum, a Horner form of
``sum_j (prod of the D above j) own_j g_j s_j``), and the surface value is
``-c / (Y + h_front)``. Since ``H(q) = H(-q)`` and the fields are real, the same pass
gives the value at ``-q`` from the conjugate source: the kernel writes the full
spectrum of the complex surface response, and one complex inverse transform gives it.

Layout, for speed:

* small loops over one row of wavevectors, on real and imaginary parts in float64
  arrays, a few arrays each, indexed rather than sliced, and no branch that cannot
  become a select, so that LLVM turns them into vector code; numpy's error model, as
  Python's raises on a division by zero and that exit keeps a loop scalar (no division
  here can meet a zero: conductivities, heat capacities and frequency are positive);
* layers that share thickness, heat capacity and conductivities (a laminate has few
  distinct plies) share one set of square roots, exponentials and sines per wavevector,
  and the rows ``ky`` and ``-ky`` share them too: a type at ``(kx, -ky)`` is its mirror
  (the opposite in-plane cross term) at ``(kx, ky)``;
* layers of one material and angle share their source spectrum;
* ``exp(-lambda d)`` from tables at whole and half steps times short series, not from
  the library's exp, sin and cos, which are calls and keep a loop scalar;
* the recursion starts at the first layer below which the thermal wave has decayed by
  ``exp(-40)`` (the sum of ``Re(lambda d)`` from the viewed face): what lies deeper
  changes the surface value by less than ``2**N exp(-40)`` of it, below double precision
  for the stacks of the trade. Short wavelengths seldom reach past a few plies. A
  wavevector starts at the deepest such layer of any after it in its row (nearly always
  its own: the decay grows with ``|q|``), so the wavevectors that reach a layer are the
  first ones of the row and each layer is one loop without a mask.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["surface_spectrum", "place_fields", "blend_margins", "ATTENUATION_CUTOFF"]

#: Sum of Re(lambda d) from the viewed face beyond which deeper layers are left out.
ATTENUATION_CUTOFF = 40.0

# Fast-math without reassociation: the order of the sums (and of the series) is the written one.
_FM = {"nnan", "ninf", "nsz", "arcp", "contract", "afn"}
_JIT = {"nogil": True, "fastmath": _FM, "error_model": "numpy", "cache": True}

# exp(-x) = exp(-n) exp(-t) with n the nearest integer to Re(x) and exp(-i y) = exp(-i m/2)
# exp(-i b) with m/2 the nearest half to Im(x): table values times series in |t| <= 1/2,
# |b| <= 1/4 (within a few ulps; the subtractions are exact). Past the table exp(-x) is taken as
# 0: such a layer lies beyond the cut-off, where exp(-x) no longer reaches the surface value.
_TABLE_END = 64
_EXP_WHOLE = np.exp(-np.arange(_TABLE_END + 1.0))
_HALVES = np.arange(2 * _TABLE_END + 1.0) / 2.0
_COS_HALF = np.cos(_HALVES)
_SIN_HALF = np.sin(_HALVES)
# Horner coefficients, highest degree first: exp(-t) to t**14, sin(b) / b to b**10, cos(b) to b**12
_EXP_SERIES = tuple((-1.0) ** k / math.factorial(k) for k in range(14, -1, -1))
_SIN_SERIES = tuple((-1.0) ** k / math.factorial(2 * k + 1) for k in range(5, -1, -1))
_COS_SERIES = tuple((-1.0) ** k / math.factorial(2 * k) for k in range(6, -1, -1))


@njit(inline="always", **_JIT)
def _exp_neg(xr, xi):  # pragma: no cover - compiled
    """``exp(-(xr + i xi))`` as (real, imaginary) for ``0 <= xi <= xr``."""
    n = int(min(xr, float(_TABLE_END)) + 0.5)
    t = xr - n
    p = 0.0
    for c in _EXP_SERIES:
        p = p * t + c
    m = _EXP_WHOLE[n] * p
    if xr > _TABLE_END:
        m = 0.0
    k = int(2.0 * min(xi, float(_TABLE_END)) + 0.5)
    b = xi - _HALVES[k]
    b2 = b * b
    sb = 0.0
    for c in _SIN_SERIES:
        sb = sb * b2 + c
    sb *= b
    cb = 0.0
    for c in _COS_SERIES:
        cb = cb * b2 + c
    ca = _COS_HALF[k]
    sa = _SIN_HALF[k]
    return m * (ca * cb - sa * sb), -m * (sa * cb + ca * sb)


# Rows of a layer type over a row of wavevectors, (U, 11, nx): Z = k3 lambda, g, tanh(x),
# sech(x), Z tanh(x) (real and imaginary parts) and Re(x), x = lambda d. The loops index these
# arrays rather than take views of their rows: a view costs reference counting per call.
_Z, _G, _T, _S, _ZT, _ATT = 0, 2, 4, 6, 8, 10
_N_ROWS = 11


@njit(**_JIT)
def _layer_type(nx, qx, ky, d, cap, k3, kxx, kxy, kyy, types, u):  # pragma: no cover - compiled
    """Type u of layer over a row: Z, g, tanh and sech of x = lambda d, Re(x)."""
    ik = 1.0 / k3
    ai = cap * ik
    cap2 = cap * cap
    for ix in range(nx):
        kx = qx[ix]
        quad = kxx * kx * kx + 2.0 * kxy * kx * ky + kyy * ky * ky
        ar = quad * ik
        r = math.sqrt(ar * ar + ai * ai)
        lr = math.sqrt(0.5 * (r + ar))              # principal root: Re > 0 as ai > 0
        li = ai / (2.0 * lr)
        types[u, _Z, ix] = k3 * lr
        types[u, _Z + 1, ix] = k3 * li
        den = 1.0 / (quad * quad + cap2)
        types[u, _G, ix] = cap2 * den
        types[u, _G + 1, ix] = cap * quad * den
        xr = lr * d
        xi = li * d
        types[u, _ATT, ix] = xr
        er, ei = _exp_neg(xr, xi)
        e2r = er * er - ei * ei
        e2i = 2.0 * er * ei
        dd = 1.0 / ((1.0 + e2r) * (1.0 + e2r) + e2i * e2i)
        inr = (1.0 + e2r) * dd                      # 1 / (1 + e^-2x)
        ini = -e2i * dd
        t_r = (1.0 - e2r) * inr + e2i * ini
        t_i = (1.0 - e2r) * ini - e2i * inr
        if xr * xr + xi * xi < 0.0025:
            # much thinner than its diffusion length: the series (1 - e^-2x would cancel)
            x2r = xr * xr - xi * xi
            x2i = 2.0 * xr * xi
            pr = 62.0 / 2835.0 * x2r - 17.0 / 315.0
            pi = 62.0 / 2835.0 * x2i
            pr, pi = pr * x2r - pi * x2i + 2.0 / 15.0, pr * x2i + pi * x2r
            pr, pi = pr * x2r - pi * x2i - 1.0 / 3.0, pr * x2i + pi * x2r
            pr, pi = pr * x2r - pi * x2i + 1.0, pr * x2i + pi * x2r
            t_r = pr * xr - pi * xi
            t_i = pr * xi + pi * xr
        types[u, _T, ix] = t_r
        types[u, _T + 1, ix] = t_i
        types[u, _ZT, ix] = k3 * (lr * t_r - li * t_i)
        types[u, _ZT + 1, ix] = k3 * (lr * t_i + li * t_r)
        types[u, _S, ix] = 2.0 * (er * inr - ei * ini)
        types[u, _S + 1, ix] = 2.0 * (er * ini + ei * inr)


@njit(**_JIT)
def _count_reached(nx, types, u, work, acc, last):  # pragma: no cover - compiled
    """Add a layer's Re(x) to the sum in work row ``acc``; count it where the sum is within the cut-off."""
    for ix in range(nx):
        a = work[acc, ix] + types[u, _ATT, ix]
        work[acc, ix] = a
        last[ix] += 1 if a <= ATTENUATION_CUTOFF else 0


@njit(**_JIT)
def _source(nx, spec, iy, coef_r, work, s):  # pragma: no cover - compiled
    """A source spectrum ``sum_c coef_r[c] spec[c, iy]`` over a row, into work rows s, s + 1."""
    for ix in range(nx):
        work[s, ix] = 0.0
        work[s + 1, ix] = 0.0
    for c in range(coef_r.shape[0]):
        w = coef_r[c]
        if w != 0.0:
            for ix in range(nx):
                v = spec[c, iy, ix]
                work[s, ix] += w * v.real
                work[s + 1, ix] += w * v.imag


@njit(**_JIT)
def _layer_step(nx, types, u, work, s, state):  # pragma: no cover - compiled
    """A layer of type u over a row: Y <- Z (Z T + Y) / (Z + Y T) and c <- D c + own g s.

    ``state`` rows: Y, then ``c`` carried for the real and the imaginary part of the layer's
    source ``s`` (work rows s, s + 1) apart (``ca``, ``cb``), so that ``c(q) = ca + i cb``
    and ``c(-q) = ca - i cb``.
    """
    for ix in range(nx):
        a_r = types[u, _Z, ix]
        a_i = types[u, _Z + 1, ix]
        t_r = types[u, _T, ix]
        t_i = types[u, _T + 1, ix]
        b_r = state[0, ix]
        b_i = state[1, ix]
        den_r = a_r + b_r * t_r - b_i * t_i
        den_i = a_i + b_r * t_i + b_i * t_r
        q = 1.0 / (den_r * den_r + den_i * den_i)
        w_r = (a_r * den_r + a_i * den_i) * q        # Z / (Z + Y tanh)
        w_i = (a_i * den_r - a_r * den_i) * q
        p_r = types[u, _ZT, ix] + b_r
        p_i = types[u, _ZT + 1, ix] + b_i
        yt_r = w_r * p_r - w_i * p_i
        yt_i = w_r * p_i + w_i * p_r
        s_r = types[u, _S, ix]
        s_i = types[u, _S + 1, ix]
        d_r = s_r * w_r - s_i * w_i
        d_i = s_r * w_i + s_i * w_r
        o_r = d_r * b_r - d_i * b_i - yt_r
        o_i = d_r * b_i + d_i * b_r - yt_i
        g_r = types[u, _G, ix]
        g_i = types[u, _G + 1, ix]
        og_r = o_r * g_r - o_i * g_i                  # own contribution times g
        og_i = o_r * g_i + o_i * g_r
        sa = work[s, ix]
        sb = work[s + 1, ix]
        ca_r = state[2, ix]
        ca_i = state[3, ix]
        cb_r = state[4, ix]
        cb_i = state[5, ix]
        state[0, ix] = yt_r
        state[1, ix] = yt_i
        state[2, ix] = d_r * ca_r - d_i * ca_i + og_r * sa
        state[3, ix] = d_r * ca_i + d_i * ca_r + og_i * sa
        state[4, ix] = d_r * cb_r - d_i * cb_i + og_r * sb
        state[5, ix] = d_r * cb_i + d_i * cb_r + og_i * sb


@njit(**_JIT)
def _row_types(qx, ky, thick, rhoc, k3, kxx, kxy, kyy, omega, types):  # pragma: no cover - compiled
    """Every layer type at the wavevectors ``(qx, ky)``, into ``types`` (U, 11, >= len(qx))."""
    for u in range(thick.shape[0]):
        _layer_type(qx.shape[0], qx, ky, thick[u], omega * rhoc[u], k3[u], kxx[u], kxy[u], kyy[u], types, u)


@njit(**_JIT)
def _row_response(nx, kind, stack, spec, iy, types, plus, minus, scratch):  # pragma: no cover - compiled
    """Surface spectrum at the row's wavevectors q (``plus``) and at -q (``minus``).

    ``kind`` (N,) the type of each layer in ``types`` (filled by :func:`_row_types`);
    ``stack``: ``source_of`` (N,) each layer's row of ``sources`` (R, C), the coefficients
    of the C source spectra ``spec[:, iy, :nx]``, and the faces' ``h_front``, ``h_back``;
    ``scratch``: ``work`` (2 R + 1, >= nx), ``state`` (6, >= nx), ``last`` (>= nx),
    ``reach`` (N,), ``reach_source`` (R,).
    """
    source_of, sources, h_front, h_back = stack
    work, state, last, reach, reach_source = scratch
    n = kind.shape[0]
    acc = 2 * sources.shape[0]
    # the deepest layer the wave reaches (within the cut-off) per wavevector
    for ix in range(nx):
        work[acc, ix] = 0.0
        last[ix] = 0
    for j in range(n):
        _count_reached(nx, types, kind[j], work, acc, last)
    # Each wavevector starts at the deepest layer any wavevector after it in the row
    # reaches (the attenuation grows with |q|, so that is nearly its own): the wavevectors
    # that reach a layer are then the first ones of the row and the loops need no mask; a
    # deeper start only adds layers the cut-off would have left out.
    deepest = 0
    for ix in range(nx - 1, -1, -1):
        deepest = max(deepest, min(last[ix], n - 1))
        last[ix] = deepest
    for j in range(n):
        reach[j] = 0
    for ix in range(nx):
        stop = last[ix]
        reach[stop] = ix + 1                         # lanes up to ix reach layer stop
        if stop == n - 1:
            state[0, ix] = h_back
            state[1, ix] = 0.0
        else:                                        # what lies below looks semi-infinite
            state[0, ix] = types[kind[stop + 1], _Z, ix]
            state[1, ix] = types[kind[stop + 1], _Z + 1, ix]
        for k in range(2, 6):
            state[k, ix] = 0.0
    for j in range(deepest - 1, -1, -1):
        reach[j] = max(reach[j], reach[j + 1])
    # layers of one material and angle share their source
    for r in range(sources.shape[0]):
        reach_source[r] = 0
    for j in range(deepest + 1):
        reach_source[source_of[j]] = max(reach_source[source_of[j]], reach[j])
    for r in range(sources.shape[0]):
        _source(reach_source[r], spec, iy, sources[r], work, 2 * r)
    for j in range(deepest, -1, -1):
        _layer_step(reach[j], types, kind[j], work, 2 * source_of[j], state)
    # theta(0) = -c / (Y(0) + h_front) at q (c = ca + i cb) and at -q (c = ca - i cb)
    for ix in range(nx):
        s_r = state[0, ix] + h_front
        s_i = state[1, ix]
        q = -1.0 / (s_r * s_r + s_i * s_i)
        fr = s_r * q
        fi = -s_i * q
        ur = state[2, ix] - state[5, ix]
        ui = state[3, ix] + state[4, ix]
        vr = state[2, ix] + state[5, ix]
        vi = state[3, ix] - state[4, ix]
        plus[ix] = complex(fr * ur - fi * ui, fr * ui + fi * ur)
        minus[ix] = complex(fr * vr - fi * vi, fr * vi + fi * vr)


@njit(**_JIT)
def surface_spectrum(qx, qy, kind, mirror, thick, rhoc, k3, kxx, kxy, kyy, source_of, sources, omega, h_front,
                     h_back, nyquist_x, spec, out, first_pair, end_pair):  # pragma: no cover - compiled
    """Full spectrum of the complex surface response, the rows of pairs ``first_pair:end_pair``.

    ``qx`` (NXh,), ``qy`` (NY,) wavenumbers in rad/px of the half spectrum; per layer type
    (U,): thickness m, rho c J/(m3 K), k3 W/(m K) and the in-plane tensor on the grid
    ``kxx, kxy, kyy`` in W/(m K) px2/m2, closed under ``kxy -> -kxy``: ``mirror`` (U,) the
    type with the opposite ``kxy``, which is type u at ``(qx, -ky)``; ``kind`` (N,) the type
    of each layer (viewed face first); ``source_of`` (N,) its row of ``sources`` (R, C), its
    adiabatic value per unit of the C source fields; ``spec`` (C, NY, NXh) their half
    spectra (``rfft2``). Writes ``sum_c H_c(q) spec_c(q)`` into ``out`` (NY, NX) at every
    wavevector of rows p and ``NY - p`` for the pairs p (``0 <= p <= NY // 2``) asked for:
    separate calls may fill separate pairs at the same time.

    The rows ``ky`` and ``-ky`` are done together: the types of one are the mirrored types
    of the other, so a laminate of +-theta, 0 and 90 plies computes its exponentials once
    for both. A Nyquist bin of an even-sized axis stands for both ``+pi`` and ``-pi``; with
    an in-plane cross term ``H`` differs there, so the bin gets the mean over its aliases.
    ``nyquist_x``: the last column of the half spectrum is such a bin.
    """
    ny = qy.shape[0]
    nx = qx.shape[0]
    n_full = out.shape[1]
    n_types = thick.shape[0]
    n_chan = spec.shape[0]
    n = kind.shape[0]
    kinds = np.empty((2, n), np.int64)
    for j in range(n):
        kinds[0, j] = kind[j]
        kinds[1, j] = mirror[kind[j]]
    stack = (source_of, sources, h_front, h_back)
    scratch = (np.empty((2 * sources.shape[0] + 1, nx)), np.empty((6, nx)), np.empty(nx, np.int64),
               np.empty(n, np.int64), np.empty(sources.shape[0], np.int64))
    types = np.empty((n_types, _N_ROWS, nx))
    plus = np.empty(nx, np.complex128)
    minus = np.empty(nx, np.complex128)
    plus2 = np.empty(nx, np.complex128)
    minus2 = np.empty(nx, np.complex128)
    one = np.empty(1)
    types1 = np.empty((n_types, _N_ROWS, 1))
    spec1 = np.empty((n_chan, 1, 1), np.complex128)
    for pair in range(first_pair, end_pair):
        _row_types(qx, qy[pair], thick, rhoc, k3, kxx, kxy, kyy, omega, types)
        other = (ny - pair) % ny
        for side in range(1 if other == pair else 2):
            iy = pair if side == 0 else other
            _row_response(nx, kinds[side], stack, spec, iy, types, plus, minus, scratch)
            n_signs = 1
            if other == pair and ny % 2 == 0 and pair == ny // 2:
                # the Nyquist row stands for +ky and -ky: the mean of both
                n_signs = 2
                _row_response(nx, kinds[1], stack, spec, iy, types, plus2, minus2, scratch)
                for ix in range(nx):
                    plus[ix] = 0.5 * (plus[ix] + plus2[ix])
                    minus[ix] = 0.5 * (minus[ix] + minus2[ix])
            if nyquist_x:
                # the last column stands for +pi and -pi: the mean over every alias of the bin
                end = nx - 1
                one[0] = -qx[end]
                for c in range(n_chan):
                    spec1[c, 0, 0] = spec[c, iy, end]
                total = 0j
                for k in range(n_signs):
                    _row_types(one, qy[iy] if k == 0 else -qy[iy], thick, rhoc, k3, kxx, kxy, kyy, omega, types1)
                    _row_response(1, kinds[0], stack, spec1, 0, types1, plus2, minus2, scratch)
                    total += plus2[0]
                plus[end] = 0.5 * (plus[end] + total / n_signs)
            mirror_row = (ny - iy) % ny
            for ix in range(nx):
                out[iy, ix] = plus[ix]
            for ix in range(1, (n_full + 1) // 2):    # the other half: H(-q) = H(q), spec real
                out[mirror_row, n_full - ix] = minus[ix]


# ---------------------------------------------------------------- padded fields
@njit(nogil=True, cache=True)  # no fast-math: it would take every value as finite
def place_fields(fields, out):  # pragma: no cover - compiled
    """Copy ``fields`` (C, Y, X), any strides, into ``out[:, :Y, :X]``; True where every channel is finite."""
    n_chan, ny, nx = fields.shape
    finite = np.ones((ny, nx), np.bool_)
    for y in range(ny):
        for c in range(n_chan):
            for x in range(nx):
                v = fields[c, y, x]
                out[c, y, x] = v
                if not math.isfinite(v):
                    finite[y, x] = False
    return finite


@njit(**_JIT)
def blend_margins(out, ny, nx, w_x, w_y):  # pragma: no cover - compiled
    """Fill ``out`` (C, NY, NX) beyond the data ``[:, :ny, :nx]``: weight ``w_x`` (NX - nx,) of the
    last column against the first, then ``w_y`` (NY - ny,) of the last row against the first."""
    n_chan, n_rows, n_cols = out.shape
    for c in range(n_chan):
        for y in range(ny):
            last = out[c, y, nx - 1]
            first = out[c, y, 0]
            for k in range(n_cols - nx):
                out[c, y, nx + k] = w_x[k] * last + (1.0 - w_x[k]) * first
        for k in range(n_rows - ny):
            w = w_y[k]
            for x in range(n_cols):
                out[c, ny + k, x] = w * out[c, ny - 1, x] + (1.0 - w) * out[c, 0, x]
