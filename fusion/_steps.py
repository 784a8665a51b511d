"""The steps of one run: strain side, thermal side, registration, predictions.

Each step turns the config of a run into arrays, reading its inputs through
:mod:`fusion.io` and computing with the subpackages; :mod:`fusion._runner`
composes them into the result of the run.
"""

from __future__ import annotations

import dataclasses
import logging
import math
from pathlib import Path

import numpy as np

from .datamodel import SOURCES
from .errors import ConfigError, InputError

log = logging.getLogger(__name__)

__all__ = ["strain_side", "thermal_side", "registration_side", "predictions"]


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
    # the reference state: no displacement and no noise of its own (the correlation's noise
    # is carried by the other field)
    return dataclasses.replace(field, u=np.zeros_like(field.u), v=np.zeros_like(field.v),
                               u_std=None, v_std=None)


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
    """Strain ranges, their noise and the distance to the data's edge (IR px) on every IR pixel,
    as 7 maps, and the registration report.

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
    # no margin: the strain fits keep to the valid data up to its edges; the distance to the
    # edge goes with the maps as their last channel
    maps, inside = R.resample_to_grid(ir, values, ir_shape, grid_shape=ranges.grid_shape,
                                      valid=np.asarray(ranges.valid, bool))
    maps = np.concatenate([maps, R.edge_distance_map(inside)[None]])
    report.update(rms=float(rms) if rms is not None else float("nan"),
                  max_error=float(mx) if mx is not None else float("nan"))
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
