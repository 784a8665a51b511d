"""The output folder: its lock, what in it is fusion's, publishing a run folder, and recovery.

Ownership
---------
An entry of an output folder is fusion's only when fusion made it and marked it:

* a run folder holds the marker file :data:`RUN_MARKER` naming its run (written
  last, so a marked folder is also a complete one);
* the campaign products (``report.html``, ``frequency.nc``) are listed with the
  digest of their content in :data:`PRODUCTS_NAME`, and the campaign figures
  live in a ``figures/`` folder marked like a run folder;
* temporary entries carry a name of fusion's own with the host and the process
  id (:func:`fusion.io.temp_name`).

Nothing else is ever removed or replaced, ``--overwrite`` included: such an
entry ends the work on it with one sentence that names it.

Publishing a run folder
-----------------------
A run is written into a temporary folder; :func:`publish` then moves the old
result aside (``.NAME.fusion-old-...``), renames the new one into place and
removes the old one. A crash between any two of these steps leaves either the
result in place or a marked, complete copy under a temporary name;
:func:`recover` (run at start-up, under the lock) puts one back in place and
removes the temporary entries whose process is gone.
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import json
import logging
import os
import shutil
import stat
from pathlib import Path

from .. import __version__
from ..errors import InputError
from ..io import atomic_write_text, content_digest, make_temp_folder, parse_temp_name, temp_name, this_host

log = logging.getLogger(__name__)

__all__ = ["build_marked", "LOCK_NAME", "RUN_MARKER", "PRODUCTS_NAME", "campaign_lock", "check_campaign_targets", "publish",
           "publish_steps", "recover", "mark_folder", "is_marked_folder", "refuse_foreign", "foreign_message",
           "owned_product", "product_path", "remove_product", "refuse_foreign_product"]

LOCK_NAME = ".fusion.lock"
#: The marker file of a folder fusion made (a run folder, the campaign figures).
RUN_MARKER = ".fusion-folder.json"
#: The list of campaign product files fusion wrote, with the digests of their content.
PRODUCTS_NAME = ".fusion-products.json"
_MADE_BY = "fusion"


# --------------------------------------------------------------------------- ownership
def foreign_message(what: str) -> str:
    """The sentence that refuses an entry fusion did not make; ``what`` says what it is."""
    return (f"{what}; fusion never replaces or removes what it did not make (--overwrite included): "
            "move it away or choose another --out")


def mark_folder(folder: Path, name: str) -> None:
    """Write the marker that makes ``folder`` fusion's, for the entry ``name`` (its last write)."""
    text = json.dumps({"made_by": _MADE_BY, "name": name, "version": __version__})
    atomic_write_text(Path(folder) / RUN_MARKER, text + "\n")


def is_marked_folder(folder: Path, name: str) -> bool:
    """True when ``folder`` is a real folder holding fusion's marker for ``name``."""
    folder = Path(folder)
    try:
        if not stat.S_ISDIR(os.lstat(folder).st_mode):
            return False
        marker = folder / RUN_MARKER
        st = os.lstat(marker)
        if not stat.S_ISREG(st.st_mode) or st.st_size > 4096:
            return False
        doc = json.loads(marker.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(doc, dict) and doc.get("made_by") == _MADE_BY and doc.get("name") == name


def refuse_foreign(folder: Path, name: str) -> None:
    """Raise unless ``folder`` is absent or a folder fusion made for ``name``."""
    if not os.path.lexists(folder):
        return
    if Path(folder).is_symlink():
        raise InputError(folder, foreign_message(f"is a symbolic link (to {os.readlink(folder)!r})"))
    if not Path(folder).is_dir():
        raise InputError(folder, foreign_message("exists and is not a folder fusion made"))
    raise InputError(folder, foreign_message(f"is a folder fusion did not make (no {RUN_MARKER} inside)"))


# --------------------------------------------------------------------------- lock
@contextlib.contextmanager
def campaign_lock(out: Path):
    """Hold an exclusive lock on the output folder (refuse a concurrent ``fusion run``).

    On entry, :func:`recover` puts back results a crash left under temporary names
    and removes fusion's own leftovers whose process is gone.
    """
    out = Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(out, f"cannot be used as the output folder ({e.strerror or e}); expected a "
                         "folder that can be created or written") from e
    lock_path = out / LOCK_NAME
    try:
        # O_NOFOLLOW: a lock "file" planted as a link would have us write into its target
        fd = os.open(lock_path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | os.O_NONBLOCK, 0o644)
    except OSError as e:
        if e.errno == errno.ELOOP:
            raise InputError(lock_path, "is a symbolic link; fusion keeps its lock file inside the "
                             "output folder and will not write through a link (remove it)") from e
        raise InputError(lock_path, f"cannot create the lock file of the output folder "
                         f"({e.strerror or e}); check that the folder is writable") from e
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise InputError(lock_path, "is not a regular file; remove it")
        if st.st_nlink > 1:
            # a hard link: writing our process id would change the other name's file too
            raise InputError(lock_path, f"is hard-linked to another file ({st.st_nlink} names); fusion "
                             "writes into its lock file: remove this name")
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as e:
            if e.errno in (errno.EAGAIN, errno.EACCES):
                raise InputError(out, "another fusion process is writing to this output folder; "
                                 "wait for it to finish or choose another --out") from e
            raise
        try:
            os.ftruncate(fd, 0)
            os.write(fd, f"{os.getpid()}\n".encode())
            recover(out)
            yield
        finally:
            with contextlib.suppress(OSError):
                fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)


