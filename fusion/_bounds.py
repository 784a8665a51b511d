"""Plausible magnitudes of the values the Python API takes, and checks that name the likely slip.

A value in the wrong unit or axis order (a ply thickness in millimetres where metres are
meant, strains in microstrain, a pixel size in metres, an infrared grid given as (X, Y),
a (Y, X, F) frame stack, a temperature range in kelvin where dT/T0 is meant) reads
without error and gives a confident, wrong answer. Each quantity below has the bounds
inside which a cyclic thermoelastic test of a laminate lies; outside them the call stops
with one sentence naming the argument and the unit or axis the value looks like.

Two tables, one place: :data:`PLAUSIBLE` bounds the physical inputs a run reads from files
(checked by ``fusion/io/_plausible.py``, naming the file and config key), and
:data:`API_BOUNDS` the arguments only the Python API takes (lengths, pixel sizes, axis
order); the API checks strains, ratios and temperatures against :data:`PLAUSIBLE`. The
bounds are wide on purpose: they catch factors of 100 to 1000 (millimetres for metres,
microstrain, kelvin for a ratio), not a marginal test.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import ArgumentError

__all__ = ["Bound", "PLAUSIBLE", "API_BOUNDS", "BOUNDS", "length_problem", "check_length", "check_strain",
           "check_ratio", "check_pixel_size", "check_temperature", "check_frame_axes", "check_grid_shape"]


@dataclass(frozen=True)
class Bound:
    """Plausible range of a quantity: ``low <= typical value <= high`` in ``unit``; ``basis`` says why."""

    low: float
    high: float
    unit: str
    statistic: str
    basis: str


#: The bounds of every physical input, with the reason for each (see ``basis``).
PLAUSIBLE = {
    "strain_range": Bound(
        1e-6, 0.05, "1", "90th percentile of the largest |component| per point",
        "common practice: cyclic strain ranges of laminates under test lie between about "
        "100 microstrain and 1 %; fibre composites fail near 1-2 % (carbon) to 3 % (glass), "
        "resins near 3-6 %, so 5 % is beyond any elastic cycle, and under 1 microstrain a "
        "correlation measurement (noise floor ~50-100 microstrain) holds no strain at all"),
    "temperature": Bound(
        100.0, 1000.0, "K", "every finite value (maps), median of sampled frames (frame stacks)",
        "common practice: laboratory tests run from cryogenic chambers (~100 K with liquid "
        "nitrogen) to hot cells; epoxy matrices soften below ~500 K and 1000 K leaves room for "
        "metals; values between -100 and 100 are degrees Celsius, values in the thousands "
        "are detector counts"),
    "ratio": Bound(
        0.0, 0.01, "1", "99th percentile of |delta_T / T0|",
        "Kelvin's law dT/T0 = -K dsigma, K = alpha / (rho c): about 3e-12 /Pa for steel and "
        "1e-11 /Pa for aluminium (handbook alpha, rho, c) gives under 3e-3 at yield; an epoxy "
        "resin (E 3.5 GPa, nu 0.35, alpha 60e-6 /K, rho 1200, c 1100) at 2 % strain about "
        "5e-3: 1e-2 (3 K at room temperature) is no elastic signal, while a range in "
        "millikelvin read as kelvin gives 1e-2 and more from 3 mK up"),
    "load_range_ratio": Bound(
        0.01, 100.0, "1", "range of the load signal over the span of dic.loads",
        "common practice: the correlation states are taken within or near the cycle's load "
        "range; a factor of 1000 is a unit slip (N and kN), while a factor under 100 may be "
        "a deliberate extrapolation of small static steps"),
}

#: The bounds of the Python API's own arguments, with the reason for each (see ``basis``).
API_BOUNDS = {
    "ply_thickness": Bound(
        5e-6, 0.01, "m", "the value",
        "common practice: cured plies run from spread-tow thin plies of about 15 um to woven or "
        "roving plies of about 1 mm; a thickness typed in millimetres (0.25) or micrometres (250) "
        "lies far outside 5 um .. 10 mm"),
    "layer_thickness": Bound(
        1e-7, 0.005, "m", "the value",
        "common practice: paint films for thermography are a few um to a few hundred um thick, "
        "resin-rich layers 5 to 200 um; 0.1 um .. 5 mm leaves room either side"),
    "pixel_size": Bound(
        1e-3, 10.0, "mm", "the value",
        "common practice: correlation images resolve from about 1 um (microscope) to a few mm "
        "(large structures) of specimen per pixel; a size in metres (1e-4 for 0.1 mm) lies below"),
    "detector_aspect": Bound(
        1.0, 4.0, "1", "longer over shorter side of a frame",
        "common practice: infrared detectors are 4:3, 5:4 or 16:9 (320 x 240, 640 x 512, "
        "1280 x 1024); a frame four times longer than wide is an axis taken for another"),
}

#: Every bound: the inputs' and the API's (strain ranges, ratios and temperatures are shared).
BOUNDS = {**PLAUSIBLE, **API_BOUNDS}

_LENGTH_UNITS = (("millimetres", 1e-3), ("micrometres", 1e-6), ("centimetres", 1e-2))


def _inside(bound, v):
    return bound.low <= v <= bound.high


def length_problem(value, key) -> str | None:
    """Why a length in metres is implausible for ``key`` (a :data:`BOUNDS` entry), or None.

    The text names the unit the value looks like when one fits (``0.25`` for a ply:
    millimetres, so ``0.25e-3`` m).
    """
    b = BOUNDS[key]
    v = float(value)
    if _inside(b, v):
        return None
    msg = f"{value!r} m is outside the plausible {b.low:g} .. {b.high:g} m of a {key.replace('_', ' ')}"
    for unit, scale in _LENGTH_UNITS:
        if _inside(b, v * scale):
            return f"{msg}: it looks like {unit}; give metres ({v * scale:g})"
    return f"{msg}; give metres"


def check_length(value, key, parameter):
    """Raise :class:`~fusion.errors.ArgumentError` when a length (m) is implausible for ``key``."""
    problem = length_problem(value, key)
    if problem:
        raise ArgumentError(parameter, problem)


def _typical(values, q):
    a = np.abs(np.asarray(values, dtype=np.float64))
    a = a[np.isfinite(a)]
    return float(np.percentile(a, q)) if a.size else float("nan")


def check_strain(components, parameter, *, fix=None):
    """Refuse strain ranges whose typical size is no strain (microstrain, percent, a unit slip).

    Parameters
    ----------
    components : sequence of array_like
        The strain components (plain strain, dimensionless), any shape, same for all.
    parameter : str
        The argument named in the message.
    fix : str, optional
        What to check instead of the unit (ranges computed from displacements).
    """
    b = BOUNDS["strain_range"]
    stack = np.abs(np.stack([np.asarray(c, dtype=np.float64).ravel() for c in components]))
    with np.errstate(invalid="ignore"):
        per_point = np.fmax.reduce(stack, axis=0)
    v = _typical(per_point, 90)
    if not np.isfinite(v) or _inside(b, v):
        return
    msg = (f"strain ranges like {v:.4g} (90th percentile of the largest |component|) are outside the "
           f"plausible {b.low:g} .. {b.high:g} of a strain range")
    if fix is not None:
        raise ArgumentError(parameter, f"{msg}; {fix}")
    fits = [(name, f) for name, f in (("microstrain", 1e-6), ("percent", 1e-2)) if _inside(b, v * f)]
    if fits:
        name, f = fits[0]
        raise ArgumentError(parameter, f"{msg}: they look like {name}; multiply by {f:g} to give plain "
                            "strain (dimensionless)")
    raise ArgumentError(parameter, f"{msg}; give plain strain (dimensionless, 1e-3 for 1000 microstrain)")


def check_ratio(values, parameter):
    """Refuse a thermoelastic ratio dT/T0 that is a temperature range (K) or another quantity."""
    b = BOUNDS["ratio"]
    v = _typical(values, 99)
    if not np.isfinite(v) or _inside(b, v):
        return
    hint = ("it looks like a temperature range in kelvin: divide delta_T by T0 (both in K)"
            if v < 50 else "it looks like temperatures, not a ratio: give delta_T / T0")
    raise ArgumentError(parameter, f"values like {v:.4g} (99th percentile of |value|) are outside the "
                        f"plausible {b.low:g} .. {b.high:g} of a thermoelastic ratio dT/T0; {hint}")


def check_pixel_size(value, parameter):
    """Refuse a visible pixel size (mm per pixel) given in metres or micrometres."""
    b = BOUNDS["pixel_size"]
    v = float(value)
    if _inside(b, v):
        return
    msg = f"{value!r} mm per pixel is outside the plausible {b.low:g} .. {b.high:g} mm"
    if _inside(b, v * 1e3):
        raise ArgumentError(parameter, f"{msg}: it looks like metres; give millimetres per pixel "
                            f"({v * 1e3:g})")
    if _inside(b, v * 1e-3):
        raise ArgumentError(parameter, f"{msg}: it looks like micrometres; give millimetres per pixel "
                            f"({v * 1e-3:g})")
    raise ArgumentError(parameter, f"{msg}; give millimetres of specimen per image pixel")


def check_temperature(T0, parameter):
    """Refuse mean temperatures that are no kelvin (degrees Celsius, raw detector counts)."""
    b = BOUNDS["temperature"]
    a = np.asarray(T0, dtype=np.float64)
    a = a[np.isfinite(a)]
    if a.size == 0:
        return
    med = float(np.median(a))
    if _inside(b, med):
        return
    if -100.0 < med < 100.0:
        hint = "it looks like degrees Celsius: give kelvin (offset=273.15 adds it)"
    elif med > b.high:
        hint = "it looks like detector counts: give gain (K per count) and offset (K)"
    else:
        hint = "give temperatures in kelvin, or gain and offset of the counts"
    raise ArgumentError(parameter, f"the mean temperature T0 has a median of {med:.4g}, outside the "
                        f"plausible {b.low:g} .. {b.high:g} K; {hint}")


def check_frame_axes(shape, parameter, *, n_times=None):
    """Refuse a frame stack whose axes are not (frames, rows, columns).

    Parameters
    ----------
    shape : tuple of int
        The stack's shape.
    n_times : int, optional
        Number of frame times or load samples given with the frames (one per frame).
    """
    shape = tuple(int(s) for s in shape)
    if len(shape) != 3:
        raise ArgumentError(parameter, f"expected a (frames, rows, columns) stack, got shape {shape!r}")
    f, y, x = shape
    b = BOUNDS["detector_aspect"]
    if n_times is not None and n_times != f and n_times == x:
        raise ArgumentError(parameter, f"shape {shape!r} has {n_times} entries on its last axis, as many "
                            "as the frame times: it looks like (rows, columns, frames); pass "
                            "numpy.moveaxis(frames, -1, 0)")
    if max(y, x) / max(min(y, x), 1) > b.high and max(f, y) / max(min(f, y), 1) <= b.high:
        raise ArgumentError(parameter, f"shape {shape!r} read as {f} frames of {y} x {x} px gives frames "
                            f"{max(y, x) / max(min(y, x), 1):.0f} times longer than wide (infrared "
                            f"detectors are at most {b.high:g}:1): it looks like (rows, columns, frames); "
                            "pass numpy.moveaxis(frames, -1, 0)")


def check_grid_shape(points_colrow, shape, parameter):
    """Refuse an infrared grid shape given as (X, Y) = (columns, rows).

    ``points_colrow`` are the registered positions (col, row) of the data: when far more of
    them fall inside the swapped shape than inside the given one, the axes were swapped.
    """
    ny, nx = (int(s) for s in shape)
    p = np.asarray(points_colrow, dtype=np.float64).reshape(-1, 2)
    p = p[np.all(np.isfinite(p), axis=1)]
    if ny == nx or p.shape[0] == 0:
        return

    def share(rows, cols):
        return float(np.mean((p[:, 0] > -0.5) & (p[:, 0] < cols - 0.5) & (p[:, 1] > -0.5)
                             & (p[:, 1] < rows - 0.5)))

    given, swapped = share(ny, nx), share(nx, ny)
    if swapped > given + 0.1:
        raise ArgumentError(parameter, f"the infrared grid {(ny, nx)!r} holds {100 * given:.0f} % of the "
                            f"registered points and {(nx, ny)!r} would hold {100 * swapped:.0f} %: it "
                            f"looks like (X, Y); give (rows, columns) = {(nx, ny)!r}")
