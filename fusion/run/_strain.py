"""The strain side of a run: strain ranges on the correlation grid, from a table, fields or images."""

from __future__ import annotations

import dataclasses

import numpy as np

from .._timing import step
from ..dic import correlate, ranges_from_series, ranges_from_states, ranges_from_strain_table
from ..errors import ConfigError, InputError
from ..io import check_load_ranges, check_strain_ranges, image_shape, read_dic_field, read_image
from ._files import need_file
from ._inputs import images_within_budget, speckle_images

__all__ = ["strain_side", "read_field", "check_field_points", "check_table_strains", "check_region", "MIN_POINTS"]

#: Fewest valid points a correlation field may hold: below four, no area is covered
#: (three points span a triangle with no interior point to check a neighbour against).
MIN_POINTS = 4


def read_field(path, dic, key):
    """A correlation field of a run, read with the run's column, unit and axis keys and checked."""
    need_file(path, key)
    field = read_dic_field(path, columns=dic.columns, coordinates=dic.coordinates,
                           y_axis=dic.effective_y_axis, shear=dic.shear, strain_unit=dic.strain_unit)
    check_field_points(field, path)
    return field


def check_field_points(field, path):
    """Refuse a field whose valid points are too few or lie on one line (no strain has an area)."""
    ok = np.asarray(field.valid, bool) & np.isfinite(field.x) & np.isfinite(field.y)
    n = int(np.count_nonzero(ok))
    if n < MIN_POINTS:
        raise InputError(path, f"holds {n} valid point{'s' if n != 1 else ''}; a correlation field needs "
                         f"at least {MIN_POINTS}, spread over an area")
    xy = np.column_stack([field.x[ok], field.y[ok]])
    sv = np.linalg.svd(xy - xy.mean(axis=0), compute_uv=False)
    if sv[0] == 0 or sv[1] <= 1e-9 * sv[0]:
        for k, what in ((1, "row"), (0, "column")):
            if np.ptp(xy[:, k]) == 0:
                raise InputError(path, f"holds a single {what} of {n} points (all at {'xy'[k]} = "
                                 f"{xy[0, k]:g}); a strain field needs points spread over an area (several "
                                 "rows and columns)")
        i, j = np.argmin(xy[:, 0] + xy[:, 1]), np.argmax(xy[:, 0] + xy[:, 1])
        raise InputError(path, f"its {n} valid points lie on one line, from ({xy[i, 0]:g}, {xy[i, 1]:g}) to "
                         f"({xy[j, 0]:g}, {xy[j, 1]:g}); a strain field needs points spread over an area")


def check_table_strains(field, path, dic):
    """Stop on a strain table whose values are no strain range in the declared unit."""
    check_strain_ranges([field.exx[field.valid], field.eyy[field.valid], field.gxy[field.valid]],
                        where=path, unit=dic.strain_unit or "1")


def _computed_strains(r, path):
    ok = np.asarray(r.valid, bool)
    check_strain_ranges([np.asarray(r.exx)[ok], np.asarray(r.eyy)[ok], np.asarray(r.gxy)[ok]], where=path,
                        fix="check coordinates (mm or px), pixel_size and that the files hold "
                            "displacements u, v in those units")


def _ranges(path, fn, *args, **kw):
    """A range computation whose refusal names the file it came from."""
    try:
        with step("strain fit"):
            return fn(*args, **kw)
    except ValueError as e:
        raise InputError(path, f"no strain ranges from this field: {e}") from e


