"""Frequency plan of a laminate: which layer the camera sees at which loading frequency.

``fusion plan CONFIG`` computes, for the configured laminate and strain state and without
any measured data, the surface response of the through-thickness heat model from 0.1 to
200 Hz (log spaced): the in-phase dT/T0 (what the lock-in's signed ratio measures), its
modulus and phase lag, the adiabatic value of every candidate source beside it, the
thermal diffusion length of every layer, the contribution of each layer to the in-phase
response and the band in which the response stays within a tolerance (2 % by default)
of each source, and how far heat flowing along the surface blurs stress gradients (the
in-plane diffusion lengths along and across the surface ply's fibres, and the shortest
wavelength of a strain variation the surface response still passes at half contrast). It
writes ``plan.nc`` and ``plan.png`` into the output folder (replacing its own earlier plan,
never another file) and prints a short table.

The plan is a model estimate to help choose loading frequencies; it supports engineering
judgement and does not replace the laboratory's procedures, the applicable test standards
or a qualified engineer's review of the loading programme. Test rigs under cyclic load are
hazardous.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InputError
from .io import MARK_KEY, atomic_path, product_mark, write_netcdf
from .mechanics._heat import diffusion_length, frequency_band, phase_lag, surface_weights
from .mechanics._lateral_reach import contrast_wavelength
from .mechanics._predict import REFERENCE_T0, source_coefficients, thermal_layers
from .report import band_edges_text

__all__ = ["frequency_plan", "plan_table", "plan_figure", "save_plan", "plan_command", "PLAN_CAUTION",
           "gauge_table", "gauge_command"]

#: Caution printed with the plan table and stored in plan.nc.
PLAN_CAUTION = ("Model estimate to support engineering judgement, not a qualification. Test rigs "
                "under cyclic load are hazardous: follow the laboratory's procedures and the "
                "applicable test standards, and have the loading programme reviewed by a "
                "qualified engineer.")

#: The mark of plan.nc and plan.png (:data:`fusion.io.MARK_KEY`): only files carrying it are replaced.
PLAN_MARK = "plan"

_SOURCE_WORDS = {"coating": "coating", "resin_layer": "resin-rich layer",
                 "surface_ply": "surface ply", "laminate": "laminate (homogenised)"}


def frequency_plan(laminate, strain_range, *, frequencies=None, tolerance=0.02):
    """Frequency response of the heat model for one strain state.

    Parameters
    ----------
    laminate : Laminate
        Viewed face first, with its coating, resin layer and back layer if any.
    strain_range : (3,) array_like
        (d eps_xx, d eps_yy, d gamma_xy), specimen frame, peak-to-peak (see
        :func:`fusion.mechanics.uniaxial_strain_state`).
    frequencies : (F,) array_like, optional
        Hz, increasing; default ``np.geomspace(0.1, 200, 121)``.
    tolerance : float
        Relative tolerance of the bands (default 0.02).

    Returns
    -------
    xarray.Dataset
        dims ``frequency``, ``layer`` and ``source``. Variables (``units``, ``long_name``):
        ``ratio_in_phase``, ``ratio_quadrature``, ``ratio_magnitude`` (1), ``phase_lag``
        (degree), ``layer_contribution`` (frequency, layer; sums to ``ratio_in_phase``),
        ``diffusion_length`` (frequency, layer; m), the layer table (``layer_thickness``,
        ``layer_depth``, ``layer_conductivity``, ``layer_heat_capacity``, ``layer_ratio``),
        ``adiabatic_ratio``, ``band_low`` and ``band_high`` (source; Hz, NaN where none:
        in-phase part within tolerance), ``strict_band_low`` and ``strict_band_high``
        (the complex response within tolerance, i.e. a small phase lag as well), the
        model's limits ``limit_low_frequency`` and ``limit_high_frequency``, and the in-plane
        blur: ``blur_length_along`` and ``blur_length_across`` (frequency; m), the surface
        ply's in-plane diffusion lengths along and across its fibres, and
        ``resolved_wavelength_along`` / ``resolved_wavelength_across`` (frequency; m), the
        shortest wavelength of a variation of the strain state along / across those fibres
        whose surface response keeps half the uniform-field modulus (a feature much smaller
        is blurred out; NaN where the response never falls that far).
        Attributes: the laminate, strain range, tolerance, ``band_<source>`` = [low, high]
        in Hz, and the caution.

    Notes
    -----
    One admittance recursion per frequency gives the complex weight of every layer
    (:func:`fusion.mechanics.surface_weights`); the response is their sum with the layers'
    adiabatic values. The low-frequency limit is the rho-c weighted mean of all layers
    (coating and resin layers included, so it differs slightly from ``laminate``, which
    homogenises the plies alone); with convection on a face the response falls to 0 at
    very low frequency instead. The resolved wavelengths come from the lateral heat model
    (:func:`fusion.mechanics.contrast_wavelength`), every layer with its in-plane
    conductivities.

    References
    ----------
    Carslaw & Jaeger, *Conduction of Heat in Solids*, 1959 (harmonic conduction, diffusion
    length); Potter & Greaves 1987 and Kelvin's law for the layer sources (see
    :mod:`fusion.mechanics`).
    """
    import xarray as xr

    e = np.asarray(strain_range, dtype=float)
    if e.shape != (3,) or not np.all(np.isfinite(e)):
        raise ValueError(f"strain_range must be three finite numbers (d eps_xx, d eps_yy, d gamma_xy), "
                         f"got {strain_range!r}")
    f = np.geomspace(0.1, 200.0, 121) if frequencies is None else np.asarray(frequencies, dtype=float)
    if f.ndim != 1 or f.size < 2 or not np.all(np.diff(f) > 0):
        raise ValueError(f"frequencies must be at least 2 increasing values in Hz, got {frequencies!r}")
    layers = thermal_layers(laminate)
    w = surface_weights(layers, f, convection_front=laminate.convection_front,
                        convection_back=laminate.convection_back)
    s = np.array([la.adiabatic_ratio(e) for la in layers])
    response = w @ s
    sources = {k: float(c @ e) for k, c in source_coefficients(laminate).items()}
    bands = {k: frequency_band(f, response, v, tolerance=tolerance) for k, v in sources.items()}
    strict = {k: frequency_band(f, response, v, tolerance=tolerance, quadrature=True)
              for k, v in sources.items()}
    thick = np.array([la.thickness for la in layers])
    rhoc = np.array([la.volumetric_heat_capacity for la in layers])
    k3 = np.array([la.conductivity for la in layers])
    depth = np.concatenate([[0.0], np.cumsum(thick)[:-1]])
    first = laminate.plies[0]
    fibre = float(first.angle + laminate.zero_direction)
    rc_ply = first.material.volumetric_heat_capacity
    conv = dict(convection_front=laminate.convection_front, convection_back=laminate.convection_back)
    resolved = {side: contrast_wavelength(layers, e, f, fibre + turn, **conv)
                for side, turn in (("along", 0.0), ("across", 90.0))}

    def var(dims, data, units, long_name):
        return xr.Variable(dims, np.asarray(data), {"units": units, "long_name": long_name})

    F, L = ("frequency",), ("layer",)
    src = list(sources)
    ds = xr.Dataset(
        {
            "ratio_in_phase": var(F, response.real, "1", "heat model surface dT/T0 in phase with the load"),
            "ratio_quadrature": var(F, response.imag, "1", "heat model surface dT/T0 in quadrature"),
            "ratio_magnitude": var(F, np.abs(response), "1", "modulus of the heat model surface dT/T0"),
            "phase_lag": var(F, phase_lag(response), "degree",
                             "phase lag of the surface response behind the signed in-phase axis"),
            "layer_contribution": var(F + L, (w * s).real, "1",
                                      "contribution of each layer to the in-phase surface dT/T0"),
            "diffusion_length": var(F + L, diffusion_length(k3[None, :], rhoc[None, :], f[:, None]), "m",
                                    "thermal diffusion length sqrt(2 k / (rho c omega))"),
            "layer_thickness": var(L, thick, "m", "layer thickness"),
            "layer_depth": var(L, depth, "m", "depth of the layer's top below the viewed face"),
            "layer_conductivity": var(L, k3, "W m-1 K-1", "through-thickness thermal conductivity"),
            "layer_heat_capacity": var(L, rhoc, "J m-3 K-1", "volumetric heat capacity rho c"),
            "layer_ratio": var(L, s, "1", "adiabatic dT/T0 of each layer"),
            "adiabatic_ratio": var(("source",), [sources[k] for k in src], "1",
                                   "adiabatic dT/T0 of each candidate source"),
            "band_low": var(("source",), [bands[k][0] for k in src], "Hz",
                            "lowest frequency of the band within tolerance of the source"),
            "band_high": var(("source",), [bands[k][1] for k in src], "Hz",
                             "highest frequency of the band within tolerance of the source"),
            "strict_band_low": var(("source",), [strict[k][0] for k in src], "Hz",
                                   "lowest frequency of the band where in-phase and quadrature parts "
                                   "are both within tolerance of the source"),
            "strict_band_high": var(("source",), [strict[k][1] for k in src], "Hz",
                                    "highest frequency of the band where in-phase and quadrature parts "
                                    "are both within tolerance of the source"),
            "limit_low_frequency": var((), float(np.sum(rhoc * thick * s) / np.sum(rhoc * thick)), "1",
                                       "low-frequency limit: rho-c weighted mean of the layers (adiabatic faces)"),
            "limit_high_frequency": var((), float(s[0]), "1",
                                        "high-frequency limit: adiabatic dT/T0 of the top layer"),
            "blur_length_along": var(F, diffusion_length(first.material.k1, rc_ply, f), "m",
                                     "in-plane diffusion length of the surface ply along its fibres"),
            "blur_length_across": var(F, diffusion_length(first.material.k2, rc_ply, f), "m",
                                      "in-plane diffusion length of the surface ply across its fibres"),
            "resolved_wavelength_along": var(F, resolved["along"], "m",
                                             "shortest wavelength of a strain variation along the surface "
                                             "ply's fibres passed at half contrast"),
            "resolved_wavelength_across": var(F, resolved["across"], "m",
                                              "shortest wavelength of a strain variation across the surface "
                                              "ply's fibres passed at half contrast"),
        },
        coords={
            "frequency": var(F, f, "Hz", "loading frequency"),
            "layer": xr.Variable(L, np.array([la.name for la in layers], dtype=object),
                                 {"long_name": "layer, viewed face first"}),
            "source": xr.Variable(("source",), np.array(src, dtype=object), {"long_name": "candidate source"}),
        },
        attrs={
            "title": "fusion frequency plan: through-thickness heat model",
            "laminate": laminate.name, "layup": laminate.layup_code or "/".join(f"{a:g}" for a in laminate.angles),
            "plies": len(laminate.plies), "laminate_thickness_m": laminate.thickness,
            "zero_direction_deg": float(laminate.zero_direction),
            "strain_range": e, "tolerance": float(tolerance),
            "convection_front": float(laminate.convection_front),
            "convection_back": float(laminate.convection_back),
            "surface_fibre_angle_deg": fibre,
            "caution": PLAN_CAUTION,
        },
    )
    for k in src:
        ds.attrs[f"band_{k}"] = np.array(bands[k], dtype=float)
        ds.attrs[f"strict_band_{k}"] = np.array(strict[k], dtype=float)
    return ds


def _words(name) -> str:
    return _SOURCE_WORDS.get(str(name), str(name).replace("_", " "))


def _nearest_source(value, ds) -> str:
    """The source within tolerance of the complex ``value`` (lag included), else the nearest
    source and how far the response is from it."""
    ratios = ds["adiabatic_ratio"].values
    names = [str(v) for v in ds["source"].values]
    rel = np.abs(value - ratios) / np.maximum(np.abs(ratios), 1e-300)
    i = int(np.argmin(rel))
    if rel[i] <= float(ds.attrs["tolerance"]):
        return _words(names[i])
    return f"between sources (nearest: {_words(names[i])}, {100 * rel[i]:.2g} % away)"


def _band_line(name, band, strict, f, tol) -> str:
    """One plain sentence on where the response stays near one source."""
    tried = (float(f[0]), float(f[-1]))
    near = f"{_words(name)}: the response"
    if not math.isfinite(band[0]):
        return (f"{near} never comes within {100 * tol:g} % of it between {tried[0]:.3g} Hz and "
                f"{tried[1]:.3g} Hz.")

    def span(b):
        lo, hi = band_edges_text(b[0], b[1], tried)
        return f"from {lo} to {hi}"

    within = f"within {100 * tol:g} % of it"
    if np.allclose(strict, band, rtol=1e-9):
        return f"{near} stays {within} {span(band)}, with a small phase lag."
    text = f"{_words(name)}: the in-phase part of the response stays {within} {span(band)}"
    if not math.isfinite(strict[0]):
        return text + ", but the phase lag is not small there."
    again = span(strict)
    for said in ("(the lowest frequency tried)", "(the highest frequency tried)"):
        if said in text:            # said once is enough
            again = again.replace(" " + said, "")
    return text + f"; with a small phase lag as well {again}."


def plan_table(ds) -> str:
    """A short plain-text summary of a frequency plan (the output of :func:`frequency_plan`).

    Returns
    -------
    str
        Strain state; the adiabatic dT/T0 of each source (units of 1e-6, and dT in mK at
        293.15 K); the layers with their diffusion lengths at round frequencies; the
        response at 1-2-5 frequencies with the nearest source; the bands; the caution.
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
    names = [str(v) for v in ds["source"].values]
    for i, name in enumerate(names):
        r = float(ds["adiabatic_ratio"].values[i])
        lines.append(f"  {_words(name):<30}{r * 1e6:>14.2f}{r * REFERENCE_T0 * 1e3:>24.3f}")
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
        rows.append(["plies" if is_ply else _words(name), 1, t,
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


_LINESTYLES = {"coating": ":", "resin_layer": "-.", "surface_ply": "--", "laminate": (0, (6, 1.5, 1, 1.5))}


def _plan_figure(ds):
    """The figure of :func:`plan_figure`, not written."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from .report._style import CATEGORY_COLOURS

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
        The output of :func:`frequency_plan`.
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


def save_plan(ds, folder, *, dpi=150) -> dict:
    """Write ``plan.nc`` and ``plan.png`` into ``folder``; returns their paths by name.

    A plan is a what-if: an earlier ``plan.nc`` or ``plan.png`` that fusion plan wrote (its
    mark :data:`fusion.io.MARK_KEY` says ``"plan"``) is replaced without asking. Any other file
    of those names is never replaced: both targets are checked before anything is written, so
    a refusal leaves the folder as it was.

    Raises
    ------
    InputError
        Naming a target that exists and was not written by fusion plan.
    """
    folder = Path(folder)
    paths = {"plan.nc": folder / "plan.nc", "plan.png": folder / "plan.png"}
    for p in paths.values():
        if (p.exists() or p.is_symlink()) and product_mark(p) != PLAN_MARK:
            raise InputError(p, "exists and was not written by fusion plan, which replaces only its own "
                             "plan.nc and plan.png: move the file away or write the plan elsewhere with --out")
    ds = ds.copy()
    ds.attrs[MARK_KEY] = PLAN_MARK
    write_netcdf(ds, paths["plan.nc"], overwrite=True)
    plan_figure(ds, paths["plan.png"], dpi=dpi, overwrite=True)
    return paths


def plan_command(config, *, out=None, laminate=None) -> str:
    """``fusion plan CONFIG``: plan the configured laminate, write plan.nc and plan.png.

    Parameters
    ----------
    config : str or os.PathLike
        Config file; its ``[plan]`` table gives the strain, load direction, frequency range,
        count and tolerance.
    out : path, optional
        Output folder (default: the config's output folder, ``[output] folder`` or
        ``results`` beside the config, as for ``fusion run``). An earlier plan there is
        replaced; any other file named plan.nc or plan.png is left alone (see
        :func:`save_plan`).
    laminate : str, optional
        Name of the laminate (default: ``[plan] laminate``, else the ``[laminate]`` table).

    Returns
    -------
    str
        The table of :func:`plan_table` and the files written.

    Raises
    ------
    ConfigError
        Unknown laminate, or none configured.
    """
    from .config import load_config
    from .errors import ConfigError
    from .mechanics._clt import uniaxial_strain_state

    cfg = load_config(config)
    spec = cfg.plan
    name = laminate or spec.laminate or "default"
    if name not in cfg.laminates:
        if laminate is None and spec.laminate is None and len(cfg.laminates) == 1:
            name = next(iter(cfg.laminates))
        else:
            where = "--laminate" if laminate else "plan.laminate" if spec.laminate else "laminate"
            raise ConfigError(where, f"no laminate {name!r} in the config; laminates: "
                              f"{sorted(cfg.laminates)} ('default' is the [laminate] table); name one "
                              "with --laminate or [plan] laminate", source=str(config))
    lam = cfg.laminates[name]
    strain = uniaxial_strain_state(lam, strain=spec.strain, direction=spec.direction)
    ds = frequency_plan(lam, strain, frequencies=np.geomspace(spec.f_min, spec.f_max, spec.count),
                        tolerance=spec.tolerance)
    folder = cfg.output_folder(out)
    earlier = {name for name, p in (("plan.nc", folder / "plan.nc"), ("plan.png", folder / "plan.png"))
               if p.exists()}
    paths = save_plan(ds, folder, dpi=max(150, int(cfg.output.dpi)))
    from .mechanics import source_table

    return (source_table(lam, strain) + "\n\n" + plan_table(ds) + "\n"
            + "\n".join(f"wrote {p}" + (" (replacing the earlier plan)" if name in earlier else "")
                         for name, p in paths.items()))


# --------------------------------------------------------------------------- correlation settings
def gauge_table(radius, noise, *, image=None, contrast=None, speckle_size=4.0, strain=2e-3,
                target=0.1, pixel_size=None, rows=12) -> str:
    """Spatial resolution and noise floor of correlation settings for a feature: plain text.

    Parameters
    ----------
    radius : float
        Feature radius (a hole's), px of the visible camera.
    noise : float
        Grey-level noise std of each speckle image (grey levels).
    image : (H, W) array_like, optional
        The reference speckle image; without it a rendered pattern of ``speckle_size`` px
        whose grey levels have the std ``contrast`` (default 50).
    strain : float
        The strain range to be measured (1); the noise target is ``target * strain``.
    pixel_size : float, optional
        mm per px, to show lengths in mm as well.
    rows : int
        Settings listed (the best gains within the noise target, then the others).

    Returns
    -------
    str
        The feature's wavelength; for each setting the VSG, the wavelengths of 50 % and
        90 % gain, the gain at the feature and the noise floor; the recommendation and
        why; the defaults' line.
    """
    from .dic import (DEFAULT_STEP, DEFAULT_SUBSET, DEFAULT_WINDOW, recommend_setting,
                      setting_table)
    from .dic._settings import TYPICAL, feature_wavelength

    contrast = TYPICAL["contrast"] if contrast is None else contrast
    table = setting_table(radius, noise, image=image, contrast=contrast, speckle_size=speckle_size)
    best, why = recommend_setting(table, strain=strain, target=target)
    limit = target * strain
    ranked = sorted(table, key=lambda r: (r["noise_floor"] > limit, -r["gain"], r["noise_floor"]))
    default = next((r for r in table if (r["subset"], r["step"], r["window"])
                    == (DEFAULT_SUBSET, DEFAULT_STEP, DEFAULT_WINDOW)), None)
    unit = f" ({pixel_size:g} mm/px)" if pixel_size else ""
    source = "the image given" if image is not None else (f"a rendered pattern of {speckle_size:g} px "
                                                          f"speckles, grey-level std {contrast:g}")
    lines = [
        f"Correlation settings for a feature of radius {radius:g} px{unit}: it needs the wavelength "
        f"{feature_wavelength(radius):g} px resolved (gain >= 0.9).",
        f"Image noise {noise:g} grey levels on {source}; noise target {target:.0%} of "
        f"{strain * 1e6:.0f} microstrain = {limit * 1e6:.0f} microstrain.",
        f"{'subset':>7}{'step':>6}{'window':>8}{'VSG px':>8}{'50% at px':>11}{'90% at px':>11}"
        f"{'gain':>7}{'noise floor (microstrain)':>27}",
    ]

    def line(r, mark=""):
        return (f"{r['subset']:>7}{r['step']:>6}{r['window']:>8}{r['vsg_px']:>8.0f}"
                f"{r['wavelength_gain50_px']:>11.0f}{r['wavelength_gain90_px']:>11.0f}{r['gain']:>7.2f}"
                f"{r['noise_floor'] * 1e6:>27.0f}{mark}")

    for r in ranked[:rows]:
        lines.append(line(r, "  <- recommended" if r is best else ""))
    if best not in ranked[:rows]:
        lines.append(line(best, "  <- recommended"))
    lines.append(f"Recommended: subset {best['subset']}, step {best['step']}, strain window "
                 f"{best['window']}: {why}.")
    if default is not None:
        lines.append("Defaults (config and fusion.dic.correlate):")
        lines.append(line(default))
    lines.append("Gains are modelled for complete windows (box average over the subset, then the "
                 "slope fit over the window); near holes and edges the fits are one-sided, noisier, "
                 "and their stds say so. The noise floor is the strain std of a complete window.")
    lines.append(PLAN_CAUTION)
    return "\n".join(lines)


def gauge_command(*, radius, noise, image=None, contrast=None, speckle_size=4.0, strain=2e-3,
                  target=0.1, pixel_size=None) -> str:
    """``fusion gauge``: :func:`gauge_table`, reading the reference image when a path is given."""
    img = None
    if image is not None:
        from .io import read_image

        img = read_image(image)
    try:
        return gauge_table(radius, noise, image=img, contrast=contrast, speckle_size=speckle_size,
                           strain=strain, target=target, pixel_size=pixel_size)
    except ValueError as e:
        from .errors import ConfigError

        raise ConfigError("gauge", str(e)) from e
