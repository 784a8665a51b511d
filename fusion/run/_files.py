"""The input files of a run, and the check every step makes before it opens one."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import xxhash

from ..errors import FusionError
from ..io import content_digest, input_file, is_sequence, list_images, list_sequence

__all__ = ["need_file", "input_files", "input_digests", "sequence_files", "frame_sequence", "image_sequence",
           "beside_frames", "beside_images", "INPUT_DIGEST"]

#: The hash of the input digests in result.nc and summary.json (the one the campaign's stamps use).
INPUT_DIGEST = "xxh3-128"


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


def _inputs(run):
    """(path, members) of every input of a run in config order: ``members`` are the files of a
    folder or pattern of frames or images (in frame order), None for a single file or for a
    sequence that cannot be listed (missing, empty)."""
    for spec in (run.thermal, run.dic):
        for f in dataclasses.fields(spec):
            v = getattr(spec, f.name)
            if f.name in ("frames", "images") and isinstance(v, Path) and is_sequence(v):
                try:
                    seq = frame_sequence(spec) if f.name == "frames" else image_sequence(spec)
                except FusionError:
                    yield v, None
                else:
                    yield v, list(seq.files)
            elif isinstance(v, Path):
                yield v, None
            elif isinstance(v, tuple) and v and all(isinstance(x, Path) for x in v):
                for x in v:
                    yield x, None


def input_files(run) -> list[Path]:
    """Every file a run reads, in config order (thermal side, then correlation side).

    A folder or pattern of frames or images stands for its files (in frame order); one
    that cannot be listed (missing, empty) stands for itself.
    """
    files = []
    for path, members in _inputs(run):
        files.extend(members if members is not None else [path])
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


def input_digests(run, digest=content_digest) -> dict[str, str]:
    """The content digest (:data:`INPUT_DIGEST`) of every input of a run that exists, by path.

    A folder or pattern of frames or images has one digest, over its members' names and
    digests in order (its entry stays small however many frames it holds). ``digest(path)``
    hashes one file (None when it is not a readable regular file); pass a cache's to reuse
    digests already made (each file is then read once).
    """
    out = {}
    for path, members in _inputs(run):
        if members is None:
            d = digest(path) if Path(path).is_file() else None
        else:
            parts = [[p.name, digest(p)] for p in members]
            d = None if any(x is None for _, x in parts) else \
                xxhash.xxh3_128(json.dumps(parts).encode()).hexdigest()
        if d is not None:
            out[str(path)] = d
    return out