# --------------------------------------------------------------------------- recovery
def _process_gone(host: str, pid: int) -> bool:
    """True when the process that made a temporary entry has ended (known on this host only)."""
    if host != this_host() or pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:   # alive, someone else's
        return False
    return _zombie(pid)


def _zombie(pid: int) -> bool:
    """A process that has ended but whose parent has not collected it yet (Linux: state Z)."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as fh:
            return fh.read().rsplit(b")", 1)[1].split()[0] == b"Z"
    except (OSError, IndexError):
        return False


def _remove(path: Path) -> None:
    """Remove a temporary entry of ours; a link is removed itself, never followed."""
    try:
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path)
        else:
            path.unlink()
    except FileNotFoundError:
        pass
    except OSError as e:
        log.warning("could not remove the leftover %s (%s)", path, e.strerror or e)


def _leftovers(folder: Path):
    """fusion's temporary entries in ``folder`` whose process is gone: [(path, base, kind)]."""
    found = []
    try:
        names = os.listdir(folder)
    except OSError:
        return found
    for name in names:
        parsed = parse_temp_name(name)
        if parsed is None:
            continue
        base, kind, host, pid = parsed
        if _process_gone(host, pid):
            found.append((folder / name, base, kind))
    return found


def recover(out: Path) -> list[str]:
    """Put back what a crash left and remove fusion's own leftovers whose process is gone.

    A missing folder whose complete copy waits under a temporary name (a new result
    not yet renamed into place, or the old one moved aside) gets that copy back, the
    new one first. Everything else left over by a finished process of this host is
    removed; entries of other hosts and of live processes are left alone, and so is
    any entry whose name fusion did not make. Returns the names restored.
    """
    out = Path(out)
    restored = []
    leftovers = _leftovers(out)
    by_base: dict[str, list] = {}
    for path, base, kind in leftovers:
        if kind in ("partial", "old"):
            by_base.setdefault(base, []).append((path, kind))
    for base, items in sorted(by_base.items()):
        target = out / base
        if os.path.lexists(target):
            continue
        # a new complete result first (it was about to replace the old), then the old one
        items.sort(key=lambda pk: (pk[1] != "partial", -_mtime(pk[0] / RUN_MARKER)))
        for path, _ in items:
            if is_marked_folder(path, base):
                os.rename(path, target)
                restored.append(base)
                log.info("put %s back in place after an interrupted batch", base)
                break
    figures = out / "figures"
    more = _leftovers(figures) if is_marked_folder(figures, "figures") else []
    for path, _, _ in leftovers + more:
        if os.path.lexists(path):
            _remove(path)
    return restored


def _mtime(path: Path) -> float:
    try:
        return os.lstat(path).st_mtime
    except OSError:
        return 0.0


# --------------------------------------------------------------------------- publishing
def publish_steps(tmp: Path, folder: Path, name: str):
    """The file operations that move the finished, marked folder ``tmp`` to ``folder``.

    Returns the steps, a list of ``(description, callable)`` run in order by
    :func:`publish` (the crash tests run every prefix of it), and the temporary name
    the old result is moved to (None when there is none). The old result is moved
    aside first and removed last, so at every moment a whole result exists under a
    name :func:`recover` knows.
    """
    tmp, folder = Path(tmp), Path(folder)
    if not is_marked_folder(tmp, name):
        raise InputError(tmp, f"is not a complete result folder (no {RUN_MARKER}); not published")
    if not os.path.lexists(folder):
        return [("rename new into place", lambda: os.rename(tmp, folder))], None
    if not is_marked_folder(folder, name):
        refuse_foreign(folder, name)
    old = folder.parent / temp_name(name, "old")
    return [("move old aside", lambda: os.rename(folder, old)),
            ("rename new into place", lambda: os.rename(tmp, folder)),
            ("remove old", lambda: _remove(old))], old


