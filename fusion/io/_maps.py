"""Precomputed thermal maps (T0, delta_T, phase...) made by other processing.

A run may bring its thermal maps instead of frames; they enter the pipeline the
same way as the lock-in's maps. Accepted layouts:

* NetCDF: variables named ``T0``, ``delta_T`` and optionally ``phase``,
  ``delta_T_std``, ``delta_T_quadrature``, ``magnitude`` (other names through
  ``variables``). A ``units`` attribute is honoured: K, kelvin or mK for
  temperatures (Celsius is refused for T0), degree or rad for the phase.
* Multi-page TIFF: one page per quantity in the order
  ``T0, delta_T, phase, delta_T_std, delta_T_quadrature, magnitude`` (the first
  two required), or the order given as a list in ``variables``.
* CSV: a long table with columns ``row, col`` and one column per quantity, or a
  mapping ``{quantity: path}`` of headerless numeric grids (one row of values per
  image row).

Maps are float32 ``(Y, X)`` on the infrared pixel grid; the conventions are those
of the lock-in (signed peak-to-peak ranges in K, phase in degrees). ``magnitude``
with ``phase`` may stand in for ``delta_T`` (a lock-in that exports amplitude and
phase): the signed in-phase range is then ``magnitude * cos(phase)``.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._guard import (check_bytes, clip, decoding, hdf5_stays_inside, input_file, quiet_logger, quote,
                     text_rows_warning)
from ._plausible import check_temperatures

__all__ = ["read_thermal_maps", "MAP_QUANTITIES"]

#: Quantities a map set may hold, in the default TIFF page order: T0 is required, and
#: delta_T or magnitude with phase.
MAP_QUANTITIES = ("T0", "delta_T", "phase", "delta_T_std", "delta_T_quadrature", "magnitude")
_REQUIRED = ("T0",)


def _missing_range(present):
    """The quantity to name when neither delta_T nor magnitude with phase is present, else None."""
    if "delta_T" in present or ("magnitude" in present and "phase" in present):
        return None
    return "delta_T"
_TEMPERATURE_UNITS = {"k": 1.0, "kelvin": 1.0, "kelvins": 1.0, "mk": 1e-3, "millikelvin": 1e-3}
_CELSIUS = {"degc", "deg_c", "celsius", "degree_celsius", "degrees_celsius", "°c", "c"}
_ANGLE_UNITS = {"degree": 1.0, "degrees": 1.0, "deg": 1.0, "°": 1.0,
                "rad": 180.0 / np.pi, "radian": 180.0 / np.pi, "radians": 180.0 / np.pi}


def _scale(path, name, units):
    """Factor to K (temperatures) or degrees (phase) for a ``units`` string; None means as is."""
    if units is None or not str(units).strip():
        return 1.0
    u = str(units).strip().lower().replace(" ", "_")
    if name == "phase":
        if u in _ANGLE_UNITS:
            return _ANGLE_UNITS[u]
        raise InputError(path, f"phase has units {units!r}; expected degree or rad")
    if u in _CELSIUS:
        if name == "T0":
            raise InputError(path, "T0 is in degrees Celsius; give kelvin (add 273.15) or set units = 'K'")
        return 1.0  # a difference in degC equals one in K
    if u in _TEMPERATURE_UNITS:
        return _TEMPERATURE_UNITS[u]
    raise InputError(path, f"{name} has units {units!r}; expected K, kelvin or mK")


def _names(variables, default=MAP_QUANTITIES):
    if variables is None:
        return {q: q for q in default}
    if isinstance(variables, Mapping):
        unknown = [k for k in variables if k not in MAP_QUANTITIES]
        if unknown:
            raise ValueError(f"variables: unknown quantity {unknown[0]!r}; known: {list(MAP_QUANTITIES)!r}")
        out = {q: q for q in default if q not in variables}
        out.update(variables)
        return out
    raise TypeError(f"variables must be a mapping of quantity to name, got {variables!r}")


def _read_netcdf(path, variables, max_bytes):
    import netCDF4

    names = _names(variables)
    hdf5_stays_inside(path, "NetCDF")
    with decoding(path, "NetCDF"):
        ds = netCDF4.Dataset(path, "r")
    out = {}
    with ds, decoding(path, "NetCDF maps"):
        for q in (*_REQUIRED, _missing_range([q for q, v in names.items() if v in ds.variables])):
            if q is not None and names[q] not in ds.variables:
                raise InputError(path, f"has no variable {names[q]!r} for {q}; variables are "
                                 f"{list(ds.variables)!r} (map the names with thermal.variables, e.g. "
                                 f"variables = {{ {q} = \"dT\" }})")
        for q, v in names.items():
            if v not in ds.variables:
                continue
            var = ds.variables[v]
            kind = "U" if var.dtype is str else np.dtype(var.dtype).kind
            if kind not in "iuf":
                raise InputError(path, f"variable {v!r} ({q}) holds {var.dtype}; expected numbers")
            # the header states the size: check it before reading (a forged or unwritten
            # variable may claim more than memory)
            check_bytes(path, var.shape, 8, what=f"variable {v!r}", max_bytes=max_bytes)
            var.set_auto_mask(True)
            data = np.ma.filled(var[...].astype(np.float64), np.nan)
            data = np.squeeze(data)
            if data.ndim != 2:
                raise InputError(path, f"variable {v!r} must be a 2-D (y, x) map, got shape {data.shape!r}")
            out[q] = data * _scale(path, q, getattr(var, "units", None))
    return out


def _read_tiff(path, variables, max_bytes):
    import tifffile

    order = list(MAP_QUANTITIES) if variables is None else list(variables)
    unknown = [q for q in order if q not in MAP_QUANTITIES]
    if unknown or isinstance(variables, Mapping):
        raise ValueError(f"variables for a TIFF is the page order, a list from {list(MAP_QUANTITIES)!r}; "
                         f"got {variables!r}")
    with quiet_logger("tifffile"), decoding(path, "a TIFF of map pages"):
        with tifffile.TiffFile(path) as tif:
            shape = tif.series[0].shape
    check_bytes(path, shape, 8, what="the TIFF map pages", max_bytes=max_bytes)
    with quiet_logger("tifffile"), decoding(path, "a TIFF of map pages"):
        data = tifffile.imread(path)
    if data.dtype.kind not in "iuf":
        raise InputError(path, f"holds {data.dtype} samples; expected numeric maps")
    if data.ndim != 3:
        raise InputError(path, f"expected one page per quantity ({', '.join(order)}), got shape {data.shape!r}")
    if data.shape[0] < 2 or data.shape[0] > len(order):
        raise InputError(path, f"has {data.shape[0]} pages; expected 2 to {len(order)} in the order "
                         f"{', '.join(order)}")
    return {q: data[i].astype(np.float64) for i, q in enumerate(order[:data.shape[0]])}


def _read_grid(path):
    from ._signals import _text_file

    path = _text_file(path, "a headerless numeric grid, one image row per line", missing="no such map file")
    try:
        with open(path, encoding="utf-8-sig") as fh:
            first = next((ln for ln in fh if ln.strip() and not ln.lstrip().startswith("#")), "")
        delim = next((d for d in (",", ";", "\t") if d in first), None)
        with text_rows_warning():
            grid = np.loadtxt(path, delimiter=delim, ndmin=2, comments="#", encoding="utf-8-sig")
    except (ValueError, UnicodeDecodeError) as e:
        raise InputError(path, f"expected a headerless numeric grid, one image row per line ({clip(e)})") from e
    if grid.size == 0:
        raise InputError(path, "is empty; expected a headerless numeric grid, one image row per line")
    return grid


def _read_long_csv(path, variables, max_bytes):
    from ._signals import _header, _text_file

    _text_file(path, "a map table with columns row, col, T0, delta_T")
    line, delim, names = _header(path)
    low = [n.lower() for n in names]
    if "row" not in low or "col" not in low:
        raise InputError(path, f"a map table needs columns row, col and T0, delta_T...; columns are {quote(names)}. "
                         "For one grid per quantity pass a mapping {quantity: path}")
    wanted = _names(variables)
    present = {q: names[low.index(n.lower())] for q, n in wanted.items() if n.lower() in low}
    missing = [q for q in (*_REQUIRED, _missing_range(present)) if q is not None and q not in present]
    if missing:
        raise InputError(path, f"has no column {wanted[missing[0]]!r} for {missing[0]}; columns are {quote(names)} "
                         f"(map the names with thermal.variables)")
    cols = [low.index("row"), low.index("col")] + [names.index(present[q]) for q in present]
    try:
        with text_rows_warning():
            data = np.loadtxt(path, delimiter=delim, skiprows=line + 1, usecols=cols, ndmin=2, comments="#",
                              encoding="utf-8-sig")
    except ValueError as e:
        raise InputError(path, f"expected numbers in columns {quote([names[c] for c in cols])} ({clip(e)})") from e
    if data.shape[0] == 0:
        raise InputError(path, "has a header but no data rows; expected one row per IR pixel")
    rc = data[:, :2]
    if not np.all(np.isfinite(rc)) or np.any(rc < 0) or np.any(rc != np.round(rc)):
        raise InputError(path, "row and col must be non-negative integers (IR pixel indices)")
    r, c = rc[:, 0].astype(np.int64), rc[:, 1].astype(np.int64)
    ny, nx = int(r.max()) + 1, int(c.max()) + 1
    # the largest index sets the grid: a stray row 100000 would otherwise allocate it
    check_bytes(path, (len(present), ny, nx), 8, what="the map grid spanned by row and col",
                max_bytes=max_bytes)
    flat = r * nx + c
    if np.unique(flat).size != flat.size:
        raise InputError(path, "a (row, col) pixel appears twice")
    out = {}
    for k, q in enumerate(present):
        grid = np.full(ny * nx, np.nan)
        grid[flat] = data[:, 2 + k]
        out[q] = grid.reshape(ny, nx)
    return out


def _validate(where, maps):
    shapes = {q: m.shape for q, m in maps.items()}
    if len(set(shapes.values())) != 1:
        raise InputError(where, f"maps differ in shape: {shapes!r}")
    for q, m in maps.items():
        if np.any(np.isinf(m)):
            raise InputError(where, f"{q} holds infinite values; expected finite numbers (NaN marks a "
                             "missing pixel)")
    if _missing_range(maps) or "T0" not in maps:
        raise InputError(where, f"holds {sorted(maps)}; expected T0, and delta_T or magnitude with phase")
    rng = "delta_T" if "delta_T" in maps else "magnitude"
    if not np.isfinite(maps[rng]).any():
        raise InputError(where, f"{rng} has no finite value (all NaN): expected the temperature range in K")
    check_temperatures(maps["T0"], where=where)
    if "magnitude" in maps and np.any(maps["magnitude"][np.isfinite(maps["magnitude"])] < 0):
        raise InputError(where, "magnitude must be >= 0 (the size of the temperature response in K; the "
                         "sign sits in the phase)")
    if "delta_T_std" in maps and np.any(maps["delta_T_std"][np.isfinite(maps["delta_T_std"])] < 0):
        raise InputError(where, "delta_T_std must be >= 0 (a standard deviation in K)")
    if "phase" in maps:
        ph = maps["phase"][np.isfinite(maps["phase"])]
        if ph.size and np.max(np.abs(ph)) > 360.0:
            raise InputError(where, "phase must be in degrees within -360..360 (set units = 'rad' on a "
                             "NetCDF variable in radians)")


def read_thermal_maps(path, *, variables=None, max_bytes=None) -> dict:
    """Read precomputed thermal maps.

    Parameters
    ----------
    path : str, os.PathLike or mapping of str to path
        A NetCDF file (``.nc``), a multi-page TIFF, a long CSV table (columns ``row``,
        ``col``, ``T0``, ``delta_T``...), or a mapping ``{quantity: path}`` of headerless
        CSV grids.
    variables : mapping or list, optional
        NetCDF and CSV: ``{quantity: name in the file}`` for names that differ. TIFF: the
        page order, a list of quantities.
    max_bytes : int, optional
        Largest map set read into memory (float64 while checked), bytes; default
        ``fusion.io._guard.MAX_READ_BYTES`` (2 GiB). Checked from headers before reading.

    Returns
    -------
    dict of str to (Y, X) float32 ndarray
        ``T0`` (K), ``delta_T`` (K) or ``magnitude`` (K) with ``phase``, and when present
        ``phase`` (degrees), ``delta_T_std`` (K), ``delta_T_quadrature`` (K), ``magnitude`` (K),
        as the file holds them (no conversion between conventions here).

    Raises
    ------
    InputError
        Missing, unreadable or corrupt file, missing required maps, shapes that disagree,
        non-numeric or infinite values, a delta_T without any finite value, units that are
        not temperatures, T0 outside 100..1000 K (with a hint when it looks like Celsius),
        or more data than ``max_bytes``.
    """
    if isinstance(path, Mapping):
        unknown = [q for q in path if q not in MAP_QUANTITIES]
        if unknown:
            raise ValueError(f"unknown quantity {unknown[0]!r}; known: {list(MAP_QUANTITIES)!r}")
        missing = [q for q in (*_REQUIRED, _missing_range(list(path))) if q is not None and q not in path]
        if missing:
            raise ValueError(f"map files must include {missing[0]!r} (required: T0, and delta_T or "
                             "magnitude with phase)")
        maps = {q: _read_grid(p) for q, p in path.items()}
        where = Path(path["T0"])
    else:
        where = input_file(path, "thermal maps (.nc, .tif or .csv)", missing="no such map file")
        suffix = where.suffix.lower()
        if suffix in (".nc", ".nc4", ".cdf"):
            maps = _read_netcdf(where, variables, max_bytes)
        elif suffix in (".tif", ".tiff"):
            maps = _read_tiff(where, variables, max_bytes)
        elif suffix in (".csv", ".txt"):
            maps = _read_long_csv(where, variables, max_bytes)
        else:
            raise InputError(where, f"unknown map format {suffix!r}: expected .nc, .tif/.tiff or .csv")
    _validate(where, maps)
    return {q: np.asarray(maps[q], dtype=np.float32) for q in MAP_QUANTITIES if q in maps}
