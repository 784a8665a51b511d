"""Sequences of per-frame files, as cameras write them: a folder or a glob pattern.

A sequence is ordered by the number in its file names (natural order: ``f_9`` before
``f_10``), checked for gaps, and every file's header is checked for one frame size and
one element type before any frame is decoded. Binary frames (TIFF, PNG, ``.npy``) are
read lazily, a block of frames at a time, through :class:`SequenceStack`, which the
lock-in streams like a single-file :class:`~fusion.io.FrameStack`. Text grids (CSV,
TXT) are converted once into a binary stack in fusion's cache (``_textgrids.py``).
"""

from __future__ import annotations

import glob
import math
import os
import re
import stat
import struct
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._guard import decoding, input_file, npy_header, quiet_logger
from ._images import decode_png
from ._textgrids import text_grid_stack

__all__ = ["SequenceFiles", "SequenceStack", "is_sequence", "list_sequence", "open_sequence", "list_images", "file_identity", "frame_header",
           "check_headers", "FRAME_SUFFIXES", "IMAGE_SUFFIXES"]

#: suffixes of per-frame files and their kind
FRAME_SUFFIXES = {".tif": "tiff", ".tiff": "tiff", ".png": "png", ".npy": "npy", ".csv": "text", ".txt": "text"}
#: suffixes of speckle-image sequences
IMAGE_SUFFIXES = {".tif": "tiff", ".tiff": "tiff", ".png": "png"}
_BINARY = ("tiff", "png", "npy")
_GLOB_CHARS = re.compile(r"[*?\[]")
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_PNG_GREY = {0: "grey", 2: "RGB", 3: "palette", 4: "grey with alpha", 6: "RGBA"}


def is_sequence(path) -> bool:
    """True when ``path`` names a folder or a glob pattern rather than one file."""
    p = Path(path)
    if p.is_dir():
        return True
    if p.exists():
        return False
    # a bracket in an existing folder's name is a name, not a pattern
    return bool(_GLOB_CHARS.search(p.name)) or (bool(_GLOB_CHARS.search(str(p.parent))) and not p.parent.exists())


@dataclass(frozen=True)
class SequenceFiles:
    """The ordered files of a sequence.

    Attributes
    ----------
    source : pathlib.Path
        The folder or pattern as configured (named in messages).
    files : tuple of pathlib.Path
        Files in frame order.
    kind : str
        ``"tiff"``, ``"png"``, ``"npy"`` or ``"text"``.
    numbers : tuple of int or None
        Frame number read from each name (None when the names carry only times).
    name_times : (F,) float64 ndarray or None
        Times read from the names with ``name_time``, s.
    gaps : tuple of (int, int, int)
        Each gap of the numbering: index of the file before it, first and last missing number.
    """

    source: Path
    files: tuple
    kind: str
    numbers: tuple
    name_times: np.ndarray | None = None
    gaps: tuple = ()

    def __len__(self):
        return len(self.files)

    @property
    def missing(self) -> int:
        """How many frame numbers are missing between the first and the last."""
        return sum(b - a + 1 for _, a, b in self.gaps)

    def describe_gaps(self) -> str:
        """The gaps in words: how many numbers are missing, and the files either side of the first."""
        if not self.gaps:
            return ""
        i, a, b = self.gaps[0]
        first = f"number {a}" if a == b else f"numbers {a}..{b}"
        more = f" and {len(self.gaps) - 1} more gap(s)" if len(self.gaps) > 1 else ""
        return (f"{self.missing} frame number(s) missing: {first} between {self.files[i].name} and "
                f"{self.files[i + 1].name}{more}")

    def signature(self) -> tuple:
        """(name, size, mtime_ns) of every file: what changes while a camera writes."""
        out = []
        for f in self.files:
            try:
                st = f.stat()
            except OSError:
                out.append((f.name, None, None))
            else:
                out.append((f.name, st.st_size, st.st_mtime_ns))
        return tuple(out)


def file_identity(path):
    """(path, size, modification time in ns) of a file, or None when it cannot be reached."""
    try:
        st = Path(path).stat()
    except OSError:
        return None
    return (str(path), st.st_size, st.st_mtime_ns)


