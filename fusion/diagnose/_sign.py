"""A measurement that every prediction explains only with the opposite sign.

Strain ranges of the wrong sign (correlation images or states in the wrong order, strains of
the unloading half-cycle) or a temperature range of the other sign turn every prediction of
dT/T0 upside down: no source fits, and the verdict "no candidate source fits" says nothing of
why. Fitting the measurement as a multiple of each prediction tells that case apart: the best
fit has a negative multiple and explains most of the measurement, far more than any prediction
taken with its own sign.
"""

from __future__ import annotations

import numpy as np

__all__ = ["sign_reversal", "REVERSED_SHARE", "REVERSED_MARGIN"]

#: Share of the measurement's sum of squares (about zero, since dT/T0 vanishes with the strain)
#: a prediction turned over must explain before the sign is called reversed ...
REVERSED_SHARE = 0.5
#: ... and by how much more than the best prediction taken with its own sign.
REVERSED_MARGIN = 0.25
#: Valid pixels needed for the fits.
_MIN_PIXELS = 50


def sign_reversal(measured, predictions: dict, valid) -> tuple[str, float, float, float] | None:
    """(source, factor, share, share_as_given) when a turned-over prediction explains the
    measurement far better than any prediction with its own sign, else None.

    Parameters
    ----------
    measured : (Y, X) array
        Measured dT/T0.
    predictions : dict of str to (Y, X) array
        Predicted dT/T0 of each source.
    valid : (Y, X) bool array
        Pixels of the diagnosis.

    Returns
    -------
    None, or (source, factor, share, share_as_given): the source whose prediction explains the
    measurement best as ``measured ~ factor x predicted`` with ``factor`` negative, the share of
    the measurement's sum of squares that fit explains (at least :data:`REVERSED_SHARE`), and
    the share the best fit with a positive factor explains (:data:`REVERSED_MARGIN` less at
    most; 0 when no prediction has the measurement's sign).
    """
    m = np.asarray(measured, dtype=np.float64)
    best = {True: (None, 0.0, 0.0), False: (None, 0.0, 0.0)}      # by sign of the factor
    for source, p in predictions.items():
        p = np.asarray(p, dtype=np.float64)
        ok = np.asarray(valid, bool) & np.isfinite(m) & np.isfinite(p)
        if np.count_nonzero(ok) < _MIN_PIXELS:
            continue
        mm, pp = m[ok], p[ok]
        pp2, m2 = float(pp @ pp), float(mm @ mm)
        if pp2 <= 0.0 or m2 <= 0.0:
            continue
        factor = float(mm @ pp) / pp2
        share = 1.0 - float(np.sum((mm - factor * pp) ** 2)) / m2
        if share > best[factor > 0][2]:
            best[factor > 0] = (source, factor, share)
    source, factor, share = best[False]
    as_given = best[True][2]
    if source is None or share < REVERSED_SHARE or share < as_given + REVERSED_MARGIN:
        return None
    return source, factor, share, as_given
