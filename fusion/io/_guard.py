"""Checks every reader makes before it allocates or decodes.

Files from laboratory PCs arrive truncated, half-copied, mislabelled or not
files at all. The helpers here turn each of those into an
:class:`~fusion.errors.InputError` that names the file and says what was
expected, before any large allocation:

* :func:`input_file` — the path is a readable regular file (not a folder, pipe
  or device, not unreadable);
* :func:`check_bytes` — an array a header or config claims fits the read limit;
* :func:`npy_header` — a ``.npy`` header parsed without unpickling and checked
  against the file size;
* :func:`h5_dataset` — an HDF5 object reached without leaving the file (no
  external links, external raw storage or virtual datasets) and fully written;
* :func:`decoding` — any exception a third-party decoder raises on corrupt bytes
  becomes an ``InputError`` naming the file (decoders fed fuzzed bytes raise
  IndexError, KeyError, struct.error... not only their documented errors).
"""

from __future__ import annotations

import contextlib
import logging
import math
import os
import stat
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["MAX_READ_BYTES", "QUOTE_CHARS", "input_file", "small_text", "check_bytes", "npy_header", "h5_dataset",
           "hdf5_stays_inside", "decoding", "quiet_logger", "text_rows_warning", "clip", "quote"]

#: Largest array a reader materialises in memory at once, bytes (2 GiB, the default
#: ``[compute] memory_budget``). Frame stacks are memory-mapped or streamed and are not
#: bound by it; maps, correlation fields and images are.
MAX_READ_BYTES = 2 * 1024**3
#: Most characters of a file's content (a header row, a parser's complaint) quoted in a message.
QUOTE_CHARS = 80


def clip(text, limit: int = QUOTE_CHARS) -> str:
    """``text`` cut to ``limit`` characters, saying how long it was (messages quote files)."""
    text = str(text)
    if len(text) <= limit:
        return text
    return f"{text[:limit]}... ({len(text)} characters)"


def quote(value, limit: int = QUOTE_CHARS) -> str:
    """``repr(value)`` cut to ``limit`` characters (see :func:`clip`)."""
    return clip(repr(value), limit)


def input_file(path, what: str, *, missing: str = "does not exist") -> Path:
    """``path`` as a :class:`~pathlib.Path` after checking it is a readable regular file.

    Parameters
    ----------
    path : str or os.PathLike
    what : str
        What the file should be, for the message (e.g. ``"a frame stack (.npy, .tif...)"``).
    missing : str
        Start of the message for a path that does not exist.

    Raises
    ------
    InputError
        Missing, a folder, a pipe/device/socket (reading one would block or never end),
        or unreadable (permissions).
    """
    path = Path(path)
    try:
        st = path.stat()
    except FileNotFoundError:
        raise InputError(path, f"{missing} (expected {what})") from None
    except PermissionError:
        raise InputError(path, f"cannot be reached: permission denied (expected {what})") from None
    except OSError as e:
        raise InputError(path, f"cannot be reached ({e.strerror or e}); expected {what}") from e
    if stat.S_ISDIR(st.st_mode):
        raise InputError(path, f"is a folder; expected {what}")
    if not stat.S_ISREG(st.st_mode):
        raise InputError(path, f"is not a regular file (a pipe, device or socket); expected {what}")
    try:
        # open once: permissions, and files a network share lists but cannot serve
        with open(path, "rb") as fh:
            if st.st_size == 0 and fh.read(1):
                # a size of 0 with content: a file the system makes up when read (/proc, /sys),
                # such as a process's environment; never read, never quoted
                raise InputError(path, f"is a file of the operating system (no size, content made up when "
                                 f"read, as in /proc); expected {what}")
    except PermissionError:
        raise InputError(path, f"cannot be read: permission denied (expected {what})") from None
    except OSError as e:
        raise InputError(path, f"cannot be read ({e.strerror or e}); expected {what}") from e
    return path


