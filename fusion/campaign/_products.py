"""Campaign products: the frequency-sweep fit (frequency.nc), the campaign figures and the report.

They are rebuilt from every complete run folder of the campaign on disk (the
config's runs, whatever ``--only`` selected), never from the runs of one
invocation alone; a run whose folder holds a result made from other inputs than
the config names now is shown with a warning. When no run of the campaign has a
complete folder, the products are left as they are.
"""

from __future__ import annotations

import datetime as _dt
import logging
import shutil
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import FusionError
from ..io import make_temp_folder, read_netcdf
from ..mechanics import (fit_sweep, fit_sweep_maps, model_response, source_coefficients, thermal_layers,
                         transfer_coefficients)
from ..report import band_sentence, campaign_figures, write_report
from ._folders import is_marked_folder, mark_folder, product_path, publish, refuse_foreign, remove_product
from ._frequency import band_info, band_label, band_pair, write_frequency
from ._outcome import RunOutcome
from ._provenance import read_stamp, read_summary, run_stamp

log = logging.getLogger(__name__)

__all__ = ["write_campaign", "sweep_points", "runs_on_disk", "without_in_plane_flow"]


def _load(folder: Path):
    return read_netcdf(folder / "result.nc")


def sweep_points(datasets):
    """Whole-field statistics of each run of a sweep, sorted by frequency.

    Returns frequencies (R,), ratio means (R,), their std (R,), lags (R,) or None, lag std
    (R,) or None and the mean strain range (R, 3).

    Every statistic is a mean over the same valid pixels: the predicted ratio is linear in
    the strain range (``Re(T(f) . eps)`` at every pixel), so the field mean of the measured
    ratio is the prediction at the field-mean strain exactly, and the lag of the mean
    in-phase and quadrature ratios is the lag at that strain. A median of either side
    would not be (the median of a sum is not the sum of the medians), and pairing the mean
    ratio with the median strain biases the fit wherever the field is not uniform.
    """
    rows = []
    for ds in datasets:
        v = ds["valid"].values.astype(bool)
        r = ds["ratio_measured"].values[v].astype(np.float64)
        s = ds["ratio_measured_std"].values[v]
        n = max(1, r.size)
        mean = float(np.nanmean(r))
        # standard error of the field mean from the pixel noise, plus 1 % for what the
        # noise does not capture (emissivity, calibration drift between runs)
        std = float(np.sqrt(np.nanmedian(s) ** 2 / n + (0.01 * mean) ** 2))
        lag = lag_std = None
        if "phase_lag_measured" in ds and "delta_T_quadrature" in ds:
            with np.errstate(invalid="ignore", divide="ignore"):
                q = (ds["delta_T_quadrature"].values[v] / ds["T0"].values[v]).astype(np.float64)
            q *= float(ds.attrs.get("calibration_factor", 1.0))   # as ratio_measured is
            lag = float(-np.degrees(np.arctan(np.nanmean(q) / mean)))
            lv = ds["phase_lag_measured"].values[v]
            lag_std = float(max(0.2, 1.4826 * np.nanmedian(np.abs(lv - np.nanmedian(lv))) / np.sqrt(n) * 3))
        strain = np.array([np.nanmean(ds[k].values[v].astype(np.float64))
                           for k in ("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")])
        rows.append((float(ds.attrs["frequency"]), mean, std, lag, lag_std, strain))
    rows.sort(key=lambda t: t[0])
    f = np.array([t[0] for t in rows])
    lags = None if any(t[3] is None for t in rows) else np.array([t[3] for t in rows])
    lag_std = None if lags is None else np.array([t[4] for t in rows])
    return f, np.array([t[1] for t in rows]), np.array([t[2] for t in rows]), lags, lag_std, np.stack([t[5] for t in rows])


def _results(outcomes):
    """Each finished run's result.nc, read once: {run name: dataset, or the error reading it}."""
    results = {}
    for o in outcomes:
        if o.status == "failed" or o.folder is None:
            continue
        try:
            results[o.name] = _load(o.folder)
        except FusionError as e:
            results[o.name] = e
    return results


def _sweeps(cfg, outcomes, results):
    """Runs grouped per specimen, for specimens with results at two or more frequencies."""
    by_spec: dict[str, list] = {}
    for o in outcomes:
        if o.name not in results:
            continue
        run = next(r for r in cfg.runs if r.name == o.name)
        by_spec.setdefault(run.specimen or run.name, []).append((run, o))
    groups = {}
    for spec, items in by_spec.items():
        bad = next((results[o.name] for _, o in items if isinstance(results[o.name], Exception)), None)
        if bad is not None:
            log.warning("specimen %s: cannot read a result (%s)", spec, bad)
            continue
        datasets = [results[o.name] for _, o in items]
        freqs = {round(float(ds.attrs["frequency"]), 9) for ds in datasets}
        if len(freqs) >= 2:
            groups[spec] = (items, datasets)
    return groups


