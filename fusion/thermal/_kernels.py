"""Streaming accumulation kernels of the lock-in (numba, parallel over pixel rows) and their driver.

The least-squares fit of every pixel's series on a six-column basis needs, per
pixel, only the six cross products ``sum_t x_j(t) d(t)`` and the sum of squares
``sum_t d(t)**2`` of the offset data ``d = y - y_ref``; the 6x6 normal matrix is
common to all pixels and built once from the frame times. The kernel adds one
block of frames into those sums, so a stack of any length is fitted in one
pass over memory, block after block.

Layout and numerics
-------------------
* ``frames`` is a ``(n, Y, X)`` block in its own dtype (float32/float64, or
  int16/uint16/uint8/int32 detector counts), read once and never copied (the
  kernel sees it through a view: bands of rows, below).
* Work precision (:func:`work_dtype`): float32 for float32 and 8/16-bit integer
  stacks, float64 for float64 and wider integers. In float32 work each value
  costs half the vector lanes of float64: the products are compute-bound, not
  memory-bound, so this is what lets the pass run near the speed of memory
  (``fusion bench`` reports both, ``lockin_f64_work_ratio``).
* Two-level sums keep float32 work accurate. Within a sub-block of
  :data:`SUB_BLOCK` frames the products are summed in the work dtype about that
  sub-block's first frame ``r_b`` (the *local* reference, so a drift over the
  record never inflates the values multiplied); at the end of the sub-block the
  partial sums are widened to float64 and moved onto the global reference ``r``
  (the first frame) exactly: ``sum b (y - r) = sum b (y - r_b) + (r_b - r) sum b``
  and ``sum (y - r)^2 = sum (y - r_b)^2 + 2 (r_b - r) sum (y - r_b) + K (r_b - r)^2``,
  with the column sums ``sum b`` of the sub-block precomputed once for all pixels.
  ``y - r_b`` is exact in float32 for float32 frames whose values are within a
  factor two of each other (Sterbenz) and for integer counts below 2**24, so the
  only rounding is that of the products and of at most ``SUB_BLOCK / 4`` additions.
  The basis is rounded to the work dtype *before* the normal matrix is built
  (:func:`fusion.thermal._lockin`), so the fit is the exact least-squares fit on
  the basis actually multiplied.
* ``acc`` is ``(Y, 8, X)`` float64: for each image row, the seven sums lie in
  seven contiguous lines of ``X`` values, and an eighth line adds up the squares
  about the sub-block references, the scale the float32 rounding is relative to
  (it tells whether float32 work resolves the residual). The work-dtype partial
  sums are a thread-local ``(7, X)`` block kept in the L1 cache while the frames
  stream past.
* Frames are unrolled by four: the twenty basis values of those frames are
  hoisted out of the pixel loop, each partial sum is loaded and stored once per
  four frames.
* Narrow rows are joined into bands (:func:`band_rows`): a C-contiguous
  ``(n, Y, X)`` block is viewed, without a copy, as ``(n, Y/k, k X)`` so that one
  kernel row holds about :data:`BAND_BYTES` of work values (its seven lines of
  partial sums stay in the L1 cache beside the frame rows streaming past, and a
  parallel row is long enough to be worth scheduling). The sums, the reference, the
  maxima and the maps share that layout; only :func:`fusion.thermal._lockin._solve`
  turns the maps back to ``(Y, X)`` (again a view).
* Plain numba over numpy arrays, no hand-written LLVM (no software prefetch): the
  kernel builds with any numba release; ``fusion bench`` measures the pass against
  one plain read of the stack and against the whole realistic run.
* NaN or infinite values need no test in the loop: they poison only the sums
  of their own pixel, which are checked after the pass. Nothing is shared
  between pixels, so a bad pixel never disturbs its neighbours.

Only ``contract`` is allowed among the fast-math flags (fused multiply-add);
``nnan``/``ninf`` would let the compiler drop the NaN propagation relied on.
"""

from __future__ import annotations

import math
import mmap
import threading

import numpy as np
from numba import njit, prange

from .._progress import Progress

