"""Text grids (one CSV or TXT table of values per frame) converted once into a cached binary stack.

Parsing text is far slower than reading binary frames, and a lock-in may read a stack
twice (a float64 refit, motion compensation). A sequence of text grids is therefore
parsed once into one ``.npy`` stack in fusion's cache folder (``$FUSION_CACHE``, else
``~/.cache/fusion``, subfolder ``text-grids``), named by the SHA-256 of the files'
names and contents and of the parsing options, and reused while they are unchanged.
A small index keyed by the folder remembers the files' sizes and modification times,
so an unchanged folder is not hashed again on every run. Everything in that folder
is fusion's own: it may be deleted at any time and is rebuilt when needed.

The element type of the cached stack keeps every digit the text gives: integers in
16 bits stay 16-bit integers, values whose decimals float32 holds (as a camera export
to a few decimals does) become float32, the others float64.
"""

from __future__ import annotations

import hashlib
import io
import json
import logging
import os
import time
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._frames import open_frames
from ._guard import npy_header, small_text, text_rows_warning

log = logging.getLogger(__name__)

__all__ = ["text_grid_stack", "cache_folder", "parse_grid", "text_delimiter"]

_FORMAT = "fusion-text-grids-1"      # change when the parsing or the stored layout changes
_CANDIDATES = ("uint16", "int16", "float32", "float64")
_HEADER_LINES = 50


def cache_folder() -> Path:
    """fusion's cache of converted text-grid stacks: ``$FUSION_CACHE/text-grids`` or ``~/.cache/fusion/text-grids``."""
    root = Path(os.environ.get("FUSION_CACHE") or Path.home() / ".cache" / "fusion")
    return root / "text-grids"


# ------------------------------------------------------------------------------ parsing
def text_delimiter(line, decimal):
    """The field delimiter of a text line: semicolon, tab, comma (unless the decimal mark), else None (blanks)."""
    for d in (";", "\t"):
        if d in line:
            return d
    if "," in line and decimal != ",":
        return ","
    return None     # whitespace


def _fields(line, delim):
    parts = line.split(delim) if delim else line.split()
    if parts and not parts[-1].strip():
        parts = parts[:-1]     # a delimiter at the end of each line (common in exports)
    return parts


def _numeric_line(line, delim, decimal):
    parts = _fields(line, delim)
    if not parts:
        return False
    try:
        for p in parts:
            float(p.replace(",", ".") if decimal == "," else p)
    except ValueError:
        return False
    return True


def parse_grid(path, *, decimal="."):
    """One text grid (rows of values; comma, semicolon, tab or space separated) as a float64 array.

    Lines before the first all-numeric line are taken as a header and skipped; ``#``
    starts a comment; a delimiter at the end of each line is ignored. With
    ``decimal=","`` the values use decimal commas (the delimiter is then a semicolon,
    a tab or spaces).

    Returns
    -------
    (rows, cols) float64 ndarray
    """
    path, text = small_text(path, "a grid of numbers, one frame row per line (CSV or TXT)",
                            kind="a text grid of one frame")
    lines = text.splitlines()
    start, delim = None, None
    for i, line in enumerate(lines[:_HEADER_LINES]):
        s = line.split("#", 1)[0].strip()
        if not s:
            continue
        delim = text_delimiter(s, decimal)
        if _numeric_line(s, delim, decimal):
            start = i
            break
    if start is None:
        raise InputError(path, f"has no line of numbers in its first {_HEADER_LINES} lines; expected a grid "
                         "of values (set decimal = \",\" for decimal commas)" if lines else
                         "is empty; expected a grid of values")
    first = lines[start].split("#", 1)[0].strip()
    ncols = len(_fields(first, delim))
    # a delimiter closing every line leaves an empty last field: read only the values, and count
    # the delimiters afterwards so that a row with an extra value is not cut silently
    trailing = delim is not None and lines[start].split("#", 1)[0].rstrip(" \r\n").endswith(delim)
    body = "\n".join(lines[start:])
    if decimal == ",":
        body = body.replace(",", ".")
    try:
        with text_rows_warning():
            grid = np.loadtxt(io.StringIO(body), delimiter=delim, comments="#", ndmin=2, dtype=np.float64,
                              usecols=range(ncols) if trailing else None)
    except ValueError as e:
        raise InputError(path, _short_row(lines, start, delim, ncols)
                         or f"is not a grid of numbers ({e}); every row needs {ncols} values") from e
    if trailing:
        counted = (body.count(delim) if "#" not in body else
                   sum(x.split("#", 1)[0].count(delim) for x in lines[start:]))
        if counted != grid.shape[0] * ncols:
            raise InputError(path, _short_row(lines, start, delim, ncols)
                             or f"is not a grid of {ncols} values per row")
    return grid