def without_in_plane_flow(ds, lam):
    """A run's result with the in-plane heat flow taken out of the measured ratio, quadrature and lag.

    The sweep fits the through-thickness model's parameters; near holes and edges heat
    flowing sideways biases them. Where the run evaluated the lateral heat model, its
    in-plane part at nominal properties (the complex lateral response, from ``ratio_lateral``
    and ``phase_lateral``, minus the through-thickness model on the same strain maps) is
    subtracted from the measurement: a first-order correction, since that part depends on
    the fitted parameters only weakly. Returns ``ds`` itself when there is no lateral
    prediction.
    """
    if "ratio_lateral" not in ds.data_vars:
        return ds
    f = float(ds.attrs["frequency"])
    coef = transfer_coefficients(thermal_layers(lam), np.array([f]), convection_front=lam.convection_front,
                                 convection_back=lam.convection_back)[0]
    strain = np.stack([ds[k].values for k in ("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")],
                      axis=-1).astype(np.float64)
    one_d = strain @ coef
    _, one_lag = model_response(coef, strain)
    lat_re = ds["ratio_lateral"].values.astype(np.float64)
    in_plane_re = lat_re - one_d.real
    out = ds.copy()
    out["ratio_measured"] = ds["ratio_measured"] - in_plane_re
    if "phase_lateral" in ds.data_vars:
        lat_lag = ds["phase_lateral"].values.astype(np.float64)
        in_plane_im = -lat_re * np.tan(np.radians(lat_lag)) - one_d.imag
        if "phase_lag_measured" in ds.data_vars:
            out["phase_lag_measured"] = ds["phase_lag_measured"] - (lat_lag - one_lag)
        if "delta_T_quadrature" in ds.data_vars and "T0" in ds.data_vars:
            # the sweep reads the quadrature ratio as delta_T_quadrature / T0 times the calibration
            cal = float(ds.attrs.get("calibration_factor", 1.0))
            out["delta_T_quadrature"] = ds["delta_T_quadrature"] - in_plane_im * ds["T0"].values / cal
    for name in ("ratio_measured", "phase_lag_measured", "delta_T_quadrature"):
        if name in out.data_vars:
            out[name].attrs = dict(ds[name].attrs)
    out.attrs["in_plane_flow_removed"] = 1
    return out


def _fit_specimen(cfg, spec, items, datasets):
    lams = {cfg.laminate_for(run).name for run, _ in items}
    lam = cfg.laminate_for(items[0][0])
    if len(lams) > 1:
        log.warning("specimen %s: runs use different laminates %s; fitting with %s", spec, sorted(lams), lam.name)
    lateral = all("ratio_lateral" in ds.data_vars for ds in datasets)
    if lateral:
        datasets = [without_in_plane_flow(ds, lam) for ds in datasets]
    f, r, s, lag, lag_std, strain = sweep_points(datasets)
    params = ["conductivity_scale"]
    if lam.resin_layer is not None:
        params.insert(0, "resin_thickness")
    if lam.coating is not None:
        params.insert(0, "coating_thickness")
    params = params[: max(1, len(f) - 1)]
    # the model curve spans the plan's default range and every measured frequency
    f_range = (min(0.1, float(f.min()) / 2), max(200.0, float(f.max()) * 2))
    fit = fit_sweep(lam, f, r, s, strain, measured_lag=lag, lag_std=lag_std, parameters=tuple(params),
                    frequency_range=f_range)
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
            "runs": [run.name for run, _ in items], "in_plane_flow_removed": lateral}


def runs_on_disk(cfg, out: Path, outcomes, digests=None):
    """The runs of the config with a complete folder of fusion's in ``out``, as outcomes.

    Runs processed now keep their outcome; the others are read from their folder. A
    folder whose stamp differs from the run's present one gets a warning in its
    summary's ``warnings``. Returns (outcomes in config order, failures of this call).
    """
    now = {o.name: o for o in outcomes}
    found, failures = [], []
    for run in cfg.runs:
        o = now.get(run.name)
        if o is not None and o.status == "failed":
            failures.append({"run": run.name, "error": o.error})
        folder = Path(out) / run.name
        if not is_marked_folder(folder, run.name) or not (folder / "result.nc").is_file():
            continue
        summary = read_summary(folder)
        if summary is None:
            continue
        current = o is not None and o.status in ("done", "skipped")    # stamped by this call
        if not current and read_stamp(folder) != run_stamp(cfg, run, digests=digests):
            summary = dict(summary)
            summary["warnings"] = list(summary.get("warnings") or []) + [
                "this result was made from other inputs or settings than the config names now; "
                "rerun with --overwrite to update it"]
        found.append(RunOutcome(run.name, "done", folder, summary=summary))
    return found, failures


