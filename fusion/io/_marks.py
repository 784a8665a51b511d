"""Which product of fusion a file is: a mark written into NetCDF attributes and PNG text chunks.

A command that replaces its own earlier output without asking (``fusion plan``) must never
replace a file it did not make; it writes :data:`MARK_KEY` into every file and replaces a file
only when :func:`product_mark` reads its own mark back.
"""

from __future__ import annotations

import struct
from pathlib import Path

__all__ = ["MARK_KEY", "product_mark"]

#: Name of the NetCDF global attribute and of the PNG text keyword holding the mark.
MARK_KEY = "fusion_product"

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
# text chunks come before the image data in the files we write; stop looking after this much
_PNG_HEAD_LIMIT = 1 << 20


def _png_text(path: Path) -> dict:
    """The tEXt chunks before the first IDAT of a PNG file (W3C PNG specification, 11.3.4.3)."""
    out = {}
    with open(path, "rb") as f:
        if f.read(8) != _PNG_SIGNATURE:
            return out
        read = 8
        while read < _PNG_HEAD_LIMIT:
            head = f.read(8)
            if len(head) < 8:
                break
            length, kind = struct.unpack(">I4s", head)
            if kind == b"IDAT" or length > _PNG_HEAD_LIMIT:
                break
            body = f.read(length)
            f.read(4)  # CRC
            read += 12 + length
            if kind == b"tEXt" and b"\x00" in body:
                key, value = body.split(b"\x00", 1)
                out[key.decode("latin-1")] = value.decode("latin-1")
    return out


def product_mark(path) -> str | None:
    """The fusion product a file says it is (``"plan"``...), or None for any other file.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.nc`` file (global attribute :data:`MARK_KEY`) or a ``.png`` file (text chunk
        :data:`MARK_KEY`).

    Returns
    -------
    str or None
        None for a missing file, a symbolic link, another suffix, a file that cannot be
        read as its suffix says, or a file without the mark: none of them is fusion's to
        replace.
    """
    p = Path(path)
    if p.is_symlink() or not p.is_file():
        return None
    suffix = p.suffix.lower()
    try:
        if suffix == ".png":
            value = _png_text(p).get(MARK_KEY)
        elif suffix == ".nc":
            import netCDF4

            with netCDF4.Dataset(p, "r") as nc:
                value = nc.__dict__.get(MARK_KEY)
        else:
            return None
    except (OSError, RuntimeError, ValueError, struct.error):
        # unreadable as what its name says: certainly not a file we wrote
        return None
    return str(value) if value else None
