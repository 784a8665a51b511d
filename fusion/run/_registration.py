"""Registration of a run: the correlation data onto the infrared grid, with its report.

One coordinate rule holds for every input: control points (``dic_points``) and exclusions in
``frame = "dic"`` are written in the coordinates of the data they describe — a correlation file's
own x, y (its unit, its y direction), or for images the reference image's (col, row) pixels.
The data themselves are held in the specimen frame (x right, y up); :func:`file_to_specimen` is
the one map between the two. ``identity`` means the data already sit on the IR pixel grid: file
(x, y) = IR (col, row). A y-up specimen frame seen as rows-down IR pixels reverses orientation,
so every fitted transform must too (unless the IR image is mirrored): the opposite is the
signature of swapped (row, col) points and is refused.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..errors import ConfigError, InputError
from ..io import read_dic_field, read_image
from ..mechanics import source_coefficients
from ..register import (FOOTPRINT_FAIL, FOOTPRINT_WARN, Transform2D, assess_fit, disk_mask,
                        check_handedness, edge_distance_map, find_fiducials, fit_camera, fit_transform, footprint_share, match_fiducials,
                        refine_with_signal, resample_to_grid, shape_contains, shape_mask, warp_support_ok)
from ._files import need_file
from ._inputs import reference_image_path

__all__ = ["Registered", "registration_side", "refine_registration", "file_to_specimen", "motion_support",
           "check_footprint"]

_VALUES = ("exx", "eyy", "gxy", "exx_std", "eyy_std", "gxy_std")
_ORIENTATION_SAMPLE = 2000   # data points at which the orientation of a fit is checked


@dataclasses.dataclass
class Registered:
    """The correlation data on the IR grid, and what the registration knows about itself.

    ``maps`` (6, Y, X): strain ranges and their standard deviations (NaN without data);
    ``footprint``: pixels wholly on usable correlation data; ``covered``: pixels the correlation
    grid lands on, usable or not (what registration alone decides); ``missing``: covered pixels
    over unusable data (holes, lost subsets, exclusions in correlation coordinates);
    ``masked``: markers and exclusions; ``inside`` = footprint and not masked.
    """

    maps: np.ndarray
    inside: np.ndarray
    footprint: np.ndarray
    covered: np.ndarray
    missing: np.ndarray
    masked: np.ndarray
    report: dict
    warnings: list
    transform: Transform2D | None
    markers: tuple = (np.zeros((0, 2)), np.zeros(0))
    assessment: dict | None = None


# --------------------------------------------------------------------------- coordinates
def file_to_specimen(run, reg) -> np.ndarray:
    """(3, 3) matrix from the coordinates the config uses for the run's correlation data to the
    specimen frame the data are held in (see ``DicSpec.to_specimen``)."""
    return run.dic.to_specimen(reg.dic_points_units)


def _apply(m, pts):
    p = np.asarray(pts, float)
    return p[:, :2] * np.diag(m)[:2] + m[:2, 2]


def _control_points(reg, F):
    pts = np.asarray(reg.dic_points, float)
    if reg.method == "camera":
        if pts.shape[1] != 3:
            raise ConfigError("registration.dic_points", "method 'camera' needs [x, y, z] points")
        return np.column_stack([_apply(F, pts[:, :2]), pts[:, 2]])
    if pts.shape[1] != 2:
        raise ConfigError("registration.dic_points", f"method {reg.method!r} needs [x, y] points; "
                          "[x, y, z] points are for method 'camera'")
    return _apply(F, pts)


def _heights(run, ranges):
    """z of every correlation point (3D correlation), read from the first correlation file (the
    strain ranges keep only x, y; the same reader gives the same point order)."""
    d = run.dic
    path, key = ((d.strain_ranges, "dic.strain_ranges") if d.strain_ranges is not None else
                 (d.states[0], "dic.states[0]") if d.states is not None else
                 (d.series[0], "dic.series[0]") if d.series is not None else (None, None))
    if path is None:
        raise ConfigError("registration.method", "method 'camera' needs 3D correlation points (x, y, z)")
    field = read_dic_field(need_file(path, key), columns=d.columns, coordinates=d.coordinates,
                           y_axis=d.effective_y_axis, shear=d.shear)
    if field.z is None:
        raise InputError(path, "has no z column; method 'camera' needs 3D correlation points (x, y, z)")
    if field.z.shape != np.shape(ranges.x) or not np.array_equal(field.x, ranges.x, equal_nan=True):
        raise InputError(path, "its points do not match the strain ranges computed from it")
    return field.z


def _points_key(reg):
    return {"identity": "registration.method", "fiducials": "registration.fiducials"}.get(
        reg.method, "registration.dic_points / ir_points")


# --------------------------------------------------------------------------- the fit
def _fit(reg, ir_shape, T0, run, F):
    """(transform or None, camera or None, (src, dst, inliers) or None, markers)."""
    no_markers = (np.zeros((0, 2)), np.zeros(0))
    if reg.method == "identity":
        t = Transform2D(np.linalg.inv(F), "identity")
        return t, None, None, no_markers
    if reg.method == "fiducials":
        return _fit_fiducials(reg, T0, run)
    src = _control_points(reg, F)
    dst = np.asarray(reg.ir_points, float)
    markers = ((dst, np.full(len(dst), float(reg.marker_radius))) if reg.marker_radius is not None
               else no_markers)
    if reg.method == "camera":
        try:
            cam = fit_camera(src, dst, ir_shape, distortion=True)
        except ValueError as e:
            raise ConfigError("registration.dic_points", str(e)) from e
        return None, cam, (src, dst, None), markers
    try:
        t = fit_transform(src, dst, method=reg.method, ransac_threshold=reg.ransac_threshold, warn_limit=None)
    except ValueError as e:
        raise ConfigError("registration.dic_points", str(e)) from e
    return t, None, (src, dst, t.inliers), markers


def _fit_fiducials(reg, T0, run):
    ref = reference_image_path(run.dic)
    if ref is None:
        raise ConfigError("dic.reference_image", "registration by fiducials needs the visible "
                          "reference image (dic.reference_image or dic.images)")
    vis = read_image(need_file(ref, "dic.reference_image"))
    try:
        ir_pts, ir_radii, _ = find_fiducials(T0, count=reg.fiducials, polarity=reg.fiducial_polarity_ir,
                                             min_radius=reg.fiducial_radius_ir[0],
                                             max_radius=reg.fiducial_radius_ir[1], details=True)
    except ValueError as e:
        raise InputError(run.thermal.frames or run.thermal.maps, f"fiducials in the T0 map: {e}") from e
    try:
        vis_pts = find_fiducials(vis, count=reg.fiducials, polarity=reg.fiducial_polarity_visible,
                                 min_radius=reg.fiducial_radius_visible[0],
                                 max_radius=reg.fiducial_radius_visible[1])
    except ValueError as e:
        raise InputError(ref, f"fiducials in the visible reference image: {e}") from e
    if run.dic.images is None and (run.dic.coordinates != "px" or run.dic.effective_y_axis != "down"):
        # markers are found in the reference image's (col, row) px: a correlation file is in
        # those coordinates only when it is in px with y down
        raise ConfigError("registration.method", "method 'fiducials' with a correlation file needs the "
                          "file in the reference image's pixels (coordinates = \"px\", y down); "
                          "otherwise give dic_points and ir_points")
    src = _apply(run.dic.to_specimen("px"), vis_pts)     # found in px, whatever dic_points_units says
    try:
        # the specimen frame is y-up and the IR image rows-down: an orientation flip
        si, di = match_fiducials(src, ir_pts, method="homography", reflection=not reg.ir_mirrored,
                                 max_rotation=reg.max_rotation)
    except ValueError as e:
        raise ConfigError("registration.fiducials", f"cannot match the markers of the two "
                          f"cameras: {e}") from e
    try:
        t = fit_transform(src[si], ir_pts[di], method="homography", ransac_threshold=reg.ransac_threshold,
                          warn_limit=None)
    except ValueError as e:
        raise ConfigError("registration.fiducials", str(e)) from e
    return t, None, (src[si], ir_pts[di], t.inliers), (ir_pts, ir_radii)


def _check_orientation(reg, jac, method):
    """Refuse a mapping of the wrong handedness (the signature of (row, col) swapped points)."""
    try:
        check_handedness(jac, mirrored=reg.ir_mirrored, method=method)
    except ValueError as e:
        if method == "identity":
            raise ConfigError("dic.y_axis", "method 'identity' would mirror the field: the file's y must "
                              "count IR rows (y_axis = \"down\")") from e
        raise ConfigError(_points_key(reg), str(e)) from e


def _camera_jacobian(cam, pts3, h):
    """d(col, row)/d(x, y) of a camera projection by central differences (step h)."""
    out = np.empty((len(pts3), 2, 2))
    for k in range(2):
        d = np.zeros(3)
        d[k] = h
        out[:, :, k] = (cam.project(pts3 + d) - cam.project(pts3 - d)) / (2 * h)
    return out


def _sample(n, k=_ORIENTATION_SAMPLE):
    return np.unique(np.linspace(0, n - 1, min(n, k)).astype(np.intp)) if n else np.zeros(0, np.intp)


# --------------------------------------------------------------------------- warnings
def _w(code, message):
    return {"code": code, "message": message}


def _quality_warnings(reg, a, src, dst, method, F):
    """At most one warning per cause: exact fit, one bad point, or an error above the limit."""
    out = []
    if a.exact:
        out.append(_w("registration_exact_fit", (
            f"registration error not estimable (exact fit): {a.n_points} control points are exactly what "
            f"a {method} needs, so it passes through them whatever their errors; give "
            f"{a.n_min + 2} or more to measure the error and check each point")))
        return out
    if a.outlier:
        w = a.worst
        back = np.linalg.inv(F)
        file_pt = _apply(back, src[w:w + 1, :2])[0]
        out.append(_w("registration_outlier", (
            f"control point {w} (dic {np.round(file_pt, 3).tolist()}, IR {np.round(dst[w], 2).tolist()}) is "
            f"{a.leave_one_out[list(a.index).index(w)]:.2f} IR px from where the other {a.n_points - 1} "
            f"points put it (they agree within {a.scatter:.2g} px; RMS {a.rms:.2f} px with it, "
            f"{a.rms_without_worst:.2f} px without): mis-clicked or mismatched? correct or remove it")))
    elif a.rms is not None and a.rms > reg.max_error:
        who = ("" if a.scatter is not None else
               f"; with {a.n_points} points (one more than a {method} needs) a single bad point cannot be "
               "told from the others: add points")
        out.append(_w("registration_error", (
            f"registration RMS error {a.rms:.2f} IR px exceeds the limit {reg.max_error:g} px "
            f"(registration.max_error): strain and temperature may be compared at different points{who}")))
    return out


# --------------------------------------------------------------------------- masks
def _exclusions(reg, F, ir_shape, points_spec):
    """IR mask of the exclusions in IR px, and the correlation points inside those in 'dic'."""
    ir = np.zeros(ir_shape, bool)
    dic = np.zeros(len(points_spec), bool)
    back = np.linalg.inv(F)
    pts_file = _apply(back, points_spec) if len(points_spec) else np.zeros((0, 2))
    for k, ex in enumerate(reg.exclude):
        shape = {"rect": ex.rect, "circle": ex.circle,
                 "polygon": None if ex.polygon is None else np.asarray(ex.polygon, float)}
        key = f"registration.exclude[{k}]"
        if ex.frame == "ir":
            m = shape_mask(ir_shape, **shape)
            if not m.any():
                raise ConfigError(key, f"covers no pixel of the {ir_shape[0]} x {ir_shape[1]} IR image: "
                                  "frame = \"ir\" takes IR pixels [col, row]; for the correlation data's "
                                  "coordinates set frame = \"dic\"")
            ir |= m
        else:
            m = shape_contains(pts_file, **shape)
            if not m.any():
                raise ConfigError(key, "covers no correlation point: frame = \"dic\" takes the correlation "
                                  "data's own coordinates (as dic_points); for IR pixels set frame = \"ir\"")
            dic |= m
    return ir, dic


def registration_side(run, reg, ranges, ir_shape, T0, *, previous=None, transform=None) -> Registered:
    """Strain ranges, their noise and the distance to the data's edge (IR px) on every IR pixel
    (7 maps), the masks, and the registration report.

    ``previous`` (with ``transform``): a refined transform replaces the fit of ``previous``, whose
    markers and assessment are kept.
    """
    F = file_to_specimen(run, reg)
    camera = fit = None
    if transform is None:
        transform, camera, fit, markers = _fit(reg, ir_shape, T0, run, F)
    else:
        markers = previous.markers
    pts = np.column_stack([ranges.x, ranges.y])
    valid = np.asarray(ranges.valid, bool).copy()
    if camera is not None:
        pts3 = np.column_stack([pts, _heights(run, ranges)])
        ir = camera.project(pts3)
        sel = _sample(len(pts))
        sel = sel[np.isfinite(pts3[sel]).all(axis=1)]
        h = 1e-3 * float(np.ptp(pts[np.isfinite(pts).all(axis=1)], axis=0).max() or 1.0)
        jac = _camera_jacobian(camera, np.vstack([fit[0], pts3[sel]]), h)
        report = {"method": "camera", **camera.to_dict()}
        scale = None
    else:
        ir = transform.apply(pts)
        ok = np.isfinite(pts).all(axis=1) & valid
        jac = transform.jacobian(np.vstack([pts[ok][_sample(int(ok.sum()))]] +
                                           ([fit[0][fit[2]]] if fit is not None else [])))
        report = {"method": transform.method, **transform.to_dict()}
        scale = transform.scale if transform.method != "identity" else float(
            np.sqrt(abs(np.linalg.det(transform.matrix[:2, :2]))))
    _check_orientation(reg, jac, report["method"].split("+")[0])

    warnings = []
    assessment = previous.assessment if previous is not None else None
    if fit is not None:
        method = "camera" if camera is not None else transform.method
        a = assess_fit(fit[0], fit[1], method=method, limit=reg.max_error, inliers=fit[2],
                       image_shape=ir_shape)
        assessment = a.to_dict()
        warnings += _quality_warnings(reg, a, fit[0], fit[1], method, F)
        if fit[2] is not None and not np.all(fit[2]):
            out = np.flatnonzero(~np.asarray(fit[2])).tolist()
            warnings.append(_w("registration_outlier", (
                f"RANSAC left out control points {out} (farther than ransac_threshold = "
                f"{reg.ransac_threshold:g} IR px from the fit to the others)")))
    if assessment is not None:
        report["assessment"] = assessment
        if assessment["exact"]:
            report["error_estimate"] = "not estimable (exact fit)"
    exact = bool(assessment and assessment["exact"])
    rms = mx = None
    if exact:
        report.update(registration_rms_px=None, registration_max_error_px=None)
    elif camera is not None:
        rms, mx = camera.rms, camera.max_error
    elif len(transform.src_points):
        rms, mx = transform.rms, transform.max_error

    ir_excl, dic_excl = _exclusions(reg, F, ir_shape, pts)
    n = len(pts)
    values = np.column_stack([_arr(getattr(ranges, k), n) for k in _VALUES])
    # no margin: the strain fits keep to the valid data up to its edges; a pixel keeps a value
    # only where its whole area lies on usable correlation points
    # a plane registration maps IR pixels straight back onto the correlation grid; a camera model
    # with lens distortion has no closed inverse
    direct = {} if camera is not None else {"source_points": pts, "inverse": transform.inverse_apply}
    maps, usable = resample_to_grid(ir, values, ir_shape, grid_shape=ranges.grid_shape,
                                    valid=valid & ~dic_excl, whole_pixels=True, **direct)
    footprint = usable
    # where the grid lands at all (registration alone decides it)
    _, covered = resample_to_grid(ir, np.zeros((n, 1)), ir_shape, grid_shape=ranges.grid_shape, **direct)
    masked = ir_excl.copy()
    if dic_excl.any():
        # the IR image of an exclusion in correlation coordinates is masked too (not "missing")
        _, before = resample_to_grid(ir, np.zeros((n, 1)), ir_shape, grid_shape=ranges.grid_shape, valid=valid,
                                     whole_pixels=True, **direct)
        masked |= before & ~usable
    centres, radii = markers
    on_markers = disk_mask(ir_shape, centres, np.asarray(radii, float) + reg.marker_margin)
    masked |= on_markers
    missing = covered & ~usable & ~masked
    maps[:, masked] = np.nan
    inside = footprint & ~masked
    # the distance to the data's edge (holes, masks, markers, exclusions) goes with the maps as
    # their last channel
    maps = np.concatenate([maps, edge_distance_map(inside)[None]])

    report.update(rms=rms, max_error=mx, masked_pixels=int(masked.sum()),
                  marker_pixels=int(on_markers.sum()),
                  markers_ir=[[float(c), float(r), float(rad)] for (c, r), rad in zip(centres, radii)])
    if scale and ranges.units == "mm":
        report["pixel_size_mm"] = 1.0 / float(scale)
    return Registered(maps, inside, footprint, covered, missing, masked, report, warnings, transform, markers,
                      assessment)


def _arr(v, n):
    a = np.asarray(v, dtype=np.float32)
    return np.broadcast_to(a, (n,)) if a.ndim == 0 else a


# --------------------------------------------------------------------------- after the thermal side
def motion_support(registered, motion, load_range):
    """Pixels whose motion-compensated value is interpolated from pixels with data only.

    Frames are resampled at p + motion(p) (L - L_mean), the load swinging by ``load_range``; a
    pixel whose cubic B-spline stencil over that swing reaches pixels over missing correlation
    data or masked markers mixes in an edge whose motion the data do not describe.
    """
    half = 0.5 * np.asarray(motion, float) * float(load_range)
    known = ~(registered.missing | registered.masked)
    return warp_support_ok(known, -np.abs(half), np.abs(half), reach=(1, 2))


#: Below this share of strong-signal pixels under the correlation data, a small usable thermal
#: area is put down to the thermal signal, not to the registration.
WEAK_SIGNAL_SHARE = 0.5


def check_thermal_signal(registered, t_valid, snr, min_snr, frequency, *, from_frames: bool):
    """Whether the thermal signal is weak where the correlation data land, and a warning if so.

    The usable thermal area (signal-to-noise ratio at least ``diagnosis.min_snr``) is what the
    footprint check measures the registration against; when most pixels under the correlation
    data fall short, a wrong clock or frequency is likelier than a wrong registration.
    """
    under = t_valid & registered.covered & ~registered.masked & np.isfinite(snr)
    n = int(np.count_nonzero(under))
    if n == 0:
        return False, []
    strong = int(np.count_nonzero(under & (snr >= min_snr)))
    if strong >= WEAK_SIGNAL_SHARE * n:
        return False, []
    at = f" at {frequency:g} Hz" if frequency else ""
    causes = ("thermal.frame_rate or the frame times (a wrong clock moves the signal off the lock-in "
              "frequency), the loading frequency, " if from_frames else "the thermal maps' delta_T and its std, ")
    text = (f"only {100 * strong / n:.0f} % of the {n} IR pixels under the correlation data reach a "
            f"signal-to-noise ratio of {min_snr:g}{at} (median {float(np.median(snr[under])):.2g}): the "
            f"thermal signal is weak there; check {causes}a load too small for the camera's noise, "
            "or diagnosis.min_snr")
    return True, [_w("low_snr", text)]


def check_footprint(reg, registered, thermal_ok, *, weak_signal: bool = False):
    """Coverage of the usable thermal area by the correlation data, as far as registration
    decides it: a warning below ``FOOTPRINT_WARN``, a :class:`ConfigError` below ``FOOTPRINT_FAIL``.

    With ``weak_signal`` (see :func:`check_thermal_signal`) the usable area is small because
    the signal is, so a short coverage is left to that warning and the registration not blamed.
    Returns the numbers (for the summary) and the warnings.
    """
    area = thermal_ok & ~registered.masked
    info = footprint_share(registered.covered, area)
    info["valid_reference_pixels"] = info["thermal_pixels"]
    share, n_t, n_f = info["share"], info["thermal_pixels"], info["footprint_pixels"]
    if n_t == 0 or weak_signal:
        return info, []
    text = (f"the correlation data land on {100 * share:.0f} % of the {n_t} IR pixels with usable thermal "
            f"data (correlation footprint {n_f} px, overlap {info['overlap_pixels']} px)")
    cause = (f"registration (method {reg.method!r}, {_points_key(reg)}) is the likely cause: "
             "check the points' coordinates (dic: the data's own x, y; IR: [col, row]); if the cameras "
             "see different areas on purpose, exclude the uncovered part (registration.exclude)")
    if n_f > 0 and info["overlap_pixels"] >= 0.8 * n_f:
        # nearly all the correlation data land on usable thermal data: a registration that shrinks
        # the field, or correlation data that cover that little (a mask, a region, failed subsets)
        cause = (f"registration (method {reg.method!r}, {_points_key(reg)}) is the likely cause if it "
                 "shrinks the field (control points in another unit than the data?); nearly all the "
                 "correlation data land on usable thermal data, so they may also just cover that little: "
                 "check dic.mask, dic.region and the correlation's failures; if the cameras see different "
                 "areas on purpose, exclude the uncovered part (registration.exclude)")
    if share < FOOTPRINT_FAIL:
        raise ConfigError(_points_key(reg), f"{text}, below {100 * FOOTPRINT_FAIL:.0f} %: {cause}")
    if share < FOOTPRINT_WARN:
        return info, [_w("registration_footprint", f"{text}, below {100 * FOOTPRINT_WARN:.0f} %: {cause}")]
    return info, []


def refine_registration(run, reg, ranges, lam, thermal, t_valid, registered, warnings):
    """Refine the registration by enhanced correlation of the measured and predicted (laminate) maps.

    Returns the registration, refined when the correction is accepted and as given (with a
    warning appended to ``warnings``) when it is not.
    """
    coef = source_coefficients(lam)["laminate"]
    predicted = np.moveaxis(registered.maps[:3], 0, -1) @ coef
    with np.errstate(invalid="ignore", divide="ignore"):
        measured = thermal["delta_T"] / thermal["T0"]
    ok = registered.inside & t_valid & np.isfinite(predicted) & np.isfinite(measured)
    warp, info = refine_with_signal(np.nan_to_num(measured), np.nan_to_num(predicted), valid=ok,
                                    max_correction=reg.max_correction)
    refinement = {k: (float(v) if isinstance(v, (int, float, np.floating)) else v)
                  for k, v in info.items() if k != "warp"}
    if not info.get("accepted"):
        warnings.append(_w("registration_refinement", "registration refinement not applied: "
                           f"{info.get('message', 'no convergence')}"))
        registered.report = dict(registered.report, refinement=refinement)
        return registered
    new = registration_side(run, reg, ranges, registered.inside.shape, None, previous=registered,
                            transform=registered.transform.corrected(warp))
    new.report["refinement"] = refinement
    for key in ("assessment", "error_estimate"):
        if key in registered.report:
            new.report[key] = registered.report[key]
    new.warnings = registered.warnings
    return new
