"""Streaming accumulation kernels of the lock-in (numba, parallel over pixel rows) and their driver.

The least-squares fit of every pixel's series on a six-column basis needs, per
pixel, only the six cross products ``sum_t x_j(t) d(t)`` and the sum of squares
``sum_t d(t)**2`` of the offset data ``d = y - y_ref``; the 6x6 normal matrix is
common to all pixels and built once from the frame times. The kernels add one
block of frames into those sums, so a stack of any length is fitted in one
pass over memory, block after block.

Layout and numerics
-------------------
* ``frames`` is a ``(n, Y, X)`` block in its own dtype (float32/float64, or
  int16/uint16/int32/uint8 detector counts): values are widened to float64 one
  by one in registers, so integer stacks are fitted without a float copy.
* ``acc`` is ``(Y, 7, X)`` float64: for each image row, the seven sums lie in
  seven contiguous lines of ``X`` values, which keeps the inner loop over ``x``
  vectorised and the accumulators of one row in the L1 cache while the frames
  stream past.
* Frames are unrolled by eight: each accumulator is loaded and stored once per
  eight frames, and the forty basis values of those frames are hoisted out of
  the pixel loop (AVX-512 FMAs take them as broadcast memory operands). Eight
  measured about 10 % faster than four on the 2-core development machine.
* Subtracting a reference frame (the first one) before squaring avoids the
  cancellation of ``sum y**2 - (sum y)**2 / N`` when the mean (~300 K) dwarfs
  the signal (mK).
* NaN or infinite values need no test in the loop: they poison only the sums
  of their own pixel, which are checked after the pass. Nothing is shared
  between pixels, so a bad pixel never disturbs its neighbours.

Only ``contract`` is allowed among the fast-math flags (fused multiply-add);
``nnan``/``ninf`` would let the compiler drop the NaN propagation relied on.
"""

from __future__ import annotations

import math
import mmap
import sys
import threading

import numpy as np
from numba import njit, prange

__all__ = ["accumulate", "accumulate_with_max", "solve", "stream", "stream_dask", "is_dask", "N_SUMS",
           "MAP_NAMES"]

#: Order of the maps written by :func:`solve`.
MAP_NAMES = ("T0", "delta_T", "delta_T_quadrature", "magnitude", "delta_T_std", "second_harmonic",
             "second_harmonic_ratio", "drift_rate", "residual_std", "snr")

#: Sums kept per pixel: six cross products with the basis, then sum of d**2.
N_SUMS = 7

_FASTMATH = {"contract"}


