"""Frequency plan of a laminate: which layer the camera sees at which loading frequency.

``fusion plan CONFIG`` computes, for the configured laminate and strain state and without
any measured data, the surface response of the through-thickness heat model from 0.1 to
200 Hz (log spaced): the in-phase dT/T0 (what the lock-in's signed ratio measures), its
modulus and phase lag, the adiabatic value of every candidate source beside it, the
thermal diffusion length of every layer, the contribution of each layer to the in-phase
response and the band in which the response stays within a tolerance (2 % by default)
of each source. It writes ``plan.nc`` and ``plan.png`` and prints a short table.

The plan is a model estimate to help choose loading frequencies; it supports engineering
judgement and does not replace the laboratory's procedures, the applicable test standards
or a qualified engineer's review of the loading programme. Test rigs under cyclic load are
hazardous.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .mechanics._heat import diffusion_length, frequency_band, phase_lag, surface_weights
from .mechanics._predict import REFERENCE_T0, source_coefficients, thermal_layers

__all__ = ["frequency_plan", "plan_table", "plan_figure", "save_plan", "plan_command", "PLAN_CAUTION",
           "gauge_table", "gauge_command"]

#: Caution printed with the plan table and stored in plan.nc.
PLAN_CAUTION = ("Model estimate to support engineering judgement, not a qualification. Test rigs "
                "under cyclic load are hazardous: follow the laboratory's procedures and the "
                "applicable test standards, and have the loading programme reviewed by a "
                "qualified engineer.")

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
        (the complex response within tolerance, i.e. a small phase lag as well), and the
        model's limits ``limit_low_frequency`` and ``limit_high_frequency``.
        Attributes: the laminate, strain range, tolerance, ``band_<source>`` = [low, high]
        in Hz, and the caution.

    Notes
    -----
    One admittance recursion per frequency gives the complex weight of every layer
    (:func:`fusion.mechanics.surface_weights`); the response is their sum with the layers'
    adiabatic values. The low-frequency limit is the rho-c weighted mean of all layers
    (coating and resin layers included, so it differs slightly from ``laminate``, which
    homogenises the plies alone); with convection on a face the response falls to 0 at
    very low frequency instead.

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
            "caution": PLAN_CAUTION,
        },
    )
    for k in src:
        ds.attrs[f"band_{k}"] = np.array(bands[k], dtype=float)
        ds.attrs[f"strict_band_{k}"] = np.array(strict[k], dtype=float)
    return ds


def _nearest_source(value, ds) -> str:
    """The source within tolerance of the complex ``value`` (in phase and quadrature), else
    "mixed" with the nearest source and the relative distance."""
    ratios = ds["adiabatic_ratio"].values
    names = [str(v) for v in ds["source"].values]
    rel = np.abs(value - ratios) / np.maximum(np.abs(ratios), 1e-300)
    i = int(np.argmin(rel))
    if rel[i] <= float(ds.attrs["tolerance"]):
        return names[i]
    return f"mixed (nearest {names[i]}, {100 * rel[i]:.0f} % off)"


def _band_text(lo, hi, f) -> str:
    if not math.isfinite(lo):
        return "none in range"
    a = f"{lo:.3g}" + (" (range start)" if lo <= f[0] * (1 + 1e-9) else "")
    b = f"{hi:.3g}" + (" (range end)" if hi >= f[-1] * (1 - 1e-9) else "")
    return f"{a} to {b} Hz"


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
        f"Adiabatic sources: {'dT/T0 (1e-6)':>14}{'dT (mK)':>10}   band within {tol:.0%} "
        "(in phase; and with a small lag too)",
    ]
    for i, name in enumerate(ds["source"].values):
        r = float(ds["adiabatic_ratio"].values[i])
        band = _band_text(float(ds["band_low"].values[i]), float(ds["band_high"].values[i]), f)
        strict = _band_text(float(ds["strict_band_low"].values[i]), float(ds["strict_band_high"].values[i]), f)
        lines.append(f"  {_SOURCE_WORDS.get(str(name), str(name)):<24}{r * 1e6:>9.2f}{r * REFERENCE_T0 * 1e3:>10.3f}"
                     f"   {band}; {strict}")
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
        rows.append(["plies" if is_ply else name, 1, t, [float(ds["diffusion_length"].values[c, j]) for c in cols]])
    for label, count, t, mus in rows:
        text = f"{label} (x{count})" if label == "plies" else label
        lines.append(f"  {text:<18}{t * 1e3:>12.3f}   {'':>25}" + "".join(f"{m * 1e3:>10.3f}" for m in mus))
    lines.append(f"Surface response: {'f (Hz)':>8}{'in phase (1e-6)':>17}{'modulus (1e-6)':>16}"
                 f"{'lag (deg)':>11}   source within {tol:.0%} (in phase and quadrature)")
    picks = sorted({int(np.argmin(np.abs(np.log(f / x)))) for x in
                    (0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100, 200, 500, 1000)
                    if f[0] * 0.999 <= x <= f[-1] * 1.001} | {0, f.size - 1})
    for i in picks:
        r = float(ds["ratio_in_phase"].values[i])
        c = complex(r, float(ds["ratio_quadrature"].values[i]))
        lines.append(f"  {'':>15}{f[i]:>8.3g}{r * 1e6:>17.2f}{float(ds['ratio_magnitude'].values[i]) * 1e6:>16.2f}"
                     f"{float(ds['phase_lag'].values[i]):>11.2f}   {_nearest_source(c, ds)}")
    lines.append(PLAN_CAUTION)
    return "\n".join(lines)


_LINESTYLES = {"coating": ":", "resin_layer": "-.", "surface_ply": "--", "laminate": (0, (6, 1.5, 1, 1.5))}


def plan_figure(ds, path, *, dpi=150, overwrite=False):
    """Figure of a frequency plan: response, phase lag and diffusion lengths over frequency.

    Parameters
    ----------
    ds : xarray.Dataset
        The output of :func:`frequency_plan`.
    path : str or os.PathLike
        PNG file to write (atomically; an existing file is kept unless ``overwrite``).
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
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from .io import atomic_path
    from .report._style import CATEGORY_COLOURS

    if isinstance(dpi, bool) or not isinstance(dpi, int) or dpi < 150:
        raise ValueError(f"dpi must be an integer >= 150, got {dpi!r}")
    f = ds["frequency"].values
    fig = Figure(figsize=(7.0, 8.0), layout="constrained")
    FigureCanvasAgg(fig)
    ax_r, ax_l, ax_m = fig.subplots(3, 1, sharex=True, height_ratios=(1.4, 1.0, 1.0))
    names = [str(v) for v in ds["source"].values]
    for i, name in enumerate(names):
        colour = CATEGORY_COLOURS.get(name, "0.4")
        ax_r.axhline(float(ds["adiabatic_ratio"].values[i]) * 1e6, color=colour, lw=1.2,
                     ls=_LINESTYLES.get(name, "--"), label=f"{_SOURCE_WORDS.get(name, name)}, adiabatic")
        lo, hi = float(ds["band_low"].values[i]), float(ds["band_high"].values[i])
        if math.isfinite(lo):
            for ax in (ax_r, ax_l, ax_m):
                ax.axvspan(lo, hi, color=colour, alpha=0.15, lw=0)
    ax_r.plot(f, ds["ratio_in_phase"].values * 1e6, color="k", lw=2.0, label="heat model, in phase")
    signed = np.sign(ds["ratio_in_phase"].values) * ds["ratio_magnitude"].values
    ax_r.plot(f, signed * 1e6, color="0.45", lw=1.0, label="heat model, modulus (signed)")
    ax_r.set_ylabel("surface dT/T0 (1e-6)")
    ax_r.legend(fontsize=7, loc="best")
    ax_r.set_title(f"{ds.attrs['laminate']} ({ds.attrs['layup']}): shaded bands within "
                   f"{float(ds.attrs['tolerance']):.0%} of a source", fontsize=9)
    ax_l.plot(f, ds["phase_lag"].values, color="k", lw=1.5)
    ax_l.axhline(0.0, color="0.6", lw=0.8)
    ax_l.set_ylabel("phase lag (degree)")
    seen = set()
    for j, name in enumerate(ds["layer"].values):
        key = (float(ds["layer_conductivity"].values[j]), float(ds["layer_heat_capacity"].values[j]))
        label = "plies" if str(name).startswith("ply ") else str(name)
        if (label, key) in seen:
            continue
        seen.add((label, key))
        line, = ax_m.loglog(f, ds["diffusion_length"].values[:, j] * 1e3, lw=1.3, label=f"{label}")
        ax_m.axhline(float(ds["layer_thickness"].values[j]) * 1e3, color=line.get_color(), lw=0.8, ls=":")
    ax_m.set_ylabel("diffusion length (mm)\n(dotted: thickness)")
    ax_m.set_xlabel("loading frequency (Hz)")
    ax_m.set_xscale("log")
    ax_m.legend(fontsize=7, loc="best")
    for ax in (ax_r, ax_l, ax_m):
        ax.grid(True, which="both", lw=0.3, alpha=0.5)
    path = Path(path)
    with atomic_path(path, overwrite=overwrite) as tmp:
        fig.savefig(tmp, format="png", dpi=dpi)
    return path


