"""One run, step by step: thermal maps, strain ranges, registration, predictions, diagnosis.

:func:`compute_run` composes the pure functions of the subpackages into the
result of one ``[[run]]`` (no file is written); :func:`write_run` writes it
(result.nc, summary.json, figures) into a folder. The steps follow DESIGN
section 2: the strain side first (it may drive motion compensation of the
infrared frames), then the lock-in, registration onto the infrared grid,
predictions of every source, the diagnosis.
"""

from __future__ import annotations

import dataclasses
import logging
from pathlib import Path

import numpy as np

from . import __version__
from ._steps import (_load_range, _need_file, predictions, registration_side, strain_side,
                     thermal_side)
from .datamodel import SOURCES, result_dataset
from .errors import ConfigError, InputError

log = logging.getLogger(__name__)

__all__ = ["compute_run", "write_run", "check_run_inputs", "RunResult"]


@dataclasses.dataclass
class RunResult:
    """Everything one run produced, in memory."""

    dataset: object                 # xarray.Dataset of result.nc
    regions: list                   # region-table rows
    warnings: list
    meta: dict
    figure_inputs: dict


# --------------------------------------------------------------------------- one run
def _motion_field(transform, disp, load_range, ir_shape, inside_points):
    """Displacement per unit load on the IR grid (2, Y, X) in IR px, from the correlation range."""
    from . import register as R

    x, y, du, dv = (np.asarray(a, float) for a in disp)
    ok = np.isfinite(du) & np.isfinite(dv)
    p0 = np.column_stack([x, y])
    d_ir = transform.apply(p0 + np.column_stack([du, dv])) - transform.apply(p0)
    maps, inside = R.resample_to_grid(transform.apply(p0), d_ir / load_range, ir_shape, valid=ok)
    return np.nan_to_num(maps, nan=0.0), inside


