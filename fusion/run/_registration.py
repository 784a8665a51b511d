"""Registration of a run: the correlation data onto the infrared grid, with its report."""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import ConfigError, InputError
from ..io import read_image
from ..mechanics import source_coefficients
from ..register import (RegistrationWarning, edge_distance_map, find_fiducials, fit_camera, fit_transform,
                        match_fiducials, refine_with_signal, resample_to_grid)
from ._files import need_file
from ._inputs import reference_image_path

__all__ = ["registration_side", "refine_registration"]


def _fit_registration(reg, ir_shape, T0, run):
    """The transform from correlation coordinates to IR (col, row) pixels, and its report."""
    method = reg.method
    if method == "identity":
        return fit_transform(np.zeros((0, 2)), np.zeros((0, 2)), method="identity", warn_limit=None), None
    if method == "camera":
        pts = np.asarray(reg.dic_points, float)
        if pts.shape[1] != 3:
            raise ConfigError("registration.dic_points", "method 'camera' needs [x, y, z] points")
        cam = fit_camera(pts, np.asarray(reg.ir_points, float), ir_shape, distortion=True)
        return None, cam
    if method == "fiducials":
        ref = reference_image_path(run.dic)
        if ref is None:
            raise ConfigError("dic.reference_image", "registration by fiducials needs the visible "
                              "reference image (dic.reference_image or dic.images)")
        vis = read_image(need_file(ref, "dic.reference_image"))
        try:
            ir_pts = find_fiducials(T0, count=reg.fiducials, polarity=reg.fiducial_polarity_ir,
                                      min_radius=reg.fiducial_radius_ir[0], max_radius=reg.fiducial_radius_ir[1])
        except ValueError as e:
            raise InputError(run.thermal.frames or run.thermal.maps, f"fiducials in the T0 map: {e}") from e
        try:
            vis_pts = find_fiducials(vis, count=reg.fiducials, polarity=reg.fiducial_polarity_visible,
                                       min_radius=reg.fiducial_radius_visible[0],
                                       max_radius=reg.fiducial_radius_visible[1])
        except ValueError as e:
            raise InputError(ref, f"fiducials in the visible reference image: {e}") from e
        src = _visible_px_to_dic(vis_pts, vis.shape, run.dic)
        try:
            # the correlation frame is y-up and the IR image rows-down: an orientation flip
            si, di = match_fiducials(src, ir_pts, method="homography", reflection=True,
                                       max_rotation=reg.max_rotation)
        except ValueError as e:
            raise ConfigError("registration.fiducials", f"cannot match the markers of the two "
                              f"cameras: {e}") from e
        return _quiet_fit(fit_transform, src[si], ir_pts[di], method="homography",
                          ransac_threshold=reg.ransac_threshold, warn_limit=reg.max_error), None
    pts = _dic_points(reg, run)
    try:
        t = _quiet_fit(fit_transform, pts, np.asarray(reg.ir_points, float), method=method,
                       ransac_threshold=reg.ransac_threshold, warn_limit=reg.max_error)
    except ValueError as e:
        raise ConfigError("registration.dic_points", str(e)) from e
    return t, None


def _quiet_fit(fn, *args, **kw):
    # the registration's quality warnings are collected in .warnings and reported with the run
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
    camera = None
    if transform is None:
        transform, camera = _fit_registration(reg, ir_shape, T0, run)
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
    maps, inside = resample_to_grid(ir, values, ir_shape, grid_shape=ranges.grid_shape,
                                    valid=np.asarray(ranges.valid, bool))
    maps = np.concatenate([maps, edge_distance_map(inside)[None]])
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


def refine_registration(run, reg, ranges, lam, thermal, t_valid, smaps, inside, report, transform, warnings):
    """Refine the registration by enhanced correlation of the measured and predicted (laminate) maps.

    Returns the strain maps, footprint, report and transform, refined when the correction is
    accepted and as given (with a warning appended to ``warnings``) when it is not.
    """
    coef = source_coefficients(lam)["laminate"]
    predicted = np.moveaxis(smaps[:3], 0, -1) @ coef
    with np.errstate(invalid="ignore", divide="ignore"):
        measured = thermal["delta_T"] / thermal["T0"]
    ok = inside & t_valid & np.isfinite(predicted) & np.isfinite(measured)
    warp, info = refine_with_signal(np.nan_to_num(measured), np.nan_to_num(predicted), valid=ok,
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
