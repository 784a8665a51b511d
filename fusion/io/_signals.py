"""Load signals and frame timestamps from text files.

A load file is a delimited text table (comma, semicolon or tab) with a header row
naming its columns; lines starting with ``#`` are comments. It is sampled either
once per frame or on its own clock (then interpolated or fitted on its own
times); an optional column gives the frame index of the rows taken at frame
triggers, which then define the frame times.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..errors import InputError
from .._conventions import short_repr
from ._guard import MAX_READ_BYTES, check_bytes, clip, input_file, npy_header, quote, text_rows_warning

__all__ = ["LoadSignal", "read_load_signal", "read_frame_times"]

_MIN_SAMPLES = 8


@dataclasses.dataclass(frozen=True)
class LoadSignal:
    """A sampled load signal.

    Attributes
    ----------
    times : (N,) float64 ndarray
        Sample times, s, strictly increasing.
    load : (N,) float64 ndarray
        Load in the file's units (N, kN, V...).
    path : str
        The file read.
    frame : (N,) float64 ndarray or None
        Frame index of each row (NaN on rows between frames), when a frame column was read.
    """

    __repr__ = short_repr  # shapes, not values

    times: np.ndarray
    load: np.ndarray
    path: str = ""
    frame: np.ndarray | None = None

    def __len__(self):
        return int(self.times.size)

    def at(self, times):
        """The load linearly interpolated at ``times`` (s); refuses times outside the record."""
        t = np.asarray(times, dtype=np.float64)
        # a tolerance of a millionth of the record absorbs rounding in a shared clock
        tol = 1e-6 * (self.times[-1] - self.times[0])
        if t.size and (t.min() < self.times[0] - tol or t.max() > self.times[-1] + tol):
            raise InputError(self.path, f"load signal covers {self.times[0]:g}..{self.times[-1]:g} s, "
                             f"frames span {t.min():g}..{t.max():g} s: the load must cover every frame")
        return np.interp(t, self.times, self.load)

    def frame_times(self, n_frames):
        """Times of frames 0..n_frames-1: from the frame column, or the rows if one per frame."""
        if self.frame is None:
            if self.times.size != n_frames:
                raise InputError(self.path, f"has {self.times.size} rows and no frame column; "
                                 f"one row per frame ({n_frames}) is needed to give frame times")
            return self.times.copy()
        rows = np.flatnonzero(np.isfinite(self.frame))
        idx = self.frame[rows]
        if not np.array_equal(idx, np.arange(n_frames, dtype=np.float64)):
            raise InputError(self.path, f"frame column must number the frames 0..{n_frames - 1} once each, "
                             f"in order; found {idx.size} entries")
        return self.times[rows]


def _text_file(path, what, *, missing="does not exist"):
    """A readable regular text file no larger than the read limit (a table of numbers
    takes several times its size in memory once parsed)."""
    path = input_file(path, what, missing=missing)
    size = path.stat().st_size
    if size > MAX_READ_BYTES // 4:
        raise InputError(path, f"is {size / 2**20:.0f} MiB, more than the {MAX_READ_BYTES // 4 / 2**20:.0f} "
                         f"MiB a text table may have; expected {what}")
    return path


def _sniff(line):
    for d in (",", ";", "\t"):
        if d in line:
            return d
    return None


def _header(path):
    """Line number of the header row, the delimiter and the column names."""
    try:
        with open(path, encoding="utf-8-sig") as fh:
            for i, line in enumerate(fh):
                s = line.strip()
                if not s or s.startswith("#"):
                    continue
                delim = _sniff(s)
                names = [c.strip().strip('"').strip() for c in (s.split(delim) if delim else s.split())]
                return i, delim, names
    except UnicodeDecodeError as e:
        raise InputError(path, "is not a text file (expected a CSV table with a header row)") from e
    raise InputError(path, "is empty: expected a header row naming the columns and data rows")


def _column(path, names, want, role):
    low = [n.lower() for n in names]
    if want.lower() not in low:
        raise InputError(path, f"has no {role} column {want!r}; columns are {quote(names)}")
    return low.index(want.lower())


def _blank_to_nan(text):
    text = text.strip()
    return float(text) if text else np.nan


def read_load_signal(path, *, time_column="time", load_column="load", frame_column=None) -> LoadSignal:
    """Read a load signal (time, load) from a delimited text file.

    Parameters
    ----------
    path : str or os.PathLike
        Text table with a header row; comma, semicolon or tab separated; ``#`` comments.
    time_column, load_column : str
        Column names (case-insensitive) of the time in s and of the load.
    frame_column : str, optional
        Column holding the frame index on rows taken at frame triggers (blank elsewhere).

    Returns
    -------
    LoadSignal
        float64 times (s) and load (file units).

    Raises
    ------
    InputError
        Missing columns (the message lists those present), non-numeric entries, fewer
        than 8 rows, non-finite values, or times that do not increase strictly.
    """
    path = _text_file(path, "a load-signal table (CSV with columns time, load)",
                      missing="no such load-signal file")
    line, delim, names = _header(path)
    it = _column(path, names, time_column, "time")
    il = _column(path, names, load_column, "load")
    cols = [it, il]
    conv = None
    if frame_column is not None:
        ifr = _column(path, names, frame_column, "frame")
        cols.append(ifr)
        conv = {ifr: _blank_to_nan}
    try:
        with text_rows_warning():
            data = np.loadtxt(path, delimiter=delim, skiprows=line + 1, usecols=cols, ndmin=2, comments="#",
                              converters=conv, encoding="utf-8-sig", dtype=np.float64)
    except ValueError as e:
        raise InputError(path, f"expected numbers in columns {quote([names[c] for c in cols])} ({clip(e)})") from e
    if data.shape[0] < _MIN_SAMPLES:
        raise InputError(path, f"has {data.shape[0]} data rows; at least {_MIN_SAMPLES} are needed")
    t, v = data[:, 0].copy(), data[:, 1].copy()
    for arr, name in ((t, names[it]), (v, names[il])):
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            raise InputError(path, f"column {name!r} has a non-finite value on data row {bad[0] + 1} "
                             "(expected finite numbers)")
    if np.ptp(v) == 0:
        # a flat record (a disconnected load cell, the wrong column) has no cycle to lock on to
        raise InputError(path, f"column {names[il]!r} is constant ({float(v[0])!r}) on all {v.size} rows; "
                         "expected the cyclic load of the test")
    steps = np.diff(t)
    if np.any(steps <= 0):
        k = int(np.flatnonzero(steps <= 0)[0])
        raise InputError(path, f"time must increase strictly: data row {k + 2} has {t[k + 1]!r} s after "
                         f"{t[k]!r} s")
    frame = data[:, 2].copy() if frame_column is not None else None
    return LoadSignal(times=t, load=v, path=str(path), frame=frame)


def read_frame_times(path, *, column="time", n_frames=None) -> np.ndarray:
    """Frame timestamps in s from a ``.npy`` array or a text file (a named column, or one number a line).

    Parameters
    ----------
    path : str or os.PathLike
    column : str
        Column of a table with a header row (ignored for ``.npy`` and bare number lists).
    n_frames : int, optional
        Expected count, checked.

    Returns
    -------
    (F,) float64 ndarray
        Finite, strictly increasing times, s.
    """
    path = input_file(path, "frame times (.npy, or a text file with one time per line)",
                      missing="no such frame-times file")
    if path.suffix.lower() == ".npy":
        shape, _, dtype, _ = npy_header(path)
        check_bytes(path, shape, dtype.itemsize, what="the frame-time array")
        try:
            t = np.load(path, allow_pickle=False)
        except (ValueError, EOFError, OSError) as e:
            raise InputError(path, f"expected a 1-D numeric array of frame times ({clip(e)})") from e
    else:
        _text_file(path, "frame times (.npy, or a text file with one time per line)")
        line, delim, names = _header(path)
        try:
            float(names[0])
            first_is_data = True
        except ValueError:
            first_is_data = False
        col = 0 if first_is_data else _column(path, names, column, "time")
        try:
            with text_rows_warning():
                t = np.loadtxt(path, delimiter=delim, skiprows=0 if first_is_data else line + 1, ndmin=1,
                               comments="#", usecols=col)
        except ValueError as e:
            raise InputError(path, f"expected numeric frame times ({clip(e)})") from e
    t = np.asarray(t)
    if t.ndim != 1 or t.dtype.kind not in "iuf":
        raise InputError(path, f"expected a 1-D list of frame times, got shape {t.shape!r} dtype {t.dtype!s}")
    t = t.astype(np.float64)
    if t.size == 0:
        raise InputError(path, "holds no frame times; expected one time in s per frame")
    if n_frames is not None and t.size != int(n_frames):
        raise InputError(path, f"has {t.size} frame times, the stack has {int(n_frames)} frames")
    if not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
        raise InputError(path, "frame times must be finite and increase strictly (s)")
    return t
