"""The recommended loading-frequency band in words: its edges as numbers and what they mean."""

from __future__ import annotations

import math

from ._style import category_label

__all__ = ["band_edges_text", "band_sentence"]

# An edge within this relative distance of the end of the modelled range is that end: the band
# may go on beyond it, the model was not asked.
_END = 1e-6


def _hz(f: float) -> str:
    return f"{f:.3g} Hz"


def _percent(fraction: float) -> str:
    return f"{100 * fraction:.3g} %"


def _open(lo, hi, tried):
    """(lower edge open, upper edge open): the edge is the end of the range the model tried."""
    f_lo, f_hi = (float(v) for v in tried)
    return lo <= f_lo * (1 + _END), hi >= f_hi * (1 - _END)


def band_edges_text(low, high, tried) -> tuple[str, str]:
    """The two edges of a band as words: a number, or where the band runs past the range tried.

    Parameters
    ----------
    low, high : float
        Band edges in Hz (finite, ``low < high``).
    tried : (float, float)
        Lowest and highest frequency the heat model was evaluated at, Hz.

    Returns
    -------
    (str, str)
        e.g. ``("8.2 Hz", "above 400 Hz (the highest frequency tried)")``.
    """
    open_lo, open_hi = _open(float(low), float(high), tried)
    lo = f"below {_hz(float(tried[0]))} (the lowest frequency tried)" if open_lo else _hz(float(low))
    hi = f"above {_hz(float(tried[1]))} (the highest frequency tried)" if open_hi else _hz(float(high))
    return lo, hi


def band_sentence(band: dict, *, frequencies=(), specimen: str | None = None) -> str:
    """One sentence on a recommended loading-frequency band, for the report and the terminal.

    Parameters
    ----------
    band : dict
        ``low``, ``high`` (Hz; NaN or None where no band exists), ``source`` (the source
        the band is near, or None), ``tolerance`` (relative, e.g. 0.02), ``strict`` (True
        when the band also asks for a small phase lag) and ``tried`` ``(f_lowest,
        f_highest)``, the range of the heat model in Hz.
    frequencies : sequence of float
        Loading frequencies of the measured runs, Hz; placed below, inside or above.
    specimen : str, optional
        Named at the start of the sentence.

    Returns
    -------
    str
        e.g. ``"specimen CX: recommended loading frequencies from 8.2 Hz to above 400 Hz,
        the highest frequency tried (there the heat model stays within 2 % of the
        adiabatic dT/T0 of the surface
        ply, with a small phase lag); the runs at 0.05 Hz and 2 Hz lie below the band;
        the run at 100 Hz lies inside the band"``.

    Notes
    -----
    An edge that coincides with the end of the modelled range is not an edge of the band:
    the band may continue beyond it, so the sentence says "above"/"below" the frequency
    tried instead of quoting the end of the plot as if the response changed there.
    """
    head = f"specimen {specimen}: " if specimen else ""
    lo, hi = band.get("low"), band.get("high")
    tol = float(band.get("tolerance") or 0.02)
    tried = band["tried"]
    range_text = f"between {_hz(float(tried[0]))} and {_hz(float(tried[1]))}"
    if lo is None or hi is None or not (math.isfinite(float(lo)) and math.isfinite(float(hi))) \
            or not band.get("source"):
        return (f"{head}no recommended loading-frequency band: {range_text} the heat model does not "
                f"stay within {_percent(tol)} of any single source's adiabatic dT/T0")
    lo, hi = float(lo), float(hi)
    lo_text, hi_text = band_edges_text(lo, hi, tried)
    near = f"within {_percent(tol)} of the adiabatic dT/T0 of the {category_label(band['source'])}"
    meaning = (f"the heat model stays {near}, with a small phase lag" if band.get("strict") else
               f"the in-phase part of the heat model stays {near} (the phase lag is not small there)")
    text = f"{head}recommended loading frequencies from {lo_text} to {hi_text}; there {meaning}"
    open_lo, open_hi = _open(lo, hi, tried)
    groups: dict[str, list[str]] = {}
    for f in sorted(float(x) for x in frequencies):
        where = ("below the band" if f < lo and not open_lo else "above the band" if f > hi and not open_hi
                 else "inside the band" if lo <= f <= hi else "outside the range tried")
        groups.setdefault(where, []).append(_hz(f))
    for where in ("below the band", "inside the band", "above the band", "outside the range tried"):
        fs = groups.get(where)
        if fs:
            many = len(fs) > 1
            joined = ", ".join(fs[:-1]) + " and " + fs[-1] if many else fs[0]
            text += f"; the run{'s' if many else ''} at {joined} {'lie' if many else 'lies'} {where}"
    return text
