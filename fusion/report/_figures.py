"""Map figures of one run: measured beside predicted, residuals, source map, overlay.

Every builder returns a :class:`matplotlib.figure.Figure` made without pyplot
(no global state, safe in worker processes) at a fixed size, so the written
image has exactly ``size_inches * dpi`` pixels. Artists that tests and
scripts look for carry a ``gid`` (``"colorbar"``, ``"scalebar"``,
``"region_outline"``...).
"""

from __future__ import annotations

import math
import textwrap

import numpy as np

from ..datamodel import SOURCES
from ._style import (
    CATEGORY_COLOURS, MAP_INTERPOLATION, DIVERGING_CMAP, NO_DATA_COLOUR, SEQUENTIAL_CMAP, attr_float, category_label,
    engineering_exponent, frequency_text, pixel_size_mm, ratio_axis_label, ratio_formatter,
    ratio_limits, source_categories, symmetric_limit,
)

__all__ = [
    "measured_vs_predicted_figure", "residuals_figure", "source_map_figure", "overlay_figure",
    "draw_source_map", "category_legend_handles", "present_categories", "evaluated_sources",
    "map_title", "fit_title", "new_figure", "no_data_handle",
]

FIGURE_WIDTH = 7.0  # inches: the text width of a two-column report page


def new_figure(width: float, height: float):
    """A constrained-layout Figure detached from pyplot."""
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), layout="constrained")


def evaluated_sources(ds, prefix: str = "ratio_") -> list[str]:
    """Sources of :data:`fusion.datamodel.SOURCES` with a ``<prefix><source>`` map in ``ds``."""
    return [s for s in SOURCES if f"{prefix}{s}" in ds.data_vars]


#: Run names longer than this are shortened in figure titles (the report gives them whole).
TITLE_NAME_CHARS = 40


def map_title(ds) -> str:
    """``"run name · 20 Hz"`` from the global attributes (a long name shortened with an ellipsis)."""
    name = str(ds.attrs.get("run_name") or "run")
    if len(name) > TITLE_NAME_CHARS:
        name = name[:TITLE_NAME_CHARS - 1] + "\u2026"
    f = frequency_text(attr_float(ds, "frequency"))
    return f"{name} · {f}" if f else name


def fit_title(text: str, width_in: float, fontsize: float) -> str:
    """``text`` wrapped to lines that fit ``width_in`` inches at ``fontsize`` points."""
    chars = max(12, int(width_in * 72.0 / (0.6 * fontsize)))
    return textwrap.fill(str(text), width=chars, break_long_words=False) or str(text)


#: Font size of a panel title (points).
_PANEL_TITLE_PT = 9


def _panel_titles(names, panel_w: float) -> list[str]:
    """Panel titles wrapped to the panel width, so none runs into its neighbour or off the page."""
    return [fit_title(n, panel_w, _PANEL_TITLE_PT) for n in names]


def _grid_shape(n: int, ny: int, nx: int, title_lines: int = 1,
                suptitle_lines: int = 1) -> tuple[int, int, tuple[float, float]]:
    """(rows, columns, figure size in inches) of a grid of ``n`` maps of ``ny`` x ``nx`` pixels.

    The layout gives a map nearly the whole width of its panel; the figure is made tall enough for
    each row's map and title and for the super-title, colour bar and legend, because a layout
    engine short of height squeezes the gaps between fixed-aspect maps instead of shrinking them,
    and titles then run into the maps above.
    """
    aspect = ny / nx
    ncols = 1 if aspect < 0.3 else (2 if aspect < 0.6 else 3)
    ncols = max(1, min(n, ncols))
    nrows = math.ceil(n / ncols)
    panel_w = FIGURE_WIDTH / ncols
    # keep one map at most ~5 in tall, so tall coupons still fit a page
    map_h = min((panel_w - 0.1) * aspect, 5.0)
    row_h = map_h + 0.12 + 0.17 * title_lines
    height = nrows * row_h + 1.4 + 0.19 * (suptitle_lines - 1)
    return nrows, ncols, (FIGURE_WIDTH, float(np.clip(height, 2.4, 9.5)))


def _scale_length(width: float) -> float:
    """Largest 1-2-5 length not above a quarter of the field width (same unit)."""
    target = width / 4.0
    k = math.floor(math.log10(target))
    best = 10.0 ** k
    for m in (1.0, 2.0, 5.0, 10.0):
        if m * 10.0 ** k <= target:
            best = m * 10.0 ** k
    return best