def _short_row(lines, start, delim, ncols):
    """The first row of another length than the first row of numbers, in words (None: none)."""
    for j in range(start, len(lines)):
        s = lines[j].split("#", 1)[0].strip()
        n = len(_fields(s, delim)) if s else ncols
        if n != ncols:
            last = not any(x.split("#", 1)[0].strip() for x in lines[j + 1:])
            why = ("the file ends in the middle of a row: cut short by an interrupted copy, or read while "
                   "the camera was still writing it?" if last and n < ncols else "a damaged row?")
            return f"line {j + 1} holds {n} value{'' if n == 1 else 's'}, the first line of numbers {ncols}: {why}"
    return None


def _decimals(values, start=0):
    """Fewest decimals d >= start with every finite value a whole number of 10**-d (None past 15)."""
    v = values[np.isfinite(values)]
    for d in range(start, 16):
        scaled = v * 10.0 ** d
        if not scaled.size or np.max(np.abs(scaled - np.round(scaled))) <= 1e-6 * max(1.0, 1e-9 * np.max(np.abs(scaled))):
            return d
    return None


class _DtypeChoice:
    """The narrowest element type that keeps every value the text gives."""

    def __init__(self):
        self.index = 0
        self.decimals = 0
        self.lo, self.hi = np.inf, -np.inf      # range of the whole-number grids seen so far

    @property
    def dtype(self):
        return np.dtype(_CANDIDATES[self.index])

    def fits(self, grid) -> bool:
        """Widen the choice for ``grid``; False when an earlier choice no longer fits."""
        need = self._need(grid)
        if need > self.index:
            self.index = need
            return False
        return True

    def _need(self, grid):
        finite = np.isfinite(grid)
        whole = finite.all() and np.array_equal(grid, np.round(grid))
        if whole:
            # the range of every grid so far: one frame's values may fit where the stack's do not
            self.lo, self.hi = min(self.lo, float(grid.min())), max(self.hi, float(grid.max()))
            if self.lo >= 0 and self.hi <= 65535:
                return max(self.index, 0)
            if self.lo >= -32768 and self.hi <= 32767:
                return max(self.index, 1)
        if self.index <= 2:
            v = grid[finite]
            if whole and np.max(np.abs(v), initial=0.0) <= 2**24:
                return max(self.index, 2)
            d = _decimals(v, self.decimals)
            if d is not None:
                self.decimals = max(self.decimals, d)
                err = np.max(np.abs(v.astype(np.float32).astype(np.float64) - v), initial=0.0)
                # float32 keeps the value when its rounding stays inside the text's last digit
                if err <= 0.5 * 10.0 ** -d:
                    return max(self.index, 2)
        return 3


# ------------------------------------------------------------------------------ the cache
def _stats(files):
    out = []
    for f in files:
        st = Path(f).stat()
        out.append([Path(f).name, st.st_size, st.st_mtime_ns])
    return out


def _content_key(files, decimal):
    h = hashlib.sha256(f"{_FORMAT}\ndecimal={decimal}\n".encode())
    for f in files:
        fh = hashlib.sha256()
        with open(f, "rb") as stream:
            for block in iter(lambda: stream.read(1 << 20), b""):
                fh.update(block)
        h.update(f"{Path(f).name}\n{fh.hexdigest()}\n".encode())
    return h.hexdigest()


def _index_path(root, source, decimal):
    tag = hashlib.sha256(f"{os.path.abspath(source)}\n{decimal}".encode()).hexdigest()[:32]
    return root / "index" / f"{tag}.json"


def _cached(root, key, n_files):
    target = root / f"{key}.npy"
    if not target.is_file():
        return None
    try:
        shape, _, _, _ = npy_header(target)
    except InputError:
        return None
    return target if len(shape) == 3 and shape[0] == n_files else None


def _write_json(path, data):
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(json.dumps(data, indent=1))
    os.replace(tmp, path)