def write_campaign(cfg, out: Path, outcomes, *, digests=None):
    """Rebuild frequency.nc, the campaign figures and report.html from the run folders on disk.

    Returns the paths of frequency.nc and report.html (None for what was not written) and one
    sentence per specimen on its recommended loading-frequency band (for the terminal).
    Leaves every product as it is when no run of the campaign has a complete folder.
    """
    out = Path(out)
    outcomes, failures = runs_on_disk(cfg, out, outcomes, digests)
    if not outcomes:
        log.warning("no run of the campaign has a complete result folder: campaign files left as they are")
        return None, None, []
    fits = {}
    loaded = _results(outcomes)
    for spec, (items, datasets) in _sweeps(cfg, outcomes, loaded).items():
        try:
            fits[spec] = _fit_specimen(cfg, spec, items, datasets)
        except (ValueError, FusionError) as e:
            log.warning("specimen %s: sweep fit failed (%s)", spec, e)
    freq_path = None
    if fits:
        with product_path(out, "frequency.nc") as tmp:
            write_frequency(fits, tmp)
        freq_path = out / "frequency.nc"
    else:
        remove_product(out, "frequency.nc")      # an old sweep fit no run supports any more
    report_path = None
    if cfg.output.report:
        runs, figures = [], {}
        results = {}
        for o in outcomes:
            summary = o.summary or {}
            figs = {k: o.folder / v for k, v in (summary.get("figures") or {}).items()}
            runs.append({"summary": summary, "figures": figs, "regions": summary.get("regions", []),
                         "warnings": summary.get("warnings", [])})
            ds = loaded.get(o.name)
            if ds is not None and not isinstance(ds, Exception):
                results[o.name] = ds
        if cfg.output.figures:
            specimens = {sp: _specimen_figure_input(f) for sp, f in fits.items()}
            if specimens or results:
                figures.update(_write_figures(out, specimens, results))
        campaign = {"name": cfg.campaign.name, "description": cfg.campaign.description,
                    "operator": cfg.campaign.operator, "config_sha256": cfg.sha256, "version": __version__,
                    "date": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
                    "config_text": cfg.text, "config_path": str(cfg.path) if cfg.path else None,
                    "sweeps": {sp: _sweep_summary(f) for sp, f in fits.items()}}
        with product_path(out, "report.html") as tmp:
            write_report(tmp, campaign=campaign, runs=runs, campaign_figures=figures, failures=failures,
                         overwrite=True)
        report_path = out / "report.html"
    bands = [band_sentence(band_info(f), frequencies=f["frequencies"], specimen=sp) for sp, f in fits.items()]
    return freq_path, report_path, bands


def _write_figures(out: Path, specimens, results) -> dict:
    """The campaign figures, made in a temporary folder and published as ``out/figures``."""
    target = out / "figures"
    if not is_marked_folder(target, "figures"):
        refuse_foreign(target, "figures")
    tmp = make_temp_folder(out, "figures", "partial")
    try:
        made = campaign_figures(specimens, tmp, dpi=150, datasets=results or None, overwrite=True)
        mark_folder(tmp, "figures")
        publish(tmp, target, "figures")
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return {k: target / Path(v).name for k, v in made.items()}


def _specimen_figure_input(f):
    fit = f["fit"]
    mf, mr = fit.model_curve
    b = band_info(f)
    # an edge at the end of the range tried is open: the figure shades to its own edge
    band = (None if b["source"] is None else
            (None if b["low_open"] else b["low"], None if b["high_open"] else b["high"]))
    return {"frequency": f["frequencies"], "ratio": f["ratio"], "ratio_std": f["ratio_std"],
            "model": {"frequency": np.asarray(mf), "ratio": np.real(np.asarray(mr))},
            "adiabatic": f["limits"], "band": band, "band_label": band_label(b)}


def _sweep_summary(f):
    fit = f["fit"]
    b = band_info(f)
    return {"runs": f["runs"], "frequencies": [float(x) for x in f["frequencies"]],
            "ratio": [float(x) for x in f["ratio"]],
            "params": {k: float(v) for k, v in fit.params.items()},
            "std_errors": {k: float(v) for k, v in fit.std_errors.items()},
            "low_frequency_source": str(fit.low_frequency_source),
            "high_frequency_source": str(fit.high_frequency_source), "band": list(band_pair(fit)),
            "band_info": b, "band_text": band_sentence(b, frequencies=f["frequencies"])}
