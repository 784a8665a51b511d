"""Reading exported correlation fields: CSV, NetCDF, HDF5 and MATLAB files.

Every format ends in the same few steps: named arrays are taken from the
file, broadcast to one list of points, checked, converted to the specimen
frame (x right, y up) and, when the points sit on a lattice, put in grid
order with the holes filled as invalid points.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..dic._field import DicField
from ..errors import InputError
from ._guard import MAX_READ_BYTES, check_bytes, clip, decoding, h5_dataset, hdf5_stays_inside, input_file
from ._matfile import check_mat5
from ._plausible import STRAIN_UNITS

__all__ = ["read_dic_field", "FIELD_NAMES"]

#: Our names of the quantities a field file may hold.
FIELD_NAMES = ("x", "y", "z", "u", "v", "exx", "eyy", "exy", "gxy", "valid", "zncc")
_FORMATS = {".csv": "csv", ".txt": "csv", ".nc": "netcdf", ".nc4": "netcdf", ".cdf": "netcdf",
            ".h5": "hdf5", ".hdf5": "hdf5", ".hdf": "hdf5", ".mat": "mat"}
_MM = {"mm", "millimeter", "millimetre", "millimeters", "millimetres"}
_PX = {"px", "pixel", "pixels", "pix"}
_M = {"m", "meter", "metre", "meters", "metres"}
_UNITLESS = {"", "1", "-", "strain", "m/m", "mm/mm"}
_MICRO = {"microstrain", "ustrain", "µε", "1e-6", "micro"}
_PERCENT = {"%", "percent", "pct"}
_STRAINS = ("exx", "eyy", "exy", "gxy")


def _check_names(option, mapping):
    if mapping is None:
        return {}
    if not isinstance(mapping, dict):
        raise TypeError(f"{option}: expected a mapping of our names to the file's names, "
                        f"got {type(mapping).__name__}")
    out = {}
    for k, v in mapping.items():
        if k not in FIELD_NAMES:
            raise ValueError(f"{option}: {k!r} is not a field name; expected some of {FIELD_NAMES!r}")
        if not isinstance(v, str) or not v.strip():
            raise ValueError(f"{option}[{k!r}]: expected the file's column or variable name, got {v!r}")
        out[k] = v.strip()
    if "exy" in out and "gxy" in out:
        raise ValueError(f"{option}: map either 'exy' or 'gxy' to the shear column, not both")
    return out


# ---------------------------------------------------------------- per-format loading

def _csv_separator(path):
    with open(path, encoding="utf-8-sig", errors="replace") as fh:
        for line in fh:
            s = line.strip()
            if s and not s.startswith("#"):
                for sep in (",", ";", "\t"):
                    if sep in s:
                        return sep, s
                return r"\s+", s
    raise InputError(path, "is empty; expected a header row naming the columns, then one row per point")


def _last_row_fields(path, sep):
    """Number of fields on the last non-blank, non-comment line (read from the file's tail)."""
    with open(path, "rb") as fh:
        fh.seek(0, 2)
        size = fh.tell()
        fh.seek(max(0, size - 65536))
        tail = fh.read().decode("utf-8", "replace")
    lines = [ln.strip() for ln in tail.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        return None
    last = lines[-1]
    return len(last.split()) if sep == r"\s+" else len(last.split(sep))


def _load_csv(path, names, max_bytes):
    import pandas as pd

    from ._signals import _text_file

    _text_file(path, "an exported correlation table (CSV)")
    sep, header = _csv_separator(path)
    first = [c.strip() for c in (header.split() if sep == r"\s+" else header.split(sep))]
    if all(_is_number(c) for c in first if c):
        raise InputError(path, "has no header row; expected the first line to name the columns "
                         f"(e.g. {', '.join(FIELD_NAMES[:5])})")
    try:
        table = pd.read_csv(path, sep=sep, comment="#", skipinitialspace=True, engine="c"
                            if sep != r"\s+" else "python", encoding="utf-8-sig")
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as e:
        raise InputError(path, f"could not be parsed as a delimited table ({clip(e)})") from e
    n_last = _last_row_fields(path, sep)
    if len(table) and n_last is not None and n_last < len(first):
        # pandas pads a short last row with NaN: a copy cut mid-line would pass as a missing point
        raise InputError(path, f"its last row has {n_last} of the {len(first)} fields the header names: "
                         "the file looks truncated (copy it again)")
    cols = {str(c).strip().lower(): c for c in table.columns}
    out = {}
    for ours, theirs in names.items():
        key = cols.get(theirs.lower())
        if key is None:
            continue
        col = orig = table[key]
        if ours == "valid" and col.dtype == object:
            low = col.astype(str).str.strip().str.lower()
            mapped = low.map({"true": 1.0, "false": 0.0, "yes": 1.0, "no": 0.0, "1": 1.0, "0": 0.0,
                              "nan": np.nan, "": np.nan})
            col = mapped
        values = pd.to_numeric(col, errors="coerce").to_numpy(dtype=np.float64)
        bad = np.flatnonzero(np.isnan(values) & orig.notna().to_numpy()
                             & ~orig.astype(str).str.strip().str.lower().isin(["nan", ""]).to_numpy())
        if bad.size:
            raise InputError(path, f"column {theirs!r} ({ours}): data row {int(bad[0]) + 1} "
                             f"holds {orig.iloc[bad[0]]!r}; expected a number")
        out[ours] = (values, None)
    return out, list(map(str, table.columns))


def _is_number(text):
    try:
        float(text)
    except ValueError:
        return False
    return True


def _units_attr(attrs):
    u = attrs.get("units", None)
    if isinstance(u, bytes):
        u = u.decode("utf-8", "replace")
    if isinstance(u, np.ndarray):
        u = u.item() if u.size == 1 else None
        if isinstance(u, bytes):
            u = u.decode("utf-8", "replace")
    return None if u is None else str(u).strip()


def _load_netcdf(path, names, max_bytes):
    import xarray as xr

    hdf5_stays_inside(path, "NetCDF")
    with decoding(path, "NetCDF"):
        ds = xr.open_dataset(path, engine="netcdf4")
    with ds, decoding(path, "a NetCDF correlation field"):
        found = {ours: theirs for ours, theirs in names.items() if theirs in ds.variables}
        if found:
            # broadcasting x and y to the data grid: every array ends at the largest size
            size = max(ds[v].size for v in found.values())
            check_bytes(path, (len(found), size), 8, what="the correlation variables", max_bytes=max_bytes)
        arrays = xr.broadcast(*[ds[v] for v in found.values()]) if found else []
        out = {}
        for (ours, theirs), arr in zip(found.items(), arrays):
            out[ours] = (np.asarray(arr.transpose(*sorted(arr.dims)).values, dtype=np.float64)
                         if arr.dtype.kind in "uifb" else _not_numeric(path, theirs, arr.dtype),
                         _units_attr(ds[theirs].attrs))
        return out, sorted(map(str, ds.variables))


def _not_numeric(path, name, dtype):
    raise InputError(path, f"variable {name!r} holds {dtype}; expected numbers")


def _load_hdf5(path, names, max_bytes):
    import h5py

    with decoding(path, "HDF5"):
        fh = h5py.File(path, "r")
    with fh, decoding(path, "an HDF5 correlation field"):
        available = []
        fh.visititems(lambda n, obj: available.append(n) if isinstance(obj, h5py.Dataset) else None)
        out = {}
        for ours, theirs in names.items():
            ds = h5_dataset(path, fh, theirs, what="variable")
            if not isinstance(ds, h5py.Dataset):
                continue
            if ds.dtype.kind not in "uifb":
                _not_numeric(path, theirs, ds.dtype)
            check_bytes(path, ds.shape, 8, what=f"variable {theirs!r}", max_bytes=max_bytes)
            # MATLAB's HDF5 files store arrays transposed; all alike, so point order holds
            out[ours] = (np.asarray(ds[()], dtype=np.float64), _units_attr(dict(ds.attrs)))
        return out, sorted(available)


_MAT_NUMERIC = {"double", "single", "int8", "uint8", "int16", "uint16", "int32", "uint32", "int64",
                "uint64", "logical"}


def _load_mat(path, names, max_bytes):
    from scipy import io as sio

    # the directory of the file first: classes and sizes from the headers, no data read
    try:
        with decoding(path, "a MATLAB file"):
            listing = sio.whosmat(path)
    except InputError as e:
        if isinstance(e.__cause__, NotImplementedError):  # version 7.3 files are HDF5
            return _load_hdf5(path, names, max_bytes)
        raise
    wanted = set(names.values())
    for name, shape, cls in listing:
        if name not in wanted:
            continue
        if cls not in _MAT_NUMERIC:
            raise InputError(path, f"variable {name!r} is a MATLAB {cls}; expected a numeric array "
                             "(MATLAB objects, structs and cells are not read)")
        check_bytes(path, shape, 8, what=f"variable {name!r}", max_bytes=max_bytes)
    present = [n for n, _, _ in listing if n in wanted]
    # scipy's compiled reader crashes the process on a damaged type code: check the tags first
    check_mat5(path, set(present), max_bytes=MAX_READ_BYTES if max_bytes is None else int(max_bytes))
    with decoding(path, "a MATLAB file"):
        data = sio.loadmat(path, squeeze_me=True, variable_names=present) if present else {}
    available = sorted(n for n, _, _ in listing)
    out = {}
    for ours, theirs in names.items():
        if theirs not in data:
            continue
        arr = np.asarray(data[theirs])
        if arr.dtype.kind not in "uifb":
            _not_numeric(path, theirs, arr.dtype)
        out[ours] = (arr.astype(np.float64), None)
    return out, available


# ---------------------------------------------------------------- common steps

def _broadcast(path, arrays):
    """Flatten all arrays to one point list; 1-D x and y may span a 2-D grid."""
    shapes = {k: a.shape for k, a in arrays.items()}
    others = [k for k in arrays if k not in ("x", "y")]
    target = shapes[others[0]] if others else shapes["x"]
    for k in others:
        if shapes[k] != target:
            raise InputError(path, f"{k!r} has shape {shapes[k]!r} but {others[0]!r} has "
                             f"{target!r}; expected arrays of one shape")
    x, y = arrays["x"], arrays["y"]
    if x.shape != target or y.shape != target:
        if len(target) == 2 and x.ndim == 1 and y.ndim == 1:
            if (y.size, x.size) == target:
                y, x = np.meshgrid(y, x, indexing="ij")
            elif (x.size, y.size) == target:
                x, y = np.meshgrid(x, y, indexing="ij")
            else:
                raise InputError(path, f"x ({x.size}) and y ({y.size}) do not span the grid "
                                 f"{target!r} of the data arrays")
        else:
            raise InputError(path, f"x {x.shape!r} and y {y.shape!r} do not match the data "
                             f"arrays {target!r}")
    arrays = dict(arrays, x=x, y=y)
    return {k: np.ravel(a) for k, a in arrays.items()}


def _strain_unit_of(path, name, unit):
    """The strain unit ("1", "%", "microstrain") a variable's units attribute states."""
    low = unit.lower()
    for ours, names in (("1", _UNITLESS), ("microstrain", _MICRO), ("%", _PERCENT)):
        if low in names:
            return ours
    raise InputError(path, f"variable {name!r} has units {unit!r}; expected a strain in '1', '%' or "
                     "'microstrain'")


def _convert_units(path, name, values, unit, coordinates, strain_unit=None):
    """Scale a variable that states its unit (lengths to the coordinates, strains to '1')."""
    if name in _STRAINS:
        stated = None if unit is None else _strain_unit_of(path, name, unit)
        if stated is not None and strain_unit is not None and stated != strain_unit:
            raise InputError(path, f"variable {name!r} has units {unit!r} but strain_unit is "
                             f"{strain_unit!r}; make them agree (or leave strain_unit out)")
        return values * STRAIN_UNITS[stated or strain_unit or "1"]
    if unit is None:
        return values
    low = unit.lower()
    if name in ("valid", "zncc"):
        if low in _UNITLESS:
            return values
        raise InputError(path, f"variable {name!r} has units {unit!r}; expected none")
    if coordinates == "mm":
        if low in _MM:
            return values
        if low in _M:
            return values * 1e3
    elif low in _PX:
        return values
    raise InputError(path, f"variable {name!r} has units {unit!r}, which is not "
                     f"{'a length (mm or m)' if coordinates == 'mm' else 'pixels'}; "
                     f"set coordinates= to match the file")


def _lattice(values):
    """(origin, spacing, count) when the values sit on an arithmetic lattice, else None."""
    v = np.sort(values)
    span = v[-1] - v[0]
    if span <= 0:
        return None
    breaks = np.flatnonzero(np.diff(v) > 1e-6 * span)
    starts = np.concatenate([[0], breaks + 1])
    centres = np.add.reduceat(v, starts) / np.diff(np.concatenate([starts, [v.size]]))
    if centres.size < 2:
        return None
    step = float(np.min(np.diff(centres)))
    k = (centres - centres[0]) / step
    if np.max(np.abs(k - np.rint(k))) > 1e-3:
        return None
    return float(centres[0]), step, int(np.rint(k[-1])) + 1


def _to_grid(path, data, n):
    """Grid order (y descending, x ascending) with holes, or None for scattered points."""
    x, y = data["x"], data["y"]
    lx, ly = _lattice(x), _lattice(y)
    if lx is None or ly is None:
        return None
    (x0, dx, nx), (y0, dy, ny) = lx, ly
    if nx * ny > max(4 * n, n + 1000):
        return None
    ix = np.rint((x - x0) / dx).astype(np.int64)
    iy = np.rint((y - y0) / dy).astype(np.int64)
    if np.max(np.abs(x - (x0 + ix * dx))) > 1e-3 * dx or np.max(np.abs(y - (y0 + iy * dy))) > 1e-3 * dy:
        return None
    flat = (ny - 1 - iy) * nx + ix
    order = np.argsort(flat, kind="stable")
    dup = np.flatnonzero(np.diff(flat[order]) == 0)
    if dup.size:
        k = order[dup[0]]
        raise InputError(path, f"two points share the position x={x[k]!r}, y={y[k]!r}; expected "
                         "one row per point")
    out = {}
    for key, values in data.items():
        full = np.full(nx * ny, np.nan)
        full[flat] = values
        out[key] = full
    rows, cols = np.divmod(np.arange(nx * ny), nx)
    out["x"] = x0 + cols * dx
    out["y"] = y0 + (ny - 1 - rows) * dy
    present = np.zeros(nx * ny, dtype=bool)
    present[flat] = True
    return out, (ny, nx), present


def read_dic_field(path, *, columns=None, coordinates="mm", y_axis=None, shear="engineering",
                   variables=None, min_zncc=None, attrs=None, max_bytes=None, strain_unit=None):
    """Read an exported displacement (or strain) field into the specimen frame.

    Parameters
    ----------
    path : str or os.PathLike
        ``.csv``/``.txt`` (a header row, then one row per point; comma,
        semicolon, tab or blank separated; ``#`` comments), ``.nc`` (NetCDF),
        ``.h5``/``.hdf5`` (HDF5 datasets, paths such as ``"group/u"``) or
        ``.mat`` (MATLAB, including version 7.3).
    columns : dict, optional
        Our names (x, y, z, u, v, exx, eyy, exy or gxy, valid, zncc) mapped
        to the file's column names (case-insensitive); unmapped names are
        looked up as themselves.
    coordinates : {"mm", "px"}
        Unit of coordinates and displacements in the file. Variables carrying
        a ``units`` attribute (NetCDF/HDF5) are checked, and metres converted.
    y_axis : {"up", "down"}, optional
        Direction of the file's y axis; default "up" for mm and "down" for px
        (image rows). With "down": ``y = -y_file``, ``v = -v_file``,
        ``gxy = -gxy_file``; exx and eyy unchanged.
    shear : {"engineering", "tensor"}
        Whether the shear column holds gamma_xy or eps_xy (= gamma_xy / 2),
        whatever its name.
    variables : dict, optional
        Like ``columns``, for NetCDF/HDF5/MATLAB variable names (default
        ``columns``).
    min_zncc : float, optional
        Points whose ``zncc`` column is below this are invalid.
    attrs : dict, optional
        Reporting quantities to attach (``subset``, ``step`` in px,
        ``pixel_size`` in mm per px).
    max_bytes : int, optional
        Largest set of arrays read into memory, bytes; default
        ``fusion.io._guard.MAX_READ_BYTES`` (2 GiB), checked from the file's headers
        before any data is read.
    strain_unit : {"1", "%", "microstrain"}, optional
        Unit of the strain columns, scaled to plain strain on reading. A variable's own
        ``units`` attribute (NetCDF/HDF5) is honoured and must agree; default "1".

    Returns
    -------
    DicField
        Regular grids (holes allowed) in grid order, else scattered points.
        A point is valid where u and v (or, for a strain table, the strains)
        are finite, its validity column is non-zero and its ZNCC passes.

    Raises
    ------
    InputError
        Missing, unreadable or corrupt file, unknown format, missing or
        non-numeric column, MATLAB objects, HDF5 links to other files, a
        truncated last row, more data than ``max_bytes``, shapes that do not
        match, infinite values, duplicate points; the message names the file
        and the column.
    """
    path = Path(path)
    if coordinates not in ("mm", "px"):
        raise ValueError(f"coordinates: expected 'mm' or 'px', got {coordinates!r}")
    if y_axis is None:
        y_axis = "up" if coordinates == "mm" else "down"
    if y_axis not in ("up", "down"):
        raise ValueError(f"y_axis: expected 'up' or 'down', got {y_axis!r}")
    if shear not in ("engineering", "tensor"):
        raise ValueError(f"shear: expected 'engineering' or 'tensor', got {shear!r}")
    if strain_unit is not None and strain_unit not in STRAIN_UNITS:
        raise ValueError(f"strain_unit: expected one of {sorted(STRAIN_UNITS)}, got {strain_unit!r}")
    user = _check_names("columns", columns)
    kind = _FORMATS.get(path.suffix.lower())
    if kind != "csv" and variables is not None:
        user = _check_names("variables", variables)
    input_file(path, "an exported correlation field")
    if kind is None:
        raise InputError(path, f"has the suffix {path.suffix!r}; expected one of {sorted(_FORMATS)}")
    names = {k: user.get(k, k) for k in FIELD_NAMES}
    if "exy" in user:
        names.pop("gxy")
    elif "gxy" in user:
        names.pop("exy")
    loader = {"csv": _load_csv, "netcdf": _load_netcdf, "hdf5": _load_hdf5, "mat": _load_mat}[kind]
    raw, available = loader(path, names, max_bytes)
    what = "column" if kind == "csv" else "variable"
    for ours in user:
        if ours not in raw:
            raise InputError(path, f"has no {what} {user[ours]!r} (mapped to {ours}); "
                             f"found {available!r}")
    if "exy" in raw and "gxy" in raw:
        raise InputError(path, f"has both {names['exy']!r} and {names['gxy']!r}; map the shear "
                         "column with columns={'gxy': ...} or {'exy': ...}")
    for req in ("x", "y"):
        if req not in raw:
            raise InputError(path, f"has no {what} {names[req]!r} for {req}; found {available!r} "
                             f"(map it with columns={{'{req}': ...}})")
    has_uv = "u" in raw and "v" in raw
    has_strain = "exx" in raw and "eyy" in raw and ("gxy" in raw or "exy" in raw)
    if not (has_uv or has_strain):
        raise InputError(path, f"needs displacement {what}s u and v, or strain {what}s exx, eyy "
                         f"and gxy (or exy); found {available!r}")
    arrays = {k: _convert_units(path, k, a, unit, coordinates, strain_unit) for k, (a, unit) in raw.items()}
    data = _broadcast(path, arrays)
    for k, a in data.items():
        if np.any(np.isinf(a)):
            i = int(np.flatnonzero(np.isinf(a))[0])
            raise InputError(path, f"{what} {names.get(k, k)!r} ({k}) holds an infinite value at "
                             f"point {i + 1}; expected finite numbers (NaN marks a missing value)")
    located = np.isfinite(data["x"]) & np.isfinite(data["y"])
    dropped = int(np.count_nonzero(~located))
    if not located.any():
        raise InputError(path, "holds no point with finite x and y coordinates")
    data = {k: a[located] for k, a in data.items()}
    n = data["x"].size
    if "exy" in data:
        data["gxy"] = data.pop("exy")  # the shear option, not the name, says what it holds
    if "gxy" in data and shear == "tensor":
        data["gxy"] = 2.0 * data["gxy"]
    if y_axis == "down":
        data["y"] = -data["y"]
        for k in ("v", "gxy"):
            if k in data:
                data[k] = -data[k]
    ok = np.ones(n, dtype=bool)
    if has_uv:
        ok &= np.isfinite(data["u"]) & np.isfinite(data["v"])
    else:
        ok &= np.isfinite(data["exx"]) & np.isfinite(data["eyy"]) & np.isfinite(data["gxy"])
    if not ok.any():
        need = "u and v" if has_uv else "exx, eyy and gxy"
        raise InputError(path, f"holds no measured point: {need} are NaN at all {n} points; "
                         "expected a measured field")
    if "valid" in data:
        ok &= np.nan_to_num(data["valid"], nan=0.0) != 0
    if min_zncc is not None:
        if "zncc" not in data:
            raise InputError(path, f"min_zncc is set but the file has no {what} {names['zncc']!r}")
        ok &= np.nan_to_num(data["zncc"], nan=-np.inf) >= float(min_zncc)
    data["valid"] = ok.astype(np.float64)
    grid = _to_grid(path, data, n)
    grid_shape = None
    if grid is not None:
        data, grid_shape, present = grid
        ok = present & (np.nan_to_num(data["valid"]) != 0)
    else:
        if np.unique(np.column_stack([data["x"], data["y"]]), axis=0).shape[0] < n:
            raise InputError(path, "two points share one position; expected one row per point")
    size = data["x"].size
    nan = np.full(size, np.nan)
    meta = dict(attrs or {})
    meta.update(source=str(path), format=kind, coordinates=coordinates, y_axis_in_file=y_axis,
                shear_in_file=shear, dropped_points=dropped,
                names={k: names[k] for k in raw})
    return DicField(
        x=data["x"], y=data["y"], u=data.get("u", nan), v=data.get("v", nan),
        exx=data.get("exx"), eyy=data.get("eyy"), gxy=data.get("gxy"), z=data.get("z"),
        valid=ok, grid_shape=grid_shape, units=coordinates, attrs=meta, zncc=data.get("zncc"))
