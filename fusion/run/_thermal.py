"""The thermal side of a run: T0, dT, phase and noise maps from a lock-in of the frames or from maps.

Before the lock-in the inputs are checked where they enter: a sample of frames for a
scrambled layout and for temperatures in kelvin, the load signal for the share of the
record it covers and for the frequency it shows against the configured one.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import ConfigError, InputError
from ..io import check_ratio, check_temperatures, read_load_signal, read_thermal_maps
from ..register import resample_to_grid
from ..thermal import (alias_candidates, estimate_frequency, layout_problem, load_reference, lockin,
                       motion_compensate, sample_frames)
from ._files import need_file
from ._inputs import frame_memory, frame_times, open_thermal_frames

__all__ = ["thermal_side", "maps_side", "prepared_maps", "load_range", "run_load_range", "motion_field",
           "load_and_frequency", "check_frames", "LOAD_CLOCK_FACTOR", "FREQUENCY_SIGMAS", "FREQUENCY_MISMATCH",
           "LOAD_COVERAGE_WARN", "LOAD_COVERAGE_FLOOR"]

#: A load sampled at least this many times faster than the frames runs on its own clock
#: and resolves every frequency the frames can be locked to without knowing it: slower,
#: it cannot tell a fast load from its alias, and the frequency must be configured.
LOAD_CLOCK_FACTOR = 2.0
#: Configured and estimated frequency agree within this many standard uncertainties.
FREQUENCY_SIGMAS = 3.0
#: Beyond this relative difference the configured frequency and the load file do not
#: describe the same test (a typo, a time column in ms, another run's file): refused.
FREQUENCY_MISMATCH = 0.10
#: Share of the frames' time span the load signal must cover before a warning names it,
#: and below which the run is refused (the reference phase would rest on less of the
#: record than it is extrapolated over, and the rest may hold no cycling at all).
LOAD_COVERAGE_WARN = 0.98
LOAD_COVERAGE_FLOOR = 0.5
# how far either side of 0 or 180 degrees a phase may sit for delta_T * tan(phase) to give
# the quadrature with at most twice the noise of delta_T
_QUADRATURE_FROM_TAN = 60.0


def load_range(sig, frequency):
    """Peak-to-peak range of the load's fundamental (a fit, so noise does not inflate it)."""
    try:
        f = frequency or estimate_frequency(sig.times, sig.load)
        return float(load_reference(sig.times, sig.load, f).range)
    except ValueError as e:
        raise InputError(sig.path, f"cannot find the load cycle in the load signal ({e})") from e


def _clock(spec, frames, load_sig):
    """Frame times for the lock-in (None with a frame rate), the times themselves and the rate (Hz)."""
    n_frames = frames.shape[0]
    times = frame_times(spec, frames, load_sig)
    t = times if times is not None else np.arange(n_frames) / spec.frame_rate
    rate = spec.frame_rate if times is None else 1.0 / float(np.median(np.diff(times)))
    return times, t, rate


def _open(spec, progress=False, budget=None):
    """The frames of a run: a stack file, or a folder or pattern of per-frame files."""
    return spec.frames, open_thermal_frames(spec, progress=progress, budget=budget)


def _read_load(spec):
    return read_load_signal(need_file(spec.load, "thermal.load"), time_column=spec.time_column,
                            load_column=spec.load_column)


def _coverage(sig, frame_t):
    """Share of the frames' time span the load signal covers, and the two spans."""
    a0, a1 = float(frame_t[0]), float(frame_t[-1])
    b0, b1 = float(sig.times[0]), float(sig.times[-1])
    span = a1 - a0
    share = max(0.0, min(a1, b1) - max(a0, b0)) / span if span > 0 else 1.0
    return min(share, 1.0), (a0, a1), (b0, b1)


