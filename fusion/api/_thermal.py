"""The thermal steps: lock-in maps of a frame stack or precomputed maps, and the motion field."""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._bounds import check_frame_axes, check_grid_shape, check_temperature
from ..datamodel import result_dataset
from ..diagnose import measured_ratio
from ..errors import ArgumentError
from ..io import LoadSignal, read_thermal_maps
from ..register import Transform2D
from ..run._thermal import motion_field as _run_motion_field
from ..run._thermal import prepared_maps
from ..thermal import estimate_frequency, load_reference, lockin, motion_amplitude, motion_compensate
from ._labels import extra, flag, grid_shape_of, to_ranges

__all__ = ["lockin_maps", "motion_field", "thermal_maps"]


def _load(load, load_times):
    if isinstance(load, LoadSignal):
        if load_times is not None:
            raise ArgumentError("load_times", "a LoadSignal carries its own times; leave load_times out")
        return np.asarray(load.load, np.float64), np.asarray(load.times, np.float64)
    if load is None:
        return None, None
    return np.asarray(load, np.float64), None if load_times is None else np.asarray(load_times, np.float64)


def _add_measured(maps):
    """Add the measured ratio dT/T0, its std, the SNR and (with a quadrature) the phase lag to
    ``maps``; returns the lag's std (None without a quadrature: no lag, as in a run)."""
    ratio, ratio_std, snr, lag, lag_std = measured_ratio(maps["T0"], maps["delta_T"], maps["delta_T_std"],
                                                         maps.get("delta_T_quadrature"))
    maps.update(ratio_measured=ratio, ratio_measured_std=ratio_std, snr=snr)
    if lag is not None:
        maps["phase_lag_measured"] = lag
    return lag_std


def _add_lag_std_and_valid(ds, lag_std, ok, meaning):
    if lag_std is not None:
        ds["phase_lag_measured_std"] = extra(("y", "x"), lag_std, "degree", "standard deviation of "
                                             "phase_lag_measured")
    ds["thermal_valid"] = flag(("y", "x"), ok, meaning)


