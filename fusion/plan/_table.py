"""The plan as plain text: sources, bands in sentences, layers, in-plane blur, response."""

from __future__ import annotations

import math

import numpy as np

from ..mechanics._predict import REFERENCE_T0
from ..report import band_edges_text
from ._response import PLAN_CAUTION

__all__ = ["plan_table"]

def _nearest_source(value, ds) -> str:
    """The source within tolerance of the complex ``value`` (lag included), else the nearest
    source and how far the response is from it."""
    ratios = ds["adiabatic_ratio"].values
    names = [str(v) for v in ds["source"].values]
    rel = np.abs(value - ratios) / np.maximum(np.abs(ratios), 1e-300)
    i = int(np.argmin(rel))
    if rel[i] <= float(ds.attrs["tolerance"]):
        return names[i]
    return f"between sources (nearest: {names[i]}, {100 * rel[i]:.2g} % away)"


def _band_line(name, band, strict, f, tol) -> str:
    """One plain sentence on where the response stays near one source."""
    tried = (float(f[0]), float(f[-1]))
    near = f"{name}: the response"
    if not math.isfinite(band[0]):
        return (f"{near} never comes within {100 * tol:g} % of it between {tried[0]:.3g} Hz and "
                f"{tried[1]:.3g} Hz.")

    def span(b):
        lo, hi = band_edges_text(b[0], b[1], tried)
        return f"from {lo} to {hi}"

    within = f"within {100 * tol:g} % of it"
    if np.allclose(strict, band, rtol=1e-9):
        return f"{near} stays {within} {span(band)}, with a small phase lag."
    text = f"{name}: the in-phase part of the response stays {within} {span(band)}"
    if not math.isfinite(strict[0]):
        return text + ", but the phase lag is not small there."
    again = span(strict)
    for said in ("(the lowest frequency tried)", "(the highest frequency tried)"):
        if said in text:            # said once is enough
            again = again.replace(" " + said, "")
    return text + f"; with a small phase lag as well {again}."


def plan_table(ds) -> str:
    """A short plain-text summary of a frequency plan (the output of :func:`~fusion.plan.frequency_plan`).

    Returns
    -------
    str
        Strain state; the adiabatic dT/T0 of each source (units of 1e-6, and dT in mK at
        293.15 K); the layers with their diffusion lengths at round frequencies; the
        response at 1-2-5 frequencies with the nearest source; the bands; the caution.
        Sources and layers are named as in the config and result.nc.
    """
    f = ds["frequency"].values
    e = np.asarray(ds.attrs["strain_range"], dtype=float)
    tol = float(ds.attrs["tolerance"])
    lines = [
        f"Frequency plan of laminate {ds.attrs['laminate']!r} ({ds.attrs['layup']}, {ds.attrs['plies']} plies, "
        f"{ds.attrs['laminate_thickness_m'] * 1e3:.3f} mm)",
        f"Strain range (microstrain): d eps_xx {e[0] * 1e6:.1f}, d eps_yy {e[1] * 1e6:.1f}, "
        f"d gamma_xy {e[2] * 1e6:.1f}",
        f"Adiabatic value of each source: {'dT/T0 (1e-6)':>14}{f'dT at {REFERENCE_T0:g} K (mK)':>24}",
    ]
    # sources and layers keep the names of the config (diagnosis.sources), result.nc and plan.nc,
    # as in the source table printed above the plan, so that a line can be looked up in each
    names = [str(v) for v in ds["source"].values]
    for i, name in enumerate(names):
        r = float(ds["adiabatic_ratio"].values[i])
        lines.append(f"  {name:<30}{r * 1e6:>14.2f}{r * REFERENCE_T0 * 1e3:>24.3f}")
    lines.append("Where the heat model's surface response stays near a source:")
    for i, name in enumerate(names):
        band = (float(ds["band_low"].values[i]), float(ds["band_high"].values[i]))
        strict = (float(ds["strict_band_low"].values[i]), float(ds["strict_band_high"].values[i]))
        lines.append(f"  {_band_line(name, band, strict, f, tol)}")
    # layers: one row per distinct material (32 identical plies would drown the table)
    marks = [x for x in (0.1, 1.0, 10.0, 100.0, 1000.0) if f[0] * (1 - 1e-9) <= x <= f[-1] * (1 + 1e-9)]
    marks = marks or [float(f[0]), float(f[-1])]
    cols = [int(np.argmin(np.abs(np.log(f / x)))) for x in marks]
    head = "".join(f"{f'{f[c]:.3g} Hz':>10}" for c in cols)
    lines.append(f"Layers: {'thickness (mm)':>22}   diffusion length (mm) at {head}")
    rows, index = [], {}
    for j, name in enumerate(str(v) for v in ds["layer"].values):
        t = float(ds["layer_thickness"].values[j])
        is_ply = name.startswith("ply ")
        key = (("plies", float(ds["layer_conductivity"].values[j]),
                float(ds["layer_heat_capacity"].values[j]), t) if is_ply else (name, j))
        if key in index:
            rows[index[key]][1] += 1
            continue
        index[key] = len(rows)
        rows.append(["plies" if is_ply else name, 1, t,
                     [float(ds["diffusion_length"].values[c, j]) for c in cols]])
    for label, count, t, mus in rows:
        text = f"{label} (x{count})" if label == "plies" else label
        lines.append(f"  {text:<18}{t * 1e3:>12.3f}   {'':>25}" + "".join(f"{m * 1e3:>10.3f}" for m in mus))
    if "blur_length_along" in ds:
        lines.append(f"In-plane blur (surface ply fibres at {float(ds.attrs['surface_fibre_angle_deg']):g}° from "
                     "specimen x): diffusion length and shortest strain wavelength passed at half contrast, mm")
        lines.append(f"  {'f (Hz)':>10}{'along':>10}{'across':>10}{'wavelength along':>20}{'across':>10}")
        for c in cols:
            lines.append(f"  {f[c]:>10.3g}{float(ds['blur_length_along'].values[c]) * 1e3:>10.3f}"
                         f"{float(ds['blur_length_across'].values[c]) * 1e3:>10.3f}"
                         f"{float(ds['resolved_wavelength_along'].values[c]) * 1e3:>20.3f}"
                         f"{float(ds['resolved_wavelength_across'].values[c]) * 1e3:>10.3f}")
    lines.append(f"Surface response: {'f (Hz)':>8}{'in phase (1e-6)':>17}{'amplitude (1e-6)':>18}"
                 f"{'lag (deg)':>11}   source within {100 * tol:g} % (lag included)")
    picks = sorted({int(np.argmin(np.abs(np.log(f / x)))) for x in
                    (0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100, 200, 500, 1000)
                    if f[0] * 0.999 <= x <= f[-1] * 1.001} | {0, f.size - 1})
    for i in picks:
        r = float(ds["ratio_in_phase"].values[i])
        c = complex(r, float(ds["ratio_quadrature"].values[i]))
        lines.append(f"  {'':>15}{f[i]:>8.3g}{r * 1e6:>17.2f}{float(ds['ratio_magnitude'].values[i]) * 1e6:>18.2f}"
                     f"{float(ds['phase_lag'].values[i]):>11.2f}   {_nearest_source(c, ds)}")
    lines.append(PLAN_CAUTION)
    return "\n".join(lines)
