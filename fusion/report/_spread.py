"""The heat-spread figure of a run: what the lateral heat model explains that the 1-D one leaves.

Top: the residual maps (measured minus predicted dT/T0) of the through-thickness model and
of the lateral heat model on one symmetric scale, the band where the lateral model cannot
know the boundary (``lateral_edge``) outlined. Bottom: the root-mean-square residual of each
against the distance from the nearest hole (where stress gradients and in-plane heat flow
live), beside the measurement noise; distances where most pixels lie in that band are
shaded.
"""

from __future__ import annotations

import numpy as np

from ._figures import FIGURE_WIDTH, _decorate_axes, fit_title, map_title, new_figure
from ._style import (
    CATEGORY_COLOURS, MAP_INTERPOLATION, DIVERGING_CMAP, NO_DATA_COLOUR, SOURCE_LINESTYLES,
    engineering_exponent, pixel_size_mm, ratio_axis_label, ratio_formatter, symmetric_limit,
)

__all__ = ["heat_spread_figure", "distance_profile", "hole_distance"]

_HEAT = ("model", "lateral")
_NAMES = {"model": "through-thickness heat model", "lateral": "lateral heat model"}


def hole_distance(valid):
    """Distance (IR px) of every pixel from the nearest hole: a no-data region enclosed by data.

    Where the grid holds no enclosed no-data region, from the nearest no-data pixel or the
    grid's border instead. Returns ``(distance, from_holes)``.
    """
    from scipy.ndimage import distance_transform_edt, label

    ok = np.asarray(valid, bool)
    lab, n = label(~ok)
    touching = np.unique(np.concatenate([lab[0], lab[-1], lab[:, 0], lab[:, -1]]))
    holes = np.isin(lab, np.setdiff1d(np.arange(1, n + 1), touching))
    if holes.any():
        return distance_transform_edt(~holes), True
    return distance_transform_edt(np.pad(ok, 1))[1:-1, 1:-1], False


