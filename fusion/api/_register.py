"""The registration step: strain ranges resampled onto the infrared grid."""

from __future__ import annotations

import numpy as np

from .._bounds import check_grid_shape
from ..datamodel import result_dataset
from ..errors import ArgumentError
from .._conventions import as_mask
from ..register import CameraModel, Transform2D, disk_mask, edge_distance_map, resample_to_grid
from ._labels import COMPONENTS, flag, grid_shape_of, to_ranges

__all__ = ["registered_strain"]


def registered_strain(strain, transform, grid, *, markers=None, exclude=None):
    """Strain ranges and their standard deviations on every IR pixel.

    Parameters
    ----------
    strain : xarray.Dataset
        Strain ranges of :func:`fusion.strain_ranges` (correlation grid, specimen frame).
    transform : Transform2D or CameraModel
        From correlation coordinates (x, y) to IR (column, row) px:
        :func:`fusion.register.fit_transform` from control points, or
        :func:`fusion.register.fit_camera` (then the strain points need a ``z`` coordinate).
    grid : xarray.Dataset or (int, int)
        The IR grid: the dataset of :func:`fusion.lockin_maps` (its dims ``y``, ``x``), or
        (rows, columns).
    markers : (K, 3) array_like, optional
        Disks of IR pixels that hold no data of the surface (fiducial markers): (x, y, radius)
        = (column, row, radius) in IR px, the radius including any margin (a run's
        ``registration.marker_radius + marker_margin`` around its ``ir_points``).
    exclude : (Y, X) mask, optional
        Further IR pixels to leave out (bool, 0/1 or 0/255).

    Returns
    -------
    xarray.Dataset
        Dims ``(y, x)`` = (IR row, IR column), pixels: ``delta_eps_xx``, ``delta_eps_yy``,
        ``delta_gamma_xy`` and their ``_std`` (dimensionless, specimen frame: only positions
        move in registration), ``strain_edge_distance`` (IR px to the edge of the data),
        ``footprint`` (the whole pixel lies on usable correlation data, outside markers and
        exclusions), ``masked`` (markers and exclusions) and ``missing`` (the correlation grid
        covers the pixel but has no usable data there). ``attrs``: the registration
        errors ``registration_rms`` and ``registration_max_error`` (IR px) and the strain
        settings (``strain_attrs``).

    Raises
    ------
    ArgumentError
        A grid given as (columns, rows): the registered points fall inside the swapped shape.

    Notes
    -----
    The resampling of a run's registration step (:func:`fusion.register.resample_to_grid`
    with whole pixels and no margin, markers and exclusions masked,
    :func:`fusion.register.edge_distance_map`). Fit the transform with the control points
    in the data's own coordinates turned into the specimen frame (y up). A signal-based refinement
    (``registration.refine``) is not applied here: refine the transform first
    (:func:`fusion.register.refine_with_signal`) and pass the refined one.
    """
    r = to_ranges(strain)
    shape = grid_shape_of(grid)
    pts = np.column_stack([r.x, r.y])
    if isinstance(transform, CameraModel):
        if "z" not in strain.coords:
            raise ArgumentError("strain", "a camera model projects 3-D points: the strain ranges need a z "
                                "coordinate (stereo correlation)")
        ir = transform.project(np.column_stack([pts, np.asarray(strain["z"].values).ravel()]))
        rms, mx = transform.rms, transform.max_error
    elif isinstance(transform, Transform2D):
        ir = transform.apply(pts)
        rms, mx = transform.rms, transform.max_error
    else:
        raise ArgumentError("transform", f"expected a Transform2D or CameraModel (fusion.register), got "
                            f"{type(transform).__name__}")
    check_grid_shape(ir[r.valid], shape, "grid")
    names = [f for _, f in COMPONENTS] + [f"{f}_std" for _, f in COMPONENTS]
    values = np.column_stack([np.asarray(getattr(r, k), dtype=np.float32) for k in names])
    # a pixel keeps a value only where its whole area lies on usable correlation points
    maps, usable = resample_to_grid(ir, values, shape, grid_shape=r.grid_shape, valid=np.asarray(r.valid, bool),
                                    whole_pixels=True)
    _, covered = resample_to_grid(ir, np.zeros((len(pts), 1)), shape, grid_shape=r.grid_shape)
    masked = np.zeros(shape, bool) if exclude is None else as_mask(exclude, "exclude", shape=shape)
    if markers is not None:
        m = np.asarray(markers, dtype=np.float64).reshape(-1, 3)
        masked |= disk_mask(shape, m[:, :2], m[:, 2])
    maps[:, masked] = np.nan
    inside = usable & ~masked
    out = {n: maps[k] for k, n in enumerate([n for n, _ in COMPONENTS] + [f"{n}_std" for n, _ in COMPONENTS])}
    out["strain_edge_distance"] = edge_distance_map(inside)
    ds = result_dataset(out)
    for k, (name, _) in enumerate(COMPONENTS):
        for var in (name, f"{name}_std"):
            ds[var].attrs.update(r.map_attrs(k))
    ds["footprint"] = flag(("y", "x"), inside, "whole pixel on usable correlation data, outside markers and "
                           "exclusions")
    ds["masked"] = flag(("y", "x"), masked, "pixel of a marker or an exclusion (no data of the surface)")
    ds["missing"] = flag(("y", "x"), covered & ~usable & ~masked, "pixel covered by the correlation grid "
                         "without usable data")
    ds.attrs.update(registration_rms=float("nan") if rms is None else float(rms),
                    registration_max_error=float("nan") if mx is None else float(mx),
                    registration_units="IR pixel", strain_attrs=dict(r.attrs))
    return ds
