"""Inputs given as sequences: frames from one file or a folder of files, their times, and speckle
images with the loads of their capture log. Also what `fusion watch` asks of a run: are all its
inputs there, and what do they look like now."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np

from ..errors import ConfigError, FusionError, InputError
from ..io import (file_identity, is_sequence, list_sequence, open_frames, open_sequence, read_frame_times,
                  read_load_log, read_sequence_times)
from ..thermal import SAMPLE_FRAMES
from ._files import beside_frames, frame_sequence, image_sequence, need_file

__all__ = ["open_thermal_frames", "frames_within_budget", "images_within_budget", "frame_memory", "PIXEL_BYTES",
           "MOTION_PIXEL_BYTES", "IMAGE_PIXEL_BYTES", "frame_times", "speckle_images", "SpeckleImages", "reference_image_path",
           "input_state", "InputState"]


#: Memory a run holds per pixel of one frame whatever the number of frames, bytes: the
#: lock-in's float64 sums and per-pixel limits, the maps of result.nc, the registration,
#: prediction and diagnosis temporaries and the figures' copies.
PIXEL_BYTES = 600
#: The same with motion compensation (the motion field, its spline coefficients and a warped
#: frame block beside the stack's).
MOTION_PIXEL_BYTES = 1200
#: Memory the correlation of a pair of speckle images holds per image pixel, bytes: both images,
#: the reference's gradients, the deformed image's spline coefficients and their float64
#: temporaries (the correlation's peak is about 60 bytes per pixel whatever the step; the rest
#: is margin for the mask and the strain fit).
IMAGE_PIXEL_BYTES = 80


def frame_memory(frames, *, motion=False) -> int:
    """Bytes of a run that grow with the frame area of ``frames`` (a stack's shape and dtype),
    not with its length: the per-pixel maps (:data:`PIXEL_BYTES`) and the frames sampled
    for the stack checks (:data:`fusion.thermal.SAMPLE_FRAMES`, as stored)."""
    area = int(np.prod(frames.shape[1:], dtype=np.float64))
    sampled = min(int(frames.shape[0]), SAMPLE_FRAMES) * np.dtype(frames.dtype).itemsize
    return area * ((MOTION_PIXEL_BYTES if motion else PIXEL_BYTES) + sampled)


def _within_budget(path, frames, budget, motion):
    """Refuse, from the header alone, a stack whose frames are too large for the memory budget."""
    need = frame_memory(frames, motion=motion)
    if need > budget:
        ny, nx = frames.shape[1:]
        raise InputError(path, f"frames of {ny}x{nx} px need about {need / 1e6:,.0f} MB of per-pixel maps "
                         f"whatever their number, more than [compute] memory_budget = {budget / 1e6:,.0f} MB: "
                         "check that the frame size (shape, or the file's header) is right, or raise "
                         "memory_budget if this machine has the memory")


def open_thermal_frames(spec, *, key="thermal", progress=False, budget=None):
    """The frames of a run: a stack file, or a folder or pattern of per-frame files.

    Returns a lazy stack (``FrameStack`` or ``SequenceStack``) the lock-in streams in blocks.
    ``budget`` (bytes, ``[compute] memory_budget``): frames whose per-pixel memory
    (:func:`frame_memory`) exceeds it are refused from their header, before any is read.
    """
    if is_sequence(spec.frames):
        frames = open_sequence(spec.frames, name_time=spec.name_time, time_unit=spec.time_unit,
                               decimal=spec.decimal, exclude=beside_frames(spec), frame_count=spec.frame_count,
                               progress=progress)
        path = spec.frames
    else:
        if spec.name_time is not None:
            raise ConfigError(f"{key}.name_time", f"reads times from the names of a folder or pattern of frame "
                              f"files; frames = {str(spec.frames)!r} is one file (use times or frame_rate)")
        path = need_file(spec.frames, f"{key}.frames")
        frames = open_frames(path, dtype=spec.dtype, shape=spec.shape, byte_order=spec.byte_order,
                             dataset=spec.dataset, header_bytes=spec.header_bytes)
        if spec.frame_count is not None and frames.shape[0] != spec.frame_count:
            raise InputError(path, f"holds {frames.shape[0]} frames, frame_count says {spec.frame_count}: the "
                             "stack is incomplete or frame_count is wrong")
    if budget is not None:
        _within_budget(path, frames, budget, bool(spec.motion_compensation))
    return frames


def frames_within_budget(run, budget) -> None:
    """Refuse a run's frames whose headers promise frames too large for ``budget``
    (:func:`frame_memory`), reading nothing beyond the headers: before the frames are hashed
    or sampled. A stack file, or a folder or pattern of TIFF, PNG or .npy frames; text grids
    are checked when they are opened (their size is known only once one is parsed)."""
    spec = run.thermal
    if spec.frames is None:
        return
    if is_sequence(spec.frames):
        try:
            kind = list_sequence(spec.frames, name_time=spec.name_time, time_unit=spec.time_unit,
                                 exclude=beside_frames(spec)).kind
        except InputError:
            return          # said with its file when the frames are opened
        if kind != "text":
            open_thermal_frames(spec, budget=budget)
    elif Path(spec.frames).is_file():
        open_thermal_frames(spec, budget=budget)


def images_within_budget(path, shape, budget) -> None:
    """Refuse speckle images of ``shape`` (rows, columns; from the header of ``path``) whose
    correlation would need more than ``budget`` bytes (:data:`IMAGE_PIXEL_BYTES`)."""
    need = IMAGE_PIXEL_BYTES * int(shape[0]) * int(shape[1])
    if budget is not None and need > budget:
        raise InputError(path, f"speckle images of {shape[0]}x{shape[1]} px need about {need / 1e6:,.0f} MB to "
                         f"correlate, more than [compute] memory_budget = {budget / 1e6:,.0f} MB: crop the "
                         "images to the specimen (or bin them), or raise memory_budget if this machine has "
                         "the memory")


def frame_times(spec, frames, load_sig):
    """Frame times in s (None: from the frame rate), checked against the frames.

    A sequence with gaps in its numbering needs times per file (a times table, or times in
    the names): counted from the frame rate, every frame after a gap would be given the
    time of the one before it.
    """
    seq = getattr(frames, "sequence", None)
    n = frames.shape[0]
    if spec.times is not None:
        path = need_file(spec.times, "thermal.times")
        if seq is not None and path.suffix.lower() != ".npy":
            return read_sequence_times(path, seq, columns=spec.times_columns, unit=spec.time_unit,
                                       decimal=spec.decimal)
        return read_frame_times(path, n_frames=n) * spec.time_unit
    if seq is not None and seq.name_times is not None:
        return seq.name_times
    if seq is not None and seq.gaps:
        i, _, _ = seq.gaps[0]
        raise InputError(seq.files[i + 1], f"comes after {seq.files[i].name} in {seq.source}, but "
                         f"{seq.describe_gaps()}; with frame times counted from the frame rate every later "
                         "frame would be mistimed: copy the missing frames, or give times per file (a times "
                         "table with a file column, or name_time)")
    if spec.frame_rate is not None:
        return None
    if load_sig is not None and load_sig.times.size == n:
        return load_sig.times
    raise ConfigError("thermal.frame_rate", "frame times unknown: give frame_rate, times, or a load "
                      f"file with one sample per frame ({n} frames)")


@dataclasses.dataclass(frozen=True)
class SpeckleImages:
    """The speckle images of a run, the reference first, with the load of each (None: unknown)."""

    paths: tuple
    loads: np.ndarray | None
    source: str
    times: np.ndarray | None = None


def _reference_first(paths, loads, index):
    order = [index] + [k for k in range(len(paths)) if k != index]
    return tuple(paths[k] for k in order), None if loads is None else np.asarray(loads, float)[order]


def _named(spec, paths, where):
    names = [Path(p).name for p in paths]
    stems = [Path(p).stem for p in paths]
    if spec.reference in names:
        return names.index(spec.reference)
    if spec.reference in stems:
        return stems.index(spec.reference)
    raise ConfigError("dic.reference", f"{spec.reference!r} names no image of {where} (first images: "
                      f"{names[:3]!r})")


def speckle_images(spec) -> SpeckleImages:
    """The images of ``dic.images`` (a list, or a folder or pattern with its load log), reference first."""
    if not spec.image_sequence:
        paths = tuple(spec.images)
        index = _named(spec, paths, "dic.images") if spec.reference is not None else 0
        paths, loads = _reference_first(paths, spec.loads, index)
        return SpeckleImages(paths, loads, "dic.images")
    seq = image_sequence(spec)
    if spec.image_count is not None and len(seq) != spec.image_count:
        raise InputError(seq.source, f"holds {len(seq)} images, image_count says {spec.image_count}: the "
                         "sequence is incomplete (still being written or copied?) or image_count is wrong")
    times = None
    if spec.load_log is not None:
        loads, times = read_load_log(need_file(spec.load_log, "dic.load_log"), seq,
                                     columns=spec.load_log_columns, decimal=spec.decimal)
    else:
        if len(spec.loads) != len(seq):
            raise InputError(seq.source, f"holds {len(seq)} images, dic.loads lists {len(spec.loads)} loads: "
                             "one load per image in name order is needed (or a load_log)")
        loads = np.asarray(spec.loads, float)
    if len(seq) < 2:
        raise InputError(seq.source, f"holds {len(seq)} image; the correlation needs a reference and at "
                         "least one loaded image")
    # the reference: the one named, else the image at minimum load (the first of equals)
    index = _named(spec, seq.files, str(seq.source)) if spec.reference is not None else int(np.argmin(loads))
    paths, loads = _reference_first(seq.files, loads, index)
    if times is not None:
        times = _reference_first(seq.files, times, index)[1]
    return SpeckleImages(paths, loads, str(seq.source), times)


def reference_image_path(spec):
    """The visible reference image: ``reference_image``, else the correlation's reference, else None."""
    if spec.reference_image is not None:
        return spec.reference_image
    if spec.images is None:
        return None
    if not spec.image_sequence:
        return speckle_images(spec).paths[0]
    try:
        return speckle_images(spec).paths[0]
    except FusionError:
        return None


# ------------------------------------------------------------------------------ watching
@dataclasses.dataclass(frozen=True)
class InputState:
    """Whether every input of a run is there (``waiting_for`` says what is not) and their identity now."""

    ready: bool
    waiting_for: str
    signature: tuple


def _sequence_state(source, listing, count, marker, what):
    """(waiting reason or "", signature) of a sequence."""
    try:
        seq = listing()
    except FusionError as e:
        return f"{source} ({e.message if isinstance(e, InputError) else e})", ()
    sig = (str(source),) + seq.signature()
    if marker is not None and file_identity(marker) is None:
        return f"{marker} ({len(seq)} {what}s so far)", sig
    if count is not None and len(seq) < count:
        return f"{source} ({len(seq)} of {count} {what}s)", sig
    return "", sig


def input_state(run) -> InputState:
    """Are all inputs of a run present (sequences complete: their count or marker), and their identity.

    The identity (path, size, modification time of every file, sequence members
    included) changes while anything is still being written; `fusion watch` processes a
    run once it is ready and its identity has stayed the same for a settle period.
    """
    t, d = run.thermal, run.dic
    waiting, sig = [], []
    singles = [p for p in (t.maps, t.times, t.load, d.strain_ranges, d.load_log, d.mask, d.reference_image)
               if p is not None]
    singles += list(d.states or ()) + list(d.series or ())
    if t.frames is not None:
        if is_sequence(t.frames):
            why, s = _sequence_state(t.frames, lambda: frame_sequence(t), t.frame_count, t.done_marker, "frame")
            waiting += [why] if why else []
            sig += s
        else:
            singles.append(t.frames)
    if d.images is not None:
        if d.image_sequence:
            why, s = _sequence_state(d.images, lambda: image_sequence(d), d.image_count, d.done_marker, "image")
            waiting += [why] if why else []
            sig += s
        else:
            singles += list(d.images)
    for p in singles:
        fid = file_identity(p)
        if fid is None:
            waiting.append(str(p))
        sig.append(fid or (str(p), None, None))
    return InputState(not waiting, "; ".join(waiting), tuple(sig))
