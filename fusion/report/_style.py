"""Palette, category labels, colour scales and small helpers shared by the figures.

The categorical colours are the seven chromatic hues of the Okabe–Ito set,
chosen because they stay distinct under the common forms of colour-vision
deficiency; the assignment to sources is ours. Sequential maps use viridis
(perceptually uniform, readable in grey), residuals matplotlib's ``coolwarm``
diverging map (Moreland 2009), whose lightness is symmetric about its neutral
centre so that equal positive and negative residuals look equally strong.
"""

from __future__ import annotations

import math

import numpy as np

from ..datamodel import SOURCES, source_flags

__all__ = [
    "CATEGORY_COLOURS", "SEQUENTIAL_CMAP", "DIVERGING_CMAP", "NO_DATA_COLOUR", "RATIO_PERCENTILES",
    "RESIDUAL_PERCENTILE", "category_label", "source_categories", "ratio_limits",
    "symmetric_limit", "engineering_exponent", "ratio_axis_label", "ratio_formatter",
    "attr_float", "frequency_text", "pixel_size_mm", "MAP_INTERPOLATION",
]

#: One colour for pixels without valid data in every map figure: a dark grey, far from every
#: hue of viridis, coolwarm (whose neutral centre is a light grey) and the categories below,
#: also for the common colour-vision deficiencies.
NO_DATA_COLOUR = "#404040"

#: Colour of each source-map category (Okabe & Ito, "Color Universal Design", 2008 hues).
CATEGORY_COLOURS = {
    "coating": "#E69F00",            # orange
    "resin_layer": "#56B4E9",        # sky blue
    "surface_ply": "#009E73",        # bluish green
    "laminate": "#0072B2",           # blue
    "model": "#CC79A7",              # reddish purple
    "lateral": "#8700FF",            # violet: beside the heat model's hue, apart from all under CVD
    "indistinguishable": "#F0E442",  # yellow
    "no_source_fits": "#D55E00",     # vermillion
    "no_data": NO_DATA_COLOUR,
}

#: Line styles beside the colours, so profiles stay readable in grey print.
SOURCE_LINESTYLES = {
    "coating": ":",
    "resin_layer": "-.",
    "surface_ply": "--",
    "laminate": (0, (6, 1.5, 1, 1.5, 1, 1.5)),
    "model": (0, (1, 1)),
    "lateral": (0, (4, 1, 1, 1)),
}

#: How maps are drawn: at their native resolution. PDF and SVG embed the map's own pixels (not
#: a copy resampled at the figure's dpi); raster output shows each figure pixel the map pixel
#: under it, so no two values or categories are ever blended.
MAP_INTERPOLATION = "none"

SEQUENTIAL_CMAP = "viridis"
DIVERGING_CMAP = "coolwarm"

#: Percentiles of the pooled finite values that set the shared dT/T0 scale; a few
#: hot pixels at free edges would otherwise flatten the whole map.
RATIO_PERCENTILES = (1.0, 99.0)
#: Percentile of |residual| that sets the symmetric residual scale.
RESIDUAL_PERCENTILE = 99.0

_WORDS = {
    "coating": "coating",
    "resin_layer": "resin-rich layer",
    "surface_ply": "surface ply",
    "laminate": "whole laminate",
    "model": "heat model",
    "lateral": "lateral heat model",
    "indistinguishable": "indistinguishable",
    "no_source_fits": "no source fits",
    "no_data": "no data",
}


def category_label(name: str, frequency: float | None = None) -> str:
    """Words for a source-map category (legends, tables, alt text)."""
    words = _WORDS.get(name, name.replace("_", " "))
    if name in ("model", "lateral") and frequency is not None:
        words = f"{words} at {frequency:g} Hz"
    return words


