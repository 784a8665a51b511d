"""Frame-stack sanity from a sample of frames: clipped values and scrambled layouts.

A stack read with the wrong layout (rows and columns swapped, a header one frame too
short) or clipped by the detector still streams through the lock-in and gives maps
that look plausible. The checks here look at a few dozen frames spread over the
record, never at the whole stack:

* :func:`clip_levels` finds pile-ups at the sample's extreme raw values: noise spreads
  a pixel's values, so a value that many samples share exactly at the very top (or
  bottom) of the range is where the detector or its export cut the signal off;
* :func:`layout_problem` compares neighbouring rows with neighbouring columns of the
  mean frame (an image read with the wrong row length has rows that hardly resemble
  each other) and the first frame with the others (a header read as a frame).
"""

from __future__ import annotations

import warnings

import numpy as np

from ._kernels import _release

__all__ = ["sample_frames", "clip_levels", "layout_problem", "CLIP_MIN_SAMPLES", "CLIP_PILE_UP",
           "ROW_ROUGHNESS_LIMIT", "FIRST_FRAME_LIMIT"]

#: Frames read for the checks: enough values for the statistics, a negligible read.
SAMPLE_FRAMES = 48
#: Samples that must share an extreme value before it counts as a pile-up.
CLIP_MIN_SAMPLES = 8
#: ... and by how much they must outnumber each of the next three levels inward.
CLIP_PILE_UP = 4.0
#: Median difference of neighbouring rows over that of neighbouring columns of the mean
#: frame above which the rows are taken as scrambled (a camera image stays near 1-3;
#: an image read with a wrong row length gives hundreds).
ROW_ROUGHNESS_LIMIT = 20.0
#: Median departure of the first frame from the others, over that of a typical frame,
#: above which the first frame is taken as not a frame of the record.
FIRST_FRAME_LIMIT = 20.0


def sample_frames(frames, count=SAMPLE_FRAMES):
    """A few frames spread over a stack: the first one and ``count - 1`` evenly spaced others.

    Parameters
    ----------
    frames : (F, Y, X) ndarray, memory map, FrameStack or dask array
    count : int

    Returns
    -------
    indices : (K,) ndarray of int
        Frame indices read, increasing, the first being 0.
    sample : (K, Y, X) ndarray
        Those frames in their stored dtype (native byte order).
    """
    n = int(frames.shape[0])
    idx = np.unique(np.concatenate([[0], np.linspace(1, n - 1, max(1, min(count, n) - 1)).round()]))
    idx = idx[(idx >= 0) & (idx < n)].astype(np.int64)
    parts = []
    for i in idx:
        # frame slices: the one kind of indexing every stack the lock-in takes supports
        raw = np.asarray(frames[int(i):int(i) + 1])
        parts.append(raw.copy())
        _release(raw)   # a memory-mapped frame leaves the resident set once copied
    sample = np.concatenate(parts)
    if not sample.dtype.isnative:
        sample = sample.astype(sample.dtype.newbyteorder("="))
    return idx, sample


def _pile_up(levels, counts):
    """True when the first level's count towers over the next three."""
    if counts.size < 2 or counts[0] < CLIP_MIN_SAMPLES:
        return False
    return bool(counts[0] >= CLIP_PILE_UP * counts[1:4].max())


def clip_levels(sample):
    """Raw values at which a stack is clipped, from a sample of its frames.

    Parameters
    ----------
    sample : (K, Y, X) ndarray
        Frames of the stack (raw values as stored).

    Returns
    -------
    high, low : float or None
        The value a pile-up sits on at the top and at the bottom of the sampled values,
        or None where there is none. A pixel whose values reach ``high`` (or ``low``)
        was cut off there for part of the record at least.

    Notes
    -----
    Only pixels that vary within the sample count: a pixel stuck at one value is a dead
    pixel, masked as such, not evidence of clipping. Noise spreads the values of a
    pixel, so the highest value of a stack is normally shared by few samples and the
    counts fall off towards the extreme; a clipped stack has at least
    :data:`CLIP_MIN_SAMPLES` samples on exactly one extreme value, and
    :data:`CLIP_PILE_UP` times more than on any of the next three values inward.
    Non-finite values are ignored here (they are masked by the lock-in).
    """
    s = np.asarray(sample)
    if s.ndim != 3 or s.shape[0] < 2:
        return None, None
    # fmax/fmin skip NaN without the warnings of nanmax on all-NaN pixels
    varying = np.fmax.reduce(s, axis=0) > np.fmin.reduce(s, axis=0)
    values = s[:, varying].ravel()
    if values.dtype.kind == "f":
        values = values[np.isfinite(values)]
    if values.size < CLIP_MIN_SAMPLES:
        return None, None
    levels, counts = np.unique(values, return_counts=True)
    high = float(levels[-1]) if _pile_up(levels[::-1], counts[::-1]) else None
    low = float(levels[0]) if _pile_up(levels, counts) else None
    return high, low


def _roughness(a, axis):
    d = np.abs(np.diff(a, axis=axis))
    d = d[np.isfinite(d)]
    return float(np.median(d)) if d.size else 0.0


def layout_problem(sample, *, indices=None):
    """What looks wrong with the layout of a stack, from a sample of its frames, or None.

    Parameters
    ----------
    sample : (K, Y, X) ndarray
        Frames of the stack, the first being frame 0 (see :func:`sample_frames`).
    indices : (K,) array_like, optional
        Their frame indices; the first-frame test runs only when the first is 0.

    Returns
    -------
    None or (str, str)
        ``("rows", detail)`` when neighbouring rows of the mean frame differ
        :data:`ROW_ROUGHNESS_LIMIT` times more than neighbouring columns (the row length
        is wrong: rows and columns swapped, or a wrong width), ``("first frame", detail)``
        when the first frame departs from the others :data:`FIRST_FRAME_LIMIT` times more
        than a typical frame does (a header read as a frame); ``detail`` gives the figures.

    Notes
    -----
    Neighbouring pixels of a camera image see neighbouring points of the scene, so they
    are alike along rows and columns alike. Read with a wrong row length, consecutive
    rows of the read image come from points of the scene a fraction of a row apart,
    while consecutive columns stay neighbours. Noise-only frames (no scene) show
    neither test.
    """
    s = np.asarray(sample, dtype=np.float64)
    if s.ndim != 3:
        return None
    k, ny, nx = s.shape
    rest = s[1:] if k > 2 else s
    with np.errstate(invalid="ignore", over="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)   # all-NaN pixels: NaN is the answer
        if k > 2 and (indices is None or int(np.asarray(indices)[0]) == 0):
            ref = np.nanmedian(rest, axis=0)
            dev = np.array([np.nanmedian(np.abs(f - ref)) if np.isfinite(f).any() else np.inf for f in s])
            dev[~np.isfinite(dev)] = np.inf
            typical = float(np.median(dev[1:]))
            floor = 1e-9 * max(float(np.nanmedian(np.abs(ref))), 1e-30)
            if dev[0] > FIRST_FRAME_LIMIT * max(typical, floor):
                return ("first frame", f"its first frame departs from the others by a median of "
                        f"{dev[0]:.4g} per pixel, a typical frame by {typical:.4g}")
        if ny >= 4 and nx >= 4:
            mean = np.nanmean(rest, axis=0)
            rows, cols = _roughness(mean, 0), _roughness(mean, 1)
            if cols > 0 and rows > ROW_ROUGHNESS_LIMIT * cols:
                return ("rows", f"neighbouring rows of its mean frame differ by a median of {rows:.4g}, "
                        f"neighbouring columns by {cols:.4g}")
    return None
