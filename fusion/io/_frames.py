"""Infrared frame stacks in open formats, opened lazily as (frames, rows, cols).

Formats: NumPy ``.npy`` (memory-mapped, never loaded whole, no pickles),
headerless raw binary (``.raw``/``.bin``/``.dat``, dtype, shape and byte order
from the config), multi-page TIFF (memory-mapped when uncompressed and
contiguous, else read page by page), an HDF5 dataset (memory-mapped when stored
contiguous and uncompressed, else sliced through h5py) and a NetCDF variable
(sliced through netCDF4). Everything is validated from headers and file sizes
before any data is read.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._guard import decoding, h5_dataset, hdf5_stays_inside, input_file, npy_header, quiet_logger

__all__ = ["FrameStack", "open_frames"]

_RAW = (".raw", ".bin", ".dat")
_TIFF = (".tif", ".tiff")
_HDF5 = (".h5", ".hdf5", ".he5")
_NETCDF = (".nc", ".nc4", ".cdf")
_BYTE_ORDERS = {"little": "<", "big": ">", "native": "="}


def _numeric(dtype, path, what="frames"):
    dt = np.dtype(dtype)
    if dt.kind not in "iuf":
        raise InputError(path, f"{what} must be numeric (int, uint or float), the file holds dtype {dt!s}")
    return dt


def _same_dtype(a, b):
    return np.dtype(a).newbyteorder("=") == np.dtype(b).newbyteorder("=")


class FrameStack:
    """A lazy ``(frames, rows, cols)`` stack in a file.

    Indexing reads only what is asked: ``stack[i]`` is one frame, ``stack[a:b]``
    a block of frames (an ``ndarray`` view of a memory map where the format allows,
    in native byte order), ``stack[a:b, r0:r1, c0:c1]`` a window. Pickling keeps only
    the path and the layout, so a stack travels to dask workers cheaply.

    Attributes
    ----------
    path : pathlib.Path
    shape : tuple of int
        (frames, rows, cols).
    dtype : numpy.dtype
        Values as stored (native byte order after reading).
    kind : str
        ``"npy"``, ``"raw"``, ``"tiff"``, ``"hdf5"`` or ``"netcdf"``.
    dataset : str or None
        HDF5 dataset path or NetCDF variable name.
    max_bytes : int or None
        Largest read one indexing call may return, bytes (None: no limit).
    """

    ndim = 3

    def __init__(self, path, kind, shape, dtype, *, dataset=None, mapping=None, max_bytes=None):
        self.path = Path(path)
        self.kind = kind
        self.shape = tuple(int(s) for s in shape)
        self._stored_dtype = np.dtype(dtype)
        self.dtype = self._stored_dtype.newbyteorder("=")
        self.dataset = dataset
        self.max_bytes = max_bytes
        self._mapping = mapping  # (offset, stored dtype, order) for memory-mappable layouts
        self._mm = None

    # -- basic protocol -----------------------------------------------------------------
    def __len__(self):
        return self.shape[0]

    def __repr__(self):
        return (f"FrameStack({str(self.path)!r}, kind={self.kind!r}, shape={self.shape!r}, "
                f"dtype={self.dtype.name!r})")

    @property
    def nbytes(self) -> int:
        return math.prod(self.shape) * self.dtype.itemsize

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_mm"] = None  # a memmap would pickle as a full copy of the data
        return state

    @property
    def memmap(self):
        """The whole stack as a read-only ``numpy.memmap`` (None when the layout does not allow it)."""
        if self._mapping is None:
            return None
        if self._mm is None:
            offset, stored, order = self._mapping
            self._mm = np.memmap(self.path, dtype=stored, mode="r", offset=offset, shape=self.shape,
                                 order=order)
        return self._mm

    def _result_shape(self, key):
        probe = np.lib.stride_tricks.as_strided(np.zeros(1, np.uint8), shape=self.shape, strides=(0, 0, 0))
        return probe[key].shape

    def __getitem__(self, key):
        if self.max_bytes is not None:
            size = math.prod(self._result_shape(key)) * self.dtype.itemsize
            if size > self.max_bytes:
                raise ValueError(f"reading {key!r} from {self.path} would take {size} bytes, more than "
                                 f"max_bytes={self.max_bytes!r}; read fewer frames at a time")
        mm = self.memmap
        if mm is not None:
            out = mm[key]
        else:
            # a page or chunk may be corrupt although the header was sound
            with decoding(self.path, f"a {self.kind} frame stack"):
                if self.kind == "tiff":
                    out = self._read_tiff(key)
                elif self.kind == "hdf5":
                    import h5py

                    with h5py.File(self.path, "r") as fh:
                        out = fh[self.dataset][key]
                else:
                    out = self._read_netcdf(key)
        out = np.asarray(out) if not isinstance(out, np.ndarray) else out
        if not out.dtype.isnative:
            out = out.astype(out.dtype.newbyteorder("="))
        return out

    def __array__(self, dtype=None, copy=None):
        out = np.array(self[:], copy=True)
        return out if dtype is None else out.astype(dtype)

    def _read_tiff(self, key):
        import tifffile

        key = key if isinstance(key, tuple) else (key,)
        first, rest = key[0], key[1:]
        if isinstance(first, (int, np.integer)):
            idx = [range(self.shape[0])[first]]
        else:
            idx = list(range(self.shape[0])[first])
        if not idx:
            data = np.empty((0,) + self.shape[1:], self._stored_dtype)
        else:
            with tifffile.TiffFile(self.path) as tif:
                data = tif.asarray(key=idx, series=0).reshape((len(idx),) + self.shape[1:])
        data = data[(slice(None),) + rest]
        return data[0] if isinstance(first, (int, np.integer)) else data

    def _read_netcdf(self, key):
        import netCDF4

        with netCDF4.Dataset(self.path, "r") as ds:
            var = ds.variables[self.dataset]
            var.set_auto_mask(False)
            data = np.asarray(var[key])
            fill = getattr(var, "_FillValue", None)
        if fill is not None and data.dtype.kind == "f":
            data = np.where(data == fill, np.nan, data).astype(data.dtype, copy=False)
        return data

    def to_dask(self, chunk_frames=None):
        """The stack as a dask array chunked along frames only (contiguous blocks of whole frames)."""
        import dask.array as da

        if chunk_frames is None:
            chunk_frames = max(1, (32 * 2**20) // max(1, self.nbytes // max(self.shape[0], 1)))
        return da.from_array(self, chunks=(int(chunk_frames), -1, -1), asarray=True, fancy=False)


# ------------------------------------------------------------------------------ openers
def _check_config(path, shape, dtype, want_shape, want_dtype):
    if want_dtype is not None and not _same_dtype(dtype, want_dtype):
        raise InputError(path, f"holds dtype {np.dtype(dtype)!s} but the config says {np.dtype(want_dtype)!s}")
    if want_shape is not None:
        ws = tuple(want_shape)
        if len(ws) != 3 or any(w is not None and int(w) != s for w, s in zip(ws, shape)):
            raise InputError(path, f"holds a stack of shape {tuple(shape)!r} (frames, rows, cols) but the "
                             f"config says {ws!r}")


def _need_3d(path, shape, what="stack"):
    if len(shape) != 3:
        raise InputError(path, f"expected a 3-D {what} (frames, rows, cols), found {len(shape)}-D shape "
                         f"{tuple(shape)!r}")
    if any(s <= 0 for s in shape):
        raise InputError(path, f"the {what} is empty: shape {tuple(shape)!r}")


def _open_npy(path, dtype, shape, max_bytes):
    shp, fortran, dt, offset = npy_header(path)
    _numeric(dt, path)
    _need_3d(path, shp)
    _check_config(path, shp, dt, shape, dtype)
    return FrameStack(path, "npy", shp, dt, mapping=(offset, dt, "F" if fortran else "C"), max_bytes=max_bytes)


def _open_raw(path, dtype, shape, byte_order, header_bytes, max_bytes):
    if dtype is None or shape is None:
        raise InputError(path, "a headerless raw stack needs dtype and shape (frames, rows, cols) in the config")
    if byte_order not in _BYTE_ORDERS:
        raise ValueError(f"byte_order must be one of {sorted(_BYTE_ORDERS)}, got {byte_order!r}")
    header_bytes = int(header_bytes)
    if header_bytes < 0:
        raise ValueError(f"header_bytes must be >= 0, got {header_bytes!r}")
    try:
        dt = np.dtype(dtype)
    except TypeError as e:
        raise InputError(path, f"dtype {dtype!r} is not a NumPy dtype (e.g. 'uint16', 'float32')") from e
    dt = _numeric(dt, path).newbyteorder(_BYTE_ORDERS[byte_order])
    shp = tuple(shape)
    if len(shp) != 3:
        raise InputError(path, f"shape must have 3 entries (frames, rows, cols), the config says {shp!r}")
    frame_bytes = int(shp[1]) * int(shp[2]) * dt.itemsize
    have = os.path.getsize(path) - header_bytes
    if have < 0 or frame_bytes <= 0:
        raise InputError(path, f"is {have + header_bytes} bytes, shorter than its {header_bytes}-byte header")
    if shp[0] is None:  # frames from the file size
        if have % frame_bytes:
            raise InputError(path, f"holds {have} data bytes, not a whole number of {shp[1]}x{shp[2]} "
                             f"{dt.name} frames ({frame_bytes} bytes each)")
        shp = (have // frame_bytes, int(shp[1]), int(shp[2]))
    shp = tuple(int(s) for s in shp)
    _need_3d(path, shp)
    need = math.prod(shp) * dt.itemsize
    if have != need:
        hint = (f"; it holds {have // frame_bytes} frames of that size" if have % frame_bytes == 0 else
                "; check rows, cols, dtype and header_bytes")
        raise InputError(path, f"holds {have} data bytes after a {header_bytes}-byte header, but shape "
                         f"{shp!r} of {dt.name} needs {need}{hint}")
    stack = FrameStack(path, "raw", shp, dt, mapping=(header_bytes, dt, "C"), max_bytes=max_bytes)
    _check_byte_order(path, stack.memmap[:4], byte_order)
    return stack


def _roughness(values):
    """Median absolute difference of neighbouring values (along columns and frames)."""
    with np.errstate(all="ignore"):
        v = np.asarray(values, dtype=np.float64)
        d = [np.abs(np.diff(v, axis=-1)).ravel()]
        if v.shape[0] > 1:
            d.append(np.abs(np.diff(v, axis=0)).ravel())
        d = np.concatenate(d)
    d[~np.isfinite(d)] = np.inf
    return float(np.median(d)) if d.size else 0.0


def _check_byte_order(path, sample, byte_order):
    """Refuse a raw stack that reads far smoother in the other byte order.

    Camera frames vary slowly from pixel to pixel and frame to frame; read in the wrong
    byte order, the noisy low byte becomes the high byte and neighbouring values differ
    by hundreds of counts (floats turn into huge numbers or NaN). A factor of 50 between
    the two readings leaves no doubt; noise-only data (no preferred order) never trips it.
    """
    if sample.dtype.itemsize == 1 or sample.size < 2:
        return
    if sample.ndim == 3:
        # whole rows, evenly spread: the median over a few dozen of them is as telling
        sample = sample[:, ::max(1, sample.shape[1] // 64)]
    as_given = _roughness(sample)
    other = _roughness(sample.view(sample.dtype.newbyteorder("S")))
    if np.isfinite(other) and other > 0 and as_given > 50 * other:
        flip = {"little": "big", "big": "little"}.get(byte_order, "the other order")
        raise InputError(path, f"looks byte-swapped: read as byte_order={byte_order!r}, neighbouring "
                         f"values differ by a median of {as_given:.3g}, read as {flip!r} by "
                         f"{other:.3g}; set byte_order = {flip!r} if the camera wrote {flip}-endian data")


#: Frames up to this size (decoded bytes) are decoded once when a TIFF stack is opened (its last
#: page, a check for truncation); larger ones only when read, after the memory budget is checked.
_DECODE_CHECK_BYTES = 16 << 20


def _open_tiff(path, dtype, shape, max_bytes):
    import tifffile

    with quiet_logger("tifffile"), decoding(path, "a TIFF stack"):
        with tifffile.TiffFile(path) as tif:
            series = tif.series[0]
            shp, dt, axes = tuple(series.shape), series.dtype, str(series.axes)
            pages = len(tif.pages)
    _numeric(dt, path)
    if "S" in axes:
        raise InputError(path, f"holds multi-sample (colour) pages, axes {axes!r}; expected one grey "
                         "frame per page")
    _need_3d(path, shp, "multi-page TIFF stack")
    if 1 < pages < shp[0]:
        # the metadata promise more frames than pages were found: the tail of the file is
        # missing (one page for many frames is the legitimate layout of very large stacks)
        raise InputError(path, f"has {pages} pages but its metadata promise {shp[0]} frames: the file "
                         "is truncated (copy it again)")
    _check_config(path, shp, dt, shape, dtype)
    mapping = None
    try:
        with quiet_logger("tifffile"):
            mm = tifffile.memmap(path, mode="r")
        if mm.shape == shp and int(mm.offset) + mm.nbytes <= os.path.getsize(path):
            mapping = (int(mm.offset), mm.dtype, "C")
        del mm
    except Exception:  # noqa: BLE001 - compressed or scattered pages: read page by page
        mapping = None
    if mapping is None and shp[1] * shp[2] * dt.itemsize > _DECODE_CHECK_BYTES:
        # too large to decode before the memory budget is checked: the last page's byte
        # ranges, from the header, tell a truncated copy
        with quiet_logger("tifffile"), decoding(path, "a TIFF stack (its last page is unreadable: truncated?)"):
            with tifffile.TiffFile(path) as tif:
                page = tif.series[0].pages[-1]
                ends = [int(o) + int(n) for o, n in zip(page.dataoffsets, page.databytecounts)]
        if not ends or max(ends) > os.path.getsize(path):
            raise InputError(path, "its last page points past the end of the file: the file is truncated "
                             "(copy it again)")
    elif mapping is None:
        # the pages of a truncated copy point past the end: reading the last one tells
        with quiet_logger("tifffile"), decoding(path, "a TIFF stack (its last page is unreadable: truncated?)"):
            with tifffile.TiffFile(path) as tif:
                last = tif.asarray(key=shp[0] - 1, series=0)
        if math.prod(last.shape) != shp[1] * shp[2]:
            raise InputError(path, f"its last page holds {last.shape!r}, not a {shp[1]}x{shp[2]} frame: "
                             "the file is truncated or its pages differ")
    return FrameStack(path, "tiff", shp, dt, mapping=mapping, max_bytes=max_bytes)


def _candidates_h5(fh):
    found = []

    def visit(name, obj):
        if hasattr(obj, "shape") and len(obj.shape) == 3 and obj.dtype.kind in "iuf":
            found.append(name)
    fh.visititems(visit)
    return found


def _open_hdf5(path, dtype, shape, dataset, max_bytes):
    import h5py

    with decoding(path, "HDF5"):
        fh = h5py.File(path, "r")
    with fh, decoding(path, "an HDF5 frame stack"):
        if dataset is None:
            cands = _candidates_h5(fh)
            if len(cands) != 1:
                raise InputError(path, f"name the frame dataset with 'dataset'; 3-D numeric datasets "
                                 f"found: {cands!r}")
            dataset = cands[0]
        d = h5_dataset(path, fh, dataset)
        if d is None or not hasattr(d, "shape"):
            raise InputError(path, f"has no dataset {dataset!r}; 3-D numeric datasets: {_candidates_h5(fh)!r}")
        shp, dt = tuple(d.shape), d.dtype
        _numeric(dt, path, f"dataset {dataset!r}")
        _need_3d(path, shp, f"dataset {dataset!r}")
        _check_config(path, shp, dt, shape, dtype)
        mapping = None
        if d.chunks is None and d.compression is None and not d.is_virtual:
            off = d.id.get_offset()
            if off is not None and int(off) + math.prod(shp) * dt.itemsize <= os.path.getsize(path):
                mapping = (int(off), dt, "C")
    return FrameStack(path, "hdf5", shp, dt, dataset=dataset, mapping=mapping, max_bytes=max_bytes)


def _nc_kind(var):
    """dtype kind of a netCDF4 variable ("U" for variable-length strings, whose dtype is ``str``)."""
    return "U" if var.dtype is str else np.dtype(var.dtype).kind


def _open_netcdf(path, dtype, shape, dataset, max_bytes):
    import netCDF4

    hdf5_stays_inside(path, "NetCDF")
    with decoding(path, "NetCDF"):
        ds = netCDF4.Dataset(path, "r")
    with ds, decoding(path, "a NetCDF frame stack"):
        cands = [k for k, v in ds.variables.items() if v.ndim == 3 and _nc_kind(v) in "iuf"]
        if dataset is None:
            if len(cands) != 1:
                raise InputError(path, f"name the frame variable with 'dataset'; 3-D numeric variables "
                                 f"found: {cands!r}")
            dataset = cands[0]
        if dataset not in ds.variables:
            raise InputError(path, f"has no variable {dataset!r}; 3-D numeric variables: {cands!r}")
        var = ds.variables[dataset]
        shp = tuple(var.shape)
        dt = np.dtype(var.dtype) if not hasattr(var, "scale_factor") else np.dtype(np.float64)
        _numeric(dt, path, f"variable {dataset!r}")
        _need_3d(path, shp, f"variable {dataset!r}")
        _check_config(path, shp, dt, shape, dtype)
    return FrameStack(path, "netcdf", shp, dt, dataset=dataset, max_bytes=max_bytes)


def open_frames(path, *, dtype=None, shape=None, byte_order="little", dataset=None, header_bytes=0,
                max_bytes=None) -> FrameStack:
    """Open an infrared frame stack lazily.

    Parameters
    ----------
    path : str or os.PathLike
        ``.npy``, raw binary (``.raw``, ``.bin``, ``.dat`` or any other name when
        ``dtype`` and ``shape`` are given), ``.tif``/``.tiff``, ``.h5``/``.hdf5`` or
        ``.nc``.
    dtype : str or numpy.dtype, optional
        Required for raw files; for the other formats a check (the stored dtype
        must match, byte order aside).
    shape : sequence of 3 int, optional
        (frames, rows, cols). Required for raw files, where frames may be None (taken
        from the file size); elsewhere a check, None entries matching anything.
    byte_order : {"little", "big", "native"}
        Byte order of raw files.
    dataset : str, optional
        HDF5 dataset path or NetCDF variable; found automatically when the file holds
        exactly one 3-D numeric one.
    header_bytes : int
        Bytes to skip at the start of a raw file.
    max_bytes : int, optional
        Largest read a single indexing call may return (a guard for large stacks).

    Returns
    -------
    FrameStack
        Lazy (frames, rows, cols) stack.

    Raises
    ------
    InputError
        Missing or unreadable file, non-numeric or non-3-D data, a file size or header
        that disagrees with the shape, or a stack that disagrees with the config; the
        message names the file and what was expected.

    Notes
    -----
    ``.npy`` headers are parsed without unpickling (object arrays are refused). Raw
    files are checked byte for byte: ``size == header_bytes + frames * rows * cols *
    itemsize``. Memory-mapped layouts are read through the OS page cache, so a stack
    larger than memory works; the lock-in releases each block after use.

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "s.npy")
    >>> np.save(p, np.zeros((5, 4, 3), np.uint16))
    >>> st = open_frames(p)
    >>> st.shape, len(st), st[1:3].shape
    ((5, 4, 3), 5, (2, 4, 3))
    """
    path = input_file(path, "a frame stack (.npy, .tif, .h5, .nc or raw)", missing="no such frame file")
    if max_bytes is not None:
        max_bytes = int(max_bytes)
        if max_bytes <= 0:
            raise ValueError(f"max_bytes must be a positive number of bytes, got {max_bytes!r}")
    suffix = path.suffix.lower()
    if suffix == ".npy":
        return _open_npy(path, dtype, shape, max_bytes)
    if suffix in _TIFF:
        return _open_tiff(path, dtype, shape, max_bytes)
    if suffix in _HDF5:
        return _open_hdf5(path, dtype, shape, dataset, max_bytes)
    if suffix in _NETCDF:
        return _open_netcdf(path, dtype, shape, dataset, max_bytes)
    if suffix in _RAW or (dtype is not None and shape is not None):
        return _open_raw(path, dtype, shape, byte_order, header_bytes, max_bytes)
    raise InputError(path, f"unknown frame format {suffix!r}: expected .npy, .tif/.tiff, .h5/.hdf5, .nc, "
                     "or a raw file with dtype and shape in the config")
