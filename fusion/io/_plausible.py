"""Plausible magnitudes of the physical inputs, and the checks that name a likely unit slip.

An input in the wrong unit (a strain table in microstrain, T0 in degrees Celsius,
delta_T in millikelvin, a load file in kN beside loads in N) reads without error and
produces a confident, wrong verdict. Each quantity below has the bounds inside which a
cyclic thermoelastic test of a laminate (or a metal) lies; outside them the run stops
with one sentence naming the file, the key and the unit the values look like.

The bounds are wide on purpose: they catch factors of 100 to 1000 (percent,
microstrain, millikelvin, kN), not a marginal test. The table lives in
``fusion/_bounds.py`` beside the bounds of the Python API's arguments (one place for
every plausible magnitude).
"""

from __future__ import annotations

import numpy as np

from .._bounds import PLAUSIBLE, Bound
from ..errors import InputError

__all__ = ["Bound", "PLAUSIBLE", "STRAIN_UNITS", "check_strain_ranges", "check_temperatures",
           "check_ratio", "check_load_ranges", "typical_magnitude"]


#: Scale of each strain unit the config accepts to plain strain.
STRAIN_UNITS = {"1": 1.0, "%": 1e-2, "microstrain": 1e-6}


def typical_magnitude(values, q):
    """The ``q``-th percentile of ``|values|`` over finite entries (nan when none)."""
    a = np.abs(np.asarray(values, dtype=np.float64))
    a = a[np.isfinite(a)]
    return float(np.percentile(a, q)) if a.size else float("nan")


def _inside(bound, v):
    return bound.low <= v <= bound.high


def check_strain_ranges(components, *, where, unit="1", key="dic.strain_unit", fix=None):
    """Refuse strain ranges whose typical size is no strain range in the declared unit.

    Parameters
    ----------
    components : sequence of (N,) arrays
        The strain components (plain strain, already scaled from ``unit``).
    where : path or str
        The file named in the message.
    unit : {"1", "%", "microstrain"}
        The unit the file was read in (what ``key`` says).
    key : str
        The config key that sets the unit.
    fix : str, optional
        What to check instead of the unit, for ranges computed from displacements.

    Raises
    ------
    InputError
        With the unit the values look like, when one fits.
    """
    b = PLAUSIBLE["strain_range"]
    stack = np.abs(np.vstack([np.asarray(c, dtype=np.float64) for c in components]))
    with np.errstate(invalid="ignore"):
        per_point = np.fmax.reduce(stack, axis=0)
    v = typical_magnitude(per_point, 90)
    if not np.isfinite(v) or _inside(b, v):
        return
    raw = v / STRAIN_UNITS[unit]
    look = {"1": "plain strain", "%": "percent", "microstrain": "microstrain"}
    fits = [u for u, f in STRAIN_UNITS.items() if u != unit and _inside(b, raw * f)]
    msg = (f"strain values like {raw:.4g} (90th percentile of |strain|; {v:.3g} as {look[unit]}) are "
           f"outside the plausible {b.low:g}..{b.high:g} of a strain range")
    if fix is not None:
        msg = (f"strain ranges like {v:.4g} (90th percentile of |strain|) are outside the plausible "
               f"{b.low:g}..{b.high:g} of a strain range; {fix}")
    elif fits:
        msg += (f": they look like {' or '.join(look[u] for u in fits)}; set "
                + " or ".join(f'{key} = "{u}"' for u in fits))
    else:
        msg += f"; check that the columns hold strain ranges, and {key}"
    raise InputError(where, msg)


def check_temperatures(values, *, where, what="T0", statistic="all", hint_counts=None):
    """Refuse temperatures outside the plausible kelvin range, naming Celsius or counts.

    Parameters
    ----------
    values : array_like
        Temperatures, K.
    where : path or str
    what : str
        The quantity named in the message.
    statistic : {"all", "median"}
        Every finite value must be inside (maps), or only the median (sampled frames,
        where a hot marker or a dead pixel is no unit slip).
    hint_counts : str, optional
        The fix to give when the values look like detector counts.
    """
    b = PLAUSIBLE["temperature"]
    a = np.asarray(values, dtype=np.float64)
    fin = a[np.isfinite(a)]
    if fin.size == 0:
        raise InputError(where, f"{what} has no finite value")
    med = float(np.median(fin))
    lo, hi = (fin.min(), fin.max()) if statistic == "all" else (med, med)
    if b.low <= lo and hi <= b.high:
        return
    if -100.0 < med < 100.0:
        hint = " — it looks like degrees Celsius: convert to kelvin (add 273.15)"
    elif med > b.high and hint_counts:
        hint = f" — it looks like detector counts: {hint_counts}"
    else:
        hint = ""
    span = f"{lo:.4g}..{hi:.4g} (median {med:.4g})" if statistic == "all" else f"a median of {med:.4g}"
    raise InputError(where, f"{what} must be an absolute temperature in kelvin within {b.low:g}..{b.high:g} "
                     f"K; found {span}{hint}")


def check_ratio(delta_T, T0, *, where, what="delta_T", fix="convert it to kelvin"):
    """Refuse a temperature range whose ``|dT/T0|`` is no thermoelastic signal (millikelvin read as K)."""
    b = PLAUSIBLE["ratio"]
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.asarray(delta_T, dtype=np.float64) / np.asarray(T0, dtype=np.float64)
    v = typical_magnitude(r, 99)
    if not np.isfinite(v) or v <= b.high:
        return
    dT = typical_magnitude(delta_T, 99)
    like = (f": values like {dT:.3g} look like millikelvin ({fix})" if v * 1e-3 <= b.high else "")
    raise InputError(where, f"|{what} / T0| reaches {v:.3g} (99th percentile), beyond the {b.high:g} of "
                     f"any elastic thermoelastic signal{like}")


def check_load_ranges(signal_range, loads, *, where, what="dic.loads"):
    """Refuse a load signal whose range and the span of ``dic.loads`` (or of ``what``) differ by a unit factor."""
    b = PLAUSIBLE["load_range_ratio"]
    span = float(np.ptp(np.asarray(loads, dtype=np.float64)))
    if not span > 0 or not np.isfinite(signal_range):
        return
    k = float(signal_range) / span
    if _inside(b, k):
        return
    slip = (" (a factor of 1000: kN against N?)" if 300 < k < 3000 or 300 < 1 / k < 3000 else "")
    unit = " N" if what == "dic.loads" else ""
    fix = ("dic.loads takes units, e.g. \"2 kN\"" if what == "dic.loads" else
           "convert the load log to the unit of the load signal")
    raise InputError(where, f"the load signal's range {float(signal_range):.4g} (file units) is {k:.3g} "
                     f"times the span {span:.4g}{unit} of {what}{slip}; give both in the same unit ({fix})")
