"""Tables that accompany a sequence: frame times per file, and the load at each speckle image.

Both are delimited text tables (comma, semicolon, tab or spaces; ``#`` comments) whose
columns carry our own names, or the file's names mapped onto ours with a ``columns``
table (``{time = "t [ms]", file = "Filename"}``). A row belongs to a file of the
sequence by its file name (with or without the suffix), by its frame number (the number
in the file name), or, when the table names neither, by its position.
"""

from __future__ import annotations

import csv
import io
import math

import numpy as np

from ..errors import InputError
from ._guard import small_text
from ._sequences import SequenceFiles
from ._signals import read_frame_times
from ._textgrids import text_delimiter

__all__ = ["read_sequence_times", "read_load_log", "read_table"]


def _number(text, decimal):
    return float(text.strip().replace(",", ".") if decimal == "," else text.strip())


def read_table(path, *, decimal=".", what="a table"):
    """A small delimited text table: its header names (None when the first row is numbers) and rows."""
    path, text = small_text(path, what, kind="a text table")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(path, f"is empty; expected {what}")
    delim = text_delimiter(lines[0], decimal)
    if delim is None:
        rows = [ln.split() for ln in lines]
    else:
        rows = [[c.strip() for c in r] for r in csv.reader(io.StringIO("\n".join(lines)), delimiter=delim)]
    rows = [r[:-1] if r and r[-1] == "" else r for r in rows]
    try:
        [_number(c, decimal) for c in rows[0]]
        header = None
    except ValueError:
        header, rows = [c.strip().strip('"') for c in rows[0]], rows[1:]
    width = len(header) if header is not None else len(rows[0]) if rows else 0
    for k, r in enumerate(rows):
        if len(r) != width:
            line = k + (2 if header is not None else 1)
            raise InputError(path, f"data row {line} has {len(r)} fields, the {'header' if header else 'first row'} "
                             f"{width}: every row needs the same columns")
    if not rows:
        raise InputError(path, f"has a header but no data rows; expected {what}")
    return header, rows


def _find(path, header, columns, role, *, required):
    """Index of our column ``role`` in the header (mapped by ``columns``), None when absent."""
    want = (columns or {}).get(role, role)
    low = [h.lower() for h in header]
    if want.lower() in low:
        return low.index(want.lower())
    if required or role in (columns or {}):
        mapped = f" (mapped from {role!r} by columns)" if role in (columns or {}) else ""
        raise InputError(path, f"has no column {want!r}{mapped}; its columns are {header!r}")
    return None


def _floats(path, rows, col, name, decimal, header_rows):
    out = np.empty(len(rows))
    for k, r in enumerate(rows):
        try:
            out[k] = _number(r[col], decimal)
        except ValueError as e:
            raise InputError(path, f"data row {k + header_rows + 1}, column {name!r}: expected a number, got "
                             f"{r[col]!r}" + (" (decimal commas? set decimal = \",\")" if "," in r[col] else "")) from e
        if not math.isfinite(out[k]):
            raise InputError(path, f"data row {k + header_rows + 1}, column {name!r}: {r[col]!r} is not a "
                             "finite number")
    return out


def _rows_per_file(path, seq: SequenceFiles, header, rows, name_col, index_col, what):
    """For each file of ``seq``, its row of the table (by name, by frame number or by position)."""
    if name_col is not None:
        by_name: dict[str, int] = {}
        for k, r in enumerate(rows):
            key = r[name_col].strip().strip('"')
            if key in by_name:
                raise InputError(path, f"names {key!r} on two rows ({by_name[key] + 2} and {k + 2})")
            by_name[key] = k
        order, taken = [], set()
        for f in seq.files:
            k = by_name.get(f.name, by_name.get(f.stem))
            if k is None:
                raise InputError(f, f"has no row in {what} {path} (column {header[name_col]!r} lists "
                                 f"{len(rows)} names): the table does not match the files")
            order.append(k)
            taken.add(k)
        extra = [k for k in range(len(rows)) if k not in taken]
        if extra:
            name = rows[extra[0]][name_col].strip().strip('"')
            folder = seq.source if seq.source.is_dir() else seq.source.parent
            raise InputError(folder / name, f"is listed in {what} {path} but missing from {seq.source} "
                             f"({len(extra)} listed file(s) missing): a frame or image was not written or "
                             "not copied")
        return order
    if index_col is not None:
        if any(n is None for n in seq.numbers):
            raise InputError(path, f"numbers its rows by {header[index_col]!r}, but the names of {seq.source} "
                             "carry no frame numbers; list file names instead")
        idx = {}
        for k, r in enumerate(rows):
            try:
                n = int(r[index_col])
            except ValueError as e:
                raise InputError(path, f"data row {k + 2}: index {r[index_col]!r} is not a whole number") from e
            if n in idx:
                raise InputError(path, f"lists index {n} on two rows ({idx[n] + 2} and {k + 2})")
            idx[n] = k
        for f, n in zip(seq.files, seq.numbers):
            if n not in idx:
                raise InputError(f, f"has frame number {n}, which no row of {what} {path} lists")
        extra = sorted(set(idx) - set(seq.numbers))
        if extra:
            raise InputError(path, f"lists index {extra[0]} ({len(extra)} such), which no file of {seq.source} "
                             "carries: a frame or image is missing from the folder")
        return [idx[n] for n in seq.numbers]
    if len(rows) != len(seq):
        raise InputError(path, f"has {len(rows)} rows and no file or index column, {seq.source} holds "
                         f"{len(seq)} files: one row per file, in order, is needed (or name the files)")
    return list(range(len(rows)))


