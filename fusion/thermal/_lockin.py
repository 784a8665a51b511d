"""Thermal lock-in of infrared frame stacks: one streaming least-squares pass.

Every pixel's series y(t) is fitted by linear least squares on the basis
``[1, tau, cos theta, sin theta, cos 2 theta, sin 2 theta]`` with
``theta(t) = 2 pi f t + phi`` the phase of the load (the load is
``L0 + dL/2 cos theta``) and ``tau`` the time from the middle of the record
scaled to [-1, 1]. The normal matrix is common to all pixels; only the
per-pixel products with the basis and the sum of squares are accumulated,
chunk by chunk (see :mod:`fusion.thermal._kernels`).
"""

from __future__ import annotations

import dataclasses
import logging
import math

import numpy as np

from .._conventions import short_repr
from . import _kernels
from ._frequency import estimate_frequency
from ._sanity import CLIP_SAMPLE_FRAMES, clip_levels, sample_frames

log = logging.getLogger(__name__)

__all__ = ["LockinResult", "LoadReference", "lockin", "load_reference"]

_N_BASIS = 6


# --------------------------------------------------------------------------- records
@dataclasses.dataclass(frozen=True)
class LoadReference:
    """Mean, range and phase of the load fundamental: ``L(t) = mean + range/2 cos(2 pi f t + phase)``.

    Attributes
    ----------
    mean : float
        Load at the middle of the record, file units.
    range : float
        Peak-to-peak range dL of the fundamental, file units (>= 0).
    phase : float
        Reference phase phi, rad, in (-pi, pi].
    frequency : float
        Loading frequency, Hz.
    residual_std : float
        Standard deviation of the load about its fitted model, file units.
    second_harmonic_ratio : float
        Peak-to-peak second harmonic over ``range`` (a measure of distortion).
    """

    mean: float
    range: float
    phase: float
    frequency: float
    residual_std: float = 0.0
    second_harmonic_ratio: float = 0.0

    def theta(self, times):
        """Phase of the load fundamental at ``times`` (s), rad."""
        return 2.0 * math.pi * self.frequency * np.asarray(times, dtype=np.float64) + self.phase


@dataclasses.dataclass
class LockinResult:
    """Maps and figures of one lock-in pass.

    Maps are ``(Y, X)`` float32, NaN where ``valid`` is false. Harmonic quantities are
    complex peak-to-peak amplitudes C relative to the load: ``y(t) = T0 + Re(C/2 exp(i theta))``.

    Attributes
    ----------
    T0 : ndarray
        Mean temperature at the middle of the record, K.
    delta_T : ndarray
        Re C: signed temperature range in phase with the load, K (T at max load minus T at min load).
    delta_T_quadrature : ndarray
        Im C: range in quadrature with the load, K.
    magnitude : ndarray
        abs(C), K.
    phase : ndarray
        angle(C), degrees in (-180, 180]; with Re C > 0 a response lagging the load has a
        negative angle (a tension-cooled pixel, Re C < 0, sits near +-180).
    delta_T_std : ndarray
        Standard deviation of ``delta_T`` from the residual variance, K.
    second_harmonic, second_harmonic_ratio : ndarray
        abs(C2) in K (peak-to-peak at 2f) and abs(C2)/abs(C).
    drift_rate : ndarray
        Linear drift of the temperature, K/s.
    residual_std : ndarray
        Standard deviation of the residual of the fit, K.
    snr : ndarray
        abs(delta_T) / delta_T_std.
    valid : ndarray of bool
        Pixel fitted (no NaN/inf, saturated or dead frames).
    frequency : float
        Loading frequency used, Hz.
    reference_phase : float
        Load phase phi at t = 0, rad (0 without a load signal).
    n_frames : int
    frame_rate : float
        Mean frame rate, Hz.
    bad_pixels : dict
        Counts of masked pixels by reason: ``nonfinite``, ``saturated``, ``clipped`` (on a
        pile-up at the stack's extreme raw values), ``dead``.
    warnings : list of str
        Notes on the sampling and the data (undersampling, noise inflation, masked pixels).
    load : LoadReference or None
        The fitted load reference, when a load signal was given.
    """

    __repr__ = short_repr  # shapes, not values

    T0: np.ndarray
    delta_T: np.ndarray
    delta_T_quadrature: np.ndarray
    magnitude: np.ndarray
    phase: np.ndarray
    delta_T_std: np.ndarray
    second_harmonic: np.ndarray
    second_harmonic_ratio: np.ndarray
    drift_rate: np.ndarray
    residual_std: np.ndarray
    snr: np.ndarray
    valid: np.ndarray
    frequency: float
    reference_phase: float
    n_frames: int
    frame_rate: float
    bad_pixels: dict
    warnings: list
    load: LoadReference | None = None

    def to_maps(self) -> dict:
        """The maps of the result data model (:mod:`fusion.datamodel`) as float32 arrays."""
        return {name: getattr(self, name) for name in
                ("T0", "delta_T", "delta_T_std", "delta_T_quadrature", "phase", "snr")}


