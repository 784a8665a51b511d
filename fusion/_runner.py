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
import math
from pathlib import Path

import numpy as np

from . import __version__
from .datamodel import SOURCES, result_dataset
from .errors import ConfigError, FusionError, InputError

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


def _need_file(path: Path, key: str) -> Path:
    if not path.exists():
        raise InputError(path, f"does not exist (named by {key})")
    if path.is_dir():
        raise InputError(path, f"is a folder, expected a file (named by {key})")
    return path


# --------------------------------------------------------------------------- strain side
def _read_field(path, dic, key):
    from .io import read_dic_field

    _need_file(path, key)
    return read_dic_field(path, columns=dic.columns, coordinates=dic.coordinates,
                          y_axis=dic.effective_y_axis, shear=dic.shear)


def strain_side(run, *, load_range=None):
    """Strain ranges of a run on its correlation grid, with the displacement range when known.

    Returns
    -------
    ranges : fusion.dic.StrainRanges
    displacement : tuple of (x, y, du, dv) arrays or None
        Displacement range per point (specimen frame, DIC units) for motion compensation.
    """
    from . import dic as D
    from .io import read_image

    spec = run.dic
    w, order = spec.strain_window, spec.strain_order
    if spec.strain_ranges is not None:
        field = _read_field(spec.strain_ranges, spec, "dic.strain_ranges")
        return D.ranges_from_strain_table(field), None
    if spec.states is not None:
        fmin = _read_field(spec.states[0], spec, "dic.states[0]")
        fmax = _read_field(spec.states[1], spec, "dic.states[1]")
        r = D.ranges_from_states(fmin, fmax, window=w, order=order)
        return r, (fmax.x, fmax.y, fmax.u - fmin.u, fmax.v - fmin.v)
    loads = np.asarray(spec.loads, dtype=float) if spec.loads is not None else None
    if spec.series is not None:
        fields = [_read_field(p, spec, f"dic.series[{i}]") for i, p in enumerate(spec.series)]
    else:
        imgs = [read_image(_need_file(p, f"dic.images[{i}]")) for i, p in enumerate(spec.images)]
        roi = tuple(spec.roi) if spec.roi is not None else None
        if spec.mask is not None:
            m = read_image(_need_file(spec.mask, "dic.mask")) > 0
            if m.shape != imgs[0].shape:
                raise InputError(spec.mask, f"mask has shape {m.shape}, the speckle images {imgs[0].shape}")
            if roi is not None:
                box = np.zeros_like(m)
                box[roi[0]:roi[2], roi[1]:roi[3]] = True
                m &= box
            roi = m
        fields = []
        for i, img in enumerate(imgs[1:], 1):
            try:
                res = D.correlate(imgs[0], img, subset=spec.subset, step=spec.step, roi=roi)
            except ValueError as e:
                raise InputError(spec.images[i], f"correlation: {e}") from e
            ok = np.asarray(res.converged).mean() if np.size(res.converged) else 0.0
            if ok < 0.5:
                raise InputError(spec.images[i], f"correlation with the reference converged at only "
                                 f"{100 * ok:.0f} % of the points; check the images, subset and roi")
            fields.append(res.to_field(pixel_size=spec.pixel_size))
        if len(fields) == 1:
            r = D.ranges_from_states(_zero_field(fields[0]), fields[0], window=w, order=order)
            _scale_ranges(r, load_range, loads)
            return r, (fields[0].x, fields[0].y, fields[0].u, fields[0].v)
        fields = [_zero_field(fields[0])] + fields
    lr = load_range if load_range is not None else float(loads.max() - loads.min())
    r = D.ranges_from_series(fields, loads, load_range=lr, window=w)
    slope_u = np.polyfit(loads, np.stack([f.u for f in fields]), 1)[0] * lr
    slope_v = np.polyfit(loads, np.stack([f.v for f in fields]), 1)[0] * lr
    return r, (fields[0].x, fields[0].y, slope_u, slope_v)


def _zero_field(field):
    return dataclasses.replace(field, u=np.zeros_like(field.u), v=np.zeros_like(field.v))


def _scale_ranges(r, load_range, loads):
    """Two images at loads L0, L1 give the range over L1 - L0; rescale to the thermal run's range."""
    if load_range is None or loads is None:
        return
    f = load_range / float(loads[1] - loads[0])
    for name in ("exx", "eyy", "gxy", "exx_std", "eyy_std", "gxy_std"):
        setattr(r, name, np.asarray(getattr(r, name)) * f)


