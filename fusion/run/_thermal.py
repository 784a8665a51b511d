"""The thermal side of a run: T0, dT, phase and noise maps from a lock-in of the frames or from maps."""

from __future__ import annotations

import math

import numpy as np

from ..errors import ConfigError, InputError
from ..io import read_load_signal, read_thermal_maps
from ..thermal import estimate_frequency, load_reference, lockin, motion_compensate
from ..register import resample_to_grid
from ._files import need_file
from ._inputs import frame_times, open_thermal_frames

__all__ = ["thermal_side", "load_range", "motion_field"]


def load_range(sig, frequency):
    """Peak-to-peak range of the load's fundamental (a fit, so noise does not inflate it)."""
    try:
        f = frequency or estimate_frequency(sig.times, sig.load)
        return float(load_reference(sig.times, sig.load, f).range)
    except ValueError as e:
        raise InputError(sig.path, f"cannot find the load cycle in the load signal ({e})") from e


def thermal_side(run, *, budget, motion=None, progress=False):
    """T0, dT, phase, noise maps of a run (lock-in of frames, or precomputed maps)."""
    spec = run.thermal
    if spec.maps is not None:
        maps = read_thermal_maps(need_file(spec.maps, "thermal.maps"))
        T0, dT = np.asarray(maps["T0"], np.float32), np.asarray(maps["delta_T"], np.float32)
        std = maps.get("delta_T_std")
        if std is None:
            # no noise map: estimate it from the pixel-to-pixel scatter (median absolute Laplacian)
            lap = dT[1:-1, 1:-1] * 4 - dT[:-2, 1:-1] - dT[2:, 1:-1] - dT[1:-1, :-2] - dT[1:-1, 2:]
            sigma = 1.4826 * np.nanmedian(np.abs(lap)) / math.sqrt(20.0)
            std = np.full_like(dT, sigma)
        quad = maps.get("delta_T_quadrature")
        if quad is None and maps.get("phase") is not None:
            quad = dT * np.tan(np.deg2rad(np.asarray(maps["phase"], np.float32)))
        out = {"T0": T0, "delta_T": dT, "delta_T_std": np.asarray(std, np.float32)}
        if quad is not None:
            out["delta_T_quadrature"] = np.asarray(quad, np.float32)
        if maps.get("phase") is not None:
            out["phase"] = np.asarray(maps["phase"], np.float32)
        valid = np.isfinite(T0) & np.isfinite(dT)
        return out, valid, {"frequency": run.frequency, "source": "maps", "warnings": []}, None

    path = spec.frames
    frames = open_thermal_frames(spec, progress=progress)
    load_sig = None
    if spec.load is not None:
        load_sig = read_load_signal(need_file(spec.load, "thermal.load"), time_column=spec.time_column,
                                    load_column=spec.load_column)
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
    chunk = int(max(16, min(4096, budget // max(1, 4 * row_bytes))))
    try:
        res = lockin(src, frequency=run.frequency, times=times,
                     frame_rate=spec.frame_rate if times is None else None,
                     load=None if load_sig is None else load_sig.load,
                     load_times=None if load_sig is None else load_sig.times,
                     gain=gain, offset=offset, saturation=spec.saturation, chunk_frames=chunk,
                     progress=progress)
    except ValueError as e:
        raise InputError(path, f"lock-in: {e}") from e
    if not np.asarray(res.valid).any():
        raise InputError(path, f"no usable pixel in the stack: bad pixels by reason {dict(res.bad_pixels)} "
                         "(NaN/Inf, saturated or dead everywhere)")
    maps = res.to_maps()
    ok = np.asarray(res.valid, bool)
    info = {"frequency": float(res.frequency), "source": "lock-in", "n_frames": int(res.n_frames),
            "bad_pixels": dict(res.bad_pixels), "warnings": list(res.warnings),
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