def save_plan(ds, folder, *, overwrite=False, dpi=150) -> dict:
    """Write ``plan.nc`` and ``plan.png`` into ``folder``; returns their paths by name.

    Both targets are checked before anything is written, so a refused overwrite leaves
    the folder as it was.
    """
    from .errors import InputError
    from .io import write_netcdf

    folder = Path(folder)
    paths = {"plan.nc": folder / "plan.nc", "plan.png": folder / "plan.png"}
    if not overwrite:
        for p in paths.values():
            if p.exists():
                raise InputError(p, "exists already; pass --overwrite to replace it")
    write_netcdf(ds, paths["plan.nc"], overwrite=overwrite)
    plan_figure(ds, paths["plan.png"], dpi=dpi, overwrite=overwrite)
    return paths


def plan_command(config, *, out=None, laminate=None, overwrite=False) -> str:
    """``fusion plan CONFIG``: plan the configured laminate, write plan.nc and plan.png.

    Parameters
    ----------
    config : str or os.PathLike
        Config file; its ``[plan]`` table gives the strain, load direction, frequency range,
        count and tolerance.
    out : path, optional
        Output folder (default: the config's folder).
    laminate : str, optional
        Name of the laminate (default: ``[plan] laminate``, else the ``[laminate]`` table).
    overwrite : bool
        Replace an existing plan.

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
    folder = Path(out) if out is not None else cfg.folder
    paths = save_plan(ds, folder, overwrite=overwrite, dpi=max(150, int(cfg.output.dpi)))
    from .mechanics import source_table

    return (source_table(lam, strain) + "\n\n" + plan_table(ds) + "\n"
            + "\n".join(f"wrote {p}" for p in paths.values()))


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