def compute_run(cfg, run, *, progress=False) -> RunResult:
    """Compute every product of one run (nothing is written)."""
    from . import diagnose as G
    from .io import read_load_signal

    lam = cfg.laminate_for(run)
    reg = cfg.registration_for(run)
    dg = cfg.diagnosis
    warnings: list[str] = []

    load_range = None
    if run.thermal.load is not None:
        sig = read_load_signal(_need_file(run.thermal.load, "thermal.load"),
                               time_column=run.thermal.time_column, load_column=run.thermal.load_column)
        load_range = _load_range(sig, run.frequency)
    ranges, disp = strain_side(run, load_range=load_range)

    thermal, t_valid, t_info, _ = thermal_side(run, budget=cfg.compute.memory_budget, progress=progress)
    frequency = t_info.get("frequency") or run.frequency
    warnings += t_info.get("warnings", [])
    T0 = thermal["T0"]
    ir_shape = T0.shape

    smaps, inside, reg_report, reg_warn, transform = registration_side(run, reg, ranges, ir_shape, T0)
    warnings += reg_warn
    if reg.refine and transform is not None:
        smaps, inside, reg_report, transform = _refine(run, reg, ranges, lam, thermal, t_valid, smaps,
                                                       inside, reg_report, transform, warnings)

    if run.thermal.motion_compensation:
        if disp is None or transform is None or load_range is None:
            raise ConfigError("thermal.motion_compensation", "needs displacement fields (dic.states, "
                              "series or images), a 2D registration and a load signal")
        motion, _ = _motion_field(transform, disp, load_range, ir_shape, inside)
        thermal, t_valid, t_info, _ = thermal_side(run, budget=cfg.compute.memory_budget, motion=motion,
                                                   progress=progress)
        t_info["motion_compensated"] = True
        from .thermal import motion_amplitude

        thermal["motion_amplitude"] = np.asarray(motion_amplitude(motion, load_range), np.float32)

    strain = np.moveaxis(smaps[:3], 0, -1).astype(np.float32)          # (Y, X, 3)
    strain_std = np.moveaxis(smaps[3:6], 0, -1).astype(np.float32)
    with np.errstate(invalid="ignore", divide="ignore"):
        measured = thermal["delta_T"] / thermal["T0"]
        measured_std = thermal["delta_T_std"] / np.abs(thermal["T0"])
        snr = np.abs(thermal["delta_T"]) / thermal["delta_T_std"]
    quad = thermal.get("delta_T_quadrature")
    lag = lag_std = None
    if quad is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            lag = -np.degrees(np.arctan(quad / thermal["delta_T"])).astype(np.float32)
            mag = np.hypot(thermal["delta_T"], quad)
            lag_std = np.degrees(thermal["delta_T_std"] / mag).astype(np.float32)
    valid = (t_valid & inside & np.all(np.isfinite(strain), axis=-1) & np.isfinite(measured)
             & np.isfinite(measured_std) & (snr >= dg.min_snr))
    if not valid.any():
        raise InputError(run.thermal.frames or run.thermal.maps,
                         "no pixel has both usable thermal data and strain data: check the "
                         "registration (points, method) and the signal-to-noise ratio")

    sources = list(dg.sources) if dg.sources else list(SOURCES)
    pred, pstd, plag, pinfo = predictions(lam, strain, strain_std, frequency, sources=sources,
                                          property_uncertainty=dg.property_uncertainty)
    missing = [s for s in (dg.sources or ()) if s not in pred]
    if missing:
        warnings.append(f"sources {missing} not evaluated: the laminate has no such layer")

    regions = {r.name: _region(r, ir_shape, G) for r in dg.regions}
    calibration = None
    if dg.calibration is not None:
        mask = regions[dg.calibration.region] & valid
        src = dg.calibration.source
        if src not in pred:
            raise ConfigError("diagnosis.calibration.source", f"source {src!r} is not evaluated for this run")
        try:
            factor, fstd, n = G.calibration_factor(measured, pred[src], mask, measured_std=measured_std,
                                                   predicted_std=pstd[src])
        except ValueError as e:
            raise ConfigError("diagnosis.calibration", str(e)) from e
        measured, measured_std = G.apply_calibration(measured, factor, measured_std=measured_std,
                                                     factor_std=fstd)
        calibration = {"region": dg.calibration.region, "source": src, "factor": float(factor),
                       "factor_std": float(fstd), "pixels": int(n)}
        warnings.append(f"infrared measurement calibrated by a factor {factor:.3f} ± {fstd:.3f} on region "
                        f"{dg.calibration.region!r} assumed to show the {src}")

    diag = G.diagnose(measured, measured_std, pred, pstd, valid=valid, measured_lag=lag,
                      measured_lag_std=lag_std, predicted_lag=plag, fit_threshold=dg.fit_threshold,
                      distinguish=dg.distinguish)
    table = _flat_regions(G.region_table(measured, diag, pred, regions=regions, valid=valid))

    maps = {k: v for k, v in thermal.items() if k in ("T0", "delta_T", "delta_T_std", "delta_T_quadrature",
                                                      "phase", "motion_amplitude")}
    maps.update(ratio_measured=measured, ratio_measured_std=measured_std, snr=snr,
                delta_eps_xx=strain[..., 0], delta_eps_yy=strain[..., 1], delta_gamma_xy=strain[..., 2],
                delta_eps_xx_std=strain_std[..., 0], delta_eps_yy_std=strain_std[..., 1],
                delta_gamma_xy_std=strain_std[..., 2], strain_edge_distance=smaps[6])
    if lag is not None:
        maps["phase_lag_measured"] = lag
    for s in pred:
        maps[f"ratio_{s}"] = pred[s]
        maps[f"ratio_{s}_std"] = pstd[s]
        maps[f"residual_{s}"] = diag.residual[s]
        maps[f"zscore_{s}"] = diag.zscore[s]
    if "model" in pred:
        maps["phase_model"] = plag["model"]
    maps["surface_fraction"] = diag.surface_fraction
    maps["source_probability"] = diag.probability
    maps["source_layer"] = diag.source_layer
    maps["valid"] = valid.astype(np.int8)
    for k, v in list(maps.items()):
        if k not in ("source_layer", "valid", "source_probability", "T0"):
            v = np.asarray(v, np.float32).copy()
            v[~valid] = np.nan
            maps[k] = v
    prob = np.asarray(maps["source_probability"], np.float32).copy()
    prob[:, ~valid] = np.nan
    maps["source_probability"] = prob

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
    attrs = {
        "title": f"fusion result of run {run.name}",
        "Conventions": "CF-1.10",
        "source": f"fusion {__version__}",
        "fusion_version": __version__,
        "run_name": run.name, "specimen": meta["specimen"], "frequency": float(frequency),
        "frequency_units": "Hz",
        "registration_rms": float(reg_report.get("rms", float("nan"))),
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
    ds = result_dataset(maps, attrs=attrs, sources=tuple(pred))
    # each strain map states its spatial resolution and noise floor (and so does its std)
    for k, name in enumerate(("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")):
        for var in (name, f"{name}_std"):
            ds[var].attrs.update(ranges.map_attrs(k))
    fig_inputs = {"region_mask": inside, "ply_profile": _ply_profile(lam, strain, valid),
                  "reference_image": _reference_on_ir(run, transform, ir_shape)}
    return RunResult(ds, table, warnings, meta, fig_inputs)


def _refine(run, reg, ranges, lam, thermal, t_valid, smaps, inside, report, transform, warnings):
    """Refine the registration by enhanced correlation of the measured and predicted maps."""
    from . import register as R
    from .mechanics import source_coefficients

    coef = source_coefficients(lam)["laminate"]
    predicted = np.moveaxis(smaps[:3], 0, -1) @ coef
    with np.errstate(invalid="ignore", divide="ignore"):
        measured = thermal["delta_T"] / thermal["T0"]
    ok = inside & t_valid & np.isfinite(predicted) & np.isfinite(measured)
    warp, info = R.refine_with_signal(np.nan_to_num(measured), np.nan_to_num(predicted), valid=ok,
                                      max_correction=reg.max_correction)
    report = dict(report, refinement={k: (float(v) if isinstance(v, (int, float, np.floating)) else v)
                                      for k, v in info.items() if k != "warp"})
    if not info.get("accepted"):
        warnings.append(f"registration refinement not applied: {info.get('message', 'no convergence')}")
        return smaps, inside, report, transform
    transform = transform.corrected(warp)
    smaps, inside, new_report, _, transform = registration_side(run, reg, ranges, inside.shape, None,
                                                                 transform=transform)
    new_report["refinement"] = report["refinement"]
    return smaps, inside, new_report, transform


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


def _region(r, shape, G):
    if r.mask is not None:
        from .io import read_image

        m = read_image(_need_file(r.mask, f"diagnosis.regions[{r.name}].mask")) > 0
        if m.shape != shape:
            raise InputError(r.mask, f"region mask has shape {m.shape}, expected the IR grid {shape}")
        return m
    try:
        return G.region_mask(shape, rect=r.rect, circle=r.circle)
    except ValueError as e:
        raise ConfigError(f"diagnosis.regions[{r.name}]", str(e)) from e


def _ply_profile(lam, strain, valid):
    from .mechanics import ply_profile

    mean = np.nanmedian(strain[valid], axis=0) if valid.any() else np.zeros(3)
    return ply_profile(lam, mean)


def _reference_on_ir(run, transform, shape):
    """The visible reference image resampled onto the IR grid (for the overlay), or None."""
    ref = run.dic.reference_image or (run.dic.images[0] if run.dic.images else None)
    if ref is None or transform is None or not Path(ref).is_file():
        return None
    import cv2

    from .io import read_image

    img = read_image(ref).astype(np.float32)
    rows, cols = np.mgrid[0:shape[0], 0:shape[1]]
    dic_xy = transform.inverse_apply(np.column_stack([cols.ravel(), rows.ravel()]).astype(float))
    scale = run.dic.pixel_size if (run.dic.coordinates == "mm" and run.dic.pixel_size) else 1.0
    map_x = (dic_xy[:, 0] / scale).reshape(shape).astype(np.float32)
    map_y = (-dic_xy[:, 1] / scale).reshape(shape).astype(np.float32)
    return cv2.remap(img, map_x, map_y, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=np.nan)


# --------------------------------------------------------------------------- writing
def write_run(result: RunResult, folder: Path, *, cfg, run, stamp: str) -> dict:
    """Write result.nc, summary.json and figures of a run into ``folder``; returns the summary."""
    from . import report as P
    from .io import sha256_file, write_netcdf

    inputs = {}
    for p in _inputs_of(run):
        if Path(p).is_file():
            inputs[str(p)] = sha256_file(p)
    ds = result.dataset
    ds.attrs["input_sha256"] = inputs
    write_netcdf(ds, folder / "result.nc")
    # the IR field usually shows grips and background as well: warn below 10 % valid, not 25 %
    summary = P.summarize_run(ds, regions=result.regions, warnings=result.warnings, meta=result.meta,
                              valid_area_limit=0.10,
                              registration_limit_px=cfg.registration_for(run).max_error,
                              snr_limit=cfg.diagnosis.min_snr)
    summary["provenance"].update(stamp=stamp, inputs=inputs)
    if cfg.output.figures:
        figs = P.run_figures(ds, folder / "figures", formats=cfg.output.formats, dpi=cfg.output.dpi,
                             reference_image=result.figure_inputs.get("reference_image"),
                             region_mask=result.figure_inputs.get("region_mask"),
                             profile_line=cfg.output.profile_line,
                             ply_profile=result.figure_inputs.get("ply_profile"))
        summary["figures"] = {k: str(Path(v).relative_to(folder)) for k, v in figs.items()}
    P.write_summary(summary, folder / "summary.json")
    return summary


def _inputs_of(run):
    from .pipeline import _input_files

    return _input_files(run)


def check_run_inputs(cfg, run, *, key) -> str:
    """Open every input of a run far enough to check it; return a one-line description."""
    from .io import open_frames, read_dic_field, read_image, read_load_signal, read_thermal_maps

    t, d = run.thermal, run.dic
    parts = []
    if t.frames is not None:
        fr = open_frames(_need_file(t.frames, f"{key}.thermal.frames"), dtype=t.dtype, shape=t.shape,
                         byte_order=t.byte_order, dataset=t.dataset, header_bytes=t.header_bytes)
        parts.append(f"{fr.shape[0]} frames of {fr.shape[1]}x{fr.shape[2]} {fr.dtype}")
    else:
        maps = read_thermal_maps(_need_file(t.maps, f"{key}.thermal.maps"))
        parts.append(f"maps {maps['T0'].shape[0]}x{maps['T0'].shape[1]}")
    if t.load is not None:
        sig = read_load_signal(_need_file(t.load, f"{key}.thermal.load"), time_column=t.time_column,
                               load_column=t.load_column)
        parts.append(f"load signal of {sig.times.size} samples")
    if t.times is not None:
        from .io import read_frame_times

        # read, not only found: a damaged times file should fail here, not in the run
        read_frame_times(_need_file(t.times, f"{key}.thermal.times"),
                         n_frames=fr.shape[0] if t.frames is not None else None)
    if d.strain_ranges is not None:
        f = read_dic_field(_need_file(d.strain_ranges, f"{key}.dic.strain_ranges"), columns=d.columns,
                           coordinates=d.coordinates, y_axis=d.effective_y_axis, shear=d.shear)
        parts.append(f"strain ranges at {f.x.size} points")
    for name in ("states", "series"):
        for i, p in enumerate(getattr(d, name) or ()):
            f = read_dic_field(_need_file(p, f"{key}.dic.{name}[{i}]"), columns=d.columns,
                               coordinates=d.coordinates, y_axis=d.effective_y_axis, shear=d.shear)
        if getattr(d, name):
            parts.append(f"{len(getattr(d, name))} displacement fields of {f.x.size} points")
    if d.images is not None:
        shapes = {read_image(_need_file(p, f"{key}.dic.images[{i}]")).shape for i, p in enumerate(d.images)}
        if len(shapes) != 1:
            raise InputError(d.images[0], f"the speckle images differ in size: {sorted(shapes)}")
        parts.append(f"{len(d.images)} speckle images of {shapes.pop()}")
    if d.reference_image is not None:
        read_image(_need_file(d.reference_image, f"{key}.dic.reference_image"))
    return ", ".join(parts)