def strain_side(run, *, load_range=None, progress=False, budget=None):
    """Strain ranges of a run on its correlation grid, with the displacement range when known.

    ``budget`` (bytes, ``[compute] memory_budget``): speckle images too large to correlate
    within it are refused from the reference's header, before any is decoded.

    Returns
    -------
    ranges : fusion.dic.StrainRanges
    displacement : tuple of (x, y, du, dv) arrays or None
        Displacement range per point (specimen frame, DIC units) for motion compensation.
    """
    spec = run.dic
    w, order = spec.strain_window, spec.strain_order
    loads = np.asarray(spec.loads, dtype=float) if spec.loads is not None else None
    if loads is not None and load_range is not None:
        check_load_ranges(load_range, loads, where=run.thermal.load)
    if spec.strain_ranges is not None:
        field = read_field(spec.strain_ranges, spec, "dic.strain_ranges")
        check_table_strains(field, spec.strain_ranges, spec)
        return _ranges(spec.strain_ranges, ranges_from_strain_table, field), None
    if spec.states is not None:
        fmin = read_field(spec.states[0], spec, "dic.states[0]")
        fmax = read_field(spec.states[1], spec, "dic.states[1]")
        r = _ranges(spec.states[1], ranges_from_states, fmin, fmax, window=w, order=order)
        du, dv = fmax.u - fmin.u, fmax.v - fmin.v
        if loads is not None:
            if load_range is None:
                raise ConfigError("dic.loads", "rescales the ranges of 'states' to the load signal's "
                                  "range, but the run has no thermal.load: give the load signal, or leave "
                                  "loads out (the states are then the minimum and maximum of the cycle)")
            # the states were taken at loads[0] and loads[1]: rescale to the thermal run's cycle
            f = _scale_ranges(r, load_range, loads)
            du, dv = du * f, dv * f
        _computed_strains(r, spec.states[1])
        return r, (fmax.x, fmax.y, du, dv)
    if spec.series is not None:
        fields = [read_field(p, spec, f"dic.series[{i}]") for i, p in enumerate(spec.series)]
    else:
        images = speckle_images(spec)
        loads, paths = images.loads, images.paths
        if spec.load_log is not None and load_range is not None:
            check_load_ranges(load_range, loads, where=spec.load_log, what="the load log's loads")
        images_within_budget(paths[0], image_shape(need_file(paths[0], "dic.images")), budget)
        imgs = [read_image(need_file(p, "dic.images")) for p in paths]
        for p, img in zip(paths[1:], imgs[1:]):
            if img.shape != imgs[0].shape:
                raise InputError(p, f"is a {img.shape[0]}x{img.shape[1]} image, the reference {paths[0].name} "
                                 f"{imgs[0].shape[0]}x{imgs[0].shape[1]}: every speckle image must have one size; "
                                 "an image of another camera setting (window, binning) or of another run?")
        region = spec.correlation_region            # (x0, y0, x1, y1), columns first
        check_region(spec, imgs[0].shape, paths[0])
        if spec.mask is not None:
            m = read_image(need_file(spec.mask, "dic.mask")) > 0
            if m.shape != imgs[0].shape:
                raise InputError(spec.mask, f"mask has shape {m.shape}, the speckle images {imgs[0].shape}")
            if region is not None:
                x0, y0, x1, y1 = region
                box = np.zeros_like(m)
                box[y0:y1, x0:x1] = True
                m &= box
            region = m
        fields = []
        for i, img in enumerate(imgs[1:], 1):
            try:
                with step("correlation"):
                    res = correlate(imgs[0], img, subset=spec.subset, step=spec.step, region=region,
                                    progress=progress)
            except ValueError as e:
                raise InputError(paths[i], f"correlation: {e}") from e
            ok = np.asarray(res.converged).mean() if np.size(res.converged) else 0.0
            if ok < 0.5:
                where = ", region and dic.mask (non-zero where to correlate: inverted?)" if spec.mask else \
                    " and region"
                raise InputError(paths[i], f"correlation with the reference converged at only "
                                 f"{100 * ok:.0f} % of the points{_main_failure(res)}; check the images, "
                                 f"subset{where}")
            fields.append(res.to_field(pixel_size=spec.pixel_size))
        if len(fields) == 1:
            r = _ranges(paths[1], ranges_from_states, _zero_field(fields[0]), fields[0], window=w,
                        order=order)
            f = _scale_ranges(r, load_range, loads)
            _computed_strains(r, paths[1])
            return r, (fields[0].x, fields[0].y, fields[0].u * f, fields[0].v * f)
        fields = [_zero_field(fields[0])] + fields
    lr = load_range if load_range is not None else float(loads.max() - loads.min())
    where = spec.series[-1] if spec.series is not None else paths[-1]
    r = _ranges(where, ranges_from_series, fields, loads, load_range=lr, window=w)
    _computed_strains(r, where)
    slope_u = np.polyfit(loads, np.stack([f.u for f in fields]), 1)[0] * lr
    slope_v = np.polyfit(loads, np.stack([f.v for f in fields]), 1)[0] * lr
    return r, (fields[0].x, fields[0].y, slope_u, slope_v)


def check_region(spec, shape, path):
    """Refuse a ``dic.region`` (or ``roi``) reaching past the speckle images of ``shape`` (rows, cols)."""
    region = spec.correlation_region
    if region is not None and (region[2] > shape[1] or region[3] > shape[0]):
        name = "region" if spec.region is not None else "roi"
        raise InputError(path, f"dic.{name} = {list(getattr(spec, name))} reaches past this {shape[1]} x "
                         f"{shape[0]} px image (columns x rows): region is [x0, y0, x1, y1], columns first")


def _zero_field(field):
    # the reference state: no displacement and no noise of its own (the correlation's noise
    # is carried by the other field)
    return dataclasses.replace(field, u=np.zeros_like(field.u), v=np.zeros_like(field.v),
                               u_std=None, v_std=None)


def _main_failure(res):
    """", most failed for: <reason> (<share> of the points)" from a correlation's reason codes."""
    from ..dic._icgn import OK, REASON_CODES

    reason = np.asarray(res.reason).ravel()
    failed = reason[reason != OK]
    if failed.size == 0:
        return ""
    codes, counts = np.unique(failed, return_counts=True)
    k = int(np.argmax(counts))
    return f", most failed for: {REASON_CODES[int(codes[k])]} ({100 * counts[k] / reason.size:.0f} % of the points)"


def _scale_ranges(r, load_range, loads):
    """Two states at loads L0, L1 give the range over L1 - L0; rescale to the thermal run's range.

    Returns the factor applied (1 without a load signal: the states are then taken as the
    cycle's extremes, and ``r.attrs["load_scaling"]`` says so).
    """
    if loads is None:
        return 1.0
    if load_range is None:
        r.attrs["load_scaling"] = ("dic.loads not used: without a load signal the correlation states are "
                                   "taken as the minimum and maximum of the cycle")
        return 1.0
    f = load_range / float(loads[1] - loads[0])
    # loads in falling order turn the ranges over (the images then run from high to low load);
    # a standard deviation scales by the size of the factor
    for name in ("exx", "eyy", "gxy"):
        setattr(r, name, np.asarray(getattr(r, name)) * f)
    for name in ("exx_std", "eyy_std", "gxy_std"):
        setattr(r, name, np.asarray(getattr(r, name)) * abs(f))
    r.attrs["load_scaling"] = (f"ranges scaled by {f:.6g}: the load signal's range {load_range:.6g} over "
                               f"dic.loads {loads[1]:.6g} - {loads[0]:.6g}")
    return f