def lockin_maps(frames, *, frequency=None, frame_rate=None, times=None, load=None, load_times=None,
                gain=1.0, offset=0.0, saturation=None, motion=None, chunk_frames=None, progress=False):
    """Lock-in maps of an infrared frame stack, labelled on the IR grid.

    Parameters
    ----------
    frames : (F, Y, X) array_like
        Frames in time order, axes (frame, row, column): an ndarray, a memory map or the
        :class:`~fusion.io.FrameStack` of :func:`fusion.io.open_frames`. Values
        ``gain * frame + offset`` are temperatures in K.
    frequency : float, optional
        Loading frequency, Hz; estimated from ``load`` when omitted.
    frame_rate : float, optional
        Frames per second, Hz. Give it or ``times`` (or a load with one sample per frame).
    times : (F,) array_like, optional
        Frame times, s.
    load : LoadSignal or (M,) array_like, optional
        The load signal (:func:`fusion.io.read_load_signal`), the phase reference.
    load_times : (M,) array_like, optional
        Times of the load samples on the frame clock, s (an array ``load`` only; default one
        sample per frame).
    gain, offset : float
        Calibration ``T = gain * value + offset``: K per count, K.
    saturation : float, optional
        Raw value at or above which a pixel is masked as saturated.
    motion : (2, Y, X) array_like, optional
        Displacement per unit load on the IR grid (:func:`fusion.motion_field`): the frames
        are warped back to the reference configuration before the lock-in (needs ``load``).
    chunk_frames : int, optional
        Frames per streamed block (see :func:`fusion.thermal.lockin`).
    progress : bool
        A progress bar on stderr when it is a terminal.

    Returns
    -------
    xarray.Dataset
        On the IR grid, dims ``(y, x)`` = (IR row, IR column) in pixels: ``T0``, ``delta_T``,
        ``delta_T_std``, ``delta_T_quadrature`` (K), ``phase`` (degree), and what the
        diagnosis takes: ``ratio_measured`` and ``ratio_measured_std`` (dT/T0,
        dimensionless), ``snr``, ``phase_lag_measured`` and ``phase_lag_measured_std``
        (degree, positive when delayed), ``thermal_valid`` (pixel fitted), and with
        ``motion`` ``motion_amplitude`` (IR px) and the field itself, ``motion_per_load``. ``attrs`` hold ``frequency`` (Hz),
        ``load_range`` (peak-to-peak load of the fundamental, the load's unit; NaN without a
        load), ``n_frames``, ``frame_rate``, ``reference_phase`` (rad), ``bad_pixels``,
        ``warnings``.

    Raises
    ------
    ArgumentError
        A stack whose axes look like (rows, columns, frames); mean temperatures that look
        like degrees Celsius or counts; ``motion`` without a load.

    Notes
    -----
    The lock-in of a run's thermal step (:func:`fusion.thermal.lockin`), with the frame
    clock and motion compensation as ``fusion run`` sets them up; the measured ratio and
    phase lag are those of :func:`fusion.diagnose.measured_ratio`. ``frequency`` is used as
    given: ``fusion run`` also checks a configured frequency against the load signal's and
    takes the load's where they disagree beyond its uncertainty
    (:func:`fusion.thermal.estimate_frequency` with ``return_std=True`` gives it).
    """
    shape = tuple(getattr(frames, "shape", np.shape(frames)))
    load_v, load_t = _load(load, load_times)
    # one frame time per frame, and a load without its own times has one sample per frame
    n_times = len(times) if times is not None else (load_v.size if load_v is not None and load_t is None
                                                    else None)
    check_frame_axes(shape, "frames", n_times=n_times)
    if times is None and frame_rate is None and load_t is not None and load_t.size == shape[0]:
        times = load_t          # a load sampled with the frames gives the frame clock, as in a run
    src = frames
    if motion is not None:
        if load_v is None:
            raise ArgumentError("motion", "motion compensation needs the load at every frame: give load=")
        m = np.asarray(motion.values if isinstance(motion, xr.DataArray) else motion, np.float32)
        if m.shape != (2,) + shape[1:]:
            raise ArgumentError("motion", f"expected (2, Y, X) = {(2,) + shape[1:]!r} on the frames' grid, "
                                f"got {m.shape!r}")
        if times is None and frame_rate is None:
            raise ArgumentError("frame_rate", "frame times unknown: give frame_rate or times")
        t = np.asarray(times, np.float64) if times is not None else np.arange(shape[0]) / frame_rate
        src = motion_compensate(frames, m, np.interp(t, t if load_t is None else load_t, load_v))
    try:
        res = lockin(src, frequency=frequency, times=times, frame_rate=frame_rate if times is None else None,
                     load=load_v, load_times=load_t, gain=gain, offset=offset, saturation=saturation,
                     chunk_frames=chunk_frames, progress=progress)
    except ValueError as e:
        raise ArgumentError("frames", f"lock-in: {e}") from e
    ok = np.asarray(res.valid, bool)
    check_temperature(np.asarray(res.T0)[ok], "frames")
    maps = res.to_maps()
    lag_std = _add_measured(maps)
    load_range = float("nan")
    if load_v is not None:
        lt = load_t if load_t is not None else (np.asarray(times, np.float64) if times is not None
                                                else np.arange(load_v.size) / frame_rate)
        f = frequency or estimate_frequency(lt, load_v)
        load_range = float(load_reference(lt, load_v, f).range)
    if motion is not None:
        maps["motion_amplitude"] = np.asarray(motion_amplitude(m, load_range), np.float32)
    ds = result_dataset(maps)
    if motion is not None:
        # kept for the diagnosis: where the warp reaches pixels without data
        ds["motion_per_load"] = extra(("component", "y", "x"), m, "pixel", "in-plane displacement per unit "
                                      "load the frames were warped back by, (x, y) = (column, row) IR px per "
                                      "unit of the load")
        ds = ds.assign_coords(component=["x", "y"])
    _add_lag_std_and_valid(ds, lag_std, ok, "pixel fitted by the lock-in (no NaN, saturated or dead frames)")
    ds.attrs.update(frequency=float(res.frequency), frequency_units="Hz", load_range=load_range,
                    n_frames=int(res.n_frames), frame_rate=float(res.frame_rate),
                    reference_phase=float(res.reference_phase), bad_pixels=dict(res.bad_pixels),
                    warnings=list(res.warnings), motion_compensated=motion is not None)
    return ds


_CONVENTIONS = ("peak-to-peak", "amplitude")


