"""Campaign products: the frequency-sweep fit (frequency.nc) and the report (report.html)."""

from __future__ import annotations

import datetime as _dt
import logging
from pathlib import Path

import numpy as np

from . import __version__
from .errors import FusionError

log = logging.getLogger(__name__)

__all__ = ["write_campaign", "sweep_points"]


def _load(folder: Path):
    from .io import read_netcdf

    return read_netcdf(folder / "result.nc")


def sweep_points(datasets):
    """Whole-field statistics of each run of a sweep, sorted by frequency.

    Returns frequencies (R,), ratio means (R,), their std (R,), lag means (R,) or None,
    lag std (R,) or None and the median strain range (R, 3).
    """
    rows = []
    for ds in datasets:
        v = ds["valid"].values.astype(bool)
        r = ds["ratio_measured"].values[v]
        s = ds["ratio_measured_std"].values[v]
        n = max(1, r.size)
        # standard error of the field mean from the pixel noise, plus 1 % for what the
        # noise does not capture (emissivity, calibration drift between runs)
        std = float(np.sqrt(np.nanmedian(s) ** 2 / n + (0.01 * np.nanmean(r)) ** 2))
        lag = lag_std = None
        if "phase_lag_measured" in ds:
            lv = ds["phase_lag_measured"].values[v]
            lag = float(np.nanmedian(lv))
            lag_std = float(max(0.2, 1.4826 * np.nanmedian(np.abs(lv - lag)) / np.sqrt(n) * 3))
        strain = np.array([np.nanmedian(ds[k].values[v]) for k in ("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")])
        rows.append((float(ds.attrs["frequency"]), float(np.nanmean(r)), std, lag, lag_std, strain))
    rows.sort(key=lambda t: t[0])
    f = np.array([t[0] for t in rows])
    lags = None if any(t[3] is None for t in rows) else np.array([t[3] for t in rows])
    lag_std = None if lags is None else np.array([t[4] for t in rows])
    return f, np.array([t[1] for t in rows]), np.array([t[2] for t in rows]), lags, lag_std, np.stack([t[5] for t in rows])


def _sweeps(cfg, outcomes, out):
    """Runs grouped per specimen, for specimens with results at two or more frequencies."""
    by_spec: dict[str, list] = {}
    for o in outcomes:
        if o.status == "failed" or o.folder is None:
            continue
        run = next(r for r in cfg.runs if r.name == o.name)
        by_spec.setdefault(run.specimen or run.name, []).append((run, o))
    groups = {}
    for spec, items in by_spec.items():
        try:
            datasets = [_load(o.folder) for _, o in items]
        except FusionError as e:
            log.warning("specimen %s: cannot read a result (%s)", spec, e)
            continue
        freqs = {round(float(ds.attrs["frequency"]), 9) for ds in datasets}
        if len(freqs) >= 2:
            groups[spec] = (items, datasets)
    return groups


def _fit_specimen(cfg, spec, items, datasets):
    from .mechanics import fit_sweep, source_coefficients
    from .mechanics import fit_sweep_maps

    lams = {cfg.laminate_for(run).name for run, _ in items}
    lam = cfg.laminate_for(items[0][0])
    if len(lams) > 1:
        log.warning("specimen %s: runs use different laminates %s; fitting with %s", spec, sorted(lams), lam.name)
    f, r, s, lag, lag_std, strain = sweep_points(datasets)
    params = ["conductivity_scale"]
    if lam.resin_layer is not None:
        params.insert(0, "resin_thickness")
    if lam.coating is not None:
        params.insert(0, "coating_thickness")
    params = params[: max(1, len(f) - 1)]
    fit = fit_sweep(lam, f, r, s, strain, measured_lag=lag, lag_std=lag_std, parameters=tuple(params))
    mean_strain = np.median(strain, axis=0)
    limits = {k: float(c @ mean_strain) for k, c in source_coefficients(lam).items()}
    maps = None
    shapes = {ds["ratio_measured"].shape for ds in datasets}
    if len(shapes) == 1 and lam.resin_layer is not None:
        order = np.argsort([float(ds.attrs["frequency"]) for ds in datasets])
        dss = [datasets[i] for i in order]
        ratio = np.stack([d["ratio_measured"].values for d in dss])
        std = np.stack([d["ratio_measured_std"].values for d in dss])
        smaps = np.stack([np.stack([d[k].values for k in ("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")])
                          for d in dss])
        lag_maps = (np.stack([d["phase_lag_measured"].values for d in dss])
                    if all("phase_lag_measured" in d for d in dss) else None)
        try:
            maps = fit_sweep_maps(lam, f, ratio, std, smaps, lag_maps=lag_maps)
        except (ValueError, FusionError) as e:
            log.warning("specimen %s: no per-pixel sweep maps (%s)", spec, e)
    return {"laminate": lam, "frequencies": f, "ratio": r, "ratio_std": s, "lag": lag, "lag_std": lag_std,
            "strain": mean_strain, "fit": fit, "limits": limits, "maps": maps,
            "runs": [run.name for run, _ in items]}


