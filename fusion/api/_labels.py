"""Labelled xarray objects of the steps: the correlation grid in the specimen frame, the IR grid.

Names, units and long names come from :mod:`fusion.datamodel` (the contract of result.nc);
the few step products that result.nc does not hold are described here.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..datamodel import variable_spec
from ..dic import StrainRanges
from ..errors import ArgumentError

__all__ = ["COMPONENTS", "strain_dataset", "to_ranges", "grid_shape_of", "flag", "extra"]

#: Strain components by their result.nc names, with the StrainRanges fields they come from.
COMPONENTS = (("delta_eps_xx", "exx"), ("delta_eps_yy", "eyy"), ("delta_gamma_xy", "gxy"))
_UNITS = {"mm": "mm", "px": "pixel"}


def _var(name, dims, values, **attrs):
    spec = variable_spec(name)
    return xr.Variable(dims, values, {"units": spec.units, "long_name": spec.long_name, **attrs})


def extra(dims, values, units, long_name, **attrs):
    """A variable that result.nc does not hold, with its units and long name."""
    base = {"long_name": long_name} if units is None else {"units": units, "long_name": long_name}
    return xr.Variable(dims, values, {**base, **attrs})


def flag(dims, values, long_name):
    """A 0/1 int8 flag variable with CF flag attributes."""
    return xr.Variable(dims, np.asarray(values).astype(np.int8),
                       {"long_name": long_name, "flag_values": np.array([0, 1], np.int8),
                        "flag_meanings": "no yes"})


def strain_dataset(r: StrainRanges, displacement=None) -> xr.Dataset:
    """Strain ranges on the correlation grid (``row``, ``col``) or points (``point``).

    Coordinates ``x`` and ``y`` are the specimen-frame positions (x right, y up) in the
    field's units; variables carry the result.nc names, units and long names, and each strain
    map its metrology attributes (:meth:`fusion.dic.StrainRanges.map_attrs`).
    """
    if r.grid_shape is not None:
        dims, shape = ("row", "col"), r.grid_shape
        coords = {"row": ("row", np.arange(shape[0]), {"long_name": "correlation grid row, top first"}),
                  "col": ("col", np.arange(shape[1]), {"long_name": "correlation grid column, left first"})}
    else:
        dims, shape = ("point",), (r.size,)
        coords = {}
    unit = _UNITS[r.units]

    def grid(a):
        return np.asarray(a).reshape(shape)

    coords["x"] = (dims, grid(r.x), {"units": unit, "long_name": "specimen x (right), reference state"})
    coords["y"] = (dims, grid(r.y), {"units": unit, "long_name": "specimen y (up), reference state"})
    data = {}
    for k, (name, field) in enumerate(COMPONENTS):
        metrology = r.map_attrs(k)
        data[name] = _var(name, dims, grid(getattr(r, field)), **metrology)
        data[f"{name}_std"] = _var(f"{name}_std", dims, grid(getattr(r, f"{field}_std")), **metrology)
        quad = getattr(r, f"{field}_quadrature")
        if quad is not None:
            data[f"{name}_quadrature"] = extra(dims, grid(quad), "1", f"quadrature range of {name[6:]}")
    data["valid"] = flag(dims, grid(r.valid), "point has a usable strain range")
    if r.edge_distance is not None:
        data["edge_distance"] = extra(dims, grid(r.edge_distance), unit,
                                      "distance to the nearest edge of the valid data, specimen frame")
    if displacement is not None:
        du, dv = displacement
        data["delta_u"] = extra(dims, grid(du), unit, "displacement range along specimen x (max load "
                                "minus min load)")
        data["delta_v"] = extra(dims, grid(dv), unit, "displacement range along specimen y (max load "
                                "minus min load)")
    ds = xr.Dataset(data, coords=coords)
    ds.attrs.update(r.attrs)
    ds.attrs["coordinate_units"] = r.units
    return ds


def _strain_ds(strain, parameter):
    if not isinstance(strain, xr.Dataset) or not all(n in strain for n, _ in COMPONENTS):
        raise ArgumentError(parameter, "expected the strain ranges of fusion.strain_ranges (an "
                            f"xarray.Dataset with {', '.join(n for n, _ in COMPONENTS)}), got "
                            f"{type(strain).__name__}")
    return strain


def to_ranges(strain, parameter="strain") -> StrainRanges:
    """The :class:`~fusion.dic.StrainRanges` record of a :func:`strain_dataset`."""
    ds = _strain_ds(strain, parameter)
    grid_shape = tuple(ds["delta_eps_xx"].shape) if ds["delta_eps_xx"].dims == ("row", "col") else None

    def flat(name):
        return np.asarray(ds[name].values).ravel()

    kw = {f: flat(n) for n, f in COMPONENTS}
    kw.update({f"{f}_std": flat(f"{n}_std") for n, f in COMPONENTS})
    attrs = {k: v for k, v in ds.attrs.items() if k != "coordinate_units"}
    units = ds.attrs.get("coordinate_units") or {"pixel": "px"}.get(ds["x"].attrs.get("units"), "mm")
    return StrainRanges(x=flat("x"), y=flat("y"), units=units, valid=flat("valid").astype(bool),
                        grid_shape=grid_shape, attrs=attrs,
                        edge_distance=flat("edge_distance") if "edge_distance" in ds else None, **kw)


def grid_shape_of(grid, parameter="grid") -> tuple[int, int]:
    """(rows, columns) of the infrared grid: from a dataset or map with dims (y, x), or a pair."""
    if isinstance(grid, (xr.Dataset, xr.DataArray)):
        if "y" not in grid.dims or "x" not in grid.dims:
            raise ArgumentError(parameter, f"expected an infrared map or dataset with dims (y, x), got "
                                f"dims {tuple(grid.dims)!r}")
        return int(grid.sizes["y"]), int(grid.sizes["x"])
    try:
        ny, nx = (int(v) for v in grid)
    except (TypeError, ValueError):
        raise ArgumentError(parameter, f"expected the infrared grid as a dataset of fusion.lockin_maps "
                            f"or (rows, columns), got {grid!r}") from None
    if ny < 2 or nx < 2:
        raise ArgumentError(parameter, f"expected (rows, columns) of at least 2 x 2, got {grid!r}")
    return ny, nx
