"""The plan as a figure: response, phase lag and diffusion lengths over frequency (``plan.png``)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .. import __version__
from ..io import MARK_KEY, atomic_path
from ..report._style import CATEGORY_COLOURS

__all__ = ["PLAN_MARK", "plan_figure"]

#: The mark of plan.nc and plan.png (:data:`fusion.io.MARK_KEY`): only files carrying it are replaced.
PLAN_MARK = "plan"

_SOURCE_WORDS = {"coating": "coating", "resin_layer": "resin-rich layer",
                 "surface_ply": "surface ply", "laminate": "laminate (homogenised)"}



def _words(name) -> str:
    return _SOURCE_WORDS.get(str(name), str(name).replace("_", " "))


_LINESTYLES = {"coating": ":", "resin_layer": "-.", "surface_ply": "--", "laminate": (0, (6, 1.5, 1, 1.5))}


def _plan_figure(ds):
    """The figure of :func:`plan_figure`, not written."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    f = ds["frequency"].values
    fig = Figure(figsize=(7.0, 8.0), layout="constrained")
    FigureCanvasAgg(fig)
    ax_r, ax_l, ax_m = fig.subplots(3, 1, sharex=True, height_ratios=(1.4, 1.0, 1.0))
    names = [str(v) for v in ds["source"].values]
    for i, name in enumerate(names):
        colour = CATEGORY_COLOURS.get(name, "0.4")
        ax_r.axhline(float(ds["adiabatic_ratio"].values[i]) * 1e6, color=colour, lw=1.2,
                     ls=_LINESTYLES.get(name, "--"), label=f"{_words(name)}, adiabatic")
        lo, hi = float(ds["band_low"].values[i]), float(ds["band_high"].values[i])
        if math.isfinite(lo):
            for ax in (ax_r, ax_l, ax_m):
                ax.axvspan(lo, hi, color=colour, alpha=0.15, lw=0)
    ax_r.plot(f, ds["ratio_in_phase"].values * 1e6, color="k", lw=2.0, label="heat model, in phase")
    signed = np.sign(ds["ratio_in_phase"].values) * ds["ratio_magnitude"].values
    ax_r.plot(f, signed * 1e6, color="0.45", lw=1.0, label="heat model, whole amplitude (lagging part included)")
    ax_r.set_ylabel("surface dT/T0 (1e-6)")
    ax_r.legend(fontsize=7, loc="best")
    ax_r.set_title(f"{ds.attrs['laminate']} ({ds.attrs['layup']}): shaded where the in-phase response stays "
                   f"within {100 * float(ds.attrs['tolerance']):g} % of a source", fontsize=9)
    ax_l.plot(f, ds["phase_lag"].values, color="k", lw=1.5)
    ax_l.axhline(0.0, color="0.6", lw=0.8)
    ax_l.set_ylabel("phase lag (degree)")
    seen = set()
    for j, name in enumerate(ds["layer"].values):
        key = (float(ds["layer_conductivity"].values[j]), float(ds["layer_heat_capacity"].values[j]))
        label = "plies" if str(name).startswith("ply ") else _words(name)
        if (label, key) in seen:
            continue
        seen.add((label, key))
        line, = ax_m.loglog(f, ds["diffusion_length"].values[:, j] * 1e3, lw=1.3, label=f"{label}")
        ax_m.axhline(float(ds["layer_thickness"].values[j]) * 1e3, color=line.get_color(), lw=0.8, ls=":")
    if "blur_length_along" in ds:
        for side, style in (("along", (0, (5, 2))), ("across", (0, (2, 2)))):
            ax_m.loglog(f, ds[f"blur_length_{side}"].values * 1e3, color="k", lw=1.0, ls=style,
                        label=f"in plane, {side} the surface fibres")
    ax_m.set_ylabel("diffusion length (mm)\n(dotted: thickness)")
    ax_m.set_xlabel("loading frequency (Hz)")
    ax_m.set_xscale("log")
    ax_m.legend(fontsize=7, loc="best")
    for ax in (ax_r, ax_l, ax_m):
        ax.grid(True, which="both", lw=0.3, alpha=0.5)
    return fig


def plan_figure(ds, path, *, dpi=150, overwrite=False):
    """Figure of a frequency plan: response, phase lag and diffusion lengths over frequency.

    Parameters
    ----------
    ds : xarray.Dataset
        The output of :func:`~fusion.plan.frequency_plan`.
    path : str or os.PathLike
        PNG file to write (atomically; an existing file is kept unless ``overwrite``), with
        the text chunk ``fusion_product = plan``.
    dpi : int
        Resolution, at least 150.

    Returns
    -------
    pathlib.Path
        The file written.

    Notes
    -----
    Log frequency axis; the adiabatic value of each source is a horizontal line and each
    source's band (within the plan's tolerance) is shaded in its colour on every panel.
    """
    if isinstance(dpi, bool) or not isinstance(dpi, int) or dpi < 150:
        raise ValueError(f"dpi must be an integer >= 150, got {dpi!r}")
    fig = _plan_figure(ds)
    path = Path(path)
    with atomic_path(path, overwrite=overwrite) as tmp:
        fig.savefig(tmp, format="png", dpi=dpi, metadata={MARK_KEY: PLAN_MARK, "Software": f"fusion {__version__}"})
    return path

