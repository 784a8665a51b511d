"""Atomic file writing and output-folder safety.

Every output is written to a temporary name in the destination folder and
renamed into place (``os.replace`` is atomic on POSIX within one file system),
so a reader never sees a half-written file.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import tempfile
from pathlib import Path

from ..errors import InputError

__all__ = ["atomic_path", "atomic_write_text", "atomic_write_bytes", "sha256_file", "safe_child"]


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
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    tmp = Path(tmp)
    # mkstemp makes the file private (0600); results should follow the user's umask
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
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