def thermal_maps(maps, *, delta_T_convention, frequency=None, variables=None):
    """Precomputed thermal maps (an earlier lock-in, another program's export), labelled on the IR grid.

    Parameters
    ----------
    maps : str, os.PathLike, mapping of str to path, or mapping of str to (Y, X) array_like
        A file :func:`fusion.io.read_thermal_maps` reads (NetCDF, multi-page TIFF, long CSV
        table, or ``{quantity: path}`` of CSV grids), or the maps themselves: ``T0`` (K) and
        ``delta_T`` (K), or ``magnitude`` (K) with ``phase`` (degree); optionally
        ``delta_T_std``, ``delta_T_quadrature`` (K) and ``phase``.
    delta_T_convention : {"peak-to-peak", "amplitude"}
        What the maps' ``delta_T`` (and its std, quadrature, magnitude) hold: the range
        between maximum and minimum load as fusion writes it, or half of it. No default: an
        amplitude taken for a range halves every measured dT/T0.
    frequency : float, optional
        Loading frequency of the maps, Hz (recorded in ``attrs``).
    variables : mapping or list, optional
        Names in the file that differ from the quantities (see :func:`fusion.io.read_thermal_maps`).

    Returns
    -------
    xarray.Dataset
        Dims ``(y, x)`` = (IR row, IR column): ``T0``, ``delta_T`` (peak-to-peak), ``delta_T_std``
        (from the maps, else estimated from the pixel-to-pixel scatter), ``delta_T_quadrature``
        and ``phase`` when the maps give them, the measured ratio ``ratio_measured`` with its
        std, ``snr``, ``phase_lag_measured`` and its std (with a quadrature or phase map), and
        ``thermal_valid``. ``attrs``:
        ``delta_T_convention``, ``frequency`` and ``warnings``.

    Raises
    ------
    ArgumentError
        An unknown convention; maps that are no 2-D grids of one shape.
    InputError
        A file that cannot be read; temperatures that are no kelvin; a delta_T that is no
        temperature range of these T0.

    Notes
    -----
    The thermal side of a run with ``thermal.maps`` (``fusion run``): the same conversions.
    """
    if delta_T_convention not in _CONVENTIONS:
        raise ArgumentError("delta_T_convention", f"expected one of {_CONVENTIONS}, got {delta_T_convention!r}: "
                            "does delta_T hold max-load minus min-load (peak-to-peak) or half of it (amplitude)?")
    if isinstance(maps, dict) and maps and all(not isinstance(v, (str, bytes)) and not hasattr(v, "__fspath__")
                                               for v in maps.values()):
        where = "maps"
        arrays = {k: np.asarray(v, np.float32) for k, v in maps.items()}
        shapes = {k: a.shape for k, a in arrays.items()}
        if any(a.ndim != 2 for a in arrays.values()) or len(set(shapes.values())) != 1:
            raise ArgumentError("maps", f"expected 2-D maps of one (Y, X) shape, got {shapes}")
        if "T0" not in arrays or not ("delta_T" in arrays or {"magnitude", "phase"} <= set(arrays)):
            raise ArgumentError("maps", f"expected T0 and delta_T (or magnitude with phase), got {sorted(arrays)}")
        check_temperature(arrays["T0"][np.isfinite(arrays["T0"])], "maps")
    else:
        where = str(maps) if not isinstance(maps, dict) else "maps"
        arrays = read_thermal_maps(maps, variables=variables)
    out, ok, warnings = prepared_maps(arrays, delta_T_convention, where=where)
    lag_std = _add_measured(out)
    ds = result_dataset(out)
    _add_lag_std_and_valid(ds, lag_std, ok, "pixel with T0 and delta_T in the maps")
    ds.attrs.update(delta_T_convention=delta_T_convention, warnings=list(warnings),
                    **({"frequency": float(frequency), "frequency_units": "Hz"} if frequency is not None else {}))
    return ds


def motion_field(strain, transform, grid, *, load_range=None):
    """The in-plane motion of the surface per unit load on the IR grid, for motion compensation.

    Parameters
    ----------
    strain : xarray.Dataset
        Strain ranges of :func:`fusion.strain_ranges` from displacement data (states, series
        or images): its ``delta_u``, ``delta_v`` are the displacement range.
    transform : Transform2D
        Correlation coordinates to IR (column, row) px (:func:`fusion.register.fit_transform`).
    grid : xarray.Dataset or (int, int)
        The IR grid: the dataset of :func:`fusion.lockin_maps`, or (rows, columns).
    load_range : float, optional
        Peak-to-peak load the displacement range belongs to; default ``grid.attrs["load_range"]``.

    Returns
    -------
    xarray.DataArray
        ``(component, y, x)``: the displacement per unit load along IR columns
        (``component = "x"``) and rows (``"y"``), IR px per unit of the load; 0 where the
        correlation has no data, exactly as ``fusion run`` feeds it to
        :func:`fusion.thermal.motion_compensate`.
    """
    if not isinstance(transform, Transform2D):
        raise ArgumentError("transform", f"expected a plane transform (fusion.register.fit_transform), got "
                            f"{type(transform).__name__}")
    if "delta_u" not in strain or "delta_v" not in strain:
        raise ArgumentError("strain", "these strain ranges carry no displacement (a strain table): motion "
                            "compensation needs states, series or images")
    if load_range is None:
        load_range = getattr(grid, "attrs", {}).get("load_range")
    if load_range is None or not np.isfinite(load_range) or load_range <= 0:
        raise ArgumentError("load_range", f"expected the positive peak-to-peak load of the cycle, got "
                            f"{load_range!r}")
    shape = grid_shape_of(grid)
    r = to_ranges(strain)
    du = np.asarray(strain["delta_u"].values).ravel()
    dv = np.asarray(strain["delta_v"].values).ravel()
    check_grid_shape(transform.apply(np.column_stack([r.x, r.y])[r.valid]), shape, "grid")
    maps = _run_motion_field(transform, (r.x, r.y, du, dv), float(load_range), shape)
    return xr.DataArray(np.asarray(maps, np.float32), dims=("component", "y", "x"),
                        coords={"component": ["x", "y"], "y": np.arange(shape[0], dtype="int32"),
                                "x": np.arange(shape[1], dtype="int32")},
                        name="motion_per_load",
                        attrs={"units": "pixel", "long_name": "in-plane displacement per unit load on the "
                               "IR grid, (x, y) = (column, row) IR px per unit of the load",
                               "load_range": float(load_range)})