# --------------------------------------------------------------------------- thermal side
def _load_range(sig, frequency):
    """Peak-to-peak range of the load's fundamental (a fit, so noise does not inflate it)."""
    from .thermal import estimate_frequency, load_reference

    try:
        f = frequency or estimate_frequency(sig.times, sig.load)
        return float(load_reference(sig.times, sig.load, f).range)
    except ValueError as e:
        raise InputError(sig.path, f"cannot find the load cycle in the load signal ({e})") from e


def _frame_times(spec, n_frames, load_sig):
    from .io import read_frame_times

    if spec.times is not None:
        return read_frame_times(_need_file(spec.times, "thermal.times"), n_frames=n_frames)
    if spec.frame_rate is not None:
        return None
    if load_sig is not None and load_sig.times.size == n_frames:
        return load_sig.times
    raise ConfigError("thermal.frame_rate", "frame times unknown: give frame_rate, times, or a load "
                      f"file with one sample per frame ({n_frames} frames)")


def thermal_side(run, *, budget, motion=None, progress=False):
    """T0, dT, phase, noise maps of a run (lock-in of frames, or precomputed maps)."""
    from .io import open_frames, read_load_signal, read_thermal_maps
    from .thermal import lockin

    spec = run.thermal
    if spec.maps is not None:
        maps = read_thermal_maps(_need_file(spec.maps, "thermal.maps"))
        T0, dT = np.asarray(maps["T0"], np.float32), np.asarray(maps["delta_T"], np.float32)
        std = maps.get("delta_T_std")
        if std is None:
            # no noise map: estimate it from the pixel-to-pixel scatter (median absolute Laplacian)
            lap = dT[1:-1, 1:-1] * 4 - dT[:-2, 1:-1] - dT[2:, 1:-1] - dT[1:-1, :-2] - dT[1:-1, 2:]
            sigma = 1.4826 * np.nanmedian(np.abs(lap)) / math.sqrt(20.0)
            std = np.full_like(dT, sigma)
        quad = maps.get("delta_T_quadrature")
        if quad is None and maps.get("phase") is not None:
            quad = dT * np.tan(np.deg2rad(np.asarray(maps["phase"], np.float32)))
        out = {"T0": T0, "delta_T": dT, "delta_T_std": np.asarray(std, np.float32)}
        if quad is not None:
            out["delta_T_quadrature"] = np.asarray(quad, np.float32)
        if maps.get("phase") is not None:
            out["phase"] = np.asarray(maps["phase"], np.float32)
        valid = np.isfinite(T0) & np.isfinite(dT)
        return out, valid, {"frequency": run.frequency, "source": "maps", "warnings": []}, None

    path = _need_file(spec.frames, "thermal.frames")
    frames = open_frames(path, dtype=spec.dtype, shape=spec.shape, byte_order=spec.byte_order,
                         dataset=spec.dataset, header_bytes=spec.header_bytes)
    load_sig = None
    if spec.load is not None:
        load_sig = read_load_signal(_need_file(spec.load, "thermal.load"), time_column=spec.time_column,
                                    load_column=spec.load_column)
    times = _frame_times(spec, frames.shape[0], load_sig)
    gain, offset = (spec.gain, spec.offset) if spec.values == "counts" else (1.0, 0.0)
    src = frames
    if motion is not None:
        from .thermal import motion_compensate

        if load_sig is None:
            raise ConfigError("thermal.motion_compensation", "needs a load signal (thermal.load)")
        t = times if times is not None else np.arange(frames.shape[0]) / spec.frame_rate
        load_at_frames = np.interp(t, load_sig.times, load_sig.load)
        src = motion_compensate(frames, motion, load_at_frames)
    row_bytes = 8 * int(np.prod(frames.shape[1:]))
    chunk = int(max(16, min(4096, budget // max(1, 4 * row_bytes))))
    try:
        res = lockin(src, frequency=run.frequency, times=times,
                     frame_rate=spec.frame_rate if times is None else None,
                     load=None if load_sig is None else load_sig.load,
                     load_times=None if load_sig is None else load_sig.times,
                     gain=gain, offset=offset, saturation=spec.saturation, chunk_frames=chunk,
                     progress=progress)
    except ValueError as e:
        raise InputError(path, f"lock-in: {e}") from e
    if not np.asarray(res.valid).any():
        raise InputError(path, f"no usable pixel in the stack: bad pixels by reason {dict(res.bad_pixels)} "
                         "(NaN/Inf, saturated or dead everywhere)")
    maps = res.to_maps()
    ok = np.asarray(res.valid, bool)
    info = {"frequency": float(res.frequency), "source": "lock-in", "n_frames": int(res.n_frames),
            "bad_pixels": dict(res.bad_pixels), "warnings": list(res.warnings),
            # |C2| debiased for noise (E|C2|^2 = 2 std^2 for pure noise), over |C|: a warning of
            # dissipative heating should not fire on a noisy but clean run
            "second_harmonic_ratio_map": np.sqrt(np.maximum(
                np.asarray(res.second_harmonic, float) ** 2 - 2 * np.asarray(res.delta_T_std, float) ** 2, 0.0))
            / np.asarray(res.magnitude, float),
            "drift_rate_median": float(np.nanmedian(np.asarray(res.drift_rate)[ok])),
            "load_range": None if load_sig is None else _load_range(load_sig, float(res.frequency))}
    return maps, np.asarray(res.valid, bool), info, load_sig


# --------------------------------------------------------------------------- registration
def _fit_registration(reg, ranges, ir_shape, T0, run):
    """The transform from correlation coordinates to IR (col, row) pixels, and its report."""
    from . import register as R

    method = reg.method
    if method == "identity":
        return R.fit_transform(np.zeros((0, 2)), np.zeros((0, 2)), method="identity", warn_limit=None), None
    if method == "camera":
        pts = np.asarray(reg.dic_points, float)
        if pts.shape[1] != 3:
            raise ConfigError("registration.dic_points", "method 'camera' needs [x, y, z] points")
        cam = R.fit_camera(pts, np.asarray(reg.ir_points, float), ir_shape, distortion=True)
        return None, cam
    if method == "fiducials":
        ref = run.dic.reference_image or (run.dic.images[0] if run.dic.images else None)
        if ref is None:
            raise ConfigError("dic.reference_image", "registration by fiducials needs the visible "
                              "reference image (dic.reference_image or dic.images)")
        from .io import read_image

        vis = read_image(_need_file(ref, "dic.reference_image"))
        try:
            ir_pts = R.find_fiducials(T0, count=reg.fiducials, polarity=reg.fiducial_polarity_ir,
                                      min_radius=reg.fiducial_radius_ir[0], max_radius=reg.fiducial_radius_ir[1])
        except ValueError as e:
            raise InputError(run.thermal.frames or run.thermal.maps, f"fiducials in the T0 map: {e}") from e
        try:
            vis_pts = R.find_fiducials(vis, count=reg.fiducials, polarity=reg.fiducial_polarity_visible,
                                       min_radius=reg.fiducial_radius_visible[0],
                                       max_radius=reg.fiducial_radius_visible[1])
        except ValueError as e:
            raise InputError(ref, f"fiducials in the visible reference image: {e}") from e
        src = _visible_px_to_dic(vis_pts, vis.shape, run.dic)
        try:
            # the correlation frame is y-up and the IR image rows-down: an orientation flip
            si, di = R.match_fiducials(src, ir_pts, method="homography", reflection=True,
                                       max_rotation=reg.max_rotation)
        except ValueError as e:
            raise ConfigError("registration.fiducials", f"cannot match the markers of the two "
                              f"cameras: {e}") from e
        return _quiet_fit(R.fit_transform, src[si], ir_pts[di], method="homography",
                          ransac_threshold=reg.ransac_threshold, warn_limit=reg.max_error), None
    pts = _dic_points(reg, run)
    try:
        t = _quiet_fit(R.fit_transform, pts, np.asarray(reg.ir_points, float), method=method,
                       ransac_threshold=reg.ransac_threshold, warn_limit=reg.max_error)
    except ValueError as e:
        raise ConfigError("registration.dic_points", str(e)) from e
    return t, None


def _quiet_fit(fn, *args, **kw):
    # the registration's quality warnings are collected in .warnings and reported with the run
    import warnings

    from .register import RegistrationWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RegistrationWarning)
        return fn(*args, **kw)


def _dic_points(reg, run):
    """Control points as written in the config (the correlation file's own axes), converted to the
    specimen frame the same way the correlation data are."""
    pts = np.asarray([p[:2] for p in reg.dic_points], float)
    if run.dic.images is None and run.dic.effective_y_axis == "down":
        pts = pts * np.array([1.0, -1.0])
    return pts


def _visible_px_to_dic(pts, shape, dic):
    """Visible-image (col, row) px to the correlation coordinates (specimen frame)."""
    col, row = pts[:, 0], pts[:, 1]
    scale = dic.pixel_size if dic.pixel_size is not None else 1.0
    return np.column_stack([col * scale, -row * scale])


def registration_side(run, reg, ranges, ir_shape, T0, *, transform=None):
    """Strain ranges and their noise on every IR pixel, and the registration report.

    ``transform`` replaces the fit (used after a signal-based refinement).
    """
    from . import register as R

    camera = None
    if transform is None:
        transform, camera = _fit_registration(reg, ranges, ir_shape, T0, run)
    pts = np.column_stack([ranges.x, ranges.y])
    if camera is not None:
        z = getattr(ranges, "z", None)
        if z is None:
            raise ConfigError("registration.method", "method 'camera' needs correlation points with z")
        ir = camera.project(np.column_stack([pts, z]))
        rms, mx, scale = camera.rms, camera.max_error, None
        report = {"method": "camera", **camera.to_dict()}
    else:
        ir = transform.apply(pts)
        rms, mx, scale = transform.rms, transform.max_error, transform.scale
        report = {"method": transform.method, **transform.to_dict()}
    n = len(pts)
    values = np.column_stack([_arr(getattr(ranges, k), n) for k in
                              ("exx", "eyy", "gxy", "exx_std", "eyy_std", "gxy_std")])
    vsg = ranges.attrs.get("vsg_mm" if ranges.units == "mm" else "vsg_px")
    margin = 0.5 * float(vsg) * float(scale) if (vsg and scale and np.isfinite(vsg)) else 0.0
    maps, inside = R.resample_to_grid(ir, values, ir_shape, grid_shape=ranges.grid_shape,
                                      valid=np.asarray(ranges.valid, bool), edge_margin=margin)
    report.update(rms=float(rms) if rms is not None else float("nan"),
                  max_error=float(mx) if mx is not None else float("nan"), edge_margin_px=margin)
    if scale and ranges.units == "mm":
        report["pixel_size_mm"] = 1.0 / float(scale)
    warnings = list(getattr(transform, "warnings", []) or [])
    minimum = {"homography": 4, "affine": 3, "similarity": 2}.get(str(report.get("method", "")).split("+")[0])
    n_pts = int(report.get("registration_n_points", 0) or 0)
    if minimum and n_pts <= minimum:
        warnings.append(f"registration from {n_pts} control points fits them exactly: its error cannot be "
                        f"estimated; give more than {minimum} points to check it")
    if rms is not None and np.isfinite(rms) and rms > reg.max_error:
        msg = f"registration RMS error {rms:.2f} IR px exceeds the limit {reg.max_error:.2f} px"
        if msg not in warnings:
            warnings.append(msg)
    return maps, inside, report, warnings, transform


def _arr(v, n):
    a = np.asarray(v, dtype=np.float32)
    return np.broadcast_to(a, (n,)) if a.ndim == 0 else a


# --------------------------------------------------------------------------- predictions
def predictions(lam, strain, strain_std, frequency, *, sources, property_uncertainty):
    """Predicted ratio, its std and (model) phase lag maps for every source asked for."""
    from .mechanics import (model_response, predict_ratios, prediction_std, source_coefficients,
                            thermal_layers, transfer_coefficients)

    have = set(source_coefficients(lam))
    adiabatic = [s for s in sources if s in have]
    pred = predict_ratios(lam, strain, sources=adiabatic)
    std = prediction_std(lam, strain, strain_std, property_uncertainty=property_uncertainty,
                         sources=adiabatic)
    lags = {s: 0.0 for s in adiabatic}
    info = {}
    if "model" in sources:
        if frequency is None or not np.isfinite(frequency):
            raise ConfigError("run.frequency", "the heat model needs the loading frequency")
        coef = transfer_coefficients(thermal_layers(lam), np.array([frequency]),
                                     convection_front=lam.convection_front,
                                     convection_back=lam.convection_back)[0]
        ratio, lag = model_response(coef, strain)
        pred["model"] = np.asarray(ratio, np.float32)
        # first-order: strain noise through the in-phase coefficients, plus the property share
        var = sum((np.real(coef[j]) * strain_std[..., j]) ** 2 for j in range(3))
        std["model"] = np.sqrt(var + (property_uncertainty * pred["model"]) ** 2).astype(np.float32)
        lags["model"] = np.asarray(lag, np.float32)
        info["model_coefficients_re"] = [float(c.real) for c in coef]
        info["model_coefficients_im"] = [float(c.imag) for c in coef]
    order = [s for s in SOURCES if s in pred]
    return {s: pred[s] for s in order}, {s: std[s] for s in order}, {s: lags[s] for s in order}, info


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
    strain_std = np.moveaxis(smaps[3:], 0, -1).astype(np.float32)
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
                delta_gamma_xy_std=strain_std[..., 2])
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
