"""Compiled kernels: bicubic B-spline interpolation and IC-GN subset refinement.

The inverse compositional Gauss-Newton scheme (Baker & Matthews 2004, applied
to correlation by Pan, Li & Tong 2013) keeps the Jacobian and Hessian of the
reference subset fixed, so each iteration costs one interpolation of the
deformed subset. The criterion is the zero-normalised sum of squared
differences (ZNSSD), insensitive to offset and scale of the grey levels; the
reported quality is ZNCC = 1 - ZNSSD / 2. Interpolation is the cubic B-spline
of the prefiltered deformed image (Unser 1999), evaluated with the exact
16-tap kernel in float64.
"""

from __future__ import annotations

import types

import numba
import numpy as np
from numba import njit, prange
from scipy import ndimage

__all__ = ["prefilter", "reference_gradients", "interpolate", "icgn_batch", "REASON_CODES",
           "OK", "OUTSIDE_ROI", "LOW_CONTRAST", "OUT_OF_IMAGE", "NO_CONVERGENCE", "LOW_ZNCC",
           "UNREACHED", "DIVERGED", "SEED_FAILED"]

OK = 0
OUTSIDE_ROI = 1
LOW_CONTRAST = 2
OUT_OF_IMAGE = 3
NO_CONVERGENCE = 4
LOW_ZNCC = 5
UNREACHED = 6
DIVERGED = 7
SEED_FAILED = 8

#: Meaning of each ``reason`` code of a correlation result.
REASON_CODES = {
    OK: "converged with ZNCC at or above min_zncc",
    OUTSIDE_ROI: "centre outside the region of interest, or too few subset pixels inside it",
    LOW_CONTRAST: "reference subset without usable contrast (singular Hessian)",
    OUT_OF_IMAGE: "the warped subset left the deformed image",
    NO_CONVERGENCE: "max_iterations reached before the update fell below tolerance",
    LOW_ZNCC: "converged, but ZNCC below min_zncc",
    UNREACHED: "no converged neighbour or seed to start from",
    DIVERGED: "the update became non-finite or larger than the subset",
    SEED_FAILED: "seed without a clear match (integer search, or refined ZNCC "
                 "below max(min_zncc, 0.9))",
}


def prefilter(image):
    """Cubic B-spline coefficients of an image (float64, mirror boundary).

    Evaluating them with :func:`interpolate` reproduces
    ``scipy.ndimage.map_coordinates(image, coords, order=3, mode="mirror")``.
    """
    a = np.asarray(image, dtype=np.float64)
    return ndimage.spline_filter(a, order=3, mode="mirror", output=np.float64)


def reference_gradients(coef):
    """Gradients along columns and rows of the B-spline interpolant at the pixel nodes.

    At integer positions the cubic B-spline has weights (1, 4, 1)/6 and its
    derivative (-1/2, 0, 1/2), so the exact gradient of the interpolant is a
    separable 3-tap filter of the coefficients.
    """
    smooth = np.array([1.0, 4.0, 1.0]) / 6.0
    deriv = np.array([-0.5, 0.0, 0.5])
    gx = ndimage.correlate1d(ndimage.correlate1d(coef, deriv, axis=1, mode="mirror"),
                             smooth, axis=0, mode="mirror")
    gy = ndimage.correlate1d(ndimage.correlate1d(coef, deriv, axis=0, mode="mirror"),
                             smooth, axis=1, mode="mirror")
    return gx, gy


@njit(cache=True, inline="always")
def _interp(coef, y, x):
    i = int(y)
    j = int(x)
    t = y - i
    s = x - j
    t2 = t * t
    s2 = s * s
    t3 = t2 * t
    s3 = s2 * s
    wy0 = (1.0 - 3.0 * t + 3.0 * t2 - t3) / 6.0
    wy1 = (4.0 - 6.0 * t2 + 3.0 * t3) / 6.0
    wy2 = (1.0 + 3.0 * t + 3.0 * t2 - 3.0 * t3) / 6.0
    wy3 = t3 / 6.0
    wx0 = (1.0 - 3.0 * s + 3.0 * s2 - s3) / 6.0
    wx1 = (4.0 - 6.0 * s2 + 3.0 * s3) / 6.0
    wx2 = (1.0 + 3.0 * s + 3.0 * s2 - 3.0 * s3) / 6.0
    wx3 = s3 / 6.0
    r0 = coef[i - 1]
    r1 = coef[i]
    r2 = coef[i + 1]
    r3 = coef[i + 2]
    acc = wy0 * (wx0 * r0[j - 1] + wx1 * r0[j] + wx2 * r0[j + 1] + wx3 * r0[j + 2])
    acc += wy1 * (wx0 * r1[j - 1] + wx1 * r1[j] + wx2 * r1[j + 1] + wx3 * r1[j + 2])
    acc += wy2 * (wx0 * r2[j - 1] + wx1 * r2[j] + wx2 * r2[j + 1] + wx3 * r2[j + 2])
    acc += wy3 * (wx0 * r3[j - 1] + wx1 * r3[j] + wx2 * r3[j + 1] + wx3 * r3[j + 2])
    return acc