def _decorate_axes(ax, ds):
    """A scale bar: in mm when the registration knows the pixel size, else in IR pixels."""
    from matplotlib.patches import Rectangle

    ny, nx = ds.sizes["y"], ds.sizes["x"]
    px = pixel_size_mm(ds)
    ax.set_xticks([])
    ax.set_yticks([])
    if px is None:
        length, unit, per_px = _scale_length(nx), "IR px", 1.0
    else:
        length, unit, per_px = _scale_length(nx * px), "mm", px
    length_px = length / per_px
    x0, y0, h = 0.05 * nx, 0.93 * ny, max(0.012 * ny, 0.6)
    ax.add_patch(Rectangle((x0 - 0.5, y0 - h / 2), length_px, h, facecolor="black",
                           edgecolor="white", linewidth=0.8, gid="scalebar", zorder=5))
    # the label sits a few points above the bar whatever the size of the panel
    ax.annotate(f"{length:g} {unit}", (x0 - 0.5 + length_px / 2, y0 - h / 2), xytext=(0, 2.5),
                textcoords="offset points", ha="center", va="bottom", fontsize=7, gid="scalebar_label",
                zorder=5, bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.0})


def no_data_handle():
    """Legend patch of the pixels without valid data (the same colour in every figure)."""
    from matplotlib.patches import Patch

    return Patch(facecolor=NO_DATA_COLOUR, edgecolor="0.35", linewidth=0.6, label="no data")


def _extend(arrays, lo: float, hi: float) -> str:
    finite = [np.asarray(a, dtype=np.float64) for a in arrays]
    below = any(np.nanmin(a) < lo for a in finite if np.isfinite(a).any())
    above = any(np.nanmax(a) > hi for a in finite if np.isfinite(a).any())
    return {(False, False): "neither", (True, False): "min", (False, True): "max"}.get((below, above), "both")


def _map_grid(ds, panels, *, norm, cmap, cbar_label, exponent, title):
    """Draw ``panels`` [(title, array)] on one norm with one colour bar below."""
    import matplotlib

    ny, nx = ds.sizes["y"], ds.sizes["x"]
    ncols = _grid_shape(len(panels), ny, nx)[1]
    titles = _panel_titles([p[0] for p in panels], FIGURE_WIDTH / ncols)
    title = fit_title(title, FIGURE_WIDTH, 10)
    nrows, ncols, size = _grid_shape(len(panels), ny, nx, max(t.count("\n") + 1 for t in titles),
                                     title.count("\n") + 1)
    fig = new_figure(*size)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    colormap = matplotlib.colormaps[cmap].with_extremes(bad=NO_DATA_COLOUR)
    used = []
    im = None
    for k, ax in enumerate(axes.ravel()):
        if k >= len(panels):
            ax.set_axis_off()
            continue
        name, data = panels[k]
        im = ax.imshow(np.asarray(data), cmap=colormap, norm=norm, interpolation=MAP_INTERPOLATION)
        im.set_gid(f"map:{name}")
        ax.set_title(titles[k], fontsize=_PANEL_TITLE_PT)
        _decorate_axes(ax, ds)
        used.append(ax)
    cb = fig.colorbar(im, ax=used, location="bottom", shrink=0.7, aspect=35,
                      format=ratio_formatter(exponent),
                      extend=_extend([p[1] for p in panels], norm.vmin, norm.vmax))
    cb.set_label(cbar_label, fontsize=8)
    cb.ax.set_gid("colorbar")
    cb.ax.tick_params(labelsize=7)
    if any(not np.isfinite(np.asarray(p[1], dtype=np.float64)).all() for p in panels):
        leg = fig.legend(handles=[no_data_handle()], loc="outside lower right", fontsize=7, frameon=False)
        leg.set_gid("no_data_legend")
    fig.suptitle(title, fontsize=10)
    return fig


def _require(ds, name):
    if name not in ds.data_vars:
        raise ValueError(f"the result has no {name!r} variable; present: {sorted(ds.data_vars)}")
    return ds[name].values


