"""Line profile across the maps and the through-thickness adiabatic step profile."""

from __future__ import annotations

import math

import numpy as np

from ._figures import FIGURE_WIDTH, _decorate_axes, evaluated_sources, fit_title, map_title, new_figure
from ._style import (
    CATEGORY_COLOURS, MAP_INTERPOLATION, NO_DATA_COLOUR, SEQUENTIAL_CMAP, SOURCE_LINESTYLES, attr_float, category_label,
    engineering_exponent, pixel_size_mm, ratio_axis_label, ratio_formatter, ratio_limits,
)

__all__ = ["sample_line", "default_profile_line", "profile_figure", "through_thickness_figure"]

#: Half-width of the uncertainty band, in standard deviations (about 95 % for a normal error).
BAND_SIGMA = 2.0


def _check_line(line, shape):
    try:
        (x0, y0), (x1, y1) = line
        x0, y0, x1, y1 = (float(v) for v in (x0, y0, x1, y1))
    except (TypeError, ValueError) as e:
        raise ValueError(f"profile_line={line!r} must be ((x0, y0), (x1, y1)) in IR pixels") from e
    ny, nx = shape
    for x, y in ((x0, y0), (x1, y1)):
        if not (0.0 <= x <= nx - 1 and 0.0 <= y <= ny - 1):
            raise ValueError(
                f"profile_line={line!r} leaves the IR grid: x must lie in [0, {nx - 1}], y in [0, {ny - 1}]"
            )
    if math.hypot(x1 - x0, y1 - y0) == 0.0:
        raise ValueError(f"profile_line={line!r} has zero length")
    return x0, y0, x1, y1


def sample_line(image, line, *, spacing: float = 0.5):
    """Bilinear samples of ``image`` along a straight line.

    Parameters
    ----------
    image : (Y, X) ndarray
        A map on the IR grid; NaN marks missing data.
    line : ((x0, y0), (x1, y1))
        End points in IR pixels (x = column, y = row).
    spacing : float
        Distance between samples, IR pixels.

    Returns
    -------
    distance : (N,) ndarray
        Distance of each sample from the first end point, IR pixels.
    values : (N,) ndarray
        float64 samples; NaN wherever a neighbour of the sample is NaN.

    Notes
    -----
    Bilinear interpolation (``scipy.ndimage.map_coordinates``, order 1) keeps
    values between their neighbours, so a profile never overshoots the data;
    a NaN neighbour makes the sample NaN rather than inventing data.
    """
    from scipy.ndimage import map_coordinates

    img = np.asarray(image, dtype=np.float64)
    x0, y0, x1, y1 = _check_line(line, img.shape)
    length = math.hypot(x1 - x0, y1 - y0)
    n = max(2, int(math.ceil(length / spacing)) + 1)
    t = np.linspace(0.0, 1.0, n)
    rows = y0 + t * (y1 - y0)
    cols = x0 + t * (x1 - x0)
    values = map_coordinates(img, np.vstack([rows, cols]), order=1, mode="nearest", prefilter=False)
    return t * length, values