@njit(cache=True, parallel=True)
def interpolate(coef, ys, xs):
    """B-spline values at (row, col) positions; each must satisfy 1 <= pos < size - 2."""
    out = np.empty(ys.size)
    for k in prange(ys.size):
        out[k] = _interp(coef, ys[k], xs[k])
    return out


@njit(cache=True)
def _cholesky_inverse(h, n):
    """Inverse of a symmetric positive-definite n x n matrix; None-like flag when singular."""
    low = np.zeros((n, n))
    for i in range(n):
        for j in range(i + 1):
            s = h[i, j]
            for k in range(j):
                s -= low[i, k] * low[j, k]
            if i == j:
                if s <= 1e-12 * h[i, i] or s <= 0.0:
                    return low, False
                low[i, i] = np.sqrt(s)
            else:
                low[i, j] = s / low[j, j]
    inv = np.zeros((n, n))
    for col in range(n):
        z = np.zeros(n)
        for i in range(n):
            s = 1.0 if i == col else 0.0
            for k in range(i):
                s -= low[i, k] * z[k]
            z[i] = s / low[i, i]
        for i in range(n - 1, -1, -1):
            s = z[i]
            for k in range(i + 1, n):
                s -= low[k, i] * inv[k, col]
            inv[i, col] = s / low[i, i]
    return inv, True


_FAST = {"contract", "arcp", "reassoc", "nsz"}  # no nnan/ninf: the NaN checks must stay
# index into (1, xi, eta, xi^2, xi eta, eta^2) of the product of shape terms a, b of (1, xi, eta)
_MONOMIAL = np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]])