def _resolve_frequency(configured, sig, frame_t, frame_rate, rate_from_config=False):
    """The loading frequency of a run with a load signal, and notes for the run's warnings.

    The load shows the frequency the machine ran at: it is estimated with its standard
    uncertainty, checked against the configured value and used where they disagree.
    """
    notes = []
    if frame_t is not None:
        share, (a0, a1), (b0, b1) = _coverage(sig, frame_t)
        where = f"{b0:.6g}..{b1:.6g} s against the frames' {a0:.6g}..{a1:.6g} s"
        if share < LOAD_COVERAGE_FLOOR:
            rate = ""
            if rate_from_config and b1 > b0:
                # the frames' times come from the configured rate: a mistyped rate shows up here
                rate = (f", thermal.frame_rate ({frame_rate:.6g} Hz; the load's span would fit "
                        f"{frame_rate * (a1 - a0) / (b1 - b0):.4g} Hz)")
            raise InputError(sig.path, f"covers {share:.0%} of the frames' record ({where}); at least "
                             f"{LOAD_COVERAGE_FLOOR:.0%} is needed: check the time column (seconds, on the "
                             f"frames' clock){rate} or cut the frames to the loaded part")
        if (rate_from_config and len(sig.times) == len(frame_t) and b1 > b0
                and abs((b1 - b0) / (a1 - a0) - 1.0) > 0.05):
            notes.append(f"the load signal has one sample per frame ({len(frame_t)}) but spans {b1 - b0:.6g} s "
                         f"against the frames' {a1 - a0:.6g} s at thermal.frame_rate = {frame_rate:.6g} Hz: if "
                         f"the load was logged with each frame, the frame rate is "
                         f"{frame_rate * (a1 - a0) / (b1 - b0):.4g} Hz")
        if share < LOAD_COVERAGE_WARN:
            notes.append(f"the load signal covers only {share:.0%} of the frames' record ({where}): the "
                         "reference phase is extrapolated over the rest, where the load was not recorded")
    try:
        est, std = estimate_frequency(sig.times, sig.load, return_std=True)
    except ValueError as e:
        if configured is None:
            raise InputError(sig.path, f"cannot find the load cycle in the load signal ({e})") from e
        notes.append(f"the load signal's frequency cannot be estimated ({e}): frequency = {configured:g} Hz "
                     "is used unchecked")
        return float(configured), None, notes
    t = sig.times
    load_rate = (t.size - 1) / float(t[-1] - t[0])
    own_clock = frame_rate is None or load_rate >= LOAD_CLOCK_FACTOR * frame_rate
    if configured is None:
        if not own_clock:
            others = ", ".join(f"{c:.6g}" for c in alias_candidates(est, load_rate, count=4)[1:])
            raise ConfigError("frequency", f"is required: the load signal {sig.path} is sampled no faster "
                              f"than the frames ({load_rate:.6g} Hz against {frame_rate:.6g} Hz), so the "
                              f"{est:.6g} Hz it shows may be the alias of a faster load ({others} Hz ...); give "
                              f"the frequency the machine ran at (frequency = \"{est:.6g} Hz\" if it is that)")
        notes.append(f"loading frequency {est:.8g} ± {std:.2g} Hz, estimated from the load signal")
        return est, std, notes
    # the configured frequency as the load's samples show it: the alias branch nearest to it
    candidates = alias_candidates(est, load_rate, up_to=1.5 * max(configured, est) + load_rate)
    seen = min(candidates, key=lambda c: abs(c - configured))
    diff = abs(seen - configured)
    if diff <= FREQUENCY_SIGMAS * std:
        return float(configured), std, notes
    if diff > FREQUENCY_MISMATCH * configured:
        raise InputError(sig.path, f"the load cycles at {seen:.6g} Hz, {diff / configured:.0%} away from "
                         f"frequency = {configured:g} Hz: check frequency, the time column (seconds?) and "
                         "that the load file belongs to this run")
    by = f"{diff / std:.0f} standard uncertainties" if diff < 1e3 * std else "far more than its uncertainty"
    notes.append(f"frequency {configured:g} Hz (config) differs from the {seen:.8g} ± {std:.2g} Hz of the load "
                 f"signal by {by}: the load signal's frequency is used")
    return float(seen), std, notes


def load_and_frequency(run, *, frames=None):
    """The load signal of a run (None without one), its loading frequency (Hz), notes and provenance.

    With frames the frame clock is read too: it decides whether the load can tell the
    frequency on its own and how much of the record the load covers. The provenance is a
    dict: ``frequency_source`` ("config" or "load signal") and ``frequency_std`` (Hz, the
    load signal's estimate; None without one).
    """
    spec = run.thermal
    if spec.load is None:
        return None, run.frequency, [], {"frequency_source": "config", "frequency_std": None}
    sig = _read_load(spec)
    frame_t = rate = None
    if spec.frames is not None:
        if frames is None:
            _, frames = _open(spec)
        times, frame_t, rate = _clock(spec, frames, sig)
    f, std, notes = _resolve_frequency(run.frequency, sig, frame_t, rate,
                                       rate_from_config=spec.frames is not None and times is None)
    source = "config" if run.frequency is not None and f == run.frequency else "load signal"
    return sig, f, notes, {"frequency_source": source, "frequency_std": std}


def run_load_range(run):
    """Peak-to-peak load range of a run's load signal at its resolved frequency, or None without one."""
    sig, f, _, _ = load_and_frequency(run)
    return None if sig is None else load_range(sig, f)


#: Values of the sampled frames whose median is checked against the plausible temperatures.
_MEDIAN_VALUES = 1 << 20