@njit(parallel=True, cache=True, fastmath=_FASTMATH)
def accumulate(frames, basis, ref, acc):  # pragma: no cover - compiled
    """Add the lock-in sums of ``frames`` (n, Y, X) into ``acc`` (Y, 7, X) float64.

    ``basis`` is (n, 6) float64 with column 0 equal to one (its products are
    the plain sum); ``ref`` is the (Y, X) float64 reference frame.
    """
    n, ny, nx = frames.shape
    n8 = n - n % 8
    for y in prange(ny):
        for f in range(0, n8, 8):
            b10, b11, b12, b13 = basis[f, 1], basis[f + 1, 1], basis[f + 2, 1], basis[f + 3, 1]
            b14, b15, b16, b17 = basis[f + 4, 1], basis[f + 5, 1], basis[f + 6, 1], basis[f + 7, 1]
            b20, b21, b22, b23 = basis[f, 2], basis[f + 1, 2], basis[f + 2, 2], basis[f + 3, 2]
            b24, b25, b26, b27 = basis[f + 4, 2], basis[f + 5, 2], basis[f + 6, 2], basis[f + 7, 2]
            b30, b31, b32, b33 = basis[f, 3], basis[f + 1, 3], basis[f + 2, 3], basis[f + 3, 3]
            b34, b35, b36, b37 = basis[f + 4, 3], basis[f + 5, 3], basis[f + 6, 3], basis[f + 7, 3]
            b40, b41, b42, b43 = basis[f, 4], basis[f + 1, 4], basis[f + 2, 4], basis[f + 3, 4]
            b44, b45, b46, b47 = basis[f + 4, 4], basis[f + 5, 4], basis[f + 6, 4], basis[f + 7, 4]
            b50, b51, b52, b53 = basis[f, 5], basis[f + 1, 5], basis[f + 2, 5], basis[f + 3, 5]
            b54, b55, b56, b57 = basis[f + 4, 5], basis[f + 5, 5], basis[f + 6, 5], basis[f + 7, 5]
            for x in range(nx):
                r = ref[y, x]
                d0 = np.float64(frames[f, y, x]) - r
                d1 = np.float64(frames[f + 1, y, x]) - r
                d2 = np.float64(frames[f + 2, y, x]) - r
                d3 = np.float64(frames[f + 3, y, x]) - r
                d4 = np.float64(frames[f + 4, y, x]) - r
                d5 = np.float64(frames[f + 5, y, x]) - r
                d6 = np.float64(frames[f + 6, y, x]) - r
                d7 = np.float64(frames[f + 7, y, x]) - r
                acc[y, 0, x] += ((d0 + d1) + (d2 + d3)) + ((d4 + d5) + (d6 + d7))
                acc[y, 1, x] = (acc[y, 1, x] + b10 * d0 + b11 * d1 + b12 * d2 + b13 * d3
                                 + b14 * d4 + b15 * d5 + b16 * d6 + b17 * d7)
                acc[y, 2, x] = (acc[y, 2, x] + b20 * d0 + b21 * d1 + b22 * d2 + b23 * d3
                                 + b24 * d4 + b25 * d5 + b26 * d6 + b27 * d7)
                acc[y, 3, x] = (acc[y, 3, x] + b30 * d0 + b31 * d1 + b32 * d2 + b33 * d3
                                 + b34 * d4 + b35 * d5 + b36 * d6 + b37 * d7)
                acc[y, 4, x] = (acc[y, 4, x] + b40 * d0 + b41 * d1 + b42 * d2 + b43 * d3
                                 + b44 * d4 + b45 * d5 + b46 * d6 + b47 * d7)
                acc[y, 5, x] = (acc[y, 5, x] + b50 * d0 + b51 * d1 + b52 * d2 + b53 * d3
                                 + b54 * d4 + b55 * d5 + b56 * d6 + b57 * d7)
                acc[y, 6, x] = (acc[y, 6, x] + d0 * d0 + d1 * d1 + d2 * d2 + d3 * d3
                                + d4 * d4 + d5 * d5 + d6 * d6 + d7 * d7)
        for f in range(n8, n):
            b1, b2, b3, b4, b5 = basis[f, 1], basis[f, 2], basis[f, 3], basis[f, 4], basis[f, 5]
            for x in range(nx):
                d = np.float64(frames[f, y, x]) - ref[y, x]
                acc[y, 0, x] += d
                acc[y, 1, x] += b1 * d
                acc[y, 2, x] += b2 * d
                acc[y, 3, x] += b3 * d
                acc[y, 4, x] += b4 * d
                acc[y, 5, x] += b5 * d
                acc[y, 6, x] += d * d


