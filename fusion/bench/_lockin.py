"""Benchmark of the lock-in against the memory-bandwidth limit of the same stack.

The reference is one parallel pass that reads every value of the stack and does
almost nothing with it (:func:`reference_pass`, numba ``prange`` block sums): the
fastest of a plain pass over rows unrolled by eight frames, the same over the kernel's
bands of joined rows, and a pass giving each thread a contiguous chunk of whole frames
summed into float32 or float64 (which is fastest depends on the dtype and the machine;
the ratios against each are reported). No streaming algorithm over the stack can beat it
by much. The lock-in is timed as the user calls it (:func:`fusion.thermal.lockin`,
solve included).

Measures
--------
lockin_f32_ratio
    lock-in time / reference-pass time, float32 stack in memory (target <= 1.2).
lockin_i16_ratio
    the same for int16 counts fitted directly with a gain and offset (target <= 1.6).
lockin_numpy_sum_ratio
    lock-in time / ``numpy.sum(stack, axis=0)`` on the float32 stack.
lockin_mmap_peak_fraction
    peak extra resident memory of a lock-in over a memory-mapped ``.npy`` stack twice
    the size of a memory budget, as a fraction of that budget (target < 1). Measured
    in a fresh subprocess: after imports and kernel loading its peak-RSS mark is reset
    (``/proc/self/clear_refs``), and its resident set size then (``VmRSS``) is
    subtracted from the peak ``VmHWM`` after the pass; mapped file pages count in
    both. (``resource.getrusage``'s ``ru_maxrss`` is the fallback off Linux; on Linux
    it keeps the parent's peak across ``exec``, so it would overstate.)

Each time is the minimum over interleaved repeats (the machine is shared: the
minimum is the least disturbed run).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import numba
from numba import njit, prange

from ..thermal._kernels import band_rows, banded

__all__ = ["bench_lockin", "reference_pass"]


@njit(parallel=True, cache=True)
def _block_sum(frames, out):  # pragma: no cover - compiled
    n, ny, nx = frames.shape
    n8 = n - n % 8
    for y in prange(ny):
        for f in range(0, n8, 8):
            for x in range(nx):
                out[y, x] += (((np.float64(frames[f, y, x]) + np.float64(frames[f + 1, y, x]))
                               + (np.float64(frames[f + 2, y, x]) + np.float64(frames[f + 3, y, x])))
                              + ((np.float64(frames[f + 4, y, x]) + np.float64(frames[f + 5, y, x]))
                                 + (np.float64(frames[f + 6, y, x]) + np.float64(frames[f + 7, y, x]))))
        for f in range(n8, n):
            for x in range(nx):
                out[y, x] += np.float64(frames[f, y, x])


@njit(parallel=True, cache=True)
def _frame_chunk_sum(frames, parts):  # pragma: no cover - compiled
    # each thread sums its own contiguous chunk of whole frames into its part: the longest
    # sequential reads there are (float32 parts stay in the L2 cache longer than float64)
    n, ny, nx = frames.shape
    nt = parts.shape[0]
    for t in prange(nt):
        for f in range(n * t // nt, n * (t + 1) // nt):
            for y in range(ny):
                for x in range(nx):
                    parts[t, y, x] += frames[f, y, x]


def reference_pass(frames, *, bands=False, frame_chunks=False, chunk_dtype=np.float32):
    """Sum of a (F, Y, X) stack over frames in one parallel pass (float64 result).

    The memory-bandwidth reference: every value is read once, with the row-parallel
    schedule of the lock-in kernel; ``bands`` walks the kernel's rows of joined image rows (:func:`fusion.thermal._kernels.band_rows`). ``frame_chunks``
    instead gives each thread a contiguous chunk of whole frames summed into
    ``chunk_dtype`` (other options ignored; float32 parts give the result float32
    rounding). Which is fastest depends on the machine and the dtype, so the benchmark
    takes the fastest as the limit.
    """
    frames = np.ascontiguousarray(frames)
    _, ny, nx = frames.shape
    if frame_chunks:
        parts = np.zeros((numba.get_num_threads(), ny, nx), chunk_dtype)
        _frame_chunk_sum(frames, parts)
        return parts.sum(axis=0, dtype=np.float64)
    view = banded(frames, band_rows(ny, nx, frames.dtype) if bands else 1)
    out = np.zeros(view.shape[1:])
    _block_sum(view, out)
    return out.reshape(ny, nx)


def _synthetic(n, ny, nx, rng, dtype):
    """A stack with a 7 Hz cycle at 100 frames/s, as float32 kelvin or int16 counts."""
    t = np.arange(n) / 100.0
    cyc = np.cos(2 * np.pi * 7.0 * t).astype(np.float32)
    if dtype == np.int16:
        base = rng.integers(7000, 9000, size=(ny, nx)).astype(np.int16)
        out = np.empty((n, ny, nx), np.int16)
        for k in range(n):
            out[k] = base + np.int16(round(40 * float(cyc[k])))
        out += rng.integers(-8, 9, size=out.shape, dtype=np.int16)
        return out
    out = np.empty((n, ny, nx), np.float32)
    noise = rng.standard_normal((ny, nx), dtype=np.float32) * np.float32(0.02)
    for k in range(n):
        # cheap per-frame noise: a rolled field keeps the generation far cheaper than the pass
        out[k] = np.float32(295.0) - np.float32(0.5) * cyc[k] + np.roll(noise, k, axis=1)
    return out


def _best(fns, repeats):
    """Minimum time of each callable over interleaved repeats."""
    best = [float("inf")] * len(fns)
    for _ in range(repeats):
        for i, fn in enumerate(fns):
            t0 = time.perf_counter()
            fn()
            best[i] = min(best[i], time.perf_counter() - t0)
    return best


_CHILD = r"""
import json, resource, sys
import numpy as np
from fusion.thermal import lockin
from fusion.io import open_frames

