"""Frame-stack sanity from a sample of frames: clipped values and scrambled layouts.

A stack read with the wrong layout (rows and columns swapped, a header one frame too
short) or clipped by the detector still streams through the lock-in and gives maps
that look plausible. The checks here look at a few dozen frames spread over the
record, never at the whole stack:

* :func:`clip_levels` finds pile-ups at the sample's extreme raw values: noise spreads
  a pixel's values, so a value that many samples share exactly at the very top (or
  bottom) of the range is where the detector or its export cut the signal off;
* :func:`layout_problem` compares the mean frame as read with the same values read with
  rows and columns swapped (by the median and by the mean difference of neighbours),
  neighbouring rows with neighbouring columns (an image read
  with the wrong row length has rows that hardly resemble each other), and the first
  frame with the others (a header read as a frame).
"""

from __future__ import annotations

import warnings

import numpy as np

from ._kernels import _release

__all__ = ["sample_frames", "clip_levels", "layout_problem", "CLIP_MIN_SAMPLES", "CLIP_PILE_UP", "CLIP_SAMPLE_FRAMES",
           "ROW_ROUGHNESS_LIMIT", "SWAP_LIMIT", "FIRST_FRAME_LIMIT"]

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
#: How much smoother the mean frame must read with rows and columns swapped before the
#: stack is taken as read the wrong way round (a camera image read the right way is the
#: smoother one: swapped, every row wraps across several of the scene's rows).
SWAP_LIMIT = 3.0
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


#: Frames the clip search reads: a pile-up shows in a few frames already.
CLIP_SAMPLE_FRAMES = 16


def _pile_up(sample, extremes, varying, top):
    """The extreme value of the varying pixels when many samples share it, else None.

    The candidate levels are the four most extreme of the pixels' own extremes (a partial
    sort of one value per pixel); each is then counted exactly over the samples.
    """
    v = extremes[varying]
    if v.size == 0:
        return None
    m = min(v.size, 4096)
    cut = np.partition(v, v.size - m)[v.size - m:] if top else np.partition(v, m - 1)[:m]
    levels = np.unique(cut)
    levels = levels[::-1][:4] if top else levels[:4]
    counts = np.array([np.count_nonzero((sample == lev) & varying) for lev in levels])
    if counts.size < 2 or counts[0] < CLIP_MIN_SAMPLES or counts[0] < CLIP_PILE_UP * counts[1:].max():
        return None
    return float(levels[0])


def clip_levels(sample):
    """Raw values at which a stack is clipped, from a sample of its frames.

    Parameters
    ----------
    sample : (K, Y, X) ndarray
        Frames of the stack (raw values as stored); :data:`CLIP_SAMPLE_FRAMES` frames
        spread over the record suffice.

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
    :data:`CLIP_PILE_UP` times more than on any of the next three values inward (the
    candidates are the most extreme of the pixels' own extremes, so only one value per
    pixel is sorted).
    Non-finite values are ignored here (they are masked by the lock-in).
    """
    s = np.asarray(sample)
    if s.ndim != 3 or s.shape[0] < 2:
        return None, None
    # fmax/fmin skip NaN without the warnings of nanmax on all-NaN pixels
    high, low = np.fmax.reduce(s, axis=0), np.fmin.reduce(s, axis=0)
    varying = high > low
    return _pile_up(s, high, varying, True), _pile_up(s, low, varying, False)


def _roughness(a, axis, stat=np.median):
    d = np.abs(np.diff(a, axis=axis))
    d = d[np.isfinite(d)]
    return float(stat(d)) if d.size else 0.0


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
        ``("swapped", detail)`` when the mean frame reads :data:`SWAP_LIMIT` times smoother
        with rows and columns swapped, ``("rows", detail)`` when neighbouring rows of the
        mean frame differ :data:`ROW_ROUGHNESS_LIMIT` times more than neighbouring columns
        (the row length is wrong in some other way), ``("first frame", detail)``
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
    s = np.asarray(sample)
    if s.ndim != 3:
        return None
    k, ny, nx = s.shape
    with np.errstate(invalid="ignore", over="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)   # all-NaN pixels: NaN is the answer
        if k > 2 and (indices is None or int(np.asarray(indices)[0]) == 0):
            # a few thousand pixels spread over the frame tell a foreign frame from the others
            flat = s.reshape(k, -1)
            pick = flat[:, ::max(1, flat.shape[1] // 4096)].astype(np.float64)
            ref = np.nanmean(pick[1:], axis=0)
            dev = np.nanmedian(np.abs(pick - ref), axis=1)
            dev[~np.isfinite(dev)] = np.inf
            typical = float(np.median(dev[1:]))
            floor = 1e-9 * max(float(np.nanmedian(np.abs(ref))), 1e-30)
            if dev[0] > FIRST_FRAME_LIMIT * max(typical, floor):
                return ("first frame", f"its first frame departs from the others by a median of "
                        f"{dev[0]:.4g} per pixel, a typical frame by {typical:.4g}")
        if ny >= 4 and nx >= 4:
            mean = np.nanmean(s[1:] if k > 2 else s, axis=0, dtype=np.float64)
            rows, cols = _roughness(mean, 0), _roughness(mean, 1)
            if ny != nx:
                other = mean.reshape(nx, ny)
                # the median difference shows a textured scene; the mean also the edges of a flat
                # one (a specimen before its background), which a wrong row length shears apart
                for stat in (np.median, np.mean):
                    as_read = _roughness(mean, 0, stat) + _roughness(mean, 1, stat)
                    swapped = _roughness(other, 0, stat) + _roughness(other, 1, stat)
                    if swapped > 0 and as_read > SWAP_LIMIT * swapped:
                        return ("swapped", f"its mean frame read as {ny} rows of {nx} is {as_read / swapped:.3g} "
                                f"times rougher than read as {nx} rows of {ny}")
            if cols > 0 and rows > ROW_ROUGHNESS_LIMIT * cols:
                return ("rows", f"neighbouring rows of its mean frame differ by a median of {rows:.4g}, "
                        f"neighbouring columns by {cols:.4g}")
    return None