def default_profile_line(ds):
    """Horizontal line through the middle row of the valid area, across its columns (None if empty)."""
    measured = np.asarray(ds["ratio_measured"].values)
    valid = np.isfinite(measured)
    if "valid" in ds.data_vars:
        valid &= np.asarray(ds["valid"].values) == 1
    if not valid.any():
        return None
    rows = np.flatnonzero(valid.any(axis=1))
    row = int(rows[len(rows) // 2])
    cols = np.flatnonzero(valid[row])
    if cols[0] == cols[-1]:
        return None
    return ((float(cols[0]), float(row)), (float(cols[-1]), float(row)))


def _measured_std(ds):
    if "ratio_measured_std" in ds.data_vars:
        return ds["ratio_measured_std"].values
    if "delta_T_std" in ds.data_vars and "T0" in ds.data_vars:
        return ds["delta_T_std"].values.astype(np.float64) / ds["T0"].values
    return None


def profile_figure(ds, line=None, *, sources=None):
    """Measured dT/T0, each prediction and the measurement's uncertainty band along a line.

    Parameters
    ----------
    ds : xarray.Dataset
        Result with ``ratio_measured`` (and ``ratio_measured_std`` or
        ``delta_T_std`` with ``T0`` for the band).
    line : ((x0, y0), (x1, y1)), optional
        IR pixels; default :func:`default_profile_line`.
    sources : sequence of str, optional
        Predictions to draw; default all present.

    Returns
    -------
    matplotlib.figure.Figure
        Left: the measured map with the line A→B; right: the profiles against
        distance from A (mm when the pixel size is known, else IR pixels). The
        band (gid ``"band"``) is ±2 standard deviations of the measurement.
    """
    import matplotlib
    from matplotlib.colors import Normalize

    if line is None:
        line = default_profile_line(ds)
        if line is None:
            raise ValueError("no valid pixels: give profile_line explicitly")
    measured = ds["ratio_measured"].values
    x0, y0, x1, y1 = _check_line(line, measured.shape)
    sources = list(sources) if sources is not None else evaluated_sources(ds)
    freq = attr_float(ds, "frequency")
    px = pixel_size_mm(ds)
    scale, unit = (px, "mm") if px is not None else (1.0, "IR px")

    fig = new_figure(FIGURE_WIDTH, 3.9)
    ax_map, ax = fig.subplots(1, 2, width_ratios=[1.0, 1.7])
    lo, hi = ratio_limits([measured])
    cmap = matplotlib.colormaps[SEQUENTIAL_CMAP].with_extremes(bad=NO_DATA_COLOUR)
    ax_map.imshow(measured, cmap=cmap, norm=Normalize(lo, hi), interpolation=MAP_INTERPOLATION)
    ax_map.plot([x0, x1], [y0, y1], color="white", linewidth=2.6)
    ax_map.plot([x0, x1], [y0, y1], color="black", linewidth=1.2, gid="profile_line")
    for label, (x, y) in (("A", (x0, y0)), ("B", (x1, y1))):
        ax_map.annotate(label, (x, y), fontsize=8, fontweight="bold", ha="center", va="center",
                        bbox={"boxstyle": "circle,pad=0.15", "facecolor": "white", "edgecolor": "black"})
    _decorate_axes(ax_map, ds)
    ax_map.set_title("measured dT/T0, line A→B", fontsize=8)

    dist, m = sample_line(measured, line)
    curves = [m] + [sample_line(ds[f"ratio_{s}"].values, line)[1] for s in sources]
    exponent = engineering_exponent(max(abs(v) for v in ratio_limits(curves)))
    d = dist * scale
    std = _measured_std(ds)
    if std is not None:
        s = sample_line(std, line)[1]
        band = ax.fill_between(d, m - BAND_SIGMA * s, m + BAND_SIGMA * s, color="0.75", linewidth=0,
                               label=f"measured ±{BAND_SIGMA:g} std")
        band.set_gid("band")
    ax.plot(d, m, color="black", linewidth=1.4, label="measured", gid="profile:measured")
    for src, c in zip(sources, curves[1:]):
        ax.plot(d, c, color=CATEGORY_COLOURS[src], linestyle=SOURCE_LINESTYLES.get(src, "--"),
                linewidth=1.4, label=f"predicted: {category_label(src, freq)}", gid=f"profile:{src}")
    ax.axhline(0.0, color="0.5", linewidth=0.6)
    ax.yaxis.set_major_formatter(ratio_formatter(exponent))
    ax.set_ylabel(ratio_axis_label("dT/T0", exponent), fontsize=8)
    ax.set_xlabel(f"distance from A ({unit})", fontsize=8)
    ax.set_xlim(d[0], d[-1])
    ax.tick_params(labelsize=7)
    fig.legend(handles=ax.get_legend_handles_labels()[0], loc="outside lower center", ncols=3, fontsize=7,
               frameon=False)
    fig.suptitle(fit_title(f"{map_title(ds)} · profile", FIGURE_WIDTH, 10), fontsize=10)
    return fig


def _check_rows(rows):
    if not rows:
        raise ValueError("ply_profile is empty: give one row per layer, viewed face first")
    out = []
    for i, row in enumerate(rows):
        try:
            name, zt, zb, r = str(row["name"]), float(row["z_top"]), float(row["z_bottom"]), float(row["ratio"])
        except (KeyError, TypeError, ValueError) as e:
            raise ValueError(f"ply_profile[{i}]={row!r} needs name, z_top, z_bottom (m) and ratio") from e
        if not (np.isfinite([zt, zb, r]).all() and zt != zb):
            raise ValueError(f"ply_profile[{i}]={row!r}: z_top, z_bottom must differ and be finite; ratio finite")
        out.append((name, zt, zb, r))
    return out


def through_thickness_figure(ply_profile, *, measured=None, title="through-thickness adiabatic dT/T0"):
    """Step profile of each layer's adiabatic dT/T0 against depth below the viewed face.

    Parameters
    ----------
    ply_profile : list of dict
        Rows ``{"name", "z_top", "z_bottom", "ratio"}``, viewed face first;
        ``z`` in m along any through-thickness axis (depth is measured from the
        first row's ``z_top``, so either sign convention works).
    measured : (float, float, float), optional
        Median and interquartile bounds of the measured dT/T0, drawn as a
        vertical line (gid ``"measured_median"``) over a shaded band.
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        Depth axis in mm, viewed face at the top; the step line has gid
        ``"step_profile"``.
    """
    rows = _check_rows(ply_profile)
    face = rows[0][1]
    depth = [(abs(zt - face) * 1e3, abs(zb - face) * 1e3) for _n, zt, zb, _r in rows]
    ratios = [r for *_x, r in rows]
    values = list(ratios) + (list(measured) if measured is not None else [])
    exponent = engineering_exponent(max(abs(v) for v in values) or 1.0)
    height = float(np.clip(1.6 + 0.22 * len(rows), 3.0, 8.0))
    fig = new_figure(FIGURE_WIDTH * 0.75, height)
    ax = fig.subplots()
    zs, rs = [], []
    for (d_top, d_bot), r in zip(depth, ratios):
        zs += [d_top, d_bot]
        rs += [r, r]
    for k, ((d_top, d_bot), name) in enumerate(zip(depth, [n for n, *_ in rows])):
        ax.axhspan(d_top, d_bot, color="0.93" if k % 2 else "0.985", zorder=0, linewidth=0)
        ax.text(1.01, (d_top + d_bot) / 2, name, transform=ax.get_yaxis_transform(), fontsize=6.5,
                va="center", ha="left")
    ax.plot(rs, zs, color=CATEGORY_COLOURS["laminate"], linewidth=1.6, gid="step_profile",
            label="adiabatic dT/T0 of each layer")
    if measured is not None:
        med, q1, q3 = (float(v) for v in measured)
        ax.axvspan(q1, q3, color="0.6", alpha=0.35, linewidth=0, label="measured, interquartile range")
        ax.axvline(med, color="black", linestyle="--", linewidth=1.2, gid="measured_median",
                   label="measured, median")
    ax.axvline(0.0, color="0.5", linewidth=0.6)
    ax.set_ylim(max(max(d) for d in depth), 0.0)
    ax.xaxis.set_major_formatter(ratio_formatter(exponent))
    ax.set_xlabel(ratio_axis_label("adiabatic dT/T0", exponent), fontsize=8)
    ax.set_ylabel("depth below the viewed face (mm)", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.legend(fontsize=7, frameon=False, loc="lower left")
    ax.set_title(title, fontsize=10)
    return fig
