"""Provenance of a run's result: the stamp of everything that determines it, read back from its folder.

A run is skipped only when its stamp is unchanged: the content of every file it
reads (and the suffix that selects the reader) and every config value that
affects it, never the paths themselves (so that a campaign moved elsewhere, or a
config named by a relative path, keeps its stamps). Content is hashed with a
fast hash (:func:`fusion.io.content_digest`); the digests are cached by file
identity -- device, inode, size, modification and change time in nanoseconds --
in :data:`HASHES_NAME` of the output folder. The change time cannot be set back
by a user, so a file rewritten with its size and modification time restored is
hashed again.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import logging
import os
import stat
from pathlib import Path


from .. import __version__
from ..config import Config, RunSpec
from ..errors import InputError
from ..io import atomic_write_text, content_digest
from ..run import sequence_files

log = logging.getLogger(__name__)

__all__ = ["run_stamp", "read_stamp", "read_summary", "DigestCache", "HASHES_NAME"]

#: The cache of input digests in the output folder (fusion's own file).
HASHES_NAME = ".fusion-hashes.json"
_MAX_CACHE_BYTES = 64 << 20


def _identity(st) -> list:
    return [st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns]


class DigestCache:
    """Content digests of input files, reused while a file's identity is unchanged."""

    def __init__(self, entries: dict | None = None):
        self.entries = dict(entries or {})
        self.used: dict[str, list] = {}
        self.new: dict[str, list] = {}
        self.changed = False

    def merge(self, entries: dict | None) -> None:
        """Take the digests another process computed (a worker's :attr:`new`)."""
        for key, value in (entries or {}).items():
            if isinstance(value, list) and len(value) == 6 and self.entries.get(key) != value:
                self.entries[key] = value
                self.changed = True

    @classmethod
    def load(cls, out) -> "DigestCache":
        """The cache kept in ``out`` (empty when absent, unreadable or not fusion's)."""
        path = Path(out) / HASHES_NAME
        try:
            st = os.lstat(path)
            if not stat.S_ISREG(st.st_mode) or st.st_size > _MAX_CACHE_BYTES:
                return cls()
            doc = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return cls()
        if not isinstance(doc, dict) or doc.get("made_by") != "fusion" or not isinstance(doc.get("files"), dict):
            return cls()
        return cls({k: v for k, v in doc["files"].items() if isinstance(v, list) and len(v) == 6})

    def save(self, out) -> None:
        """Write the cache into ``out`` when it gained entries (the caller holds the lock)."""
        if not self.changed:
            return
        path = Path(out) / HASHES_NAME
        if os.path.lexists(path):
            try:
                st = os.lstat(path)
                doc = json.loads(path.read_text(encoding="utf-8")) if stat.S_ISREG(st.st_mode) else None
                ours = isinstance(doc, dict) and doc.get("made_by") == "fusion"
            except (OSError, ValueError):
                ours = False
            if not ours:
                log.warning("%s is not fusion's digest cache; left as it is (inputs are hashed again next time)",
                            path)
                return
        # only entries of files that still exist: the cache does not grow without bound
        keep = {k: v for k, v in self.entries.items() if k in self.used or os.path.exists(k)}
        atomic_write_text(path, json.dumps({"made_by": "fusion", "files": keep}) + "\n", overwrite=True)
        self.changed = False

    def digest(self, path) -> str | None:
        """Digest of the file's content, or None when it is not a readable regular file."""
        key = os.path.abspath(path)
        try:
            st = os.stat(key)
        except OSError:
            return None
        if not stat.S_ISREG(st.st_mode):
            return None       # a pipe or device is never read here; the run refuses it by name
        ident = _identity(st)
        hit = self.entries.get(key)
        if hit is not None and hit[:5] == ident:
            self.used[key] = ident
            return hit[5]
        try:
            d = content_digest(key)
            after = _identity(os.stat(key))
        except OSError:
            return None
        if after == ident:     # not changing while read: worth remembering
            self.entries[key] = self.new[key] = ident + [d]
            self.changed = True
        self.used[key] = after
        return d

    def check_unchanged(self) -> None:
        """Raise when a file hashed for a stamp has changed since (a run read something else)."""
        for key, ident in self.used.items():
            try:
                now = _identity(os.stat(key))
            except OSError:
                now = None
            if now != ident:
                raise InputError(key, "changed while the run was processed; the result would not match "
                                 "its inputs (rerun when the file is complete)")


def _canonical(value, cache: DigestCache):
    """A JSON-able picture of a config value: files by their content, never by their path."""
    if isinstance(value, Path):
        return {"file": cache.digest(value), "suffix": value.suffix.lower()}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {"type": type(value).__name__,
                **{f.name: _canonical(getattr(value, f.name), cache) for f in dataclasses.fields(value)}}
    if isinstance(value, dict):
        return {str(k): _canonical(v, cache) for k, v in sorted(value.items(), key=lambda kv: str(kv[0]))}
    if isinstance(value, (list, tuple)):
        return [_canonical(v, cache) for v in value]
    if isinstance(value, (bool, int, str)) or value is None:
        return value
    return repr(value)    # floats exactly; anything else by its representation


def run_stamp(cfg: Config, run: RunSpec, *, digests: DigestCache | None = None) -> str:
    """A hash of everything that determines a run's result.

    The run's table, its laminate (material values included), its registration, the
    diagnosis and figure settings, the content of every file these name, and the
    package version. Another run's table, ``--only`` and the paths of the files do
    not enter.
    """
    cache = digests if digests is not None else DigestCache()
    parts = {
        "version": __version__,
        "run": _canonical(run, cache),
        "laminate": _canonical(cfg.laminate_for(run), cache),
        "registration": _canonical(cfg.registration_for(run), cache),
        "diagnosis": _canonical(cfg.diagnosis, cache),
        "output": _canonical((cfg.output.figures, cfg.output.formats, cfg.output.dpi, cfg.output.profile_line),
                             cache),
    }
    members = sequence_files(run)
    if members:
        # a folder or pattern of frames or images: every member by its name and content
        parts["sequences"] = [[p.name, cache.digest(p)] for p in members]
    return hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()


def read_stamp(folder: Path) -> str | None:
    summary = read_summary(folder)
    try:
        return summary.get("provenance", {}).get("stamp") if summary else None
    except AttributeError:
        return None


def read_summary(folder: Path) -> dict | None:
    path = Path(folder) / "summary.json"
    try:
        if not stat.S_ISREG(os.lstat(path).st_mode):
            return None
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return doc if isinstance(doc, dict) else None
