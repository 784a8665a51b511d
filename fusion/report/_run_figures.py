"""All figures of one run, written atomically in the requested formats."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..io import atomic_path
from ._figures import (
    evaluated_sources, measured_vs_predicted_figure, overlay_figure, residuals_figure, source_map_figure,
)
from ._profiles import default_profile_line, profile_figure, through_thickness_figure
from ._spread import heat_spread_figure

__all__ = ["run_figures", "figure_names", "save_figure", "FIGURE_NAMES", "DEFAULT_DPI"]

#: Figure names in report order.
FIGURE_NAMES = ("measured_vs_predicted", "residuals", "heat_spread", "source_map", "overlay", "profile",
                "through_thickness")

_FORMATS = {"png", "pdf", "svg"}


#: Figure resolution (dots per inch) of PNG figures by default: sharp on a screen at the
#: report's 7 in text width; 300 or more for print (``[output] dpi``), or PDF.
DEFAULT_DPI = 150
# zlib level of PNG figures: the fastest (the files are somewhat larger than at the default
# level, and the pixels the same)
_PNG_COMPRESSION = 1


def save_figure(fig, path, *, dpi: int = DEFAULT_DPI, overwrite: bool = False) -> Path:
    """Write ``fig`` to ``path`` (format from the suffix) through a temporary name.

    PDF and SVG are written without a creation date so that the same figure
    gives the same bytes (reproducible outputs); PNG with the fastest compression.
    """
    path = Path(path)
    fmt = path.suffix.lstrip(".").lower()
    if fmt not in _FORMATS:
        raise ValueError(f"figure path {str(path)!r}: suffix must be one of {sorted(_FORMATS)}")
    metadata = {"png": None, "pdf": {"CreationDate": None}, "svg": {"Date": None}}[fmt]
    extra = {"pil_kwargs": {"compress_level": _PNG_COMPRESSION}} if fmt == "png" else {}
    with atomic_path(path, overwrite=overwrite) as tmp:
        fig.savefig(tmp, format=fmt, dpi=dpi, metadata=metadata, **extra)
    return path


def _check_formats(formats):
    if isinstance(formats, str):
        formats = (formats,)
    formats = tuple(str(f).lower().lstrip(".") for f in formats)
    bad = [f for f in formats if f not in _FORMATS]
    if not formats or bad:
        raise ValueError(f"formats={formats!r}: choose from {sorted(_FORMATS)}")
    return formats


def run_figures(ds, out_dir, *, formats=("png",), dpi=DEFAULT_DPI, reference_image=None, region_mask=None,
                profile_line=None, ply_profile=None, overwrite: bool = False, names=None) -> dict[str, Path]:
    """Write the figures of one run.

    Parameters
    ----------
    ds : xarray.Dataset
        Result of the run (the variables of :mod:`fusion.datamodel`).
    out_dir : str or Path
        Folder of the figures (created when missing).
    formats : sequence of {"png", "pdf", "svg"}
        File formats; the first is the one returned.
    dpi : int
        Resolution of raster output, dots per inch (:data:`DEFAULT_DPI` for screens; 300 or
        more for print).
    reference_image : (Y, X) ndarray, optional
        Visible reference image on the IR grid; enables ``overlay``.
    region_mask : (Y, X) bool ndarray, optional
        Correlation region on the IR grid, outlined on the overlay.
    profile_line : ((x0, y0), (x1, y1)), optional
        IR pixels; default a horizontal line through the middle of the valid area.
    ply_profile : list of dict, optional
        Rows ``name, z_top, z_bottom (m), ratio``; enables ``through_thickness``.
    overwrite : bool
        Replace existing files (otherwise :class:`fusion.errors.InputError`).
    names : iterable of str, optional
        Draw only these of the figures (default: all that the inputs allow).

    Returns
    -------
    dict of str to Path
        Figure name (see :data:`FIGURE_NAMES`) to the file in the first format;
        other formats sit beside it with the same stem. Figures whose inputs
        are missing are left out (no residual maps, no source map, no overlay
        without a reference image, no through-thickness profile without rows, no
        heat-spread figure without the lateral heat model).
    """
    formats = _check_formats(formats)
    if not (isinstance(dpi, (int, np.integer)) and 30 <= dpi <= 1200):
        raise ValueError(f"dpi={dpi!r} must be an integer between 30 and 1200")
    builders = _builders(ds, reference_image, region_mask, profile_line, ply_profile)
    if names is not None:
        names = set(names)
        builders = {k: v for k, v in builders.items() if k in names}
    out_dir = Path(out_dir)
    written = {}
    for name, build in builders.items():
        fig = build()
        for k, fmt in enumerate(formats):
            path = save_figure(fig, out_dir / f"{name}.{fmt}", dpi=int(dpi), overwrite=overwrite)
            if k == 0:
                written[name] = path
                # laid out once: the other formats keep the positions found for the first
                fig.set_layout_engine("none")
    return written


def figure_names(ds, *, reference_image=None, profile_line=None, ply_profile=None) -> list[str]:
    """The figures :func:`run_figures` would write for ``ds`` with these inputs, in report order."""
    return list(_builders(ds, reference_image, None, profile_line, ply_profile))


def _builders(ds, reference_image, region_mask, profile_line, ply_profile):
    """Figure name to a function drawing it, in report order, for the figures ``ds`` allows."""
    if "ratio_measured" not in ds.data_vars:
        raise ValueError(f"the result has no 'ratio_measured' map; present: {sorted(ds.data_vars)}")
    builders = {"measured_vs_predicted": lambda: measured_vs_predicted_figure(ds)}
    if evaluated_sources(ds, "residual_"):
        builders["residuals"] = lambda: residuals_figure(ds)
    if "residual_lateral" in ds.data_vars:
        builders["heat_spread"] = lambda: heat_spread_figure(ds)
    if "source_layer" in ds.data_vars:
        builders["source_map"] = lambda: source_map_figure(ds)
    if reference_image is not None:
        builders["overlay"] = lambda: overlay_figure(ds, reference_image, region_mask=region_mask)
    line = profile_line if profile_line is not None else default_profile_line(ds)
    if line is not None:
        builders["profile"] = lambda: profile_figure(ds, line)
    if ply_profile is not None:
        builders["through_thickness"] = lambda: through_thickness_figure(ply_profile, measured=_measured_quartiles(ds))
    return {name: builders[name] for name in FIGURE_NAMES if name in builders}


def _measured_quartiles(ds):
    m = np.asarray(ds["ratio_measured"].values, dtype=np.float64)
    ok = np.isfinite(m)
    if "valid" in ds.data_vars:
        ok &= np.asarray(ds["valid"].values) == 1
    if not ok.any():
        return None
    q1, med, q3 = np.percentile(m[ok], [25, 50, 75])
    return float(med), float(q1), float(q3)