def read_sequence_times(path, seq: SequenceFiles, *, columns=None, unit=1.0, decimal=".") -> np.ndarray:
    """Frame times of a sequence from a table, by file name, by frame number or in order.

    Parameters
    ----------
    path : str or os.PathLike
        A text table (columns ``time`` and optionally ``file`` or ``index``, or one time
        per line) or a ``.npy`` array (one time per file, in order).
    seq : SequenceFiles
        The sequence the times belong to.
    columns : dict, optional
        Our column names (``file``, ``index``, ``time``) mapped to the table's.
    unit : float
        Seconds per unit of the times.
    decimal : {".", ","}

    Returns
    -------
    (F,) float64 ndarray
        Times in s, in the sequence's order; finite and strictly increasing.
    """
    what = "the frame-times table"
    if str(path).lower().endswith(".npy"):
        t = read_frame_times(path, n_frames=len(seq)) * unit
        order = list(range(len(seq)))
    else:
        header, rows = read_table(path, decimal=decimal, what="a frame-times table (columns time and file or "
                                  "index, or one time per line)")
        if header is None:
            if len(rows[0]) != 1:
                raise InputError(path, f"has {len(rows[0])} columns and no header row; name them (time, and "
                                 "file or index) in a header row, or give one time per line")
            t, order = _floats(path, rows, 0, "time", decimal, 0) * unit, _rows_per_file(
                path, seq, ["time"], rows, None, None, what)
        else:
            tc = _find(path, header, columns, "time", required=True)
            fc = _find(path, header, columns, "file", required=False)
            ic = _find(path, header, columns, "index", required=False) if fc is None else None
            t = _floats(path, rows, tc, header[tc], decimal, 1) * unit
            order = _rows_per_file(path, seq, header, rows, fc, ic, what)
    t = np.asarray(t, dtype=np.float64)[order]
    steps = np.diff(t)
    if np.any(steps <= 0):
        k = int(np.flatnonzero(steps <= 0)[0])
        raise InputError(path, f"gives {seq.files[k + 1].name} the time {t[k + 1]!r}, not after "
                         f"{seq.files[k].name} ({t[k]!r}): frame times must increase with the frame numbers")
    return t


def read_load_log(path, seq: SequenceFiles, *, columns=None, decimal="."):
    """The load (and time, if logged) at each image of a sequence, from the capture log.

    Parameters
    ----------
    path : str or os.PathLike
        A text table with a header row: ``load`` and ``image`` (file name) or ``index``
        (the number in the file name), optionally ``time``; or, with neither ``image``
        nor ``index``, one row per image in order.
    seq : SequenceFiles
        The images.
    columns : dict, optional
        Our column names (``image``, ``index``, ``load``, ``time``) mapped to the table's.
    decimal : {".", ","}

    Returns
    -------
    loads : (K,) float64 ndarray
        In the log's unit, in the sequence's order.
    times : (K,) float64 ndarray or None
        The logged times, s, when a time column exists.
    """
    what = "the load log"
    header, rows = read_table(path, decimal=decimal, what="a load log (columns image or index, load, "
                              "optionally time)")
    if header is None:
        raise InputError(path, "has no header row; name its columns (image or index, load, time)")
    lc = _find(path, header, columns, "load", required=True)
    ic = _find(path, header, columns, "image", required=False)
    xc = _find(path, header, columns, "index", required=False) if ic is None else None
    tc = _find(path, header, columns, "time", required=False)
    order = _rows_per_file(path, seq, header, rows, ic, xc, what)
    loads = _floats(path, rows, lc, header[lc], decimal, 1)[order]
    times = None if tc is None else _floats(path, rows, tc, header[tc], decimal, 1)[order]
    if np.ptp(loads) <= 0:
        raise InputError(path, f"logs one load ({loads[0]!r}) for all {loads.size} images; expected images at "
                         "two or more loads")
    return loads, times
