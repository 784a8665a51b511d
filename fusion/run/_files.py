"""The input files of a run, and the check every step makes before it opens one."""

from __future__ import annotations

import dataclasses
from pathlib import Path

from ..io import input_file, sha256_file

__all__ = ["need_file", "input_files", "input_digests"]


def need_file(path: Path, key: str) -> Path:
    """``path`` checked to be a readable regular file; the message names the config key."""
    return input_file(path, f"a file (named by {key})")


def input_files(run) -> list[Path]:
    """Every file a run reads, in config order (thermal side, then correlation side)."""
    files = []
    for spec in (run.thermal, run.dic):
        for f in dataclasses.fields(spec):
            v = getattr(spec, f.name)
            if isinstance(v, Path):
                files.append(v)
            elif isinstance(v, tuple) and v and all(isinstance(x, Path) for x in v):
                files.extend(v)
    return files


def input_digests(run) -> dict[str, str]:
    """SHA-256 of every input file of a run that exists, by path (``input_sha256`` of result.nc)."""
    return {str(p): sha256_file(p) for p in input_files(run) if Path(p).is_file()}