def check_frames(path, spec, frames):
    """Refuse a stack whose sampled frames look scrambled or are no temperatures in kelvin."""
    idx, sample = sample_frames(frames)
    if sample.dtype.kind == "f" and not np.isfinite(sample).any():
        raise InputError(path, f"no usable pixel in the stack: the {idx.size} frames sampled over the record "
                         "hold no finite value (NaN/Inf everywhere)")
    problem = layout_problem(sample, indices=idx)
    if problem is not None:
        kind, detail = problem
        raw = frames.kind == "raw" if hasattr(frames, "kind") else False
        frame_bytes = int(np.prod(frames.shape[1:])) * np.dtype(frames.dtype).itemsize
        if kind == "first frame":
            fix = (f"a header read as a frame? check header_bytes (one frame is {frame_bytes} bytes) and "
                   "the frame count in shape" if raw else
                   "remove it if the camera recorded it, or check how the file was written")
        elif kind == "swapped":
            fix = ("rows and columns look swapped: check shape = [frames, rows, cols]" if raw else
                   "the frames are not stored as (frame, row, col): check the file")
        else:
            fix = ("the row length is wrong: check shape (rows and columns swapped?), header_bytes and "
                   "byte_order" if raw else "the frames are not stored as (frame, row, col): check the file")
        raise InputError(path, f"the frames look scrambled: {detail}; {fix}")
    gain, offset = (spec.gain, spec.offset) if spec.values == "counts" else (1.0, 0.0)
    # a unit slip moves the median by orders of magnitude: an evenly strided subsample of the
    # sampled frames tells it as well as all of their values
    flat = sample.reshape(-1)
    flat = flat[::max(1, flat.size // _MEDIAN_VALUES)]
    with np.errstate(invalid="ignore", over="ignore"):
        temps = gain * flat.astype(np.float64) + offset
    check_temperatures(temps, where=path, what="the frames' temperature (gain * value + offset)",
                       statistic="median",
                       hint_counts="set values = \"counts\" with gain and offset" if spec.values == "kelvin"
                       else "check gain and offset")


def maps_side(run):
    """T0, dT, noise (and quadrature, phase) maps of a run with precomputed maps, checked."""
    spec = run.thermal
    path = need_file(spec.maps, "thermal.maps")
    variables = spec.variables
    try:
        maps = read_thermal_maps(path, variables=list(variables) if isinstance(variables, tuple) else variables)
    except (TypeError, ValueError) as e:
        if isinstance(e, InputError):
            raise
        raise ConfigError("thermal.variables", str(e)) from e
    out, valid, warnings = prepared_maps(maps, spec.delta_T_convention, where=path)
    info = {"frequency": run.frequency, "source": "maps", "delta_T_convention": spec.delta_T_convention,
            "warnings": warnings}
    return out, valid, info, None


def prepared_maps(maps, convention, *, where):
    """Precomputed maps in the run's conventions: peak-to-peak delta_T with its std and quadrature.

    ``maps`` as :func:`fusion.io.read_thermal_maps` returns them; ``convention`` is what their
    delta_T holds (``"peak-to-peak"`` or ``"amplitude"``); ``where`` names them in messages.
    Returns the maps, the pixels with T0 and delta_T, and warnings.
    """
    warnings = []
    scale = 2.0 if convention == "amplitude" else 1.0
    T0 = np.asarray(maps["T0"], np.float32)
    phase = maps.get("phase")
    quad = maps.get("delta_T_quadrature")
    mag = maps.get("magnitude")
    dT = maps.get("delta_T")
    if mag is not None and phase is not None:
        rad = np.deg2rad(np.asarray(phase, np.float64))
        if dT is None:
            dT = mag * np.cos(rad)
        if quad is None:
            quad = mag * np.sin(rad)
    elif quad is None and phase is not None:
        # Re C tan(phase) = Im C holds exactly, but near +-90 degrees Re C is mostly noise and
        # the product unbounded: the quadrature is taken only within 60 degrees of the
        # in-phase axis (noise at most about twice that of delta_T), NaN elsewhere
        rad = np.deg2rad(np.asarray(phase, np.float64))
        near_axis = np.abs(np.cos(rad)) >= math.cos(math.radians(_QUADRATURE_FROM_TAN))
        with np.errstate(invalid="ignore"):
            quad = np.where(near_axis, dT * np.tan(rad), np.nan)
        far = int(np.count_nonzero(~near_axis & np.isfinite(rad) & np.isfinite(dT)))
        if far:
            warnings.append(f"the maps give delta_T and phase but no quadrature: {far} pixels whose phase "
                            f"lies within {90 - _QUADRATURE_FROM_TAN:g} degrees of +-90 get no phase lag "
                            "(delta_T * tan(phase) is unbounded there) and leave the diagnosis; add "
                            "delta_T_quadrature or magnitude to the maps to keep them")
    dT = np.asarray(dT, np.float32) * np.float32(scale)
    std = maps.get("delta_T_std")
    if std is not None:
        std = np.asarray(std, np.float32) * np.float32(scale)
    else:
        # no noise map: estimate it from the pixel-to-pixel scatter (median absolute Laplacian)
        lap = dT[1:-1, 1:-1] * 4 - dT[:-2, 1:-1] - dT[2:, 1:-1] - dT[1:-1, :-2] - dT[1:-1, 2:]
        sigma = 1.4826 * np.nanmedian(np.abs(lap)) / math.sqrt(20.0)
        std = np.full_like(dT, sigma)
    check_ratio(dT, T0, where=where, fix="convert it to kelvin, or set units = \"mK\" on a NetCDF variable")
    out = {"T0": T0, "delta_T": dT, "delta_T_std": std}
    if quad is not None:
        out["delta_T_quadrature"] = np.asarray(quad, np.float32) * np.float32(scale)
    if phase is not None:
        out["phase"] = np.asarray(phase, np.float32)
    valid = np.isfinite(T0) & np.isfinite(dT)
    return out, valid, warnings


def thermal_side(run, *, budget, motion=None, progress=False):
    """T0, dT, phase, noise maps of a run (lock-in of frames, or precomputed maps)."""
    spec = run.thermal
    if spec.maps is not None:
        return maps_side(run)

    path, frames = _open(spec, progress=progress, budget=budget)
    check_frames(path, spec, frames)
    load_sig, frequency, notes, provenance = load_and_frequency(run, frames=frames)
    times = frame_times(spec, frames, load_sig)
    gain, offset = (spec.gain, spec.offset) if spec.values == "counts" else (1.0, 0.0)
    src = frames
    if motion is not None:
        if load_sig is None:
            raise ConfigError("thermal.motion_compensation", "needs a load signal (thermal.load)")
        t = times if times is not None else np.arange(frames.shape[0]) / spec.frame_rate
        load_at_frames = np.interp(t, load_sig.times, load_sig.load)
        src = motion_compensate(frames, motion, load_at_frames)
    row_bytes = 8 * int(np.prod(frames.shape[1:]))
    # the frame blocks get what the per-pixel maps leave of the budget
    left = budget - frame_memory(frames, motion=motion is not None)
    chunk = int(max(16, min(4096, left // max(1, 4 * row_bytes))))
    try:
        res = lockin(src, frequency=frequency, times=times,
                     frame_rate=spec.frame_rate if times is None else None,
                     load=None if load_sig is None else load_sig.load,
                     load_times=None if load_sig is None else load_sig.times,
                     gain=gain, offset=offset, saturation=spec.saturation, chunk_frames=chunk,
                     progress=progress)
    except ValueError as e:
        raise InputError(path, f"lock-in: {e}") from e
    if not np.asarray(res.valid).any():
        raise InputError(path, f"no usable pixel in the stack: bad pixels by reason {dict(res.bad_pixels)} "
                         "(NaN/Inf, saturated, clipped or dead everywhere)")
    ok = np.asarray(res.valid, bool)
    check_ratio(np.asarray(res.delta_T)[ok], np.asarray(res.T0)[ok], where=path,
                fix="check gain and offset")
    maps = res.to_maps()
    info = {"frequency": float(res.frequency), **provenance, "source": "lock-in", "n_frames": int(res.n_frames),
            "bad_pixels": dict(res.bad_pixels), "warnings": notes + list(res.warnings),
            # |C2| debiased for noise (E|C2|^2 = 2 std^2 for pure noise), over |C|: a warning of
            # dissipative heating should not fire on a noisy but clean run
            "second_harmonic_ratio_map": np.sqrt(np.maximum(
                np.asarray(res.second_harmonic, float) ** 2 - 2 * np.asarray(res.delta_T_std, float) ** 2, 0.0))
            / np.asarray(res.magnitude, float),
            "drift_rate_median": float(np.nanmedian(np.asarray(res.drift_rate)[ok])),
            "load_range": None if load_sig is None else load_range(load_sig, float(res.frequency))}
    return maps, np.asarray(res.valid, bool), info, load_sig


def motion_field(transform, disp, load_range, ir_shape):
    """Displacement per unit load on the IR grid (2, Y, X) in IR px, from the correlation range."""
    x, y, du, dv = (np.asarray(a, float) for a in disp)
    ok = np.isfinite(du) & np.isfinite(dv)
    p0 = np.column_stack([x, y])
    d_ir = transform.apply(p0 + np.column_stack([du, dv])) - transform.apply(p0)
    maps, _ = resample_to_grid(transform.apply(p0), d_ir / load_range, ir_shape, valid=ok)
    return np.nan_to_num(maps, nan=0.0)
