"""One run composed from its steps: strain, thermal, registration, predictions, diagnosis.

:func:`compute_run` turns one ``[[run]]`` of a config into its result in memory (no
file is written). The strain side comes first (its displacement may drive motion
compensation of the infrared frames), then the lock-in, registration onto the
infrared grid, the predictions of every candidate source and the diagnosis.
"""

from __future__ import annotations

import dataclasses
import logging
from pathlib import Path

import numpy as np

from .. import __version__
from .._conventions import short_repr
from .._timing import step
from ..datamodel import SOURCES, result_dataset
from ..diagnose import (apply_calibration, calibration_factor, diagnose, measured_ratio, region_mask,
                        region_table)
from ..diagnose._sign import sign_reversal
from ..errors import ConfigError, InputError
from ..io import read_image
from ..mechanics import ply_profile
from ..report._style import category_label
from ..thermal import motion_amplitude
from ._files import need_file
from ._inputs import reference_image_path
from ._lateral import ir_pixel_axes
from ._predictions import predictions
from ._registration import (check_footprint, check_thermal_signal, motion_support, refine_registration,
                            registration_side)
from ._strain import strain_side
from ._thermal import motion_field, run_load_range, thermal_side

log = logging.getLogger(__name__)

__all__ = ["compute_run", "RunResult"]

# maps that keep their values outside the valid area (T0 shows the whole scene; the flags
# and probabilities have their own no-data coding; source_tie is 0 there)
_KEEP_OUTSIDE = ("source_layer", "source_tie", "valid", "source_probability", "T0", "lateral_edge")


@dataclasses.dataclass
class RunResult:
    """Everything one run produced, in memory."""

    __repr__ = short_repr  # shapes, not values

    dataset: object                 # xarray.Dataset of result.nc
    regions: list                   # region-table rows
    warnings: list
    meta: dict
    figure_inputs: dict