# --------------------------------------------------------------------------- basis
def _check_times(times, n, name="times"):
    t = np.asarray(times, dtype=np.float64)
    if t.shape != (n,):
        raise ValueError(f"{name} must have shape ({n},) to match the frames, got {t.shape!r}")
    if not np.all(np.isfinite(t)):
        raise ValueError(f"{name} must be finite")
    if n > 1 and np.any(np.diff(t) <= 0):
        raise ValueError(f"{name} must increase strictly (s)")
    return t


def _design(times, frequency, phase):
    """(N, 6) basis [1, tau, cos th, sin th, cos 2th, sin 2th] and the half span of tau (s)."""
    t = np.asarray(times, dtype=np.float64)
    mid = 0.5 * (t[0] + t[-1])
    half = max(0.5 * (t[-1] - t[0]), float(np.finfo(np.float64).tiny))
    theta = 2.0 * math.pi * float(frequency) * t + float(phase)
    B = np.empty((t.size, _N_BASIS))
    B[:, 0] = 1.0
    B[:, 1] = (t - mid) / half
    B[:, 2] = np.cos(theta)
    B[:, 3] = np.sin(theta)
    B[:, 4] = np.cos(2.0 * theta)
    B[:, 5] = np.sin(2.0 * theta)
    return B, half


def _sampling_check(B, frequency, frame_rate, span):
    """Refuse a basis the samples cannot resolve; return notes on a weak one.

    The noise of the in-phase and quadrature coefficients is inflated by the variance
    inflation factor (VIF) of their columns; with orthogonal columns it is 1.
    """
    n = B.shape[0]
    where = f"frequency {frequency!r} Hz with frame rate {frame_rate!r} Hz over {n} frames"
    cycles = frequency * span
    if cycles < 1.0:
        raise ValueError(f"{where}: the record covers {cycles:.2f} load cycles; at least one is "
                         "needed (record more frames)")
    G = _kernels.gram(B)
    d = np.diag(G)
    if np.any(d < 1e-9 * n):
        raise ValueError(f"{where}: a basis column vanishes at the sample times (the frequency or "
                         "its second harmonic falls on a multiple of half the frame rate); change "
                         "the frame rate")
    Gn = G / np.sqrt(np.outer(d, d))
    w, V = np.linalg.eigh(Gn)   # one decomposition gives the condition number and inv(Gn)
    if not w[0] > 1e-10 * w[-1]:
        raise ValueError(f"{where}: the sampled basis is singular (the frequency or its second "
                         "harmonic aliases onto the mean, the drift or each other); change the "
                         "frame rate or record more frames")
    vif = (V * V) @ (1.0 / w)   # diagonal of inv(Gn) = V diag(1/w) V^T
    notes = []
    if max(vif[2], vif[3]) > 100.0 or max(vif[1], vif[4], vif[5]) > 1e6:
        raise ValueError(f"{where}: the samples barely separate the fundamental from the mean, "
                         f"drift or second harmonic (noise amplified {math.sqrt(max(vif[2:4])):.0f}x); "
                         "change the frame rate or record more frames")
    if max(vif[2], vif[3]) > 4.0:
        notes.append(f"sampling inflates the noise of delta_T by {math.sqrt(max(vif[2:4])):.1f}x "
                     f"({where})")
    if frame_rate < 2.0 * frequency:
        alias = abs(frequency - round(frequency / frame_rate) * frame_rate)
        notes.append(f"frame rate {frame_rate:g} Hz is below twice the loading frequency "
                     f"{frequency:g} Hz (undersampled; the fundamental appears at {alias:g} Hz): "
                     "the fit relies on the frequency being exact")
    return G, notes