def _frequency_dataset(fits: dict):
    import xarray as xr

    specs = list(fits)
    runs = [(sp, i) for sp in specs for i in range(len(fits[sp]["frequencies"]))]
    ds = xr.Dataset()
    ds["sweep_specimen"] = ("sweep_point", np.array([sp for sp, _ in runs], dtype=object),
                            {"long_name": "specimen of the sweep point"})
    ds["sweep_frequency"] = ("sweep_point", np.array([fits[sp]["frequencies"][i] for sp, i in runs]),
                             {"units": "Hz", "long_name": "loading frequency of the run"})
    ds["sweep_ratio"] = ("sweep_point", np.array([fits[sp]["ratio"][i] for sp, i in runs]),
                         {"units": "1", "long_name": "whole-field mean measured delta_T/T0"})
    ds["sweep_ratio_std"] = ("sweep_point", np.array([fits[sp]["ratio_std"][i] for sp, i in runs]),
                             {"units": "1", "long_name": "standard deviation of the mean ratio"})
    params = sorted({p for sp in specs for p in fits[sp]["fit"].params})
    ds = ds.assign_coords(specimen=("specimen", np.array(specs, dtype=object)),
                          parameter=("parameter", np.array(params, dtype=object)))
    val = np.full((len(specs), len(params)), np.nan)
    err = np.full_like(val, np.nan)
    for i, sp in enumerate(specs):
        for j, p in enumerate(params):
            if p in fits[sp]["fit"].params:
                val[i, j] = fits[sp]["fit"].params[p]
                err[i, j] = fits[sp]["fit"].std_errors[p]
    ds["fitted_value"] = (("specimen", "parameter"), val,
                          {"units": "1", "long_name": "fitted heat-model parameter (thickness in m, scale factor -)"})
    ds["fitted_std"] = (("specimen", "parameter"), err, {"units": "1", "long_name": "standard error of the fitted parameter"})
    band = np.array([[_band(fits[sp]["fit"])[k] for k in range(2)] for sp in specs])
    ds["band_low"] = ("specimen", band[:, 0], {"units": "Hz", "long_name": "lower end of the recommended loading-frequency band"})
    ds["band_high"] = ("specimen", band[:, 1], {"units": "Hz", "long_name": "upper end of the recommended loading-frequency band"})
    ds["low_frequency_source"] = ("specimen", np.array([str(fits[sp]["fit"].low_frequency_source) for sp in specs], dtype=object),
                                  {"long_name": "source the response tends to at low frequency"})
    ds["high_frequency_source"] = ("specimen", np.array([str(fits[sp]["fit"].high_frequency_source) for sp in specs], dtype=object),
                                   {"long_name": "source the response tends to at high frequency"})
    ds["chi2_per_dof"] = ("specimen", np.array([fits[sp]["fit"].chi2 / max(1, fits[sp]["fit"].dof) for sp in specs]),
                          {"units": "1", "long_name": "reduced chi-square of the sweep fit"})
    shapes = {tuple(np.shape(v)) for sp in specs if fits[sp]["maps"] for v in fits[sp]["maps"].values()}
    if len(shapes) == 1 and all(fits[sp]["maps"] for sp in specs):
        for name in fits[specs[0]]["maps"]:
            ds[f"map_{name}"] = (("specimen", "y", "x"), np.stack([np.asarray(fits[sp]["maps"][name], np.float32) for sp in specs]),
                                 {"units": "m" if "thickness" in name and "std" not in name or name.endswith("thickness_std") else "Hz" if "frequency" in name else "1",
                                  "long_name": f"per-pixel sweep fit: {name.replace('_', ' ')}"})
    ds.attrs.update(title="frequency sweep fits of the campaign", fusion_version=__version__, Conventions="CF-1.10")
    return ds