# ------------------------------------------------------------------------------ listing
def _candidates(source: Path, suffixes, exclude):
    """Regular, non-hidden files of the folder or pattern with a known suffix, sorted by name."""
    skip = {os.path.normcase(os.path.abspath(p)) for p in exclude if p is not None}

    def wanted(name, path):
        return (not name.startswith(".") and os.path.splitext(name)[1].lower() in suffixes
                and (not skip or os.path.normcase(os.path.abspath(path)) not in skip))

    if source.is_dir():
        try:
            with os.scandir(source) as it:
                # DirEntry.is_file follows links and mostly needs no system call
                found = [e.path for e in it if wanted(e.name, e.path) and e.is_file()]
        except OSError as e:
            raise InputError(source, f"cannot list the folder ({e.strerror or e})") from e
    else:
        pattern = glob.escape(str(source.parent)) + os.sep + source.name if source.parent.is_dir() else str(source)
        found = [p for p in glob.glob(pattern) if wanted(os.path.basename(p), p)]
        found = [p for p in found if _regular(p)]
    return [Path(p) for p in sorted(found, key=os.path.basename)]


def _regular(path):
    try:
        return stat.S_ISREG(os.stat(path).st_mode)
    except OSError:
        return False        # vanished since listed, or a dangling link


def _pick_kind(source, paths, suffixes, what):
    kinds: dict[str, list] = {}
    for p in paths:
        kinds.setdefault(suffixes[p.suffix.lower()], []).append(p)
    if not kinds:
        hint = ", ".join(sorted(suffixes))
        where = "is a folder with" if source.is_dir() else "matches"
        raise InputError(source, f"{where} no {what} files (expected one {what} stack file, or {what} "
                         f"files with numbered names ending in {hint})")
    if len(kinds) > 1:
        binary = [k for k in kinds if k in _BINARY]
        if len(binary) == 1:
            # a camera folder often holds a settings or log text beside its image frames
            return binary[0], kinds[binary[0]]
        counts = ", ".join(f"{len(v)} {k}" for k, v in sorted(kinds.items()))
        raise InputError(source, f"holds {what} files of several kinds ({counts}); keep one kind in the "
                         "folder or give a pattern such as 'run3/*.tif'")
    kind, files = next(iter(kinds.items()))
    return kind, files


def _number_and_time(path, name_time, time_unit):
    """The frame number (last group of digits outside the time) and the time in the name."""
    stem = path.name[: -len(path.suffix)] if path.suffix else path.name
    t = None
    if name_time is not None:
        m = name_time.search(stem)
        if m is None or not m.groups():
            raise InputError(path, f"its name does not match name_time {name_time.pattern!r} (a "
                             "regular expression whose first group is the frame time)")
        try:
            t = float(m.group(1).replace(",", ".")) * time_unit
        except ValueError as e:
            raise InputError(path, f"name_time {name_time.pattern!r} reads {m.group(1)!r} from the name, "
                             "not a number") from e
        stem = stem[: m.start()] + "/" + stem[m.end():]
    digits = re.findall(r"\d+", stem)
    return (int(digits[-1]) if digits else None), t