# --------------------------------------------------------------------------- load signal
def _fit_basis(times, values, frequency, phase=0.0):
    B, half = _design(times, frequency, phase)
    coef, _, rank, _ = np.linalg.lstsq(B, values, rcond=None)
    resid = values - B @ coef
    dof = max(B.shape[0] - _N_BASIS, 1)
    return coef, rank, float(np.sqrt(resid @ resid / dof)), half


def load_reference(times, load, frequency) -> LoadReference:
    """Mean, peak-to-peak range and phase of the load fundamental.

    Parameters
    ----------
    times : (N,) array_like
        Sample times of the load, s (strictly increasing, same clock as the frames).
    load : (N,) array_like
        Load values, any unit.
    frequency : float
        Loading frequency, Hz.

    Returns
    -------
    LoadReference
        With ``theta(t) = 2 pi f t + phase`` such that the load is ``mean + range/2 cos(theta)``.

    Notes
    -----
    Linear least squares on the same basis as the temperature (mean, linear drift,
    fundamental and second harmonic), so a drifting or slightly distorted load does not
    bias the phase. With ``a cos(2 pi f t) + b sin(2 pi f t) = R cos(2 pi f t + phi)``,
    ``R = hypot(a, b)`` and ``phi = atan2(-b, a)``.

    References
    ----------
    .. [1] S. M. Kay, *Fundamentals of Statistical Signal Processing: Estimation Theory*,
       Prentice Hall, 1993, ch. 4 (linear model, sinusoidal regression).
    """
    t = np.asarray(times, dtype=np.float64).ravel()
    v = np.asarray(load, dtype=np.float64).ravel()
    frequency = _positive(frequency, "frequency")
    if t.shape != v.shape or t.size < 8:
        raise ValueError(f"times and load must be 1-D of equal length >= 8, got {t.shape!r} and {v.shape!r}")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(v))) or np.any(np.diff(t) <= 0):
        raise ValueError("load times must be finite and strictly increasing, and load values finite")
    coef, rank, res_std, _ = _fit_basis(t, v, frequency)
    if rank < _N_BASIS:
        rate = (t.size - 1) / (t[-1] - t[0])
        raise ValueError(f"frequency {frequency!r} Hz cannot be resolved from load samples at "
                         f"{rate:g} Hz (singular basis)")
    amp = math.hypot(coef[2], coef[3])
    if amp <= 3.0 * res_std * math.sqrt(2.0 / t.size) or amp == 0.0:
        raise ValueError(f"the load signal shows no cycle at {frequency:g} Hz (fitted amplitude "
                         f"{amp:.3g}, residual std {res_std:.3g})")
    return LoadReference(mean=float(coef[0]), range=2.0 * amp, phase=math.atan2(-coef[3], coef[2]),
                         frequency=float(frequency), residual_std=res_std,
                         second_harmonic_ratio=math.hypot(coef[4], coef[5]) / amp)


# --------------------------------------------------------------------------- main entry
def _positive(value, name):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise ValueError(f"{name} must be a positive finite number, got {value!r}")
    return v