def _convert(files, source, target, decimal, progress):
    n = len(files)
    log.info("converting %d text grids of %s into one binary stack in fusion's cache %s (once; reused "
             "while the files are unchanged)", n, source, target.parent)
    t0 = time.perf_counter()
    choice = _DtypeChoice()
    first = parse_grid(files[0], decimal=decimal)
    while True:
        choice.fits(first)
        tmp = target.with_name(f".{target.stem}.{os.getpid()}.partial.npy")
        out = np.lib.format.open_memmap(tmp, mode="w+", dtype=choice.dtype, shape=(n,) + first.shape)
        try:
            restart, shown = False, 0
            for i, f in enumerate(files):
                grid = first if i == 0 else parse_grid(f, decimal=decimal)
                if grid.shape != first.shape:
                    short = grid.shape[1] == first.shape[1] and grid.shape[0] < first.shape[0]
                    why = ("it ends early: cut short by an interrupted copy, or read while the camera was "
                           "still writing it?" if short else "a grid of another acquisition (another camera "
                           "window) in the folder? move it out or give a pattern")
                    raise InputError(f, f"holds a {grid.shape[0]}x{grid.shape[1]} grid, the first file "
                                     f"{Path(files[0]).name} a {first.shape[0]}x{first.shape[1]} grid: every "
                                     f"frame of a sequence must have one size; {why}")
                if not choice.fits(grid):
                    restart = True      # a wider element type is needed: start again with it
                    break
                out[i] = grid
                pct = 10 * (i + 1) // n
                if progress and n >= 20 and pct > shown:
                    shown = pct
                    log.info("  %d/%d text grids converted (%d %%)", i + 1, n, 10 * pct)
            if not restart:
                out.flush()
        except BaseException:
            del out
            tmp.unlink(missing_ok=True)
            raise
        del out
        if restart:
            tmp.unlink(missing_ok=True)
            log.info("  a value needs %s: converting again", choice.dtype)
            continue
        os.replace(tmp, target)
        break
    log.info("converted %d text grids (%s, %dx%d) in %.1f s", n, choice.dtype, first.shape[0], first.shape[1],
             time.perf_counter() - t0)


def text_grid_stack(files, *, source, decimal=".", progress=False, cache=None):
    """The frames of a sequence of text grids as a lazy stack, converted once into fusion's cache.

    Parameters
    ----------
    files : sequence of paths
        The grids in frame order.
    source : path
        The folder or pattern they came from (named in messages and keying the index).
    decimal : {".", ","}
        Decimal separator of the values.
    progress : bool
        Log the conversion's progress.
    cache : path, optional
        The cache folder (default :func:`cache_folder`).

    Returns
    -------
    FrameStack
        The cached ``(frames, rows, cols)`` stack, memory-mapped.
    """
    files = [Path(f) for f in files]
    root = Path(cache) if cache is not None else cache_folder()
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(root, f"cannot create fusion's cache folder for converted text grids "
                         f"({e.strerror or e}); set FUSION_CACHE to a writable folder") from e
    stats = _stats(files)
    index = _index_path(root, source, decimal)
    key = None
    try:
        known = json.loads(index.read_text())
        if known.get("stats") == stats:
            key = known.get("key")
    except (OSError, ValueError, AttributeError):
        pass
    target = _cached(root, key, len(files)) if key else None
    if target is None:
        key = _content_key(files, decimal)
        target = _cached(root, key, len(files))
        if target is None:
            target = root / f"{key}.npy"
            try:
                _convert(files, source, target, decimal, progress)
            except OSError as e:
                if isinstance(e, InputError):
                    raise
                raise InputError(e.filename or root, f"converting the text grids of {source} into the cache "
                                 f"failed ({e.strerror or e}); free space or set FUSION_CACHE") from e
            if _stats(files) != stats:
                target.unlink(missing_ok=True)
                raise InputError(source, "its files changed while they were converted; wait until the "
                                 "camera has finished writing")
            _write_json(target.with_suffix(".json"), {"source": str(source), "files": len(files),
                                                      "first": files[0].name, "last": files[-1].name,
                                                      "decimal": decimal, "format": _FORMAT})
        else:
            log.info("reusing the binary stack of %d text grids of %s from fusion's cache %s", len(files),
                     source, target)
        try:
            _write_json(index, {"source": str(source), "stats": stats, "key": key})
        except OSError:
            pass        # the index only saves hashing next time
    else:
        log.info("reusing the binary stack of %d text grids of %s from fusion's cache %s", len(files),
                 source, target)
    return open_frames(target)
