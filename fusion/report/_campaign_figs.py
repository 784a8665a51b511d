"""Campaign figures: frequency response per specimen, small multiples of source maps."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np

from ._figures import FIGURE_WIDTH, _decorate_axes, category_legend_handles, draw_source_map, new_figure
from ._run_figures import _check_formats, save_figure
from ._style import (
    CATEGORY_COLOURS, SOURCE_LINESTYLES, attr_float, category_label, engineering_exponent, frequency_text,
    ratio_axis_label, ratio_formatter,
)

__all__ = ["frequency_figure", "campaign_figures", "source_map_grid_figure", "source_map_grid"]


def _array(spec, key, name, *, n=None, positive=False, nonneg=False):
    try:
        a = np.asarray(spec[key], dtype=np.float64).reshape(-1)
    except (KeyError, TypeError, ValueError) as e:
        raise ValueError(f"specimen {name!r}: {key!r} must be a sequence of numbers") from e
    if n is not None and a.size != n:
        raise ValueError(f"specimen {name!r}: {key!r} has {a.size} values; expected {n}")
    if not np.isfinite(a).all():
        raise ValueError(f"specimen {name!r}: {key!r}={a.tolist()!r} must be finite")
    if positive and (a <= 0).any():
        raise ValueError(f"specimen {name!r}: {key!r}={a.tolist()!r} must be positive (Hz)")
    if nonneg and (a < 0).any():
        raise ValueError(f"specimen {name!r}: {key!r}={a.tolist()!r} must not be negative")
    return a


def _band(spec, name):
    band = spec.get("band")
    if band is None:
        return None
    try:
        lo, hi = band
        lo = 0.0 if lo is None else float(lo)
        hi = math.inf if hi is None else float(hi)
    except (TypeError, ValueError) as e:
        raise ValueError(f"specimen {name!r}: band={band!r} must be (f_low, f_high) in Hz") from e
    if not (0 <= lo < hi) or (lo == 0 and band[0] is not None):
        raise ValueError(f"specimen {name!r}: band={band!r} needs 0 < f_low < f_high (Hz)")
    return lo, hi


def _band_label(band) -> str:
    lo = f"{band[0]:.3g} Hz" if band[0] > 0 else "below the plot"
    hi = f"{band[1]:.3g} Hz" if math.isfinite(band[1]) else "above the plot"
    return f"recommended band: {lo} to {hi}"


def frequency_figure(name: str, spec: dict):
    """Measured dT/T0 of one specimen against loading frequency, with the heat model.

    Parameters
    ----------
    name : str
        Specimen name (title).
    spec : dict
        ``frequency`` (N,) Hz; ``ratio`` (N,) measured dT/T0 of each run (e.g. the
        median over the evaluated region); optional ``ratio_std`` (N,);
        ``model`` dict with ``frequency`` and ``ratio`` (the in-phase surface
        response of the heat model); ``adiabatic`` dict source -> dT/T0 (the
        limits); ``band`` ``(f_low, f_high)`` Hz, either may be None (open: the band
        runs past the range tried, and the shading past the plot's edge);
        ``band_label`` the legend text of the band (default "recommended band" with
        its edges).

    Returns
    -------
    matplotlib.figure.Figure
        Logarithmic frequency axis. gids: ``"measured"`` (error bars ±1 std),
        ``"model"``, ``"limit:<source>"``, ``"band"``.

    Notes
    -----
    The band is drawn as given; choosing it (where the model is within a stated
    tolerance of the surface-layer limit) is the frequency-response step's job.
    """
    f = _array(spec, "frequency", name, positive=True)
    r = _array(spec, "ratio", name, n=f.size)
    std = _array(spec, "ratio_std", name, n=f.size, nonneg=True) if spec.get("ratio_std") is not None else None
    model = spec.get("model")
    if model is not None:
        mf = _array(model, "frequency", name, positive=True)
        mr = _array(model, "ratio", name, n=mf.size)
    limits = {str(k): float(v) for k, v in (spec.get("adiabatic") or {}).items()}
    band = _band(spec, name)

    values = list(r) + (list(mr) if model is not None else []) + list(limits.values())
    exponent = engineering_exponent(max(abs(v) for v in values) if values else 0.0)
    fig = new_figure(FIGURE_WIDTH * 0.8, 3.8)
    ax = fig.subplots()
    ax.set_xscale("log")
    f_all = np.concatenate([f, mf]) if model is not None else f
    x_lo, x_hi = f_all.min() / 1.5, f_all.max() * 1.5
    if band is not None:
        if band[0] > 0:
            x_lo = min(x_lo, band[0] / 1.5)
        if math.isfinite(band[1]):
            x_hi = max(x_hi, band[1] * 1.5)
        label = spec.get("band_label") or _band_label(band)
        span = ax.axvspan(max(band[0], x_lo), min(band[1], x_hi), color=CATEGORY_COLOURS["surface_ply"],
                          alpha=0.15, linewidth=0, label=label)
        span.set_gid("band")
    for src, v in limits.items():
        ax.axhline(v, color=CATEGORY_COLOURS.get(src, "0.3"), linestyle=SOURCE_LINESTYLES.get(src, "--"),
                   linewidth=1.2, label=f"adiabatic limit: {category_label(src)}", gid=f"limit:{src}")
    if model is not None:
        order = np.argsort(mf)
        ax.plot(mf[order], mr[order], color=CATEGORY_COLOURS["model"], linewidth=1.6, label="heat model",
                gid="model")
    eb = ax.errorbar(f, r, yerr=std, fmt="o", color="black", markersize=4, capsize=3, linewidth=1.0,
                     label="measured (±1 std)" if std is not None else "measured")
    eb.lines[0].set_gid("measured")
    ax.set_xlim(x_lo, x_hi)
    ax.axhline(0.0, color="0.6", linewidth=0.5)
    ax.yaxis.set_major_formatter(ratio_formatter(exponent))
    ax.set_ylabel(ratio_axis_label("dT/T0", exponent), fontsize=8)
    ax.set_xlabel("loading frequency (Hz)", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.grid(True, which="major", color="0.9", linewidth=0.6)
    fig.legend(loc="outside right upper", fontsize=7, frameon=False)
    ax.set_title(f"{name} · dT/T0 against loading frequency", fontsize=10)
    return fig


def _slug(name: str) -> str:
    slug = re.sub(r"[^A-Za-z0-9._-]+", "_", str(name)).strip("._") or "specimen"
    return slug


def campaign_figures(specimens: dict, out_dir, *, dpi=150, formats=("png",), datasets=None,
                     overwrite: bool = False) -> dict[str, Path]:
    """Write the campaign figures.

    Parameters
    ----------
    specimens : dict of str to dict
        Specimen name to the ``spec`` of :func:`frequency_figure`.
    out_dir : str or Path
        Folder of the figures.
    dpi : int
        Raster resolution, dots per inch.
    formats : sequence of {"png", "pdf", "svg"}
        The first is returned; the others are written beside it.
    datasets : dict of str to xarray.Dataset, optional
        Run name to result; adds the ``source_maps`` small-multiples grid.
    overwrite : bool
        Replace existing files.

    Returns
    -------
    dict of str to Path
        ``"frequency_<specimen>"`` per specimen (names made file-safe) and
        ``"source_maps"`` when ``datasets`` is given.
    """
    formats = _check_formats(formats)
    out_dir = Path(out_dir)
    written = {}
    for name, spec in specimens.items():
        key = f"frequency_{_slug(name)}"
        if key in written:
            raise ValueError(f"specimen names {name!r} and another map to the same file name {key!r}")
        fig = frequency_figure(str(name), spec)
        for k, fmt in enumerate(formats):
            p = save_figure(fig, out_dir / f"{key}.{fmt}", dpi=dpi, overwrite=overwrite)
            if k == 0:
                written[key] = p
    if datasets:
        fig = source_map_grid_figure(datasets)
        for k, fmt in enumerate(formats):
            p = save_figure(fig, out_dir / f"source_maps.{fmt}", dpi=dpi, overwrite=overwrite)
            if k == 0:
                written["source_maps"] = p
    return written


def source_map_grid_figure(datasets: dict, *, ncols: int | None = None):
    """Small multiples of the source maps of several runs with one shared legend.

    Parameters
    ----------
    datasets : dict of str to xarray.Dataset
        Run name to result (each with ``source_layer``); panels in dict order.
    ncols : int, optional
        Default up to 4 panels per row.

    Returns
    -------
    matplotlib.figure.Figure
        The legend (gid ``"source_legend"``) lists exactly the categories
        occurring in at least one map.
    """
    if not datasets:
        raise ValueError("datasets is empty: give at least one run result")
    n = len(datasets)
    ncols = ncols or min(4, n)
    nrows = math.ceil(n / ncols)
    aspect = max(ds.sizes["y"] / ds.sizes["x"] for ds in datasets.values())
    panel_w = (FIGURE_WIDTH - 1.4) / ncols
    height = float(np.clip(nrows * (panel_w * aspect * 0.9 + 0.3) + 0.5, 2.0, 9.5))
    fig = new_figure(FIGURE_WIDTH, height)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    present = []
    for ax, (run, ds) in zip(axes.ravel(), datasets.items()):
        for c in draw_source_map(ax, ds):
            if c not in present:
                present.append(c)
        _decorate_axes(ax, ds)
        f = frequency_text(attr_float(ds, "frequency"))
        ax.set_title(f"{run} · {f}" if f else str(run), fontsize=7)
    for ax in axes.ravel()[n:]:
        ax.set_axis_off()
    canonical = list(CATEGORY_COLOURS)
    present.sort(key=lambda c: canonical.index(c) if c in canonical else len(canonical))
    leg = fig.legend(handles=category_legend_handles(present), loc="outside right upper",
                     title="source of the signal", fontsize=7, title_fontsize=7, frameon=False)
    leg.set_gid("source_legend")
    fig.suptitle("source-layer maps of all runs", fontsize=10)
    return fig


def source_map_grid(datasets: dict, path, *, dpi=150, overwrite: bool = False) -> Path:
    """Write :func:`source_map_grid_figure` to ``path`` (format from the suffix); returns the path."""
    return save_figure(source_map_grid_figure(datasets), path, dpi=dpi, overwrite=overwrite)