def distance_profile(values, valid, distance, *, width=1.0, bins=15, statistic="rms"):
    """Root mean square (or mean) of ``values`` in bins of distance.

    Parameters
    ----------
    values : (Y, X) ndarray
        Per-pixel values (NaN ignored).
    valid : (Y, X) bool ndarray
        Pixels to use.
    distance : (Y, X) ndarray
        Distance of each pixel (e.g. from :func:`hole_distance`), IR px.
    width : float
        Bin width in IR px.
    bins : int
        Number of bins, from distance 0.
    statistic : {"rms", "mean"}

    Returns
    -------
    centres, stats, counts : (B,) ndarray
        Bin centres (IR px), the statistic per bin (NaN where empty) and the counts.
    """
    v = np.asarray(values, dtype=np.float64)
    use = np.asarray(valid, bool) & np.isfinite(v)
    idx = np.floor(np.asarray(distance)[use] / width).astype(int)
    keep = idx < bins
    vals = v[use][keep]
    counts = np.bincount(idx[keep], minlength=bins)
    sums = np.bincount(idx[keep], weights=vals ** 2 if statistic == "rms" else vals, minlength=bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        stats = np.where(counts > 0, sums / counts, np.nan)
    if statistic == "rms":
        stats = np.sqrt(stats)
    return (np.arange(bins) + 0.5) * width, stats, counts


def heat_spread_figure(ds):
    """Residuals of the through-thickness and lateral heat models, and against distance from a hole.

    Parameters
    ----------
    ds : xarray.Dataset
        Result of a run with ``residual_lateral`` (and ``residual_model`` where both heat
        models were evaluated), ``valid`` and, when present, ``lateral_edge`` and the
        z-scores.

    Returns
    -------
    matplotlib.figure.Figure
        Maps (gids ``map:model``, ``map:lateral``; the edge band outlined, gid
        ``lateral_edge``) with one colour bar, and the rms-residual profile against the
        distance from the nearest hole (gid ``profile:<source>``) with the measurement noise.
    """
    import matplotlib
    from matplotlib.colors import Normalize

    present = [s for s in _HEAT if f"residual_{s}" in ds.data_vars]
    if "lateral" not in present:
        raise ValueError("the result has no residual_lateral map: the lateral heat model was not evaluated")
    valid = ds["valid"].values.astype(bool) if "valid" in ds.data_vars else np.isfinite(ds["residual_lateral"].values)
    ny, nx = ds.sizes["y"], ds.sizes["x"]
    map_h = min(FIGURE_WIDTH / len(present) * 0.82 * ny / nx, 4.5)
    fig = new_figure(FIGURE_WIDTH, map_h + 3.6)
    grid = fig.add_gridspec(2, len(present), height_ratios=(map_h, 2.6))
    maps = [ds[f"residual_{s}"].values for s in present]
    v = symmetric_limit(maps)
    exponent = engineering_exponent(v)
    cmap = matplotlib.colormaps[DIVERGING_CMAP].with_extremes(bad=NO_DATA_COLOUR)
    axes = []
    im = None
    for k, (s, data) in enumerate(zip(present, maps)):
        ax = fig.add_subplot(grid[0, k])
        im = ax.imshow(data, cmap=cmap, norm=Normalize(-v, v), interpolation=MAP_INTERPOLATION)
        im.set_gid(f"map:{s}")
        if "lateral_edge" in ds.data_vars:
            cs = ax.contour(ds["lateral_edge"].values.astype(float), levels=[0.5], colors="k",
                            linewidths=0.8, linestyles="--")
            cs.set_gid("lateral_edge")
        ax.set_title(f"residual: {_NAMES[s]}", fontsize=9)
        _decorate_axes(ax, ds)
        axes.append(ax)
    cb = fig.colorbar(im, ax=axes, location="right", shrink=0.85, format=ratio_formatter(exponent))
    cb.set_label(ratio_axis_label("measured − predicted dT/T0", exponent), fontsize=8)
    cb.ax.set_gid("colorbar")
    cb.ax.tick_params(labelsize=7)

    ax = fig.add_subplot(grid[1, :])
    px = pixel_size_mm(ds)
    scale, unit = (px, "mm") if px else (1.0, "IR px")
    distance, from_holes = hole_distance(valid)
    exp_r = engineering_exponent(max(float(np.nanmax(np.abs(maps[-1]))), 1e-30))
    for s, data in zip(present, maps):
        centres, rms, _ = distance_profile(data, valid, distance)
        line, = ax.plot(centres * scale, rms, color=CATEGORY_COLOURS[s], ls=SOURCE_LINESTYLES[s], lw=1.6,
                        marker="o", ms=3, label=_NAMES[s])
        line.set_gid(f"profile:{s}")
    if "ratio_measured_std" in ds.data_vars:
        noise = float(np.nanmedian(ds["ratio_measured_std"].values[valid]))
        ax.axhline(noise, color="0.5", lw=0.8, ls=":")
        ax.text(0.99, noise, "measurement noise (median std)", transform=ax.get_yaxis_transform(), ha="right",
                va="top", fontsize=7, color="0.35")
    if "lateral_edge" in ds.data_vars:
        centres, share, _ = distance_profile(ds["lateral_edge"].values.astype(float), valid, distance,
                                             statistic="mean")
        for c, sh in zip(centres, share):
            if sh > 0.5:
                ax.axvspan((c - 0.5) * scale, (c + 0.5) * scale, color="0.85", lw=0, zorder=0, gid="edge_band")
    ax.yaxis.set_major_formatter(ratio_formatter(exp_r))
    where = "the nearest hole" if from_holes else "the nearest pixel without valid data"
    ax.set_xlabel(f"distance from {where} ({unit}); shaded: mostly within the dashed band")
    ax.set_ylabel(ratio_axis_label("rms residual", exp_r))
    ax.set_ylim(bottom=0)
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.legend(fontsize=7, loc="upper right")
    note = " · dashed outline: within an in-plane diffusion length of no data" if "lateral_edge" in ds else ""
    fig.suptitle(fit_title(f"{map_title(ds)} · heat flowing along the surface{note}", FIGURE_WIDTH, 9), fontsize=9)
    return fig