def lockin(frames, *, frequency=None, times=None, frame_rate=None, load=None, load_times=None,
           gain=1.0, offset=0.0, saturation=None, clipping="detect", chunk_frames=None, progress=False,
           precision="auto") -> LockinResult:
    """Least-squares lock-in of an infrared frame stack against the load, in one pass.

    Parameters
    ----------
    frames : (F, Y, X) ndarray, numpy.memmap, FrameStack or dask array
        Frames in time order; values ``gain * frame + offset`` are temperatures in K.
        Integer counts are fitted directly (no float copy of the stack). A dask array
        is processed block by block along frames (rechunked to whole frames), on the
        active scheduler. Any object with ``shape`` and frame-slice indexing also works.
    frequency : float, optional
        Loading frequency, Hz. Estimated from ``load`` when omitted (then ``load`` is required).
    times : (F,) array_like, optional
        Frame times, s. Exactly one of ``times`` and ``frame_rate``.
    frame_rate : float, optional
        Frames per second, Hz; frame k is at ``k / frame_rate``.
    load : (M,) array_like or LoadSignal, optional
        Load signal giving the reference phase. Without it the reference phase is 0 at
        t = 0 (the phase maps are then relative to ``cos(2 pi f t)``).
    load_times : (M,) array_like, optional
        Times of the load samples on the frame clock, s; by default the load has one
        sample per frame at the frame times.
    gain, offset : float
        Calibration ``T = gain * value + offset`` (K per count, K), applied to the fitted
        coefficients, never to the frames.
    saturation : float, optional
        Raw value (counts, or K for temperature frames) at or above which a pixel is
        taken as saturated and masked.
    clipping : {"detect", "ignore"}
        ``"detect"`` looks for pile-ups at the extreme raw values of a sample of frames
        (:func:`fusion.thermal.clip_levels`) and masks every pixel that reaches such a
        value as ``clipped``, in the same pass; ``"ignore"`` skips that.
    chunk_frames : int, optional
        Frames per streamed block. Default: a C-contiguous array in memory in one pass
        (about 20 blocks with a progress bar); memory maps and lazy stacks in blocks of
        about 32 MiB, each released from memory once added; dask arrays as chunked.
    progress : bool
        A bar on stderr when it is a terminal, else a line at every quarter.
    precision : {"auto", "float64"}
        Arithmetic of the pass. ``"auto"`` multiplies float32 and 8/16-bit integer
        stacks in float32 (sums widened to float64 every 64 frames, see Notes) and
        refits in float64 when that cannot resolve the residual; ``"float64"``
        always works in float64 (about 1.1-1.4x slower on a float32 stack in memory).

    Returns
    -------
    LockinResult
        float32 maps (K, K/s, degrees) and the scalars of the pass.

    Raises
    ------
    ValueError
        Bad arguments, or sampling that cannot resolve the frequency (the message names
        the frequency and the frame rate). Undersampling itself is allowed.

    Notes
    -----
    With the coefficients ``a, b`` of ``cos theta, sin theta``, ``C = 2a - 2ib``; the
    same for ``C2`` at ``2 theta``. The coefficients are ``(X^T X)^-1 X^T y`` with the
    common 6x6 normal matrix; the residual variance is
    ``s^2 = (sum d^2 - beta . X^T d) / (N - 6)`` and ``std(Re C) = 2 s sqrt((X^T X)^-1_aa)``,
    which for white noise of std sigma and many whole cycles is ``sigma sqrt(8/N)``
    (each quadrature amplitude has std ``sigma sqrt(2/N)``). A pixel with any NaN or
    infinite value, any value at or above ``saturation`` or on a detected clip level, or no
    variation at all is masked and counted in ``bad_pixels``; its sums are its own, so neighbours are untouched.
    Frames with a non-uniform clock are handled exactly through ``times``. Results are
    only as good as the frequency: an error df walks the phase by 360 df T degrees over a
    record of length T.

    Float32 and 8/16-bit integer stacks are multiplied in float32 (twice the values per
    vector instruction, which keeps the pass near the speed of memory), summed over 64
    frames about the first of them and then widened to float64. The coefficients then
    differ from a float64 fit by ~1e-7 of the values (far below their standard errors)
    and the residual noise by about ``6e-8 / rho`` relative, with ``rho`` the residual
    over the sum of squares of the pixel's offsets (3e-5 for a 0.8 K range in 20 mK
    noise). Where ``rho`` is so small that this exceeds 1e-3 on more than 1 % of the
    pixels, the pass is repeated in float64 and a warning says so.

    References
    ----------
    .. [1] S. M. Kay, *Fundamentals of Statistical Signal Processing: Estimation Theory*,
       Prentice Hall, 1993, ch. 4 (linear model; Fourier coefficients of a sinusoid in
       white noise have variance 2 sigma^2 / N).
    .. [2] P. Bloomfield, *Fourier Analysis of Time Series*, 2nd ed., Wiley, 2000, ch. 2-3.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(400) / 50.0
    >>> frames = (293.0 - 0.5 * np.cos(2 * np.pi * 5.0 * t))[:, None, None] * np.ones((1, 2, 3))
    >>> r = lockin(frames, frequency=5.0, frame_rate=50.0)
    >>> round(float(r.delta_T[0, 0]), 4), round(float(r.T0[0, 0]), 3)
    (-1.0, 293.0)
    """
    shape = tuple(getattr(frames, "shape", ()))
    if len(shape) != 3:
        raise ValueError(f"frames must be a (frames, rows, cols) stack, got shape {shape!r}")
    n, ny, nx = (int(s) for s in shape)
    if n < 2 * _N_BASIS:
        raise ValueError(f"at least {2 * _N_BASIS} frames are needed for a lock-in, got {n}")
    if (times is None) == (frame_rate is None):
        raise ValueError("give exactly one of times and frame_rate")
    if times is not None:
        t = _check_times(times, n)
        rate = 1.0 / float(np.median(np.diff(t)))
    else:
        rate = _positive(frame_rate, "frame_rate")
        t = np.arange(n, dtype=np.float64) / rate
    gain = float(gain)
    offset = float(offset)
    if not (math.isfinite(gain) and gain != 0.0 and math.isfinite(offset)):
        raise ValueError(f"gain must be finite and non-zero and offset finite, got {gain!r}, {offset!r}")

    notes: list[str] = []
    ref_load = None
    if load is not None:
        if hasattr(load, "times") and hasattr(load, "load"):
            load_times, load = (load.times if load_times is None else load_times), load.load
        lv = np.asarray(load, dtype=np.float64).ravel()
        lt = t if load_times is None else np.asarray(load_times, dtype=np.float64).ravel()
        if lt.shape != lv.shape:
            raise ValueError(f"load has {lv.size} samples but its times {lt.size} (without load_times "
                             f"the load needs one sample per frame, {n})")
        if frequency is None:
            frequency = estimate_frequency(lt, lv)
            load_rate = (lv.size - 1) / float(lt[-1] - lt[0]) if lv.size > 1 else rate
            notes.append(f"loading frequency estimated from the load signal: {frequency:.6g} Hz (an "
                         f"alias if the true frequency exceeds {load_rate / 2:g} Hz, half the load's "
                         "sample rate: give the frequency to be sure)")
        frequency = _positive(frequency, "frequency")
        ref_load = load_reference(lt, lv, frequency)
        phi = ref_load.phase
    else:
        if frequency is None:
            raise ValueError("frequency is required when no load signal is given")
        frequency = _positive(frequency, "frequency")
        phi = 0.0

    B, half = _design(t, frequency, phi)
    _, sampling_notes = _sampling_check(B, frequency, rate, t[-1] - t[0])
    notes += sampling_notes
    if saturation is not None:
        saturation = float(saturation)
    if clipping not in ("detect", "ignore"):
        raise ValueError(f"clipping must be 'detect' or 'ignore', got {clipping!r}")
    clip_high = clip_low = None
    if clipping == "detect":
        _frames_dtype(frames)
        clip_high, clip_low = clip_levels(sample_frames(frames, CLIP_SAMPLE_FRAMES)[1])
        if clip_high is not None and saturation is not None and clip_high >= saturation:
            clip_high = None  # the saturation threshold masks those pixels already
    if chunk_frames is not None and not _kernels.is_dask(frames) and int(chunk_frames) < 1:
        raise ValueError(f"chunk_frames must be a positive integer, got {chunk_frames!r}")
    if precision not in ("auto", "float64"):
        raise ValueError(f"precision must be 'auto' or 'float64', got {precision!r}")
    work = np.dtype(np.float64) if precision == "float64" else _kernels.work_dtype(_frames_dtype(frames))

    fit = dict(frames=frames, B=B, half=half, gain=gain, offset=offset, saturation=saturation,
               clip=(clip_high, clip_low), chunk_frames=chunk_frames, progress=progress)
    maps, bad, unresolved = _fit(work=work, **fit)
    if unresolved > _UNRESOLVED_LIMIT:
        # float32 sums cannot resolve the residual of these pixels (a range of roughly 250
        # times the noise or more): a second pass in float64 keeps the noise maps honest
        notes.append(f"{unresolved:.1%} of the pixels have a temperature range of some 250 times "
                     "their noise or more: refitted in float64 (a second pass over the frames)")
        maps, bad, _ = _fit(work=np.dtype(np.float64), **fit)
    for level, side in ((clip_high, "highest"), (clip_low, "lowest")):
        if level is not None:
            notes.append(f"the frames pile up at their {side} raw value {level:.10g} (clipped by the "
                         f"detector or its export): {bad['clipped']} pixels reaching a clip level masked "
                         "as clipped")
    nbad = sum(bad.values())
    if nbad:
        notes.append(f"{nbad} of {ny * nx} pixels masked: " +
                     ", ".join(f"{v} {k}" for k, v in bad.items() if v))
    for msg in notes:
        log.info("lock-in: %s", msg)
    return LockinResult(**maps, frequency=float(frequency), reference_phase=float(phi), n_frames=n,
                        frame_rate=float(rate), bad_pixels=bad, warnings=notes, load=ref_load)