def source_categories(ds) -> dict[int, str]:
    """Map the integer codes of ``ds.source_layer`` to category names.

    Reads the CF ``flag_values`` / ``flag_meanings`` of the variable and falls
    back to :func:`fusion.datamodel.source_flags` when they are missing.
    """
    var = ds["source_layer"]
    values = var.attrs.get("flag_values")
    meanings = var.attrs.get("flag_meanings")
    if values is None or meanings is None:
        values, meanings = source_flags(tuple(s for s in SOURCES if f"ratio_{s}" in ds) or SOURCES)
    if isinstance(meanings, str):
        meanings = meanings.split()
    values = [int(v) for v in np.atleast_1d(values)]
    if len(values) != len(meanings):
        raise ValueError(
            f"source_layer: {len(values)} flag_values but {len(meanings)} flag_meanings {meanings!r}"
        )
    return dict(zip(values, meanings))


def _finite(arrays) -> np.ndarray:
    parts = [np.asarray(a, dtype=np.float64).ravel() for a in arrays]
    pooled = np.concatenate(parts) if parts else np.empty(0)
    return pooled[np.isfinite(pooled)]


def ratio_limits(arrays, *, percentiles=RATIO_PERCENTILES) -> tuple[float, float]:
    """Shared colour limits of several dT/T0 maps: percentiles of their pooled finite values.

    Returns ``(-1e-6, 1e-6)`` when nothing is finite and widens a zero span, so
    a colour bar can always be drawn.
    """
    finite = _finite(arrays)
    if finite.size == 0:
        return -1e-6, 1e-6
    lo, hi = np.percentile(finite, percentiles)
    if not hi > lo:
        pad = max(abs(lo) * 1e-3, 1e-12)
        lo, hi = lo - pad, hi + pad
    return float(lo), float(hi)


def symmetric_limit(arrays, *, percentile=RESIDUAL_PERCENTILE) -> float:
    """Half-width of a colour scale symmetric about zero: a percentile of |values|."""
    finite = np.abs(_finite(arrays))
    if finite.size == 0:
        return 1e-6
    v = float(np.percentile(finite, percentile))
    return v if v > 0 else max(float(finite.max()), 1e-12)


def engineering_exponent(value: float) -> int:
    """Power of ten, a multiple of 3, that brings ``value`` into [1, 1000)."""
    if not np.isfinite(value) or value == 0:
        return 0
    return 3 * math.floor(math.log10(abs(value)) / 3)


def ratio_axis_label(quantity: str, exponent: int) -> str:
    """Axis or colour-bar label of a dimensionless ratio shown in units of 10**exponent."""
    if exponent == 0:
        return f"{quantity} (dimensionless)"
    return f"{quantity} ($\\times 10^{{{exponent}}}$, dimensionless)"


def ratio_formatter(exponent: int):
    """Tick formatter dividing values by 10**exponent (the norm stays in true units)."""
    from matplotlib.ticker import FuncFormatter

    scale = 10.0 ** exponent
    return FuncFormatter(lambda v, _pos: f"{v / scale:.4g}")


def attr_float(ds, name: str) -> float | None:
    """A numeric global attribute as float, or None when absent or empty.

    NetCDF round trips turn None into ``""``, hence the empty-string case.
    """
    v = ds.attrs.get(name)
    if v is None or (isinstance(v, str) and not v.strip()):
        return None
    try:
        f = float(np.asarray(v).reshape(-1)[0])
    except (TypeError, ValueError, IndexError) as e:
        raise ValueError(f"attribute {name}={v!r} is not a number") from e
    return f if np.isfinite(f) else None


def frequency_text(frequency: float | None) -> str:
    """``"20 Hz"`` or ``""``."""
    return "" if frequency is None else f"{frequency:g} Hz"


def pixel_size_mm(ds) -> float | None:
    """mm per IR pixel from the registration, or None when it is not known."""
    p = attr_float(ds, "pixel_size_mm")
    if p is not None and p <= 0:
        raise ValueError(f"attribute pixel_size_mm={p!r} must be positive (mm per IR pixel)")
    return p
