"""The input files of a run, and the check every step makes before it opens one."""

from __future__ import annotations

import dataclasses
from pathlib import Path

from ..errors import FusionError
from ..io import input_file, is_sequence, list_images, list_sequence, sha256_file

__all__ = ["need_file", "input_files", "input_digests", "sequence_files", "frame_sequence", "image_sequence",
           "beside_frames", "beside_images"]


def need_file(path: Path, key: str) -> Path:
    """``path`` checked to be a readable regular file; the message names the config key."""
    return input_file(path, f"a file (named by {key})")


def beside_frames(spec):
    """Files configured beside a frame sequence that may sit in its folder (not frames)."""
    return [p for p in (spec.times, spec.done_marker, spec.load, spec.maps) if p is not None]


def beside_images(spec):
    """Files configured beside an image sequence that may sit in its folder (not speckle images)."""
    return [p for p in (spec.load_log, spec.done_marker, spec.mask, spec.reference_image) if p is not None]


def frame_sequence(spec):
    """The files of ``thermal.frames`` given as a folder or pattern, in frame order."""
    return list_sequence(spec.frames, name_time=spec.name_time, time_unit=spec.time_unit,
                         exclude=beside_frames(spec))


def image_sequence(spec):
    """The files of ``dic.images`` given as a folder or pattern, in name order."""
    return list_images(spec.images, exclude=beside_images(spec))


def input_files(run) -> list[Path]:
    """Every file a run reads, in config order (thermal side, then correlation side).

    A folder or pattern of frames or images stands for its files (in frame order); one
    that cannot be listed (missing, empty) stands for itself.
    """
    files = []
    for spec in (run.thermal, run.dic):
        for f in dataclasses.fields(spec):
            v = getattr(spec, f.name)
            if f.name in ("frames", "images") and isinstance(v, Path) and is_sequence(v):
                try:
                    seq = frame_sequence(spec) if f.name == "frames" else image_sequence(spec)
                except FusionError:
                    files.append(v)
                else:
                    files.extend(seq.files)
            elif isinstance(v, Path):
                files.append(v)
            elif isinstance(v, tuple) and v and all(isinstance(x, Path) for x in v):
                files.extend(v)
    return files


def sequence_files(run) -> list[Path]:
    """The member files of the run's frame and image folders or patterns, in order (none without)."""
    files = []
    for spec, name, listing in ((run.thermal, "frames", frame_sequence), (run.dic, "images", image_sequence)):
        v = getattr(spec, name)
        if isinstance(v, Path) and is_sequence(v):
            try:
                files.extend(listing(spec).files)
            except FusionError:
                pass        # the run itself names the problem
    return files


def input_digests(run) -> dict[str, str]:
    """SHA-256 of every input file of a run that exists, by path (``input_sha256`` of result.nc)."""
    return {str(p): sha256_file(p) for p in input_files(run) if Path(p).is_file()}