__all__ = ["accumulate", "solve", "stream", "stream_dask", "is_dask", "work_dtype", "block_sums",
           "atan2_deg", "gram", "band_rows", "banded", "N_SUMS", "MAP_NAMES", "SUB_BLOCK", "BAND_BYTES"]

#: Order of the maps written by :func:`solve`.
MAP_NAMES = ("T0", "delta_T", "delta_T_quadrature", "magnitude", "delta_T_std", "second_harmonic",
             "second_harmonic_ratio", "drift_rate", "residual_std", "snr", "phase")

#: Sums kept per pixel: six cross products with the basis, the sum of d**2, and the
#: sum of squares about the sub-block references (precision check only).
N_SUMS = 8

#: Frames summed in the work dtype before the sums are widened to float64. The
#: rounding of a float32 partial sum grows with its length; 64 frames keep it near
#: 1e-7 of the sub-block's own values while the widening costs ~0.1 operation a value.
SUB_BLOCK = 64

#: Bytes of work values (float32 or float64) one kernel row aims at: 640 float32 values.
BAND_BYTES = 2560

_FASTMATH = {"contract"}


def work_dtype(dtype):
    """Arithmetic precision of the pass for a stack of ``dtype``: float32 or float64.

    float32 where every stored value is exact in float32 (float16/float32 and
    integers of at most 16 bits), float64 otherwise.
    """
    dt = np.dtype(dtype)
    if (dt.kind == "f" and dt.itemsize <= 4) or (dt.kind in "iu" and dt.itemsize <= 2):
        return np.dtype(np.float32)
    return np.dtype(np.float64)


def band_rows(ny, nx, dtype, work=None):
    """Image rows joined into one kernel row for frames of ``ny`` x ``nx`` values of ``dtype``.

    The largest ``k <= 8`` dividing ``ny`` with ``k * nx`` values of the work dtype
    (``work``, default :func:`work_dtype` of ``dtype``) within :data:`BAND_BYTES`,
    else 1 (rows already that long, or no divisor).
    """
    size = (work_dtype(dtype) if work is None else np.dtype(work)).itemsize
    k = 1
    for c in range(2, 9):
        if ny % c == 0 and c * nx * size <= BAND_BYTES:
            k = c
    return k