@njit(parallel=True, cache=True, fastmath=_FASTMATH)
def accumulate_with_max(frames, basis, ref, acc, vmax):  # pragma: no cover - compiled
    """As :func:`accumulate`, also keeping the largest raw value of each pixel in ``vmax`` (Y, X) float64.

    Used only when a saturation threshold is set, so the plain pass pays nothing for it.
    """
    n, ny, nx = frames.shape
    n8 = n - n % 8
    for y in prange(ny):
        for f in range(0, n8, 8):
            b10, b11, b12, b13 = basis[f, 1], basis[f + 1, 1], basis[f + 2, 1], basis[f + 3, 1]
            b14, b15, b16, b17 = basis[f + 4, 1], basis[f + 5, 1], basis[f + 6, 1], basis[f + 7, 1]
            b20, b21, b22, b23 = basis[f, 2], basis[f + 1, 2], basis[f + 2, 2], basis[f + 3, 2]
            b24, b25, b26, b27 = basis[f + 4, 2], basis[f + 5, 2], basis[f + 6, 2], basis[f + 7, 2]
            b30, b31, b32, b33 = basis[f, 3], basis[f + 1, 3], basis[f + 2, 3], basis[f + 3, 3]
            b34, b35, b36, b37 = basis[f + 4, 3], basis[f + 5, 3], basis[f + 6, 3], basis[f + 7, 3]
            b40, b41, b42, b43 = basis[f, 4], basis[f + 1, 4], basis[f + 2, 4], basis[f + 3, 4]
            b44, b45, b46, b47 = basis[f + 4, 4], basis[f + 5, 4], basis[f + 6, 4], basis[f + 7, 4]
            b50, b51, b52, b53 = basis[f, 5], basis[f + 1, 5], basis[f + 2, 5], basis[f + 3, 5]
            b54, b55, b56, b57 = basis[f + 4, 5], basis[f + 5, 5], basis[f + 6, 5], basis[f + 7, 5]
            for x in range(nx):
                r = ref[y, x]
                v0 = np.float64(frames[f, y, x])
                v1 = np.float64(frames[f + 1, y, x])
                v2 = np.float64(frames[f + 2, y, x])
                v3 = np.float64(frames[f + 3, y, x])
                v4 = np.float64(frames[f + 4, y, x])
                v5 = np.float64(frames[f + 5, y, x])
                v6 = np.float64(frames[f + 6, y, x])
                v7 = np.float64(frames[f + 7, y, x])
                d0 = v0 - r
                d1 = v1 - r
                d2 = v2 - r
                d3 = v3 - r
                d4 = v4 - r
                d5 = v5 - r
                d6 = v6 - r
                d7 = v7 - r
                acc[y, 0, x] += ((d0 + d1) + (d2 + d3)) + ((d4 + d5) + (d6 + d7))
                acc[y, 1, x] = (acc[y, 1, x] + b10 * d0 + b11 * d1 + b12 * d2 + b13 * d3
                                 + b14 * d4 + b15 * d5 + b16 * d6 + b17 * d7)
                acc[y, 2, x] = (acc[y, 2, x] + b20 * d0 + b21 * d1 + b22 * d2 + b23 * d3
                                 + b24 * d4 + b25 * d5 + b26 * d6 + b27 * d7)
                acc[y, 3, x] = (acc[y, 3, x] + b30 * d0 + b31 * d1 + b32 * d2 + b33 * d3
                                 + b34 * d4 + b35 * d5 + b36 * d6 + b37 * d7)
                acc[y, 4, x] = (acc[y, 4, x] + b40 * d0 + b41 * d1 + b42 * d2 + b43 * d3
                                 + b44 * d4 + b45 * d5 + b46 * d6 + b47 * d7)
                acc[y, 5, x] = (acc[y, 5, x] + b50 * d0 + b51 * d1 + b52 * d2 + b53 * d3
                                 + b54 * d4 + b55 * d5 + b56 * d6 + b57 * d7)
                acc[y, 6, x] = (acc[y, 6, x] + d0 * d0 + d1 * d1 + d2 * d2 + d3 * d3
                                + d4 * d4 + d5 * d5 + d6 * d6 + d7 * d7)
                # NaN compares false and is caught by the sums instead
                m = max(max(max(v0, v1), max(v2, v3)), max(max(v4, v5), max(v6, v7)))
                vmax[y, x] = max(vmax[y, x], m)
        for f in range(n8, n):
            b1, b2, b3, b4, b5 = basis[f, 1], basis[f, 2], basis[f, 3], basis[f, 4], basis[f, 5]
            for x in range(nx):
                v = np.float64(frames[f, y, x])
                d = v - ref[y, x]
                acc[y, 0, x] += d
                acc[y, 1, x] += b1 * d
                acc[y, 2, x] += b2 * d
                acc[y, 3, x] += b3 * d
                acc[y, 4, x] += b4 * d
                acc[y, 5, x] += b5 * d
                acc[y, 6, x] += d * d
                vmax[y, x] = max(vmax[y, x], v)