def small_text(path, what: str, *, kind: str) -> tuple[Path, str]:
    """The checked path and the text of a small text input (a table, one frame's grid).

    ``what`` names the input in messages; ``kind`` is the text a file of that kind holds
    (too large or not text: :class:`~fusion.errors.InputError` saying so).
    """
    path = input_file(path, what)
    size = path.stat().st_size
    if size > MAX_READ_BYTES // 4:
        raise InputError(path, f"is {size / 2**20:.0f} MiB, more than {kind} may have; expected {what}")
    try:
        return path, path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as e:
        raise InputError(path, f"is not a text file (expected {what})") from e


def check_bytes(path, shape, itemsize: int, *, what: str, max_bytes=None) -> int:
    """Bytes an array of ``shape`` needs; refuse more than ``max_bytes`` (default :data:`MAX_READ_BYTES`).

    Python integers: a forged header cannot overflow the product.
    """
    limit = MAX_READ_BYTES if max_bytes is None else int(max_bytes)
    dims = [int(s) for s in shape]
    if any(s < 0 for s in dims):
        raise InputError(path, f"{what} has a negative size in its shape {tuple(dims)!r}")
    need = math.prod(dims) * int(itemsize)
    if need > limit:
        raise InputError(path, f"{what} of shape {tuple(dims)!r} would take {need / 2**20:.0f} MiB in "
                         f"memory, more than the read limit of {limit / 2**20:.0f} MiB; the header may "
                         "be corrupt, or crop/subsample the data (max_bytes raises the limit)")
    return need


def npy_header(path):
    """Shape, Fortran flag, dtype and data offset of a ``.npy`` file, checked against its size.

    The header is a Python literal parsed by NumPy's own safe parser (no pickles, no code);
    object dtypes are refused.
    """
    fmt = np.lib.format
    try:
        with open(path, "rb") as fh:
            version = fmt.read_magic(fh)
            reader = {(1, 0): fmt.read_array_header_1_0, (2, 0): fmt.read_array_header_2_0}.get(version)
            if reader is None:
                raise ValueError(f"unsupported .npy version {version!r}")
            shape, fortran, dtype = reader(fh)
            offset = fh.tell()
    except Exception as e:  # noqa: BLE001 - a corrupt header raises ValueError, TokenError, MemoryError...
        text = str(e).strip() or type(e).__name__
        cause = ": cut short before the end of its header (an interrupted copy?)" if "EOF" in text else ""
        raise InputError(path, f"not a valid .npy file ({text}){cause}") from e
    if dtype.hasobject:
        raise InputError(path, "holds Python objects; only numeric arrays are read (pickles are refused)")
    if any(int(s) < 0 for s in shape):
        raise InputError(path, f"not a valid .npy file (negative size in shape {tuple(shape)!r})")
    need = offset + math.prod(int(s) for s in shape) * dtype.itemsize
    have = os.path.getsize(path)
    if have < need:
        raise InputError(path, f"is truncated: the header promises {need} bytes, the file has {have} (an "
                         "interrupted copy, or read while still being written?)")
    return tuple(int(s) for s in shape), bool(fortran), dtype, offset


def h5_dataset(path, fh, name: str, *, what: str = "dataset"):
    """The dataset ``name`` of the open HDF5 file ``fh``, refusing what leaves the file.

    External links, external raw storage and virtual datasets make HDF5 read other files
    (any file the process can read); they are refused. A dataset whose storage was not
    written to the end (a half-copied or aborted file) is refused too: HDF5 would
    silently return fill values for the missing part.

    Returns None when ``name`` does not exist (so callers can list what does).
    """
    import h5py

    parts = [p for p in str(name).split("/") if p]
    where = fh
    for i, part in enumerate(parts):
        prefix = "/".join(parts[: i + 1])
        link = where.get(part, default=None, getlink=True)
        if link is None:
            return None
        if isinstance(link, h5py.ExternalLink):
            raise InputError(path, f"{what} {name!r}: {prefix!r} is an external link to "
                             f"{link.filename!r}; links to other files are refused (copy the data in)")
        try:
            where = where[part]
        except (KeyError, OSError) as e:
            raise InputError(path, f"{what} {name!r}: {prefix!r} is a broken link ({e})") from e
    obj = where
    if not isinstance(obj, h5py.Dataset):
        return obj
    if obj.external:
        raise InputError(path, f"{what} {name!r} keeps its data in external files "
                         f"{[str(e[0]) for e in obj.external]!r}; refused (store the data in the file)")
    if obj.is_virtual:
        raise InputError(path, f"{what} {name!r} is a virtual dataset mapping other files; refused "
                         "(store the data in the file)")
    _check_written(path, obj, name, what)
    return obj


