"""NetCDF writing and reading of results through xarray (netCDF4 engine)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ._atomic import atomic_path
from ._guard import decoding, hdf5_stays_inside, input_file

__all__ = ["write_netcdf", "read_netcdf", "netcdf_form"]

# zlib level of every variable: the fastest level; higher levels shrink result maps (float32
# with NaN outside the valid area) by a few per cent for a third more time, and neither the
# byte shuffle filter nor whole-map chunks gained (fusion bench, run_realistic)
_ZLIB_LEVEL = 1


def _clean_attrs(attrs: dict) -> dict:
    """NetCDF attributes must be str, numbers or 1-D numeric arrays; encode the rest as JSON."""
    out = {}
    for k, v in attrs.items():
        if isinstance(v, (bool, np.bool_)):
            out[k] = int(v)
        elif isinstance(v, (str, int, float, np.integer, np.floating)):
            out[k] = v
        elif isinstance(v, np.ndarray) and v.dtype.kind in "iuf":
            out[k] = v
        elif v is None:
            out[k] = ""
        else:
            out[k] = json.dumps(v, default=str)
    return out


def netcdf_form(ds):
    """``ds`` as :func:`write_netcdf` writes it and :func:`read_netcdf` reads it back.

    A copy with object-dtype variables as strings, booleans as 0/1, ``None`` as ``""``
    and attributes that NetCDF cannot hold (dicts, lists, tuples) as JSON text: the
    in-memory twin of the file.
    """
    ds = ds.copy()
    ds.attrs = _clean_attrs(ds.attrs)
    for name in list(ds.variables):
        ds[name].attrs = _clean_attrs(ds[name].attrs)
        if ds[name].dtype == object:
            ds[name] = ds[name].astype(str)
    return ds


def write_netcdf(ds, path, *, overwrite: bool = False) -> Path:
    """Write ``ds`` to ``path`` (NetCDF-4) via a temporary name and a rename.

    Written in the form of :func:`netcdf_form`: object-dtype coordinates as strings,
    non-scalar attributes JSON-encoded. Refuses to replace an existing file unless
    ``overwrite``.
    """
    ds = netcdf_form(ds)
    encoding = {}
    for name, var in ds.data_vars.items():
        if var.dtype.kind == "f":
            encoding[name] = {"zlib": True, "complevel": _ZLIB_LEVEL, "_FillValue": np.nan}
        elif var.dtype.kind in "iu":
            encoding[name] = {"zlib": True, "complevel": _ZLIB_LEVEL}
    with atomic_path(path, overwrite=overwrite) as tmp:
        ds.to_netcdf(tmp, engine="netcdf4", encoding=encoding)
    return Path(path)


def read_netcdf(path):
    """Open a NetCDF file fully into memory as an :class:`xarray.Dataset`."""
    import xarray as xr

    path = input_file(path, "a NetCDF file", missing="no such NetCDF file")
    hdf5_stays_inside(path, "NetCDF")
    with decoding(path, "NetCDF"):
        with xr.open_dataset(path, engine="netcdf4") as ds:
            return ds.load()
