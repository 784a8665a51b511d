"""A structural check of MATLAB level-5 MAT-files before scipy.io.loadmat reads them.

scipy's compiled MAT-file reader trusts the data-type code of each numeric data
element and looks it up in a fixed table: a damaged code (one flipped byte in a
copy) makes it read outside that table and crash the process (found by the
fault-injection tests). This module walks the element tags of the variables we
are about to read and refuses anything the reader cannot handle, so a damaged
file becomes an :class:`~fusion.errors.InputError` instead of a crash.

References
----------
The MathWorks, *MAT-File Format* (MATLAB documentation, level 5 MAT-files):
128-byte header with the endian indicator "IM"/"MI" at bytes 126-127; data
elements of an 8-byte tag (type, byte count) or a 4-byte "small element" tag;
miMATRIX (14) holding array flags, dimensions, name and the real/imaginary parts;
miCOMPRESSED (15) holding one zlib-compressed element.
"""

from __future__ import annotations

import struct
import zlib

from ..errors import InputError
from ._guard import clip

__all__ = ["check_mat5"]

_MI_MATRIX, _MI_COMPRESSED = 14, 15
# miINT8 .. miDOUBLE, miINT64, miUINT64: the codes a numeric part may carry
_NUMERIC_TYPES = {1, 2, 3, 4, 5, 6, 7, 9, 12, 13}
# mxDOUBLE_CLASS .. mxUINT64_CLASS (logical arrays are uint8 with a flag)
_NUMERIC_CLASSES = set(range(6, 16))


def _tag(buf, pos, end, order):
    """(type, byte count, data start, next element) of the element at ``pos``."""
    if pos + 8 > end:
        raise ValueError("an element tag runs past the end of its container")
    mdtype, nbytes = struct.unpack_from(order + "II", buf, pos)
    if mdtype >> 16:  # small data element: count in the upper half, data in the tag
        return mdtype & 0xFFFF, mdtype >> 16, pos + 4, pos + 8
    start = pos + 8
    if start + nbytes > end:
        raise ValueError(f"an element of {nbytes} bytes runs past the end of its container")
    return mdtype, nbytes, start, start + ((nbytes + 7) // 8) * 8


def _matrix(buf, start, end, order, wanted, path):
    flags_t, _, flags_at, pos = _tag(buf, start, end, order)
    if flags_t != 6 or flags_at + 4 > end:
        raise ValueError("array flags are not miUINT32")
    flags = struct.unpack_from(order + "I", buf, flags_at)[0]
    cls, is_complex = flags & 0xFF, bool(flags & 0x800)
    dims_t, _, _, pos = _tag(buf, pos, end, order)
    if dims_t != 5:
        raise ValueError("array dimensions are not miINT32")
    name_t, name_n, name_at, pos = _tag(buf, pos, end, order)
    if name_t != 1:
        raise ValueError("array name is not miINT8")
    name = bytes(buf[name_at:name_at + name_n]).decode("ascii", "replace")
    if name not in wanted or cls not in _NUMERIC_CLASSES:
        return  # not read (other names), or refused by class before reading
    for part in ("real", "imaginary")[: 2 if is_complex else 1]:
        mdtype, _, _, pos = _tag(buf, pos, end, order)
        if mdtype not in _NUMERIC_TYPES:
            raise InputError(path, f"variable {name!r} is damaged: its {part} part has data type code "
                             f"{mdtype}, not a numeric MAT-file type (copy the file again)")


def check_mat5(path, wanted, *, max_bytes: int):
    """Walk the data elements of a level-5 MAT-file and refuse damaged numeric variables.

    Parameters
    ----------
    path : path
        The MAT-file (version 5/6/7; version 7.3 files are HDF5 and not handled here).
    wanted : set of str
        Names of the variables that will be read.
    max_bytes : int
        Largest decompressed element accepted, bytes (a compressed element is inflated
        only up to this size: a zip bomb stops there).

    Raises
    ------
    InputError
        A truncated element, a damaged tag or a numeric part with an unknown type code.
    """
    with open(path, "rb") as fh:
        buf = fh.read()
    if len(buf) < 128:
        raise InputError(path, "is shorter than the 128-byte MAT-file header")
    order = {b"IM": "<", b"MI": ">"}.get(buf[126:128])
    if order is None:
        raise InputError(path, "has no MAT-file endian indicator ('IM' or 'MI' at byte 126)")
    pos = 128
    try:
        while pos + 8 <= len(buf):
            mdtype, nbytes, start, nxt = _tag(buf, pos, len(buf), order)
            if mdtype == _MI_COMPRESSED:
                inflater = zlib.decompressobj()
                inner = inflater.decompress(buf[start:start + nbytes], max_bytes + 8)
                if len(inner) > max_bytes:
                    raise InputError(path, f"holds a compressed variable larger than the read limit of "
                                     f"{max_bytes / 2**20:.0f} MiB")
                itype, _, istart, _ = _tag(inner, 0, len(inner), order)
                if itype == _MI_MATRIX:
                    _matrix(inner, istart, len(inner), order, wanted, path)
                nxt = start + nbytes  # compressed elements are not padded
            elif mdtype == _MI_MATRIX:
                _matrix(buf, start, start + nbytes, order, wanted, path)
            pos = nxt
    except InputError:  # a ValueError too: already says what is wrong
        raise
    except (ValueError, struct.error, zlib.error) as e:
        raise InputError(path, f"is a damaged MAT-file ({clip(e)})") from e