#: Largest fraction of pixels whose float32 residual may be off by more than 1e-3 before
#: the pass is repeated in float64.
_UNRESOLVED_LIMIT = 0.01
#: Smallest residual / sum of squares that float32 sums resolve to 1e-3: the rounding of
#: the sums is about eps/2 of the sum of squares, so the residual is off by eps/2 / ratio.
#: With offsets of about a quarter of the squared range R, the ratio is ~4 sigma^2 / R^2:
#: the limit is reached near R = 250 sigma.
_RESOLVED_RATIO = float(np.finfo(np.float32).eps) / 2 / 1e-3


def _fit(*, frames, B, work, half, gain, offset, saturation, clip, chunk_frames, progress):
    """One pass in the ``work`` dtype and the solve; maps, bad-pixel counts, unresolved fraction."""
    # the kernels multiply by the basis rounded to their work dtype: the normal matrix is
    # built from those very values, so the fit is exact least squares on them
    Bw = B.astype(work)
    G = _kernels.gram(Bw)
    with_max = saturation is not None or clip != (None, None)
    if _kernels.is_dask(frames):
        acc, vmax, vmin, ref = _kernels.stream_dask(frames, Bw, with_max, chunk_frames, progress)
    else:
        acc, vmax, vmin, ref = _kernels.stream(frames, Bw, with_max, chunk_frames, progress)
    shape = tuple(frames.shape[1:])
    maps, bad, n_unresolved, valid = _solve(acc, vmax, vmin, ref, G, half, B.shape[0], gain, offset,
                                            saturation, clip, shape)
    unresolved = 0.0
    if work == np.float32 and valid:
        unresolved = n_unresolved / valid
    return maps, bad, unresolved