def measured_vs_predicted_figure(ds, *, sources=None):
    """Measured dT/T0 beside each prediction, all on one colour scale.

    Parameters
    ----------
    ds : xarray.Dataset
        Result of one run (:func:`fusion.datamodel.result_dataset`), with
        ``ratio_measured`` and ``ratio_<source>`` maps on dims ``(y, x)``.
    sources : sequence of str, optional
        Predictions to show; default every ``ratio_<source>`` present.

    Returns
    -------
    matplotlib.figure.Figure
        One panel per map; one colour bar (gid ``"colorbar"``) labelled with the
        quantity and its scale (dT/T0 is dimensionless).

    Notes
    -----
    The shared limits are the 1st and 99th percentiles of the pooled finite
    values of all panels (:data:`RATIO_PERCENTILES`); arrows on the colour bar
    show values beyond them. A shared scale is what lets the eye compare a
    prediction with the measurement; a misfit source shows up as a different
    colour, not as a rescaled copy.

    References
    ----------
    N. Smith and S. van der Walt, "A better default colormap for Matplotlib",
    SciPy 2015 (the perceptually uniform ``viridis`` map used here).
    """
    sources = list(sources) if sources is not None else evaluated_sources(ds)
    panels = [("measured", _require(ds, "ratio_measured"))]
    freq = attr_float(ds, "frequency")
    panels += [(f"predicted: {category_label(s, freq)}", _require(ds, f"ratio_{s}")) for s in sources]
    from matplotlib.colors import Normalize

    lo, hi = ratio_limits([p[1] for p in panels])
    exponent = engineering_exponent(max(abs(lo), abs(hi)))
    return _map_grid(ds, panels, norm=Normalize(lo, hi), cmap=SEQUENTIAL_CMAP,
                     cbar_label=ratio_axis_label("dT/T0, measured and predicted", exponent),
                     exponent=exponent, title=map_title(ds))


def residuals_figure(ds, *, sources=None):
    """Residual maps (measured minus predicted dT/T0) on one scale symmetric about zero.

    Parameters
    ----------
    ds : xarray.Dataset
        Result of one run with ``residual_<source>`` maps.
    sources : sequence of str, optional
        Default every ``residual_<source>`` present.

    Returns
    -------
    matplotlib.figure.Figure
        Colour limits ``(-v, v)`` with ``v`` the 99th percentile of the pooled
        ``|residual|`` values (:data:`RESIDUAL_PERCENTILE`); diverging map with a
        neutral light grey at 0 and dark grey for invalid pixels.

    References
    ----------
    K. Moreland, "Diverging color maps for scientific visualization", Advances
    in Visual Computing (ISVC 2009), LNCS 5876, pp. 92-103 (the ``coolwarm`` map).
    """
    from matplotlib.colors import Normalize

    sources = list(sources) if sources is not None else evaluated_sources(ds, "residual_")
    if not sources:
        raise ValueError("the result has no residual_<source> variable to draw")
    freq = attr_float(ds, "frequency")
    panels = [(category_label(s, freq), _require(ds, f"residual_{s}")) for s in sources]
    v = symmetric_limit([p[1] for p in panels])
    exponent = engineering_exponent(v)
    return _map_grid(ds, panels, norm=Normalize(-v, v), cmap=DIVERGING_CMAP,
                     cbar_label=ratio_axis_label("residual dT/T0, measured − predicted", exponent),
                     exponent=exponent, title=f"{map_title(ds)} · residuals")


def present_categories(ds) -> list[str]:
    """Category names of the source map that occur in it, in flag order."""
    codes = source_categories(ds)
    found = set(np.unique(np.asarray(ds["source_layer"].values)).tolist())
    unknown = found - set(codes)
    if unknown:
        raise ValueError(f"source_layer holds codes {sorted(unknown)!r} not listed in its flag_values {sorted(codes)!r}")
    return [name for code, name in codes.items() if code in found]


def category_legend_handles(categories, frequency=None):
    """Legend patches (in words) for ``categories``."""
    from matplotlib.patches import Patch

    return [Patch(facecolor=CATEGORY_COLOURS.get(c, "#000000"), edgecolor="0.35", linewidth=0.6,
                  label=category_label(c, frequency)) for c in categories]


def draw_source_map(ax, ds):
    """Draw the categorical source map of ``ds`` on ``ax``; returns the categories present."""
    from matplotlib.colors import BoundaryNorm, ListedColormap

    codes = source_categories(ds)
    order = list(codes.items())
    lut = {code: i for i, (code, _name) in enumerate(order)}
    raw = np.asarray(ds["source_layer"].values)
    present = present_categories(ds)
    index = np.zeros(raw.shape, dtype=np.int16)
    for code, i in lut.items():
        index[raw == code] = i
    cmap = ListedColormap([CATEGORY_COLOURS.get(name, "#000000") for _c, name in order])
    norm = BoundaryNorm(np.arange(len(order) + 1) - 0.5, len(order))
    im = ax.imshow(index, cmap=cmap, norm=norm, interpolation=MAP_INTERPOLATION)
    im.set_gid("source_map")
    return present


