"""Integer-pixel starting points: FFT cross-correlation, global and per subset."""

from __future__ import annotations

import numpy as np

__all__ = ["global_shift", "zncc_map", "integer_search"]


def global_shift(reference, deformed, box=None, *, max_size=512):
    """Dominant integer translation (dv, du) of ``deformed`` relative to ``reference``.

    Peak of the FFT cross-correlation of a central window of at most
    ``max_size`` pixels of the region ``box = (row0, col0, row1, col1)``, with
    zero-mean, Hann-tapered windows so the window edges do not vote. The plain
    (not phase-normalised) correlation is used: whitening would give the empty
    high-frequency band of a speckle pattern, which holds only noise, the same
    weight as the pattern. The content of ``deformed`` at ``x + d`` matches
    ``reference`` at ``x``.
    """
    h, w = reference.shape
    r0, c0, r1, c1 = box if box is not None else (0, 0, h, w)
    rh = min(r1 - r0, max_size)
    cw = min(c1 - c0, max_size)
    rs = r0 + (r1 - r0 - rh) // 2
    cs = c0 + (c1 - c0 - cw) // 2
    a = reference[rs:rs + rh, cs:cs + cw].astype(np.float64)
    b = deformed[rs:rs + rh, cs:cs + cw].astype(np.float64)
    taper = np.hanning(rh)[:, None] * np.hanning(cw)[None, :]
    fa = np.fft.rfft2((a - a.mean()) * taper)
    fb = np.fft.rfft2((b - b.mean()) * taper)
    surface = np.fft.irfft2(fb * np.conj(fa), s=(rh, cw))
    k = int(np.argmax(surface))
    dv, du = divmod(k, cw)
    # peaks past the half size are negative shifts (periodic correlation)
    dv = dv - rh if dv > rh // 2 else dv
    du = du - cw if du > cw // 2 else du
    return int(dv), int(du)


def _box_sum(a, sh, sw):
    """Sums of ``a`` over every sh x sw window (valid placements), via an integral image."""
    s = np.zeros((a.shape[0] + 1, a.shape[1] + 1))
    s[1:, 1:] = a.cumsum(0).cumsum(1)
    return s[sh:, sw:] - s[:-sh, sw:] - s[sh:, :-sw] + s[:-sh, :-sw]


def zncc_map(template, window):
    """Zero-normalised cross-correlation of a template at every valid placement in a window.

    Parameters
    ----------
    template : (th, tw) ndarray
    window : (wh, ww) ndarray, at least as large as the template.

    Returns
    -------
    (wh - th + 1, ww - tw + 1) ndarray
        ZNCC in [-1, 1] for the template's top-left corner at each offset; 0
        where the window is flat. The same quantity as
        ``skimage.feature.match_template`` (Lewis 1995, fast normalised
        cross-correlation), computed with FFTs and integral images.
    """
    t = np.asarray(template, dtype=np.float64)
    wdw = np.asarray(window, dtype=np.float64)
    th, tw = t.shape
    wh, ww = wdw.shape
    tz = t - t.mean()
    tnorm = np.sqrt(np.sum(tz * tz))
    shape = (wh, ww)
    num = np.fft.irfft2(np.fft.rfft2(wdw, shape) * np.conj(np.fft.rfft2(tz, shape)), shape)
    num = num[:wh - th + 1, :ww - tw + 1]
    n = th * tw
    s1 = _box_sum(wdw, th, tw)
    s2 = _box_sum(wdw * wdw, th, tw)
    var = np.maximum(s2 - s1 * s1 / n, 0.0)
    den = tnorm * np.sqrt(var)
    out = np.zeros_like(num)
    ok = den > 1e-12 * max(float(den.max()), 1e-300)
    out[ok] = num[ok] / den[ok]
    return out


def integer_search(reference, deformed, row, col, half, search, centre=(0, 0)):
    """Best integer displacement (dv, du) and its ZNCC for the subset at (row, col).

    The search covers displacements within ``search`` pixels of ``centre``,
    clipped to the image.
    """
    h, w = reference.shape
    t = reference[row - half:row + half + 1, col - half:col + half + 1]
    cv, cu = centre
    r0 = max(0, row - half + cv - search)
    r1 = min(h, row + half + 1 + cv + search)
    c0 = max(0, col - half + cu - search)
    c1 = min(w, col + half + 1 + cu + search)
    if r1 - r0 < t.shape[0] or c1 - c0 < t.shape[1]:
        return 0, 0, -1.0
    m = zncc_map(t, deformed[r0:r1, c0:c1])
    k = int(np.argmax(m))
    i, j = divmod(k, m.shape[1])
    return int(r0 + i - (row - half)), int(c0 + j - (col - half)), float(m[i, j])