def _frames_dtype(frames):
    """The dtype of a stack's values, refused early when not numeric."""
    dt = getattr(frames, "dtype", None)
    dt = np.dtype(dt) if dt is not None else np.asarray(frames[:1]).dtype
    if dt.kind not in "iuf":
        raise TypeError(f"frames must be numeric (int, uint or float), got dtype {dt!r}")
    return dt


def _solve(acc, vmax, vmin, ref, G, half, n, gain, offset, saturation, clip, shape):
    """Per-pixel maps and masks from the accumulated sums (compiled, no large temporaries).

    The sums come in the band layout of the pass (:func:`fusion.thermal._kernels.stream`);
    the maps are returned as ``shape`` (Y, X) views. Also returns the number of valid
    pixels whose residual float32 sums cannot resolve (see :func:`_fit`) and of valid pixels.
    ``clip`` holds the detected clip levels (high, low; None where none): pixels reaching
    one are counted as ``clipped``, the rest of the kernel's saturated ones as ``saturated``.
    """
    rows, _, cols = acc.shape
    out = np.empty((len(_kernels.MAP_NAMES), rows, cols), np.float32)
    valid = np.empty((rows, cols), np.bool_)
    counts = np.zeros((rows, 5), np.int64)
    vm = vmax if vmax is not None else np.empty((0, 0))
    vn = vmin if vmin is not None else np.empty((0, 0))
    high, low = clip
    sat = min(float(saturation) if saturation is not None else math.inf,
              high if high is not None else math.inf)
    lo = low if low is not None else -math.inf
    _kernels.solve(acc, ref, np.linalg.inv(G), vm, vn, sat, lo, gain, offset, half, float(n - _N_BASIS),
                   _RESOLVED_RATIO, out, valid, counts)
    out = out.reshape(out.shape[0], *shape)
    counts = counts.sum(axis=0)
    clipped = 0
    if clip != (None, None):
        reach = np.zeros(vm.shape, bool)
        if high is not None:
            reach |= vm >= high
        if low is not None:
            reach |= vn <= low
        # a pixel with a non-finite value counts as non-finite first, as in the kernel
        clipped = min(int(np.count_nonzero(reach & ~valid)), int(counts[2]))
    bad = {"nonfinite": int(counts[1]), "saturated": int(counts[2]) - clipped, "clipped": clipped,
           "dead": int(counts[3])}
    maps = {name: out[k] for k, name in enumerate(_kernels.MAP_NAMES)}
    maps["valid"] = valid.reshape(shape)
    return maps, bad, int(counts[4]), int(counts[0])
