"""Provenance of a run's result: the stamp of everything that determines it, read back from its folder."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

from .. import __version__
from ..config import Config, RunSpec
from ..run import input_files

__all__ = ["run_stamp", "read_stamp", "read_summary"]


def _quick_file_id(path: Path) -> list:
    """Size and modification time: cheap identity for the skip check (hashes come with results)."""
    try:
        st = path.stat()
    except OSError:
        return [str(path), None]
    return [str(path), st.st_size, st.st_mtime_ns]


def run_stamp(cfg: Config, run: RunSpec) -> str:
    """A hash of everything that determines a run's result (its config, laminate, materials,
    registration, diagnosis settings, input file identities and the package version)."""
    lam = cfg.laminate_for(run)
    parts = {
        "version": __version__,
        "run": repr(run),
        "laminate": repr(lam),
        "registration": repr(cfg.registration_for(run)),
        "diagnosis": repr(cfg.diagnosis),
        "output": repr((cfg.output.figures, cfg.output.formats, cfg.output.dpi, cfg.output.profile_line)),
        "inputs": [_quick_file_id(p) for p in input_files(run)],
    }
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()


def read_stamp(folder: Path) -> str | None:
    try:
        return json.loads((folder / "summary.json").read_text()).get("provenance", {}).get("stamp")
    except (OSError, ValueError, AttributeError):
        return None


def read_summary(folder: Path) -> dict | None:
    try:
        return json.loads((folder / "summary.json").read_text())
    except (OSError, ValueError):
        return None