def list_sequence(source, *, suffixes=None, name_time=None, time_unit=1.0, exclude=(),
                  what="frame") -> SequenceFiles:
    """The files of a folder or glob pattern in frame order, with the gaps of their numbering.

    Parameters
    ----------
    source : str or os.PathLike
        A folder (its non-hidden files with a known suffix) or a glob pattern
        (``"ir/run3/*.tif"``).
    suffixes : dict, optional
        Suffix -> kind of the files to take (default :data:`FRAME_SUFFIXES`). When a
        folder holds one binary kind and text files, the binary kind is taken.
    name_time : str, optional
        Regular expression whose first group is the frame time in each file name.
    time_unit : float
        Seconds per unit of the times in the names.
    exclude : sequence of paths
        Files to leave out (a times table or a marker in the same folder).

    Returns
    -------
    SequenceFiles

    Raises
    ------
    InputError
        No matching file, files of several kinds, a name without a number (or not matching
        ``name_time``), two files with one number, times that do not increase with the numbers.
    """
    source = Path(source)
    suffixes = FRAME_SUFFIXES if suffixes is None else suffixes
    if not source.is_dir() and not _GLOB_CHARS.search(str(source)):
        raise InputError(source, f"no such folder (expected a folder or a pattern of {what} files)")
    pattern = None
    if name_time is not None:
        try:
            pattern = re.compile(name_time)
        except re.error as e:
            raise InputError(source, f"name_time {name_time!r} is not a regular expression ({e})") from e
    kind, paths = _pick_kind(source, _candidates(source, suffixes, exclude), suffixes, what)
    numbered = [(p, *_number_and_time(p, pattern, time_unit)) for p in paths]
    have_numbers = [x for x in numbered if x[1] is not None]
    if pattern is not None and not have_numbers:
        numbered.sort(key=lambda x: (x[2], x[0].name))     # names carry only times
        numbers = (None,) * len(numbered)
        gaps = ()
    else:
        bare = next((x[0] for x in numbered if x[1] is None), None)
        if bare is not None:
            raise InputError(bare, f"has no number in its name: the {what}s of a sequence are ordered by the "
                             "number in their names (e.g. frame_0001.tif); move other files out of the "
                             "folder or give a pattern")
        numbered.sort(key=lambda x: (x[1], x[0].name))
        for a, b in zip(numbered, numbered[1:]):
            if a[1] == b[1]:
                raise InputError(b[0], f"has frame number {b[1]}, as {a[0].name} has: a sequence takes one "
                                 "file per number (two runs in one folder? give a pattern)")
        numbers = tuple(x[1] for x in numbered)
        # (index of the file before the gap, first missing number, last missing number)
        gaps = tuple((i, a + 1, b - 1) for i, (a, b) in enumerate(zip(numbers, numbers[1:])) if b - a > 1)
    times = None
    if pattern is not None:
        times = np.array([x[2] for x in numbered], dtype=np.float64)
        steps = np.diff(times)
        if np.any(steps <= 0) or not np.all(np.isfinite(times)):
            k = int(np.flatnonzero(~(steps > 0))[0]) + 1 if steps.size and np.any(~(steps > 0)) else 0
            raise InputError(numbered[k][0], f"its time in the name ({times[k]!r} s) does not come after "
                             f"the time of {numbered[k - 1][0].name} ({times[k - 1]!r} s): times in the names "
                             "must increase with the frame numbers")
    return SequenceFiles(source=source, files=tuple(x[0] for x in numbered), kind=kind, numbers=numbers,
                         name_times=times, gaps=gaps)


def list_images(source, *, exclude=()) -> SequenceFiles:
    """The speckle images (TIFF or PNG) of a folder or glob pattern, ordered by the numbers in their names."""
    return list_sequence(source, suffixes=IMAGE_SUFFIXES, exclude=exclude, what="image")


# ------------------------------------------------------------------------------ headers
@dataclass(frozen=True)
class FrameHeader:
    """What a file's header says about its one frame: shape, stored dtype and where the data lie."""

    shape: tuple
    dtype: np.dtype
    offset: int | None = None       # byte offset of contiguous raw data, None when decoded
    fortran: bool = False


def _png_header(path):
    with open(path, "rb") as fh:
        head = fh.read(33)
    if len(head) < 29 or head[:8] != _PNG_SIGNATURE or head[12:16] != b"IHDR":
        raise InputError(path, "is not a PNG file (expected the PNG signature and an IHDR chunk)")
    width, height, depth, colour = struct.unpack(">IIBB", head[16:26])
    if colour not in (0,):
        raise InputError(path, f"is a {_PNG_GREY.get(colour, 'colour')} PNG; expected one grey frame "
                         "(8 or 16 bit) per file")
    if depth not in (8, 16):
        raise InputError(path, f"is a {depth}-bit PNG; expected 8 or 16 bit grey")
    return FrameHeader((int(height), int(width)), np.dtype(">u2" if depth == 16 else "u1"))


def _tiff_header(path):
    import tifffile

    with quiet_logger("tifffile"), decoding(path, "a TIFF frame"):
        with tifffile.TiffFile(path) as tif:
            series = tif.series[0]
            shape, dtype = tuple(series.shape), np.dtype(series.dtype)
            page = tif.pages[0]
            offset = None
            if len(tif.pages) == 1 and page.is_contiguous and page.compression == 1 and page.dataoffsets:
                off, count = int(page.dataoffsets[0]), int(page.nbytes)
                if count == math.prod(shape) * dtype.itemsize and off + count <= os.path.getsize(path):
                    offset = off
            order = tif.byteorder
    if len(shape) != 2:
        raise InputError(path, f"holds an array of shape {shape!r}; expected one grey frame (rows, cols) "
                         "per file")
    return FrameHeader(shape, dtype.newbyteorder(order), offset)