def _band(fit):
    b = getattr(fit, "band", None) or (np.nan, np.nan)
    if isinstance(b, dict):
        b = b.get("surface_ply", b.get("laminate", (np.nan, np.nan)))
    return (float(b[0]), float(b[1]))


def write_campaign(cfg, out: Path, outcomes, *, overwrite=True):
    """Write frequency.nc (when a specimen has a sweep) and report.html; return their paths."""
    from . import report as P
    from .io import write_netcdf

    fits = {}
    for spec, (items, datasets) in _sweeps(cfg, outcomes, out).items():
        try:
            fits[spec] = _fit_specimen(cfg, spec, items, datasets)
        except (ValueError, FusionError) as e:
            log.warning("specimen %s: sweep fit failed (%s)", spec, e)
    freq_path = None
    if fits:
        freq_path = write_netcdf(_frequency_dataset(fits), out / "frequency.nc", overwrite=overwrite)
    report_path = None
    if cfg.output.report:
        runs, figures = [], {}
        results = {}
        for o in outcomes:
            if o.status == "failed" or o.folder is None:
                continue
            summary = o.summary or {}
            figs = {k: o.folder / v for k, v in (summary.get("figures") or {}).items()}
            runs.append({"summary": summary, "figures": figs, "regions": summary.get("regions", []),
                         "warnings": summary.get("warnings", [])})
            try:
                results[o.name] = _load(o.folder)
            except FusionError:
                pass
        fig_dir = out / "figures"
        if cfg.output.figures:
            specimens = {sp: _specimen_figure_input(f) for sp, f in fits.items()}
            if specimens:
                figures.update(P.campaign_figures(specimens, fig_dir, dpi=150))
            if results:
                figures["source_maps"] = P.source_map_grid(results, fig_dir / "source_maps.png")
        failures = [{"run": o.name, "error": o.error} for o in outcomes if o.status == "failed"]
        campaign = {"name": cfg.campaign.name, "description": cfg.campaign.description,
                    "config_sha256": cfg.sha256, "version": __version__,
                    "date": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
                    "config_text": cfg.text, "config_path": str(cfg.path) if cfg.path else None,
                    "sweeps": {sp: _sweep_summary(f) for sp, f in fits.items()}}
        report_path = P.write_report(out / "report.html", campaign=campaign, runs=runs,
                                     campaign_figures=figures, failures=failures)
    return freq_path, report_path


def _specimen_figure_input(f):
    fit = f["fit"]
    curve = getattr(fit, "model_curve", None) or getattr(fit, "curve", None)
    return {"frequencies": f["frequencies"], "ratio": f["ratio"], "ratio_std": f["ratio_std"],
            "model_curve": curve, "limits": f["limits"], "band": _band(fit)}


def _sweep_summary(f):
    fit = f["fit"]
    return {"runs": f["runs"], "frequencies": [float(x) for x in f["frequencies"]],
            "ratio": [float(x) for x in f["ratio"]],
            "params": {k: float(v) for k, v in fit.params.items()},
            "std_errors": {k: float(v) for k, v in fit.std_errors.items()},
            "low_frequency_source": str(fit.low_frequency_source),
            "high_frequency_source": str(fit.high_frequency_source), "band": list(_band(fit))}