def compute_run(cfg, run, *, progress=False) -> RunResult:
    """Compute every product of one run (nothing is written)."""
    lam = cfg.laminate_for(run)
    reg = cfg.registration_for(run)
    dg = cfg.diagnosis
    # a deprecated key still works this release; the run's warnings say how to rewrite it
    warnings: list = [{"code": "deprecated_key", "message": m} for m in run.deprecations()]

    thermal_step = "lock-in" if run.thermal.frames is not None else "thermal maps"
    with step(thermal_step):
        load_range = run_load_range(run)
    budget = cfg.compute.memory_budget
    with step("strain inputs"):
        ranges, disp = strain_side(run, load_range=load_range, progress=progress, budget=budget)

    with step(thermal_step):
        thermal, t_valid, t_info, _ = thermal_side(run, budget=budget, progress=progress)
    frequency = t_info.get("frequency") or run.frequency
    warnings += t_info.get("warnings", [])
    ir_shape = thermal["T0"].shape

    with step("registration"):
        registered = registration_side(run, reg, ranges, ir_shape, thermal["T0"])
        if reg.refine and registered.transform is not None:
            registered = refine_registration(run, reg, ranges, lam, thermal, t_valid, registered, warnings)
    warnings += registered.warnings
    smaps, inside, reg_report, transform = (registered.maps, registered.inside, registered.report,
                                            registered.transform)
    if run.thermal.motion_compensation:
        with step(thermal_step):
            thermal, t_valid, t_info, motion = _motion_compensated(run, budget, disp, transform, load_range,
                                                                   ir_shape, progress)
        with step("registration"):
            inside = inside & motion_support(registered, motion, load_range)

    strain = np.moveaxis(smaps[:3], 0, -1).astype(np.float32)          # (Y, X, 3)
    strain_std = np.moveaxis(smaps[3:6], 0, -1).astype(np.float32)
    measured, measured_std, snr, lag, lag_std = _measured(thermal)
    thermal_ok = t_valid & np.isfinite(measured) & np.isfinite(measured_std) & (snr >= dg.min_snr)
    weak, weak_warn = check_thermal_signal(registered, t_valid, snr, dg.min_snr, frequency,
                                           from_frames=run.thermal.frames is not None)
    reg_report["footprint"], reg_warn = check_footprint(reg, registered, thermal_ok, weak_signal=weak)
    warnings += weak_warn + reg_warn
    valid = thermal_ok & inside & np.all(np.isfinite(strain), axis=-1)
    if not valid.any():
        raise InputError(run.thermal.frames or run.thermal.maps,
                         "no pixel has both usable thermal data and strain data: check the "
                         "registration (points, method) and the signal-to-noise ratio")

    with step("predictions"):
        sources, axes = _sources(cfg, run, transform, ranges, inside)
        pred, pstd, plag, pinfo = predictions(lam, strain, strain_std, frequency, sources=sources,
                                              property_uncertainty=dg.property_uncertainty, pixel_axes=axes)
    lateral_edge = pinfo.pop("lateral_edge_map", None)
    missing = [s for s in (dg.sources or ()) if s in sources and s not in pred]
    if missing:
        warnings.append(f"sources {missing} not evaluated: the laminate has no such layer")

    with step("diagnosis"):
        regions = {r.name: _region(r, ir_shape) for r in dg.regions}
        calibration = None
        if dg.calibration is not None:
            measured, measured_std, calibration = _calibrate(dg.calibration, regions, valid, measured,
                                                             measured_std, pred, pstd)
            warnings.append(f"infrared measurement calibrated by a factor {calibration['factor']:.3f} ± "
                            f"{calibration['factor_std']:.3f} on region {dg.calibration.region!r} assumed to "
                            f"show the {calibration['source']}")

        # both heat models mix layers: named only where no layer fits, the lateral one first
        diag = diagnose(measured, measured_std, pred, pstd, valid=valid, measured_lag=lag,
                        measured_lag_std=lag_std, predicted_lag=plag, fit_threshold=dg.fit_threshold,
                        distinguish=dg.distinguish, secondary=("lateral", "model"))
        table = _flat_regions(region_table(measured, diag, pred, regions=regions, valid=valid))
        warnings += _reversed_sign(measured, pred, valid, frequency)

        maps = _result_maps(thermal, measured, measured_std, snr, lag, strain, strain_std, smaps[6], pred, pstd,
                            plag, diag, valid)
        if lateral_edge is not None:
            maps["lateral_edge"] = lateral_edge.astype(np.int8)
        meta = _meta(run, lam, frequency, reg_report, t_info, ranges, calibration, pinfo, valid)
        attrs = _attrs(cfg, run, meta, reg_report, ranges, pred, calibration)
        ds = result_dataset(maps, attrs=attrs, sources=tuple(pred))
        # each strain map states its spatial resolution and noise floor (and so does its std)
        for k, name in enumerate(("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")):
            for var in (name, f"{name}_std"):
                ds[var].attrs.update(ranges.map_attrs(k))
        with step("figures"):
            reference = _reference_on_ir(run, transform, ir_shape)
        fig_inputs = {"region_mask": inside, "ply_profile": _ply_profile(lam, strain, valid),
                      "reference_image": reference}
    return RunResult(ds, table, warnings, meta, fig_inputs)


# --------------------------------------------------------------------------- steps
def _reversed_sign(measured, pred, valid, frequency):
    """A warning when the measurement fits the predictions only turned over (see sign_reversal)."""
    found = sign_reversal(measured, pred, valid)
    if found is None:
        return []
    source, factor, share, as_given = found
    return [{"code": "sign_reversed", "message": (
        f"the measurement matches a prediction turned over (measured = {factor:.2f} x predicted "
        f"{category_label(source, frequency)}, explaining {share:.0%} of it; with their own sign the "
        f"predictions explain {as_given:.0%} at best): check the order of the correlation images or states "
        "(dic.images: the reference at minimum load first; dic.loads), strains taken on unloading, "
        "and the sign of the temperature range (the load signal, delta_T_convention of maps)")}]