def _npy_frame_header(path):
    shape, fortran, dtype, offset = npy_header(path)
    if len(shape) == 3 and shape[0] == 1:
        shape = shape[1:]
    if len(shape) != 2:
        raise InputError(path, f"holds an array of shape {shape!r}; expected one frame (rows, cols) per file")
    return FrameHeader(tuple(shape), dtype, offset, fortran)


def frame_header(path, kind) -> FrameHeader:
    """Shape and element type of one per-frame file from its header (no frame is decoded)."""
    input_file(path, f"a {kind} frame")
    if kind == "png":
        head = _png_header(path)
    elif kind == "tiff":
        head = _tiff_header(path)
    else:
        head = _npy_frame_header(path)
    if head.dtype.kind not in "iuf":
        raise InputError(path, f"holds {head.dtype} values; frames must be numeric (int, uint or float)")
    if min(head.shape) <= 0:
        raise InputError(path, f"holds an empty frame of shape {head.shape!r}")
    return head


def _same(a: FrameHeader, b: FrameHeader):
    return a.shape == b.shape and a.dtype.newbyteorder("=") == b.dtype.newbyteorder("=")


# ------------------------------------------------------------------------------ the stack
class SequenceStack:
    """A lazy ``(frames, rows, cols)`` stack read from one file per frame.

    Indexing reads only the files it needs (``stack[a:b]`` decodes frames a..b-1); the
    lock-in asks for memory-budget-sized blocks. Text-grid sequences are served from
    their cached binary stack (``memmap`` is then that stack's memory map). Pickling
    keeps only paths and layout.

    Attributes
    ----------
    path : pathlib.Path
        The folder or pattern (named in messages).
    shape : tuple of int
        (frames, rows, cols).
    dtype : numpy.dtype
        Element type (native byte order).
    kind : str
        ``"tiff"``, ``"png"``, ``"npy"`` or ``"text"``.
    sequence : SequenceFiles
        The ordered files, their numbers, name times and gaps.
    max_bytes : int or None
        Largest read one indexing call may return.
    """

    ndim = 3

    def __init__(self, sequence: SequenceFiles, headers, *, cached=None, max_bytes=None):
        self.sequence = sequence
        self.path = sequence.source
        self.kind = sequence.kind
        first = headers[0] if headers else None
        frame = cached.shape[1:] if cached is not None else first.shape
        self.shape = (len(sequence),) + tuple(int(s) for s in frame)
        self.dtype = (cached.dtype if cached is not None else first.dtype).newbyteorder("=")
        self._headers = headers
        self._cached = cached
        self.max_bytes = max_bytes

    def __len__(self):
        return self.shape[0]

    def __repr__(self):
        return (f"SequenceStack({str(self.path)!r}, kind={self.kind!r}, shape={self.shape!r}, "
                f"dtype={self.dtype.name!r})")

    @property
    def files(self):
        return self.sequence.files

    @property
    def nbytes(self) -> int:
        return math.prod(self.shape) * self.dtype.itemsize

    @property
    def memmap(self):
        """The cached binary stack of a text-grid sequence as a memory map, else None."""
        return self._cached.memmap if self._cached is not None else None

    def _frame(self, i):
        path, head = self.sequence.files[i], self._headers[i]
        rows, cols = head.shape
        if head.offset is not None:
            try:
                data = np.fromfile(path, dtype=head.dtype, count=rows * cols, offset=head.offset)
            except OSError as e:
                raise InputError(path, f"cannot be read ({e.strerror or e})") from e
            if data.size != rows * cols:
                raise InputError(path, f"holds {data.size} of the {rows * cols} values its header promised: "
                                 "the file changed or was cut after the sequence was opened")
            data = data.reshape((rows, cols), order="F" if head.fortran else "C")
        elif self.kind == "png":
            data = decode_png(path, "a PNG frame")
        else:
            with quiet_logger("tifffile"), decoding(path, "a TIFF frame"):
                import tifffile

                data = tifffile.imread(path, key=0)
        if data.shape != (rows, cols):
            raise InputError(path, f"decodes to shape {data.shape!r}, its header said {(rows, cols)!r}: "
                             "the file changed after the sequence was opened")
        return data

    def __getitem__(self, key):
        if self._cached is not None:
            return self._cached[key]
        key = key if isinstance(key, tuple) else (key,)
        first, rest = key[0], key[1:]
        single = isinstance(first, (int, np.integer))
        idx = [range(self.shape[0])[first]] if single else (
            list(range(self.shape[0])[first]) if isinstance(first, slice) else
            [range(self.shape[0])[int(i)] for i in np.asarray(first).ravel()])
        if self.max_bytes is not None:
            size = len(idx) * self.shape[1] * self.shape[2] * self.dtype.itemsize
            if size > self.max_bytes:
                raise ValueError(f"reading {len(idx)} frames of {self.path} would take {size} bytes, more "
                                 f"than max_bytes={self.max_bytes!r}; read fewer frames at a time")
        out = np.empty((len(idx),) + self.shape[1:], self.dtype)
        for j, i in enumerate(idx):
            out[j] = self._frame(i)
        out = out[(slice(None),) + rest]
        return out[0] if single else out

    def __array__(self, dtype=None, copy=None):
        out = self[:]
        return out if dtype is None else out.astype(dtype)