def publish(tmp: Path, folder: Path, name: str | None = None) -> None:
    """Move a finished, marked temporary folder into place (replacing fusion's old one only).

    When a step fails (or the process is interrupted) after the old result was moved
    aside and before the new one is in place, the old one is put back at once.
    """
    folder = Path(folder)
    steps, aside = publish_steps(tmp, folder, name or folder.name)
    done = 0
    try:
        for _, step in steps:
            step()
            done += 1
    except BaseException:
        if aside is not None and done == 1 and not os.path.lexists(folder):
            with contextlib.suppress(OSError):
                os.rename(aside, folder)
        raise


def build_marked(folder: Path, name: str, fill) -> Path:
    """Make ``folder`` whole or not at all: ``fill(tmp)`` writes into a temporary folder beside
    it, which is then marked as fusion's ``name`` and published; removed if anything fails."""
    folder = Path(folder)
    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = make_temp_folder(folder.parent, folder.name, "partial")
    try:
        fill(tmp)
        mark_folder(tmp, name)
        publish(tmp, folder, name)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return folder


def check_campaign_targets(out: Path) -> None:
    """Refuse campaign outputs that a link would carry outside ``out`` or that are not fusion's."""
    figures = Path(out) / "figures"
    if figures.is_symlink():
        raise InputError(figures, f"is a symbolic link (to {os.readlink(figures)!r}); campaign figures "
                         "are written only inside the output folder: remove the link")
    if os.path.lexists(figures) and not is_marked_folder(figures, "figures"):
        refuse_foreign(figures, "figures")


# --------------------------------------------------------------------------- product files
def _read_products(out: Path) -> dict:
    """{file name: [digests fusion wrote]} from :data:`PRODUCTS_NAME` (empty when absent)."""
    path = Path(out) / PRODUCTS_NAME
    if not os.path.lexists(path):
        return {}
    try:
        st = os.lstat(path)
        doc = json.loads(path.read_text(encoding="utf-8")) if stat.S_ISREG(st.st_mode) and st.st_size < 1 << 20 \
            else None
    except (OSError, ValueError):
        doc = None
    if not isinstance(doc, dict) or doc.get("made_by") != _MADE_BY or not isinstance(doc.get("files"), dict):
        raise InputError(path, foreign_message("is not the list of campaign files fusion keeps"))
    return {k: [d for d in v if isinstance(d, str)] for k, v in doc["files"].items() if isinstance(v, list)}


def _write_products(out: Path, files: dict) -> None:
    atomic_write_text(Path(out) / PRODUCTS_NAME, json.dumps({"made_by": _MADE_BY, "files": files}) + "\n",
                      overwrite=True)


def owned_product(out: Path, name: str) -> bool:
    """True when ``out/name`` is absent or is a campaign file fusion wrote and nobody changed since."""
    path = Path(out) / name
    if not os.path.lexists(path):
        return True
    try:
        if not stat.S_ISREG(os.lstat(path).st_mode):
            return False
        return content_digest(path) in _read_products(out).get(name, [])
    except OSError:
        return False


def refuse_foreign_product(out: Path, name: str) -> None:
    if not owned_product(out, name):
        raise InputError(Path(out) / name, foreign_message("was not written by fusion, or was changed "
                                                           "since fusion wrote it"))


@contextlib.contextmanager
def product_path(out: Path, name: str):
    """Yield a temporary path for the campaign file ``out/name``; put it in place on success.

    Refused when the present file is not fusion's. The digest of the new file is
    listed before the rename (beside the old one) and the old one dropped after it,
    so that a crash at any point leaves the file in place listed as fusion's.
    """
    out = Path(out)
    refuse_foreign_product(out, name)
    target = out / name
    tmp = out / temp_name(name, "tmp")
    os.close(os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, 0o666))
    try:
        yield tmp
        new = content_digest(tmp)
        files = _read_products(out)
        keep = [d for d in files.get(name, []) if os.path.lexists(target) and d == content_digest(target)]
        files[name] = keep + [new]
        _write_products(out, files)
        os.replace(tmp, target)
        files[name] = [new]
        _write_products(out, files)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def remove_product(out: Path, name: str) -> None:
    """Remove the campaign file ``out/name`` if it is fusion's (a product that no longer applies)."""
    out = Path(out)
    path = out / name
    if os.path.lexists(path) and owned_product(out, name):
        path.unlink()
        files = _read_products(out)
        files.pop(name, None)
        _write_products(out, files)
