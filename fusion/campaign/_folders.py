"""The output folder: its lock, leftovers of interrupted batches, and publishing a run folder."""

from __future__ import annotations

import contextlib
import errno
import fcntl
import os
import shutil
import stat
from pathlib import Path

from ..errors import InputError

__all__ = ["LOCK_NAME", "campaign_lock", "check_campaign_targets", "publish"]

LOCK_NAME = ".fusion.lock"


@contextlib.contextmanager
def campaign_lock(out: Path):
    """Hold an exclusive lock on the output folder (refuse a concurrent ``fusion run``)."""
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(out, f"cannot be used as the output folder ({e.strerror or e}); expected a "
                         "folder that can be created or written") from e
    lock_path = out / LOCK_NAME
    try:
        # O_NOFOLLOW: a lock "file" planted as a link would have us truncate its target
        fd = os.open(lock_path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW, 0o644)
    except OSError as e:
        if e.errno == errno.ELOOP:
            raise InputError(lock_path, "is a symbolic link; fusion keeps its lock file inside the "
                             "output folder and will not write through a link (remove it)") from e
        raise InputError(lock_path, f"cannot create the lock file of the output folder "
                         f"({e.strerror or e}); check that the folder is writable") from e
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise InputError(lock_path, "is not a regular file; remove it")
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as e:
            if e.errno in (errno.EAGAIN, errno.EACCES):
                raise InputError(out, "another fusion process is writing to this output folder; "
                                 "wait for it to finish or choose another --out") from e
            raise
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode())
        _remove_partials(out)
        yield
    finally:
        with contextlib.suppress(OSError):
            fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)


def _remove_partials(out: Path) -> None:
    """Remove what an interrupted batch left: hidden ``.NAME.partial-*`` run folders,
    ``.NAME.trash-*`` folders and the ``.NAME.*.tmp`` files of unfinished atomic writes
    (report, frequency fit, campaign figures). Links are removed, never followed."""
    for pattern in (".*.partial-*", ".*.trash-*"):
        for p in out.glob(pattern):
            if p.is_symlink():
                with contextlib.suppress(OSError):
                    p.unlink()
            else:
                shutil.rmtree(p, ignore_errors=True)
    figures = out / "figures"
    for folder in (out, figures) if figures.is_dir() and not figures.is_symlink() else (out,):
        for p in folder.glob(".*.tmp"):
            if p.is_file() or p.is_symlink():
                with contextlib.suppress(OSError):
                    p.unlink()


def check_campaign_targets(out: Path) -> None:
    """Refuse campaign outputs that a link would carry outside ``out`` (figures/ is written
    into; report.html and frequency.nc are replaced by rename, which replaces a link itself)."""
    figures = out / "figures"
    if figures.is_symlink():
        raise InputError(figures, f"is a symbolic link (to {os.readlink(figures)!r}); campaign figures "
                         "are written only inside the output folder: remove the link")
    if figures.exists() and not figures.is_dir():
        raise InputError(figures, "exists and is not a folder; remove it")


def publish(tmp: Path, folder: Path) -> None:
    """Move a finished temporary run folder into place (replacing an old one)."""
    if folder.exists() or folder.is_symlink():
        trash = folder.parent / f".{folder.name}.trash-{os.getpid()}"
        os.replace(folder, trash)
        os.replace(tmp, folder)
        shutil.rmtree(trash, ignore_errors=True)
    else:
        os.replace(tmp, folder)