_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def hdf5_stays_inside(path, what: str = "HDF5") -> None:
    """Refuse an HDF5-based file (NetCDF-4 is one) with any link or storage in another file.

    The netCDF library follows HDF5 external links and reads external or virtual datasets
    like its own variables; a NetCDF-4 file can therefore make us read any file. NetCDF-3
    files (no HDF5 signature) cannot hold links and pass unchecked.
    """
    with open(path, "rb") as fh:
        heads = [(fh.seek(o), fh.read(8))[1] for o in (0, 512, 1024, 2048)]
    if _HDF5_SIGNATURE not in heads:
        return
    import h5py

    with decoding(path, what):
        fh = h5py.File(path, "r")
    with fh, decoding(path, what):
        groups, datasets = [fh], []
        # visititems walks hard links once per object (cycles included) and never follows
        # soft or external links: the links themselves are looked at group by group
        fh.visititems(lambda n, o: groups.append(o) if isinstance(o, h5py.Group) else datasets.append((n, o)))
        for g in groups:
            for name in g:
                link = g.get(name, getlink=True)
                if isinstance(link, h5py.ExternalLink):
                    where = f"{g.name.rstrip('/')}/{name}"
                    raise InputError(path, f"{where!r} is an external link to {link.filename!r}; links to "
                                     "other files are refused (copy the data in)")
        for name, d in datasets:
            if isinstance(d, h5py.Dataset) and (d.external or d.is_virtual):
                raise InputError(path, f"{name!r} keeps its data in other files (external or virtual "
                                 "storage); refused (store the data in the file)")


def _check_written(path, d, name, what):
    size = math.prod(d.shape) if d.shape else 1
    if size == 0:
        return
    if d.chunks is None:
        stored = d.id.get_storage_size()
        if stored < size * d.dtype.itemsize:
            raise InputError(path, f"{what} {name!r} stores {stored} of its {size * d.dtype.itemsize} "
                             "bytes: the file was not written to the end")
        return
    expected = math.prod(math.ceil(s / c) for s, c in zip(d.shape, d.chunks))
    stored = d.id.get_num_chunks()
    if stored < expected:
        raise InputError(path, f"{what} {name!r} holds {stored} of its {expected} chunks: the file "
                         "was not written to the end (unwritten chunks would read as fill values)")


@contextlib.contextmanager
def decoding(path, what: str):
    """Turn whatever a decoder raises on corrupt bytes into an InputError naming ``path``."""
    try:
        yield
    except InputError:
        raise
    except MemoryError as e:
        raise InputError(path, f"decoding it as {what} needs more memory than is available; the "
                         "file may be corrupt or larger than expected") from e
    except Exception as e:  # noqa: BLE001 - corrupt input makes decoders raise anything
        text = clip(str(e).strip() or type(e).__name__)      # a decoder may quote the file
        # the decoder's words rarely say why: a file of the expected kind that does not decode
        # was most often cut short by an interrupted copy
        cause = "" if "truncated" in what else (f": probably cut short or damaged (an interrupted copy or "
                                                 f"transfer?), or not {what} at all")
        raise InputError(path, f"cannot be read as {what} ({text}){cause}") from e


@contextlib.contextmanager
def quiet_logger(name: str, level=logging.CRITICAL):
    """Raise a library logger's level while it parses a file we report on ourselves."""
    logger = logging.getLogger(name)
    old = logger.level
    logger.setLevel(level)
    try:
        yield
    finally:
        logger.setLevel(old)


@contextlib.contextmanager
def text_rows_warning():
    """Silence numpy.loadtxt's "input contained no data" warning (the caller reports it)."""
    import warnings

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"loadtxt: input contained no data", category=UserWarning)
        yield