def _sources(cfg, run, transform, ranges, inside):
    """The candidate sources of a run and, with the lateral heat model, the IR pixel (m)."""
    dg = cfg.diagnosis
    sources = list(dg.sources) if dg.sources else [s for s in SOURCES if s != "lateral"]
    mode = cfg.lateral_heat_for(run)
    if mode == "off":
        return sources, None
    if mode == "instead":
        sources = [s for s in sources if s != "model"]
    return sources + ["lateral"], ir_pixel_axes(transform, ranges.units, inside)


def _motion_compensated(run, budget, disp, transform, load_range, ir_shape, progress):
    """The thermal side again, on frames warped back by the correlation displacement."""
    if disp is None or transform is None or load_range is None:
        raise ConfigError("thermal.motion_compensation", "needs displacement fields (dic.states, "
                          "series or images), a 2D registration and a load signal")
    motion = motion_field(transform, disp, load_range, ir_shape)
    thermal, t_valid, t_info, _ = thermal_side(run, budget=budget, motion=motion, progress=progress)
    t_info["motion_compensated"] = True
    thermal["motion_amplitude"] = np.asarray(motion_amplitude(motion, load_range), np.float32)
    return thermal, t_valid, t_info, motion


def _measured(thermal):
    """Measured ratio dT/T0, its std, the signal-to-noise ratio and the phase lag with its std."""
    return measured_ratio(thermal["T0"], thermal["delta_T"], thermal["delta_T_std"],
                          thermal.get("delta_T_quadrature"))


def _calibrate(spec, regions, valid, measured, measured_std, pred, pstd):
    """The measurement scaled so that a region of known source matches its prediction."""
    mask = regions[spec.region] & valid
    src = spec.source
    if src not in pred:
        raise ConfigError("diagnosis.calibration.source", f"source {src!r} is not evaluated for this run")
    try:
        factor, fstd, n = calibration_factor(measured, pred[src], mask, measured_std=measured_std,
                                             predicted_std=pstd[src])
    except ValueError as e:
        raise ConfigError("diagnosis.calibration", str(e)) from e
    measured, measured_std = apply_calibration(measured, factor, measured_std=measured_std, factor_std=fstd)
    info = {"region": spec.region, "source": src, "factor": float(factor), "factor_std": float(fstd),
            "pixels": int(n)}
    return measured, measured_std, info


def _result_maps(thermal, measured, measured_std, snr, lag, strain, strain_std, edge_distance, pred, pstd, plag,
                 diag, valid):
    """The variables of result.nc, NaN outside the valid area."""
    maps = {k: v for k, v in thermal.items() if k in ("T0", "delta_T", "delta_T_std", "delta_T_quadrature",
                                                      "phase", "motion_amplitude")}
    maps.update(ratio_measured=measured, ratio_measured_std=measured_std, snr=snr,
                delta_eps_xx=strain[..., 0], delta_eps_yy=strain[..., 1], delta_gamma_xy=strain[..., 2],
                delta_eps_xx_std=strain_std[..., 0], delta_eps_yy_std=strain_std[..., 1],
                delta_gamma_xy_std=strain_std[..., 2], strain_edge_distance=edge_distance)
    if lag is not None:
        maps["phase_lag_measured"] = lag
    for s in pred:
        maps[f"ratio_{s}"] = pred[s]
        maps[f"ratio_{s}_std"] = pstd[s]
    for s in ("model", "lateral"):
        if s in pred:
            maps[f"phase_{s}"] = plag[s]
    maps.update(diag.to_maps())
    maps["valid"] = valid.astype(np.int8)
    for k, v in list(maps.items()):
        if k not in _KEEP_OUTSIDE:
            v = np.asarray(v, np.float32).copy()
            v[~valid] = np.nan
            maps[k] = v
    prob = np.asarray(maps["source_probability"], np.float32).copy()
    prob[:, ~valid] = np.nan
    maps["source_probability"] = prob
    return maps


