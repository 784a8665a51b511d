"""The strain side of a run: strain ranges on the correlation grid, from a table, fields or images."""

from __future__ import annotations

import dataclasses

import numpy as np

from ..dic import correlate, ranges_from_series, ranges_from_states, ranges_from_strain_table
from ..errors import InputError
from ..io import read_dic_field, read_image
from ._files import need_file

__all__ = ["strain_side"]


def _read_field(path, dic, key):
    need_file(path, key)
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
    spec = run.dic
    w, order = spec.strain_window, spec.strain_order
    if spec.strain_ranges is not None:
        field = _read_field(spec.strain_ranges, spec, "dic.strain_ranges")
        return ranges_from_strain_table(field), None
    if spec.states is not None:
        fmin = _read_field(spec.states[0], spec, "dic.states[0]")
        fmax = _read_field(spec.states[1], spec, "dic.states[1]")
        r = ranges_from_states(fmin, fmax, window=w, order=order)
        return r, (fmax.x, fmax.y, fmax.u - fmin.u, fmax.v - fmin.v)
    loads = np.asarray(spec.loads, dtype=float) if spec.loads is not None else None
    if spec.series is not None:
        fields = [_read_field(p, spec, f"dic.series[{i}]") for i, p in enumerate(spec.series)]
    else:
        imgs = [read_image(need_file(p, f"dic.images[{i}]")) for i, p in enumerate(spec.images)]
        # the config's dic.roi is [row0, col0, row1, col1]; correlate takes (x0, y0, x1, y1)
        roi = (spec.roi[1], spec.roi[0], spec.roi[3], spec.roi[2]) if spec.roi is not None else None
        if spec.mask is not None:
            m = read_image(need_file(spec.mask, "dic.mask")) > 0
            if m.shape != imgs[0].shape:
                raise InputError(spec.mask, f"mask has shape {m.shape}, the speckle images {imgs[0].shape}")
            if roi is not None:
                box = np.zeros_like(m)
                box[spec.roi[0]:spec.roi[2], spec.roi[1]:spec.roi[3]] = True
                m &= box
            roi = m
        fields = []
        for i, img in enumerate(imgs[1:], 1):
            try:
                res = correlate(imgs[0], img, subset=spec.subset, step=spec.step, region=roi)
            except ValueError as e:
                raise InputError(spec.images[i], f"correlation: {e}") from e
            ok = np.asarray(res.converged).mean() if np.size(res.converged) else 0.0
            if ok < 0.5:
                raise InputError(spec.images[i], f"correlation with the reference converged at only "
                                 f"{100 * ok:.0f} % of the points; check the images, subset and roi")
            fields.append(res.to_field(pixel_size=spec.pixel_size))
        if len(fields) == 1:
            r = ranges_from_states(_zero_field(fields[0]), fields[0], window=w, order=order)
            _scale_ranges(r, load_range, loads)
            return r, (fields[0].x, fields[0].y, fields[0].u, fields[0].v)
        fields = [_zero_field(fields[0])] + fields
    lr = load_range if load_range is not None else float(loads.max() - loads.min())
    r = ranges_from_series(fields, loads, load_range=lr, window=w)
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