@njit(cache=True, fastmath=_FAST)
def _refine_one(ref, gx, gy, coef, mask, r, c, p, half, max_iter, tol, min_fill, out_p,
                xi, eta, fz, fxs, fys, hess, out_noise):
    """IC-GN on one subset; returns (reason, zncc, iterations, sssig_x, sssig_y).

    ``xi, eta, fz, fxs, fys`` are work arrays of (2 half + 1)^2 values and
    ``hess`` a 6 x 6 work array, reused from subset to subset. ``out_noise``
    receives the diagonal elements (u, u) and (v, v) of the inverse Hessian,
    the sum of squared grey-level deviations of the reference subset and its
    pixel count, for the noise estimate of the translation.
    """
    nmax = (2 * half + 1) * (2 * half + 1)
    n = 0
    fsum = 0.0
    for a in range(-half, half + 1):
        for b in range(-half, half + 1):
            if mask[r + a, c + b]:
                xi[n] = b
                eta[n] = a
                fz[n] = ref[r + a, c + b]
                fxs[n] = gx[r + a, c + b]
                fys[n] = gy[r + a, c + b]
                fsum += fz[n]
                n += 1
    for k in range(6):
        out_p[k] = np.nan
    for k in range(4):
        out_noise[k] = np.nan
    if n < min_fill * nmax or n < 12:
        return OUTSIDE_ROI, np.nan, 0, np.nan, np.nan
    fm = fsum / n
    # The Hessian J^T J with J = [fx, fx xi, fx eta, fy, fy xi, fy eta] needs only
    # the moments of fx^2, fx fy and fy^2 against 1, xi, eta, xi^2, xi eta, eta^2.
    m = np.zeros((3, 6))
    ff = 0.0
    j0 = 0.0
    j1 = 0.0
    j2 = 0.0
    j3 = 0.0
    j4 = 0.0
    j5 = 0.0
    s0 = 0.0
    s1 = 0.0
    s2 = 0.0
    s3 = 0.0
    s4 = 0.0
    s5 = 0.0
    for k in range(n):
        f = fz[k] - fm
        fz[k] = f
        ff += f * f
        fx = fxs[k]
        fy = fys[k]
        x = xi[k]
        y = eta[k]
        q0 = fx * fx
        q1 = fx * fy
        q2 = fy * fy
        m[0, 0] += q0
        m[0, 1] += q0 * x
        m[0, 2] += q0 * y
        m[0, 3] += q0 * x * x
        m[0, 4] += q0 * x * y
        m[0, 5] += q0 * y * y
        m[1, 0] += q1
        m[1, 1] += q1 * x
        m[1, 2] += q1 * y
        m[1, 3] += q1 * x * x
        m[1, 4] += q1 * x * y
        m[1, 5] += q1 * y * y
        m[2, 0] += q2
        m[2, 1] += q2 * x
        m[2, 2] += q2 * y
        m[2, 3] += q2 * x * x
        m[2, 4] += q2 * x * y
        m[2, 5] += q2 * y * y
        s0 += fx
        s1 += fx * x
        s2 += fx * y
        s3 += fy
        s4 += fy * x
        s5 += fy * y
        j0 += fx * f
        j1 += fx * x * f
        j2 += fx * y * f
        j3 += fy * f
        j4 += fy * x * f
        j5 += fy * y * f
    sx = m[0, 0]
    sy = m[2, 0]
    for a in range(3):
        for b in range(3):
            mono = _MONOMIAL[a, b]
            hess[a, b] = m[0, mono]
            hess[a, b + 3] = m[1, mono]
            hess[a + 3, b] = m[1, mono]
            hess[a + 3, b + 3] = m[2, mono]
    df = np.sqrt(ff)
    hinv, ok = _cholesky_inverse(hess, 6)
    if df <= 1e-9 * n or not ok:
        return LOW_CONTRAST, np.nan, 0, sx, sy
    out_noise[0] = hinv[0, 0]
    out_noise[1] = hinv[3, 3]
    out_noise[2] = ff
    out_noise[3] = n
    jf = np.array([j0, j1, j2, j3, j4, j5])
    jsum = np.array([s0, s1, s2, s3, s4, s5])
    u, ux, uy, v, vx, vy = p[0], p[1], p[2], p[3], p[4], p[5]
    rows_lim = ref.shape[0] - 2.0
    cols_lim = ref.shape[1] - 2.0
    zncc = np.nan
    jg = np.zeros(6)
    dp = np.zeros(6)
    for it in range(1, max_iter + 1):
        a00 = 1.0 + ux
        a01 = uy
        a10 = vx
        a11 = 1.0 + vy
        gs = 0.0
        gg = 0.0
        fg = 0.0
        g0 = 0.0
        g1 = 0.0
        g2 = 0.0
        g3 = 0.0
        g4 = 0.0
        g5 = 0.0
        # the warp is affine, so the subset's corners bound every warped pixel
        # and the loop below needs no per-pixel bounds test
        ex = abs(a00) * half + abs(a01) * half
        ey = abs(a10) * half + abs(a11) * half
        if not (c + u - ex >= 1.0 and c + u + ex < cols_lim
                and r + v - ey >= 1.0 and r + v + ey < rows_lim):
            return OUT_OF_IMAGE, np.nan, it, sx, sy
        for k in range(n):
            x = xi[k]
            y = eta[k]
            xw = c + u + a00 * x + a01 * y
            yw = r + v + a10 * x + a11 * y
            g = _interp(coef, yw, xw)
            gs += g
            gg += g * g
            fg += fz[k] * g
            tx = fxs[k] * g
            ty = fys[k] * g
            g0 += tx
            g1 += tx * x
            g2 += tx * y
            g3 += ty
            g4 += ty * x
            g5 += ty * y
        jg[0] = g0
        jg[1] = g1
        jg[2] = g2
        jg[3] = g3
        jg[4] = g4
        jg[5] = g5
        gm = gs / n
        dg2 = gg - n * gm * gm
        if not dg2 > 1e-18 * gg:
            return LOW_CONTRAST, np.nan, it, sx, sy
        dg = np.sqrt(dg2)
        zncc = fg / (df * dg)
        ratio = df / dg
        # b = sum J^T [(f - fm) - (df/dg)(g - gm)], expanded so one pass suffices
        for j in range(6):
            dp[j] = 0.0
        for i in range(6):
            bi = jf[i] - ratio * (jg[i] - gm * jsum[i])
            for j in range(6):
                dp[j] -= hinv[j, i] * bi
        # inverse composition W(p) <- W(p) o W(dp)^-1 (affine 2x2 block and translation)
        d00 = 1.0 + dp[1]
        d01 = dp[2]
        d10 = dp[4]
        d11 = 1.0 + dp[5]
        det = d00 * d11 - d01 * d10
        if not (abs(det) > 1e-12) or not np.isfinite(det):
            return DIVERGED, zncc, it, sx, sy
        i00 = d11 / det
        i01 = -d01 / det
        i10 = -d10 / det
        i11 = d00 / det
        n00 = a00 * i00 + a01 * i10
        n01 = a00 * i01 + a01 * i11
        n10 = a10 * i00 + a11 * i10
        n11 = a10 * i01 + a11 * i11
        u = u - (n00 * dp[0] + n01 * dp[3])
        v = v - (n10 * dp[0] + n11 * dp[3])
        ux = n00 - 1.0
        uy = n01
        vx = n10
        vy = n11 - 1.0
        step = np.sqrt(dp[0] ** 2 + dp[3] ** 2
                       + half * half * (dp[1] ** 2 + dp[2] ** 2 + dp[4] ** 2 + dp[5] ** 2))
        if not np.isfinite(step) or step > 2.0 * half:
            return DIVERGED, zncc, it, sx, sy
        if step < tol:
            out_p[0] = u
            out_p[1] = ux
            out_p[2] = uy
            out_p[3] = v
            out_p[4] = vx
            out_p[5] = vy
            return OK, zncc, it, sx, sy
    out_p[0] = u
    out_p[1] = ux
    out_p[2] = uy
    out_p[3] = v
    out_p[4] = vx
    out_p[5] = vy
    return NO_CONVERGENCE, zncc, max_iter, sx, sy