def source_map_figure(ds):
    """The source-layer map with a legend in words.

    Parameters
    ----------
    ds : xarray.Dataset
        Result with an int8 ``source_layer`` carrying CF ``flag_values`` and
        ``flag_meanings``.

    Returns
    -------
    matplotlib.figure.Figure
        The legend (gid ``"source_legend"``) lists exactly the categories that
        occur in the map, in the order of the flags.

    Notes
    -----
    Drawn with nearest-neighbour sampling so that every pixel carries exactly
    one category colour (no blended colours that could read as another class).

    References
    ----------
    M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and
    presentations that are friendly to colorblind people", 2008 (the hues of
    :data:`CATEGORY_COLOURS`).
    """
    ny, nx = ds.sizes["y"], ds.sizes["x"]
    map_w = 4.8
    map_h = min(map_w * ny / nx, 6.0)
    fig = new_figure(FIGURE_WIDTH, max(map_h + 0.9, 2.4))
    ax = fig.subplots()
    present = draw_source_map(ax, ds)
    _decorate_axes(ax, ds)
    leg = fig.legend(handles=category_legend_handles(present, attr_float(ds, "frequency")),
                     loc="outside right upper", title="source of the signal", fontsize=8,
                     title_fontsize=8, frameon=False)
    leg.set_gid("source_legend")
    ax.set_title(fit_title(f"{map_title(ds)} · source of the signal", 0.7 * FIGURE_WIDTH, 10), fontsize=10)
    return fig


def overlay_figure(ds, reference_image, *, region_mask=None, alpha: float = 0.6):
    """Measured dT/T0 laid semi-transparently over the registered visible image.

    Parameters
    ----------
    ds : xarray.Dataset
        Result with ``ratio_measured``.
    reference_image : (Y, X) ndarray
        Visible reference image already resampled onto the IR grid (grey levels,
        any unit).
    region_mask : (Y, X) bool ndarray, optional
        The correlation region on the IR grid, outlined (gid ``"region_outline"``).
    alpha : float
        Opacity of the dT/T0 layer, in (0, 1).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib
    from matplotlib.colors import Normalize
    from matplotlib.lines import Line2D

    shape = (ds.sizes["y"], ds.sizes["x"])
    ref = np.asarray(reference_image, dtype=np.float64)
    if ref.shape != shape:
        raise ValueError(f"reference_image has shape {ref.shape!r}; expected the IR grid {shape!r}")
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha={alpha!r} must be between 0 and 1 (exclusive)")
    measured = _require(ds, "ratio_measured")
    ny, nx = shape
    map_h = min(4.8 * ny / nx, 6.0)
    fig = new_figure(FIGURE_WIDTH, max(map_h + 1.3, 2.8))
    ax = fig.subplots()
    finite = ref[np.isfinite(ref)]
    g_lo, g_hi = (np.percentile(finite, [0.5, 99.5]) if finite.size else (0.0, 1.0))
    ax.imshow(ref, cmap="gray", vmin=g_lo, vmax=g_hi if g_hi > g_lo else g_lo + 1, interpolation=MAP_INTERPOLATION,
              gid="reference_image")
    lo, hi = ratio_limits([measured])
    exponent = engineering_exponent(max(abs(lo), abs(hi)))
    cmap = matplotlib.colormaps[SEQUENTIAL_CMAP].with_extremes(bad=(0, 0, 0, 0))
    im = ax.imshow(measured, cmap=cmap, norm=Normalize(lo, hi), alpha=alpha, interpolation=MAP_INTERPOLATION)
    im.set_gid("map:measured")
    handles = []
    if region_mask is not None:
        mask = np.asarray(region_mask)
        if mask.shape != shape:
            raise ValueError(f"region_mask has shape {mask.shape!r}; expected the IR grid {shape!r}")
        cs = ax.contour(mask.astype(np.float64), levels=[0.5], colors=[CATEGORY_COLOURS["no_source_fits"]],
                        linewidths=1.6)
        cs.set_gid("region_outline")
        handles.append(Line2D([], [], color=CATEGORY_COLOURS["no_source_fits"], linewidth=1.6,
                              label="correlation region"))
    _decorate_axes(ax, ds)
    cb = fig.colorbar(im, ax=ax, location="bottom", shrink=0.7, aspect=35, format=ratio_formatter(exponent),
                      extend=_extend([measured], lo, hi))
    cb.set_label(ratio_axis_label("measured dT/T0", exponent), fontsize=8)
    cb.ax.set_gid("colorbar")
    cb.ax.tick_params(labelsize=7)
    if handles:
        fig.legend(handles=handles, loc="outside right upper", fontsize=8, frameon=False)
    ax.set_title(fit_title(f"{map_title(ds)} · measured dT/T0 over the visible image", 0.7 * FIGURE_WIDTH, 10),
                 fontsize=10)
    return fig