@njit(parallel=True, cache=True, fastmath=_FASTMATH, error_model="numpy")
def solve(acc, ref, ginv, vmax, saturation, gain, offset, half, dof, out, reason):  # pragma: no cover
    """Per-pixel coefficients and maps from the sums, in place.

    ``out`` is (10, Y, X) float32 receiving the maps of :data:`MAP_NAMES` except the
    phase (computed afterwards from delta_T and delta_T_quadrature). ``reason`` (Y, X)
    int8 gets 0 valid, 1 non-finite, 2 saturated, 3 dead. ``vmax`` is (Y, X), or
    (0, 0) when no saturation threshold is set. Masked pixels get NaN.
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
        for x in range(nx):
            # one non-finite sum makes the total non-finite (finite sums cannot overflow here)
            tot = (acc[y, 0, x] + acc[y, 1, x] + acc[y, 2, x] + acc[y, 3, x] + acc[y, 4, x]
                   + acc[y, 5, x] + acc[y, 6, x])
            sat = check_sat and vmax[y, x] >= saturation
            code = 1 if not np.isfinite(tot) else (2 if sat else (3 if acc[y, 6, x] == 0.0 else 0))
            reason[y, x] = code
            poison[x] = 0.0 if code == 0 else np.nan
        g00, g01, g02, g03, g04, g05 = ginv[0, 0], ginv[0, 1], ginv[0, 2], ginv[0, 3], ginv[0, 4], ginv[0, 5]
        g10, g11, g12, g13, g14, g15 = ginv[1, 0], ginv[1, 1], ginv[1, 2], ginv[1, 3], ginv[1, 4], ginv[1, 5]
        g20, g21, g22, g23, g24, g25 = ginv[2, 0], ginv[2, 1], ginv[2, 2], ginv[2, 3], ginv[2, 4], ginv[2, 5]
        g30, g31, g32, g33, g34, g35 = ginv[3, 0], ginv[3, 1], ginv[3, 2], ginv[3, 3], ginv[3, 4], ginv[3, 5]
        g40, g41, g42, g43, g44, g45 = ginv[4, 0], ginv[4, 1], ginv[4, 2], ginv[4, 3], ginv[4, 4], ginv[4, 5]
        g50, g51, g52, g53, g54, g55 = ginv[5, 0], ginv[5, 1], ginv[5, 2], ginv[5, 3], ginv[5, 4], ginv[5, 5]
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
            s = math.sqrt(max(acc[y, 6, x] - fit, 0.0) * inv_dof)   # residual std, raw units
            p = poison[x]  # NaN on masked pixels, 0 elsewhere: an add keeps the loop branch-free
            dT = 2.0 * gain * b2
            std = c_std * ag * s
            mag = 2.0 * ag * math.sqrt(b2 * b2 + b3 * b3)
            h2 = 2.0 * ag * math.sqrt(b4 * b4 + b5 * b5)
            out[0, y, x] = gain * (b0 + ref[y, x]) + offset + p
            out[1, y, x] = dT + p
            out[2, y, x] = -2.0 * gain * b3 + 0.0 + p  # +0.0: a -0.0 would give a phase of -180
            out[3, y, x] = mag + p
            out[4, y, x] = std + p
            out[5, y, x] = h2 + p
            out[6, y, x] = h2 / mag + p
            out[7, y, x] = gain * b1 * inv_half + p
            out[8, y, x] = ag * s + p
            out[9, y, x] = abs(dT) / std + p


# ------------------------------------------------------------------------------ driver
# numba's parallel region is launched from one thread at a time (dask's threaded scheduler
# would otherwise oversubscribe the two cores); reading the next block still overlaps.
_KERNEL_LOCK = threading.Lock()
# default size of one streamed block: large enough that the per-call overhead vanishes,
# small enough that a memory-mapped stack stays far below any sensible memory budget
_BLOCK_BYTES = 32 * 2**20


class _Progress:
    """A one-line progress bar on stderr, shown only on a terminal."""

    def __init__(self, total, enabled):
        self.total = total
        self.enabled = bool(enabled) and sys.stderr.isatty()
        self.last = -1

    def update(self, done):
        if not self.enabled:
            return
        pct = int(100 * done / max(self.total, 1))
        if pct != self.last:
            self.last = pct
            bar = "#" * (pct // 4)
            sys.stderr.write(f"\rlock-in [{bar:<25}] {pct:3d}% ({done}/{self.total} frames)")
            if done >= self.total:
                sys.stderr.write("\n")
            sys.stderr.flush()


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
    if b.dtype == np.float16:
        b = b.astype(np.float32)
    elif not b.dtype.isnative:
        b = b.astype(b.dtype.newbyteorder("="))
    return np.ascontiguousarray(b)


def _block_sums(block, basis, ref, with_max):
    """Sums (Y, 7, X) and maxima (Y, X) of one block: the unit of work of the dask path."""
    block = _kernel_block(block)
    acc = np.zeros((block.shape[1], N_SUMS, block.shape[2]))
    vmax = np.full(block.shape[1:], -np.inf) if with_max else None
    _run_kernel(block, np.ascontiguousarray(basis), ref, acc, vmax)
    return acc, vmax


def _add_sums(a, b):
    acc = a[0] + b[0]
    vmax = None if a[1] is None else np.maximum(a[1], b[1])
    return acc, vmax


def _run_kernel(block, basis, ref, acc, vmax):
    with _KERNEL_LOCK:
        if vmax is None:
            accumulate(block, basis, ref, acc)
        else:
            accumulate_with_max(block, basis, ref, acc, vmax)


def is_dask(frames):
    """True for a dask array (checked without importing dask)."""
    return type(frames).__module__.startswith("dask") and hasattr(frames, "to_delayed")


def stream_dask(frames, basis, with_max, chunk_frames, progress):
    """The pass over a dask array: one task per block of whole frames, summed pairwise.

    Runs on the active scheduler (threads by default, a distributed cluster when a
    client is active); each task returns only the (Y, 7, X) sums of its block.
    """
    import dask

    # whole frames per block: the kernel walks rows of contiguous frames
    arr = frames.rechunk({0: int(chunk_frames), 1: -1, 2: -1} if chunk_frames else {1: -1, 2: -1})
    ref = np.asarray(arr[0].compute(), dtype=np.float64)
    ref_d = dask.delayed(ref)
    edges = np.concatenate([[0], np.cumsum(arr.chunks[0])]).astype(int)
    blocks = arr.to_delayed().ravel()
    parts = [dask.delayed(_block_sums)(blk, basis[a:b], ref_d, with_max)
             for blk, a, b in zip(blocks, edges[:-1], edges[1:])]
    while len(parts) > 1:  # pairwise tree: few partial sums alive at once
        parts = [dask.delayed(_add_sums)(parts[i], parts[i + 1]) if i + 1 < len(parts) else parts[i]
                 for i in range(0, len(parts), 2)]
    if progress and sys.stderr.isatty():
        from dask.diagnostics import ProgressBar

        with ProgressBar(out=sys.stderr):
            (acc, vmax), = dask.compute(parts[0])
    else:
        (acc, vmax), = dask.compute(parts[0])
    return acc, vmax, ref


def stream(frames, basis, with_max, chunk_frames, progress):
    """One pass over a NumPy array, memory map or lazy stack; returns sums, maxima, reference."""
    n, ny, nx = frames.shape
    source = getattr(frames, "memmap", None)
    if source is None and isinstance(frames, np.ndarray):
        source = frames
    frame_bytes = max(1, ny * nx * np.dtype(getattr(frames, "dtype", np.float32)).itemsize)
    if chunk_frames is None:
        if isinstance(source, np.ndarray) and source.flags.c_contiguous and _mmap_of(source)[0] is None:
            # in memory already: one call (each parallel launch ends on a barrier that a
            # busy core delays), or about 20 steps when a progress bar is shown
            chunk_frames = n if not progress else max(4, -(-n // 20))
        else:
            chunk_frames = max(4, _BLOCK_BYTES // frame_bytes // 4 * 4)
    limit = getattr(frames, "max_bytes", None)
    if limit and source is None:  # a lazy reader refuses reads above its limit
        chunk_frames = min(int(chunk_frames), max(1, int(limit) // frame_bytes))
    chunk_frames = int(chunk_frames)
    acc = np.zeros((ny, N_SUMS, nx))
    vmax = np.full((ny, nx), -np.inf) if with_max else None
    bar = _Progress(n, progress)
    ref = None
    for f0 in range(0, n, chunk_frames):
        f1 = min(n, f0 + chunk_frames)
        raw = source[f0:f1] if source is not None else frames[f0:f1]
        block = _kernel_block(raw)
        if ref is None:
            ref = np.array(block[0], dtype=np.float64)
        _run_kernel(block, basis[f0:f1], ref, acc, vmax)
        if isinstance(raw, np.ndarray):
            _release(raw)
        del raw, block
        bar.update(f1)
    return acc, vmax, ref