def banded(arr, k):
    """View the last two axes ``(Y, X)`` of a C-contiguous array as ``(Y/k, k X)`` (no copy)."""
    if k == 1:
        return arr
    *lead, ny, nx = arr.shape
    return arr.reshape(*lead, ny // k, k * nx)


def block_sums(basis):
    """Column sums (float64) of ``basis`` over its sub-blocks of :data:`SUB_BLOCK` rows.

    Sub-blocks are counted from the first row given, as :func:`accumulate` counts them.
    """
    b = np.asarray(basis, dtype=np.float64)
    return np.add.reduceat(b, np.arange(0, b.shape[0], SUB_BLOCK), axis=0)


def gram(b):
    """``b.T @ b`` in float64 for an (n, m) float32 or float64 array."""
    b = np.asarray(b, dtype=np.float64)
    return b.T @ b


@njit(parallel=True, cache=True, fastmath=_FASTMATH)
def accumulate(frames, basis, bsum, ref, acc, vmax, vmin, first):  # pragma: no cover - compiled
    """Add the lock-in sums of ``frames`` (n, Y, X) into ``acc`` (Y, 8, X) float64.

    With ``first`` (the first block of a pass) ``acc`` is cleared row by row as the pass
    reaches it, so it may come uninitialised (``np.empty``: no separate zeroing pass).
    ``basis`` is (n, 6) in the work dtype with column 0 equal to one; ``bsum`` its float64
    column sums per sub-block (:func:`block_sums`); ``ref`` the (Y, X) float64 global
    reference frame. ``vmax`` and ``vmin`` (Y, X) in the work dtype receive the largest and
    smallest raw value of each pixel, or are (0, 0) to skip that bookkeeping.
    """
    n, ny, nx = frames.shape
    track = vmax.shape[0] > 0
    for y in prange(ny):
        p = np.zeros((7, nx), basis.dtype)    # partial sums of one sub-block
        rb = np.empty(nx, basis.dtype)        # local reference: the sub-block's first frame
        if first:
            for j in range(N_SUMS):
                for x in range(nx):
                    acc[y, j, x] = 0.0
        for f0 in range(0, n, SUB_BLOCK):
            f1 = min(n, f0 + SUB_BLOCK)
            for x in range(nx):
                rb[x] = frames[f0, y, x]
            f = f0
            while f + 4 <= f1:
                b10, b11, b12, b13 = basis[f, 1], basis[f + 1, 1], basis[f + 2, 1], basis[f + 3, 1]
                b20, b21, b22, b23 = basis[f, 2], basis[f + 1, 2], basis[f + 2, 2], basis[f + 3, 2]
                b30, b31, b32, b33 = basis[f, 3], basis[f + 1, 3], basis[f + 2, 3], basis[f + 3, 3]
                b40, b41, b42, b43 = basis[f, 4], basis[f + 1, 4], basis[f + 2, 4], basis[f + 3, 4]
                b50, b51, b52, b53 = basis[f, 5], basis[f + 1, 5], basis[f + 2, 5], basis[f + 3, 5]
                for x in range(nx):
                    r = rb[x]
                    d0 = frames[f, y, x] - r
                    d1 = frames[f + 1, y, x] - r
                    d2 = frames[f + 2, y, x] - r
                    d3 = frames[f + 3, y, x] - r
                    p[0, x] += (d0 + d1) + (d2 + d3)
                    p[1, x] = p[1, x] + b10 * d0 + b11 * d1 + b12 * d2 + b13 * d3
                    p[2, x] = p[2, x] + b20 * d0 + b21 * d1 + b22 * d2 + b23 * d3
                    p[3, x] = p[3, x] + b30 * d0 + b31 * d1 + b32 * d2 + b33 * d3
                    p[4, x] = p[4, x] + b40 * d0 + b41 * d1 + b42 * d2 + b43 * d3
                    p[5, x] = p[5, x] + b50 * d0 + b51 * d1 + b52 * d2 + b53 * d3
                    p[6, x] = p[6, x] + d0 * d0 + d1 * d1 + d2 * d2 + d3 * d3
                if track:  # the four rows are still in the L1 cache
                    for k in range(4):
                        for x in range(nx):
                            vmax[y, x] = max(vmax[y, x], frames[f + k, y, x])
                            vmin[y, x] = min(vmin[y, x], frames[f + k, y, x])
                f += 4
            while f < f1:
                b1, b2, b3, b4, b5 = basis[f, 1], basis[f, 2], basis[f, 3], basis[f, 4], basis[f, 5]
                for x in range(nx):
                    d = frames[f, y, x] - rb[x]
                    p[0, x] += d
                    p[1, x] += b1 * d
                    p[2, x] += b2 * d
                    p[3, x] += b3 * d
                    p[4, x] += b4 * d
                    p[5, x] += b5 * d
                    p[6, x] += d * d
                if track:
                    for x in range(nx):
                        vmax[y, x] = max(vmax[y, x], frames[f, y, x])
                        vmin[y, x] = min(vmin[y, x], frames[f, y, x])
                f += 1
            # widen to float64 and move onto the global reference (module docstring)
            k = f0 // SUB_BLOCK
            n0, n1, n2, n3, n4, n5 = bsum[k, 0], bsum[k, 1], bsum[k, 2], bsum[k, 3], bsum[k, 4], bsum[k, 5]
            for x in range(nx):
                c = np.float64(rb[x]) - ref[y, x]
                s0 = np.float64(p[0, x])
                s6 = np.float64(p[6, x])
                acc[y, 0, x] += s0 + n0 * c
                acc[y, 1, x] += np.float64(p[1, x]) + n1 * c
                acc[y, 2, x] += np.float64(p[2, x]) + n2 * c
                acc[y, 3, x] += np.float64(p[3, x]) + n3 * c
                acc[y, 4, x] += np.float64(p[4, x]) + n4 * c
                acc[y, 5, x] += np.float64(p[5, x]) + n5 * c
                acc[y, 6, x] += s6 + c * (2.0 * s0 + n0 * c)
                acc[y, 7, x] += s6
            p[:] = 0


#: atan(a) = a P(a**2) on [0, 1]: coefficients of P, a degree-9 least-squares fit of
#: atan(a)/a at 400 Chebyshev nodes in a**2 (made with numpy.polynomial.Chebyshev.fit and
#: converted to powers). Largest error 1.8e-9 rad (1e-7 degree), far below the float32
#: rounding of a phase map; checked against numpy.arctan2 in the tests.
_ATAN_COEF = (0.9999999975460206, -0.3333328229551422, 0.19998230640418527, -0.14261573680607523,
              0.10940198966442138, -0.08372063951105461, 0.057463557891640364,
              -0.030717508940221887, 0.01068071946222294, -0.0017437011468155053)


@njit(inline="always", fastmath=_FASTMATH)
def atan2_deg(yv, xv):  # pragma: no cover - compiled
    """``degrees(arctan2(yv, xv))`` without branches, so a loop over pixels stays vectorised.

    numpy's conventions: (+-0, +-0) gives 0 or +-180 by the signs of the zeros; a NaN gives NaN.
    """
    ax = abs(xv)
    ay = abs(yv)
    hi = max(ax, ay)
    lo = min(ax, ay)
    a = lo / hi if hi > 0.0 else 0.0
    if xv != xv or yv != yv:
        a = np.nan
    u = a * a
    c = _ATAN_COEF
    p = c[9]
    p = p * u + c[8]
    p = p * u + c[7]
    p = p * u + c[6]
    p = p * u + c[5]
    p = p * u + c[4]
    p = p * u + c[3]
    p = p * u + c[2]
    p = p * u + c[1]
    p = p * u + c[0]
    r = a * p
    r = 0.5 * math.pi - r if ay > ax else r
    r = math.pi - r if math.copysign(1.0, xv) < 0.0 else r
    r = -r if math.copysign(1.0, yv) < 0.0 else r
    return r * (180.0 / math.pi)


@njit(parallel=True, cache=True, fastmath=_FASTMATH, error_model="numpy")
def solve(acc, ref, ginv, vmax, vmin, saturation, low, gain, offset, half, dof, resolved, out, valid,
          counts):  # pragma: no cover - compiled
    """Per-pixel coefficients and maps from the sums, in place.

    ``out`` is (11, Y, X) float32 receiving the maps of :data:`MAP_NAMES`; ``valid``
    (Y, X) bool the pixels fitted; ``counts`` (Y, 5) int64 per row the numbers of valid,
    non-finite, saturated and dead pixels, and of valid pixels whose residual sum of
    squares is below ``resolved`` times their sum of squares about the sub-block
    references (float32 sums cannot be trusted with that residual: see
    :func:`fusion.thermal._lockin._fit`). ``vmax`` and ``vmin`` are (Y, X), or (0, 0) when
    no threshold is set; a pixel whose largest raw value is at or above ``saturation``, or
    whose smallest is at or below ``low``, counts as saturated. Masked pixels get NaN.
    """
    ny = acc.shape[0]
    nx = acc.shape[2]
    check_sat = vmax.shape[0] > 0
    ag = abs(gain)
    inv_dof = 1.0 / dof
    c_std = 2.0 * math.sqrt(ginv[2, 2])  # std(Re C) = 2 s sqrt((X^T X)^-1_aa)
    inv_half = 1.0 / half
    for y in prange(ny):
        # row-wise loops over x keep every step vectorised (selects, no branches)
        poison = np.empty(nx)
        codes = np.zeros(nx, np.int64)
        if check_sat:
            for x in range(nx):
                codes[x] = 2 if (vmax[y, x] >= saturation) | (vmin[y, x] <= low) else 0
        n1 = n2 = n3 = 0
        for x in range(nx):
            # one non-finite sum makes the total non-finite (finite sums cannot overflow here),
            # and tot - tot is 0 exactly when tot is finite (a select, where isfinite branches)
            tot = (acc[y, 0, x] + acc[y, 1, x] + acc[y, 2, x] + acc[y, 3, x] + acc[y, 4, x]
                   + acc[y, 5, x] + acc[y, 6, x])
            code = codes[x]
            code = code if code != 0 else (3 if acc[y, 6, x] == 0.0 else 0)
            code = 1 if tot - tot != 0.0 else code
            codes[x] = code
            n1 += code == 1
            n2 += code == 2
            n3 += code == 3
            poison[x] = 0.0 if code == 0 else np.nan
            valid[y, x] = code == 0
        counts[y, 0] = nx - n1 - n2 - n3
        counts[y, 1] = n1
        counts[y, 2] = n2
        counts[y, 3] = n3
        g00, g01, g02, g03, g04, g05 = ginv[0, 0], ginv[0, 1], ginv[0, 2], ginv[0, 3], ginv[0, 4], ginv[0, 5]
        g10, g11, g12, g13, g14, g15 = ginv[1, 0], ginv[1, 1], ginv[1, 2], ginv[1, 3], ginv[1, 4], ginv[1, 5]
        g20, g21, g22, g23, g24, g25 = ginv[2, 0], ginv[2, 1], ginv[2, 2], ginv[2, 3], ginv[2, 4], ginv[2, 5]
        g30, g31, g32, g33, g34, g35 = ginv[3, 0], ginv[3, 1], ginv[3, 2], ginv[3, 3], ginv[3, 4], ginv[3, 5]
        g40, g41, g42, g43, g44, g45 = ginv[4, 0], ginv[4, 1], ginv[4, 2], ginv[4, 3], ginv[4, 4], ginv[4, 5]
        g50, g51, g52, g53, g54, g55 = ginv[5, 0], ginv[5, 1], ginv[5, 2], ginv[5, 3], ginv[5, 4], ginv[5, 5]
        n4 = 0
        for x in range(nx):
            a0 = acc[y, 0, x]
            a1 = acc[y, 1, x]
            a2 = acc[y, 2, x]
            a3 = acc[y, 3, x]
            a4 = acc[y, 4, x]
            a5 = acc[y, 5, x]
            b0 = g00 * a0 + g01 * a1 + g02 * a2 + g03 * a3 + g04 * a4 + g05 * a5
            b1 = g10 * a0 + g11 * a1 + g12 * a2 + g13 * a3 + g14 * a4 + g15 * a5
            b2 = g20 * a0 + g21 * a1 + g22 * a2 + g23 * a3 + g24 * a4 + g25 * a5
            b3 = g30 * a0 + g31 * a1 + g32 * a2 + g33 * a3 + g34 * a4 + g35 * a5
            b4 = g40 * a0 + g41 * a1 + g42 * a2 + g43 * a3 + g44 * a4 + g45 * a5
            b5 = g50 * a0 + g51 * a1 + g52 * a2 + g53 * a3 + g54 * a4 + g55 * a5
            fit = b0 * a0 + b1 * a1 + b2 * a2 + b3 * a3 + b4 * a4 + b5 * a5
            rss = max(acc[y, 6, x] - fit, 0.0)
            s = math.sqrt(rss * inv_dof)   # residual std, raw units
            p = poison[x]  # NaN on masked pixels, 0 elsewhere: an add keeps the loop branch-free
            dT = 2.0 * gain * b2
            dq = -2.0 * gain * b3 + 0.0  # +0.0: a -0.0 would give a phase of -180
            std = c_std * ag * s
            mag = 2.0 * ag * math.sqrt(b2 * b2 + b3 * b3)
            h2 = 2.0 * ag * math.sqrt(b4 * b4 + b5 * b5)
            n4 += (rss < resolved * acc[y, 7, x]) & (p == 0.0)
            out[0, y, x] = gain * (b0 + ref[y, x]) + offset + p
            out[1, y, x] = dT + p
            out[2, y, x] = dq + p
            out[3, y, x] = mag + p
            out[4, y, x] = std + p
            out[5, y, x] = h2 + p
            out[6, y, x] = h2 / mag + p
            out[7, y, x] = gain * b1 * inv_half + p
            out[8, y, x] = ag * s + p
            out[9, y, x] = abs(dT) / std + p
            out[10, y, x] = atan2_deg(np.float32(dq), np.float32(dT)) + p
        counts[y, 4] = n4


# ------------------------------------------------------------------------------ driver
# numba's parallel region is launched from one thread at a time (dask's threaded scheduler
# would otherwise oversubscribe the two cores); reading the next block still overlaps.
_KERNEL_LOCK = threading.Lock()
# default size of one streamed block: large enough that the per-call overhead vanishes,
# small enough that a memory-mapped stack stays far below any sensible memory budget
_BLOCK_BYTES = 32 * 2**20


def _mmap_of(arr):
    """The mmap object behind a memory-mapped array and the byte offset of ``arr`` in it."""
    a = arr
    while isinstance(a, np.ndarray) and not isinstance(a.base, mmap.mmap):
        a = a.base
    if not isinstance(a, np.ndarray):
        return None, 0
    mm = a.base
    start = getattr(a, "offset", 0) % mmap.ALLOCATIONGRANULARITY if isinstance(a, np.memmap) else 0
    map_addr = a.__array_interface__["data"][0] - start
    return mm, arr.__array_interface__["data"][0] - map_addr


def _release(block):
    """Drop the pages of a processed memory-mapped block from this process's memory.

    Clean file pages stay in the page cache, but no longer count in the resident set,
    so a stack larger than memory streams with bounded RSS.
    """
    if not hasattr(mmap, "MADV_DONTNEED"):
        return
    mm, off = _mmap_of(block)
    if mm is None or block.nbytes == 0:
        return
    page = mmap.PAGESIZE
    lo = (off // page) * page
    hi = min(off + block.nbytes, len(mm))
    try:
        mm.madvise(mmap.MADV_DONTNEED, lo, hi - lo)
    except (OSError, ValueError):  # closed map or an exotic platform: only memory, not results
        pass


def _kernel_block(block):
    """A native-order, C-contiguous numeric block the kernels accept (no copy when already so)."""
    b = np.asarray(block)
    if b.dtype.kind not in "iuf":
        raise TypeError(f"frames must be numeric (int, uint or float), got dtype {b.dtype!r}")
    if b.dtype.kind == "f" and b.dtype.itemsize not in (4, 8):   # float16, long double
        b = b.astype(work_dtype(b.dtype))
    elif not b.dtype.isnative:
        b = b.astype(b.dtype.newbyteorder("="))
    return np.ascontiguousarray(b)


def _block_sums(block, basis, ref, with_max):
    """Sums, maxima and minima of one block in the band layout of ``ref``: the unit of work of the dask path."""
    block = _kernel_block(block)
    k = block.shape[1] // ref.shape[0]
    block = banded(block, k)
    acc = np.empty((block.shape[1], N_SUMS, block.shape[2]))
    vmax = np.full(block.shape[1:], -np.inf, basis.dtype) if with_max else None
    vmin = np.full(block.shape[1:], np.inf, basis.dtype) if with_max else None
    _run_kernel(block, np.ascontiguousarray(basis), ref, acc, vmax, vmin, True)
    return acc, vmax, vmin


def _add_sums(a, b):
    acc = a[0] + b[0]
    if a[1] is None:
        return acc, None, None
    return acc, np.maximum(a[1], b[1]), np.minimum(a[2], b[2])


def _run_kernel(block, basis, ref, acc, vmax, vmin, first):
    """One call of :func:`accumulate`; ``basis`` is already in the work dtype."""
    bsum = block_sums(basis)
    if vmax is None:
        vmax = vmin = np.empty((0, 0), basis.dtype)
    with _KERNEL_LOCK:
        accumulate(block, basis, bsum, ref, acc, vmax, vmin, first)


def is_dask(frames):
    """True for a dask array (checked without importing dask)."""
    return type(frames).__module__.startswith("dask") and hasattr(frames, "to_delayed")


def stream_dask(frames, basis, with_max, chunk_frames, progress):
    """The pass over a dask array: one task per block of whole frames, summed pairwise.

    Runs on the active scheduler (threads by default, a distributed cluster when a
    client is active); each task returns only the sums of its block. Returns sums,
    maxima, minima and reference in the band layout (see :func:`stream`).
    """
    import dask

    # whole frames per block: the kernel walks rows of contiguous frames
    arr = frames.rechunk({0: int(chunk_frames), 1: -1, 2: -1} if chunk_frames else {1: -1, 2: -1})
    _, ny, nx = arr.shape
    ref = banded(np.array(arr[0].compute(), dtype=np.float64), band_rows(ny, nx, arr.dtype, basis.dtype))
    ref_d = dask.delayed(ref)
    edges = np.concatenate([[0], np.cumsum(arr.chunks[0])]).astype(int)
    blocks = arr.to_delayed().ravel()
    parts = [dask.delayed(_block_sums)(blk, basis[a:b], ref_d, with_max)
             for blk, a, b in zip(blocks, edges[:-1], edges[1:])]
    while len(parts) > 1:  # pairwise tree: few partial sums alive at once
        parts = [dask.delayed(_add_sums)(parts[i], parts[i + 1]) if i + 1 < len(parts) else parts[i]
                 for i in range(0, len(parts), 2)]
    from dask.callbacks import Callback

    n_tasks = len(dict(parts[0].__dask_graph__()))
    with Progress(n_tasks, desc="lock-in", unit="tasks", enabled=progress) as bar, \
            Callback(posttask=lambda *a: bar.update()):
        (acc, vmax, vmin), = dask.compute(parts[0])
    return acc, vmax, vmin, ref


def _whole_sub_blocks(frames):
    """A block length near ``frames``: whole sub-blocks where possible, else whole groups of four."""
    if frames >= SUB_BLOCK:
        return frames // SUB_BLOCK * SUB_BLOCK
    return max(4, frames // 4 * 4)


def stream(frames, basis, with_max, chunk_frames, progress):
    """One pass over a NumPy array, memory map or lazy stack; returns sums, maxima, minima, reference.

    All three are in the band layout of :func:`band_rows` (``Y/k`` rows of ``k X``
    values; the sums ``(Y/k, 8, k X)``), in which :func:`solve` works too.
    """
    n, ny, nx = frames.shape
    source = getattr(frames, "memmap", None)
    if source is None and isinstance(frames, np.ndarray):
        source = frames
    frame_bytes = max(1, ny * nx * np.dtype(getattr(frames, "dtype", np.float32)).itemsize)
    if chunk_frames is None:
        if isinstance(source, np.ndarray) and source.flags.c_contiguous and _mmap_of(source)[0] is None:
            # in memory already: one call (each parallel launch ends on a barrier that a
            # busy core delays), or about 20 steps when a progress bar is shown
            chunk_frames = n if not progress else _whole_sub_blocks(-(-n // 20))
        else:
            chunk_frames = _whole_sub_blocks(_BLOCK_BYTES // frame_bytes)
    limit = getattr(frames, "max_bytes", None)
    if limit and source is None:  # a lazy reader refuses reads above its limit
        chunk_frames = min(int(chunk_frames), max(1, int(limit) // frame_bytes))
    chunk_frames = int(chunk_frames)
    k = band_rows(ny, nx, getattr(frames, "dtype", np.float32), basis.dtype)
    acc = np.empty((ny // k, N_SUMS, k * nx))    # cleared by the first block
    vmax = np.full((ny // k, k * nx), -np.inf, basis.dtype) if with_max else None
    vmin = np.full((ny // k, k * nx), np.inf, basis.dtype) if with_max else None
    ref = None
    with Progress(n, desc="lock-in", unit="frames", enabled=progress) as bar:
        for f0 in range(0, n, chunk_frames):
            f1 = min(n, f0 + chunk_frames)
            raw = source[f0:f1] if source is not None else frames[f0:f1]
            block = _kernel_block(raw)
            if ref is None:
                ref = banded(np.array(block[0], dtype=np.float64), k)
            _run_kernel(banded(block, k), basis[f0:f1], ref, acc, vmax, vmin, f0 == 0)
            if isinstance(raw, np.ndarray):
                _release(raw)
            del raw, block
            bar.advance_to(f1)
    return acc, vmax, vmin, ref