path, chunk = sys.argv[1], int(sys.argv[2])
warm = (np.arange(64, dtype=np.float32) % 5)[:, None, None] * np.ones((1, 4, 4), np.float32)
lockin(warm, frequency=7.0, frame_rate=100.0)  # load the compiled kernels for float32 first
warm.setflags(write=False)                     # a read-only map is typed apart by numba
lockin(warm, frequency=7.0, frame_rate=100.0)

def status(key):
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
    raise KeyError(key)

try:  # Linux: reset the high-water mark, then read the peak of this pass alone
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")
    how = "VmHWM"
except OSError:
    how = "ru_maxrss"
before = status("VmRSS")
stack = open_frames(path)
r = lockin(stack, frequency=7.0, frame_rate=100.0, chunk_frames=chunk)
# ru_maxrss survives exec (it carries the parent's peak), so it is only the fallback
peak = status("VmHWM") if how == "VmHWM" else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
print(json.dumps({"extra_bytes": peak - before, "valid": int(r.valid.sum()), "how": how}))
"""


def _mmap_peak(shape, budget, tmpdir):
    n, ny, nx = shape
    path = os.path.join(tmpdir, "stack.npy")
    rng = np.random.default_rng(7)
    mm = np.lib.format.open_memmap(path, mode="w+", dtype=np.float32, shape=shape)
    step = max(1, (16 * 2**20) // (ny * nx * 4))
    for f0 in range(0, n, step):
        f1 = min(n, f0 + step)
        mm[f0:f1] = _synthetic(f1 - f0, ny, nx, rng, np.float32)
    mm.flush()
    del mm
    chunk = max(4, int(budget // 8 // (ny * nx * 4)))  # blocks of 1/8 of the budget
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([os.path.dirname(os.path.dirname(os.path.dirname(__file__))),
                                         env.get("PYTHONPATH", "")])
    out = subprocess.run([sys.executable, "-c", _CHILD, path, str(chunk)], capture_output=True,
                         text=True, env=env, check=True, timeout=600)
    info = json.loads(out.stdout.strip().splitlines()[-1])
    return info["extra_bytes"] / budget, os.path.getsize(path)


def bench_lockin(*, quick: bool = False, repeats: int | None = None) -> dict:
    """Time the lock-in against the reference pass and check memory on a memory map.

    Parameters
    ----------
    quick : bool
        Small sizes (about 20 MB float32 stack) for a smoke test; the full run uses a
        float32 stack of about 330 MB (1000 frames of 256 x 320) and a 128 MiB budget
        for the memory-mapped case (256 MiB file).
    repeats : int, optional
        Interleaved repeats per timing (default 3 quick, 41 full: disturbances on a shared
        machine last seconds, and the minimum needs runs outside them).

    Returns
    -------
    dict
        ``lockin_f32_ratio``, ``lockin_i16_ratio``, ``lockin_numpy_sum_ratio``,
        ``lockin_f64_work_ratio`` (the float32 stack with ``precision="float64"``),
        ``lockin_f32_ratio_plain_read`` and ``lockin_i16_ratio_plain_read`` (against the
        plain block sum alone, the reference as first defined),
        ``lockin_f32_ratio_row_read`` and ``lockin_i16_ratio_row_read`` (against the
        fastest read in the kernel's row schedule, i.e. without the frame chunks),
        ``lockin_f32_ratio_f64_chunk_sum`` and ``lockin_i16_ratio_f64_chunk_sum`` (against
        frame chunks summed into float64 parts: slower than the memory allows, since the
        float64 parts leave the L2 cache, but the most direct form of a block sum),
        ``lockin_mmap_peak_fraction`` (dimensionless), and for information
        ``lockin_f32_seconds``, ``lockin_i16_seconds``, ``reference_f32_seconds``,
        ``reference_i16_seconds``, ``numpy_sum_f32_seconds`` (s),
        ``reference_f32_gb_per_s`` (GB/s read by the reference pass),
        ``lockin_stack_mb`` and ``lockin_mmap_file_mb`` (sizes, MB) and
        ``lockin_load_average`` (1-minute load average at the end, to read the figures by).
    """
    from ..thermal import lockin

    if quick:
        shape, budget, mshape = (250, 128, 160), 16 * 2**20, (410, 128, 160)
    else:
        shape, budget, mshape = (1000, 256, 320), 128 * 2**20, (820, 256, 320)
    repeats = repeats or (3 if quick else 41)
    rng = np.random.default_rng(20261201)
    f32 = _synthetic(*shape, rng, np.float32)
    i16 = _synthetic(*shape, rng, np.int16)
    f32_kw = dict(frequency=7.0, frame_rate=100.0)
    i16_kw = dict(frequency=7.0, frame_rate=100.0, gain=0.01, offset=200.0)
    # the reads the limit is the fastest of: rows, and bands where rows join (a frame-chunk
    # sum in float64, the most direct form of a block sum, comes last)
    reads = {name: [dict(bands=b) for b in (False, True)
                    if not b or band_rows(*stack.shape[1:], stack.dtype) > 1]
             + [dict(frame_chunks=True), dict(frame_chunks=True, chunk_dtype=np.float64)]
             for name, stack in (("f32", f32), ("i16", i16))}
    # compile and touch every page before timing
    for stack, kw, name in ((f32, f32_kw, "f32"), (i16, i16_kw, "i16")):
        lockin(stack[:16], **kw)
        lockin(stack[:16], precision="float64", **kw)
        for kw in reads[name]:
            reference_pass(stack[:8], **kw)
    read_fns = [(lambda s=stack, kw=kw: reference_pass(s, **kw))
                for stack, name in ((f32, "f32"), (i16, "i16")) for kw in reads[name]]
    times = _best([
        lambda: lockin(f32, **f32_kw),
        lambda: np.sum(f32, axis=0),
        lambda: lockin(f32, precision="float64", **f32_kw),
        lambda: lockin(i16, **i16_kw),
    ] + read_fns, repeats)
    t_lf, t_np, t_l64, t_li = times[:4]
    nf = len(reads["f32"])
    read_f, read_i = times[4:4 + nf], times[4 + nf:]
    plain_f, plain_i = read_f[0], read_i[0]     # image rows come first
    t_rf, t_ri = min(read_f), min(read_i)       # the fastest read is the limit
    rows_f, rows_i = min(read_f[:-2]), min(read_i[:-2])   # reads in the kernel's row schedule
    wide_f, wide_i = read_f[-1], read_i[-1]
    f32 = i16 = read_fns = None     # free the stacks before the memory-map case (the timed lambdas held them)
    with tempfile.TemporaryDirectory(prefix="fusion-bench-") as tmp:
        frac, size = _mmap_peak(mshape, budget, tmp)
    return {
        "lockin_f32_ratio": t_lf / t_rf,
        "lockin_i16_ratio": t_li / t_ri,
        "lockin_f32_ratio_plain_read": t_lf / plain_f,
        "lockin_i16_ratio_plain_read": t_li / plain_i,
        "lockin_f32_ratio_row_read": t_lf / rows_f,
        "lockin_i16_ratio_row_read": t_li / rows_i,
        "lockin_f32_ratio_f64_chunk_sum": t_lf / wide_f,
        "lockin_i16_ratio_f64_chunk_sum": t_li / wide_i,
        "lockin_numpy_sum_ratio": t_lf / t_np,
        "lockin_f64_work_ratio": t_l64 / t_rf,
        "lockin_mmap_peak_fraction": frac,
        "lockin_f32_seconds": t_lf,
        "lockin_i16_seconds": t_li,
        "reference_f32_seconds": t_rf,
        "reference_i16_seconds": t_ri,
        "numpy_sum_f32_seconds": t_np,
        "reference_f32_gb_per_s": float(np.prod(shape)) * 4 / t_rf / 1e9,
        "lockin_stack_mb": float(np.prod(shape)) * 4 / 1e6,
        "lockin_mmap_file_mb": size / 1e6,
        # other work on the machine slows compute-bound passes more than memory-bound ones
        "lockin_load_average": os.getloadavg()[0] if hasattr(os, "getloadavg") else None,
    }