def _batch(ref, gx, gy, coef, mask, rows, cols, p0, half, max_iter, tol, min_zncc, min_fill):
    """Refine K subsets (in parallel when compiled so).

    Parameters
    ----------
    ref, gx, gy : (H, W) float64
        Reference image and its interpolant gradients along columns and rows.
    coef : (H, W) float64
        B-spline coefficients of the deformed image.
    mask : (H, W) bool
        Reference pixels that may enter a subset.
    rows, cols : (K,) int64
        Subset centres (px).
    p0 : (K, 6) float64
        Initial shape parameters (u, du/dx, du/dy, v, dv/dx, dv/dy), image axes.
    half : int
        Subset half-width; the subset is (2 half + 1) pixels square.

    Returns
    -------
    p : (K, 6) float64, zncc : (K,), iterations : (K,) int32, reason : (K,) int8,
    sssig : (K, 2) float64 (sums of squared gradients along columns and rows),
    noise : (K, 4) float64 (inverse-Hessian elements (u, u) and (v, v), sum of
    squared grey-level deviations of the reference subset, its pixel count)
    """
    k_total = rows.size
    p = np.empty((k_total, 6))
    zncc = np.empty(k_total)
    iters = np.zeros(k_total, dtype=np.int32)
    reason = np.zeros(k_total, dtype=np.int8)
    sssig = np.empty((k_total, 2))
    noise = np.empty((k_total, 4))
    nmax = (2 * half + 1) * (2 * half + 1)
    # blocks of points share one work space, so the allocations are per block
    n_blocks = min(k_total, 256)
    for blk in prange(n_blocks):
        xi = np.empty(nmax)
        eta = np.empty(nmax)
        fz = np.empty(nmax)
        fxs = np.empty(nmax)
        fys = np.empty(nmax)
        hess = np.empty((6, 6))
        for k in range(blk, k_total, n_blocks):
            res, z, it, sx, sy = _refine_one(ref, gx, gy, coef, mask, rows[k], cols[k], p0[k],
                                             half, max_iter, tol, min_fill, p[k],
                                             xi, eta, fz, fxs, fys, hess, noise[k])
            if res == OK and not z >= min_zncc:
                res = LOW_ZNCC
            reason[k] = res
            zncc[k] = z
            iters[k] = it
            sssig[k, 0] = sx
            sssig[k, 1] = sy
    return p, zncc, iters, reason, sssig, noise


def _renamed(fn, name):
    """A copy of ``fn`` under another name.

    numba's on-disk cache tells functions apart by module, name and line, not by compile
    options: a serial and a parallel compilation of one function would load each other's
    machine code, and the parallel one could run on one thread.
    """
    copy = types.FunctionType(fn.__code__, fn.__globals__, name, fn.__defaults__, fn.__closure__)
    copy.__qualname__ = name
    copy.__doc__ = fn.__doc__
    return copy


_batch_parallel = njit(cache=True, parallel=True)(_renamed(_batch, "_batch_parallel"))
_batch_serial = njit(cache=True)(_renamed(_batch, "_batch_serial"))

#: Below this many subsets a batch runs on one thread: waking the thread team
#: costs more than it saves, and much more when the cores are shared.
SERIAL_BELOW = 128


def icgn_batch(ref, gx, gy, coef, mask, rows, cols, p0, half, max_iter, tol, min_zncc, min_fill):
    """Refine K subsets with IC-GN; see :func:`_batch` for the arguments and returns."""
    if rows.size < SERIAL_BELOW:
        return _batch_serial(ref, gx, gy, coef, mask, rows, cols, p0, half, max_iter, tol,
                             min_zncc, min_fill)
    # dynamic scheduling: subsets differ in iterations, and on shared cores a
    # statically scheduled thread that loses its core holds up the whole batch
    with numba.parallel_chunksize(1):
        return _batch_parallel(ref, gx, gy, coef, mask, rows, cols, p0, half, max_iter, tol,
                               min_zncc, min_fill)