def _meta(run, lam, frequency, reg_report, t_info, ranges, calibration, pinfo, valid):
    """What the summary and the report say about the run beyond its maps."""
    meta = {
        "run_name": run.name, "specimen": run.specimen or run.name, "frequency": float(frequency),
        "laminate": lam.name, "layup": lam.layup_code or "/".join(f"{a:g}" for a in lam.angles),
        "registration_rms": reg_report.get("rms"), "registration_max_error": reg_report.get("max_error"),
        "registration": reg_report, "thermal": t_info, "strain": dict(ranges.attrs),
        "calibration": calibration, "model": pinfo, "valid_fraction": float(valid.mean()),
    }
    harm = t_info.pop("second_harmonic_ratio_map", None)
    if harm is not None:
        # judged where the signal is (the valid pixels), not on the background
        meta["second_harmonic_ratio"] = float(np.nanmedian(np.asarray(harm)[valid]))
    if "pixel_size_mm" in reg_report:
        meta["pixel_size_mm"] = reg_report["pixel_size_mm"]
    if "footprint" in reg_report:
        meta["footprint"] = reg_report["footprint"]
    return meta


def _attrs(cfg, run, meta, reg_report, ranges, pred, calibration):
    """Global attributes of result.nc (CF conventions, provenance, caution)."""
    attrs = {
        "title": f"fusion result of run {run.name}",
        "Conventions": "CF-1.10",
        "source": f"fusion {__version__}",
        "fusion_version": __version__,
        "run_name": run.name, "specimen": meta["specimen"], "frequency": meta["frequency"],
        "frequency_units": "Hz",
        "registration_rms": float("nan") if reg_report.get("rms") is None else float(reg_report["rms"]),
        "registration_rms_units": "IR pixel",
        "config_text": cfg.text, "config_sha256": cfg.sha256,
        "strain_attrs": dict(ranges.attrs),
        "sources_evaluated": " ".join(pred),
        "caution": "Results support engineering judgement and do not certify a component.",
    }
    if "pixel_size_mm" in meta:
        attrs["pixel_size_mm"] = meta["pixel_size_mm"]
    if calibration:
        attrs["calibration_factor"] = calibration["factor"]
    return attrs


# --------------------------------------------------------------------------- helpers
def _flat_regions(rows):
    """Region-table rows flattened for summary.json and the report (one value per column)."""
    out = []
    for row in rows:
        flat = {"name": row["name"], "pixels": int(row["n_pixels"]),
                "measured_mean": row["measured_mean"], "measured_std": row["measured_std"],
                "winner": row.get("winner"), "winner_share": row.get("winner_share")}
        for s, v in (row.get("predicted_mean") or {}).items():
            flat[f"predicted_{s}"] = v
        for s, v in (row.get("abs_z_mean") or {}).items():
            flat[f"mean_abs_z_{s}"] = v
        out.append({k: (None if isinstance(v, float) and not np.isfinite(v) else v) for k, v in flat.items()})
    return out


def _region(r, shape):
    if r.mask is not None:
        m = read_image(need_file(r.mask, f"diagnosis.regions[{r.name}].mask")) > 0
        if m.shape != shape:
            raise InputError(r.mask, f"region mask has shape {m.shape}, expected the IR grid {shape}")
        return m
    try:
        return region_mask(shape, rect=r.rect, circle=r.circle)
    except ValueError as e:
        raise ConfigError(f"diagnosis.regions[{r.name}]", str(e)) from e


def _ply_profile(lam, strain, valid):
    mean = np.nanmedian(strain[valid], axis=0) if valid.any() else np.zeros(3)
    return ply_profile(lam, mean)


def _reference_on_ir(run, transform, shape):
    """The visible reference image resampled onto the IR grid (for the overlay), or None."""
    ref = reference_image_path(run.dic)
    if ref is None or transform is None or not Path(ref).is_file():
        return None
    import cv2

    img = read_image(ref).astype(np.float32)
    rows, cols = np.mgrid[0:shape[0], 0:shape[1]]
    dic_xy = transform.inverse_apply(np.column_stack([cols.ravel(), rows.ravel()]).astype(float))
    scale = run.dic.pixel_size if (run.dic.coordinates == "mm" and run.dic.pixel_size) else 1.0
    map_x = (dic_xy[:, 0] / scale).reshape(shape).astype(np.float32)
    map_y = (-dic_xy[:, 1] / scale).reshape(shape).astype(np.float32)
    return cv2.remap(img, map_x, map_y, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=np.nan)