def check_headers(sequence: SequenceFiles):
    """Every file's header: one frame size and one element type across the sequence."""
    headers = []
    for path in sequence.files:
        head = frame_header(path, sequence.kind)
        if headers and not _same(head, headers[0]):
            h0 = headers[0]
            raise InputError(path, f"holds a {head.shape[0]}x{head.shape[1]} {head.dtype.newbyteorder('=')} "
                             f"frame, the first file {sequence.files[0].name} a {h0.shape[0]}x{h0.shape[1]} "
                             f"{h0.dtype.newbyteorder('=')} frame: every frame of a sequence must have one "
                             "size and type; a file of another acquisition (another camera window, binning "
                             "or bit depth) in the folder? move it out or give a pattern")
        headers.append(head)
    return headers


def open_sequence(source, *, name_time=None, time_unit=1.0, decimal=".", exclude=(), frame_count=None,
                  progress=False, max_bytes=None) -> SequenceStack:
    """Open a folder or glob pattern of per-frame files as one lazy ``(frames, rows, cols)`` stack.

    Parameters
    ----------
    source : str or os.PathLike
        A folder, or a pattern such as ``"ir/run3/*.tif"``. Files: TIFF (8/16/32-bit
        integer or float, one frame each), 8- or 16-bit grey PNG, ``.npy`` (one 2-D
        frame each) or CSV/TXT grids.
    name_time : str, optional
        Regular expression whose first group is the frame time in each name.
    time_unit : float
        Seconds per unit of the times in the names.
    decimal : {".", ","}
        Decimal separator of text grids.
    exclude : sequence of paths
        Files of the folder that are not frames (a times table, a marker).
    frame_count : int, optional
        The number of files expected; another count is refused.
    progress : bool
        Log the progress of a text-grid conversion.
    max_bytes : int, optional
        Largest read a single indexing call may return.

    Returns
    -------
    SequenceStack

    Raises
    ------
    InputError
        Naming the file: a name without a number, two files with one number, a file of
        another size or type, an unreadable or truncated file, a count that differs from
        ``frame_count``.

    Notes
    -----
    Headers are checked for every file before any frame is decoded. Text grids are
    parsed once into fusion's cache (see ``fusion/io/_textgrids.py``).

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> d = tempfile.mkdtemp()
    >>> for i in (1, 2, 10):
    ...     np.save(os.path.join(d, f"f_{i}.npy"), np.full((4, 3), i, np.uint16))
    >>> st = open_sequence(d)
    >>> st.shape, [f.name for f in st.files], st.sequence.describe_gaps()[:25]
    ((3, 4, 3), ['f_1.npy', 'f_2.npy', 'f_10.npy'], '7 frame number(s) missing')
    """
    seq = list_sequence(source, name_time=name_time, time_unit=time_unit, exclude=exclude)
    if frame_count is not None and len(seq) != int(frame_count):
        raise InputError(seq.source, f"holds {len(seq)} {seq.kind} frame files, frame_count says "
                         f"{int(frame_count)}: the sequence is incomplete (still being written or copied?) "
                         "or frame_count is wrong")
    if seq.kind == "text":
        cached = text_grid_stack(seq.files, source=seq.source, decimal=decimal, progress=progress)
        return SequenceStack(seq, (), cached=cached, max_bytes=max_bytes)
    return SequenceStack(seq, check_headers(seq), max_bytes=max_bytes)
