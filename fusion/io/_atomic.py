"""Atomic file writing, names of fusion's own temporary entries, and output-folder safety.

Every output is written to a temporary name in the destination folder and
renamed into place (``os.replace`` is atomic on POSIX within one file system),
so a reader never sees a half-written file.

A temporary entry carries a name of fusion's own making, with the host and the
process that made it (:func:`temp_name`, :func:`parse_temp_name`): start-up
cleanup removes only such entries, and only when their process is gone. Files
and folders are created with the default modes (``0o666``/``0o777``), so the
user's umask decides their permissions exactly as for any other program.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import re
import secrets
import socket
from pathlib import Path

import xxhash

from ..errors import InputError

__all__ = ["atomic_path", "atomic_write_text", "atomic_write_bytes", "sha256_file", "safe_child",
           "temp_name", "parse_temp_name", "make_temp_folder", "this_host", "content_digest"]

#: Kinds of temporary entries: a file being written, a run folder being built, a
#: result moved aside while its replacement is put in place.
TEMP_KINDS = ("tmp", "partial", "old")
_TEMP = re.compile(r"\.(?P<base>.+)\.fusion-(?P<kind>tmp|partial|old)-(?P<host>[A-Za-z0-9-]{1,40})"
                   r"-(?P<pid>[0-9]{1,10})-(?P<token>[0-9a-f]{8})")


def this_host() -> str:
    """This machine's name as it appears in temporary names (letters, digits and ``-``)."""
    return re.sub(r"[^A-Za-z0-9-]", "-", socket.gethostname())[:40] or "host"


def temp_name(base: str, kind: str) -> str:
    """A hidden name of fusion's own for a temporary entry beside ``base``.

    ``.BASE.fusion-KIND-HOST-PID-TOKEN``: the host and process id tell start-up
    cleanup whether the process that made it is still alive; the random token
    keeps two entries of one process apart.
    """
    if kind not in TEMP_KINDS:
        raise ValueError(f"kind: expected one of {TEMP_KINDS!r}, got {kind!r}")
    return f".{base}.fusion-{kind}-{this_host()}-{os.getpid()}-{secrets.token_hex(4)}"


def parse_temp_name(name: str):
    """``(base, kind, host, pid)`` of a name made by :func:`temp_name`, else None."""
    m = _TEMP.fullmatch(name)
    if m is None:
        return None
    return m["base"], m["kind"], m["host"], int(m["pid"])


def make_temp_folder(parent, base: str, kind: str = "partial") -> Path:
    """Create an empty folder named by :func:`temp_name` in ``parent`` (permissions from the umask)."""
    path = Path(parent) / temp_name(base, kind)
    os.mkdir(path, 0o777)
    return path


@contextlib.contextmanager
def atomic_path(path, *, overwrite: bool = False):
    """Yield a temporary path beside ``path``; rename it to ``path`` on success.

    On any exception the temporary file is removed and ``path`` is untouched.

    Raises
    ------
    InputError
        When ``path`` exists and ``overwrite`` is false.
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise InputError(path, "exists already; pass --overwrite to replace it")
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.parent / temp_name(path.name, "tmp")
    # O_EXCL | O_NOFOLLOW: never write through an entry that is there already
    os.close(os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, 0o666))
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def atomic_write_bytes(path, data: bytes, *, overwrite: bool = False) -> Path:
    """Write ``data`` to ``path`` atomically; returns ``path``."""
    with atomic_path(path, overwrite=overwrite) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def atomic_write_text(path, text: str, *, overwrite: bool = False) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically; returns ``path``."""
    return atomic_write_bytes(path, text.encode("utf-8"), overwrite=overwrite)


def content_digest(path, *, chunk: int = 1 << 22) -> str:
    """Hex XXH3-128 digest of a file's bytes, read in chunks (constant memory).

    A fast non-cryptographic hash: it tells whether content changed (the stamps that decide
    whether a run is redone, and the provenance of a result), not whether someone forged it
    (:func:`sha256_file` for that).
    """
    h = xxhash.xxh3_128()
    with open(path, "rb") as f:
        while block := f.read(chunk):
            h.update(block)
    return h.hexdigest()


def sha256_file(path, *, chunk: int = 1 << 22) -> str:
    """Hex SHA-256 of a file, read in chunks (constant memory)."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while block := f.read(chunk):
            h.update(block)
    return h.hexdigest()


def safe_child(folder, name: str) -> Path:
    """``folder / name`` after checking it cannot leave ``folder``.

    Refuses separators, ``..``, empty and hidden names, and a resolved path
    (symbolic links followed) outside ``folder``.
    """
    folder = Path(folder)
    if not name or name in (".", "..") or "/" in name or "\\" in name or "\x00" in name or name.startswith("."):
        raise InputError(folder / str(name), f"{name!r} is not a safe folder or file name")
    child = folder / name
    try:
        root = folder.resolve()
        target = child.resolve()
    except (OSError, RuntimeError) as e:  # a link loop
        raise InputError(child, f"cannot be resolved ({e}); remove the symbolic link") from e
    if target != root and root not in target.parents:
        raise InputError(child, f"resolves to {target}, outside the output folder {root}")
    return child
