"""The prediction step: dT/T0 of every candidate source, with standard deviations and phase lags."""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._bounds import check_pixel_size, check_strain
from ..datamodel import result_dataset, variable_spec
from ..errors import ArgumentError
from ..mechanics import Laminate, available_sources
from ..run._predictions import predictions as _run_predictions
from ._labels import COMPONENTS, extra

__all__ = ["predictions"]


def _strain_arrays(strain, strain_std):
    if isinstance(strain, xr.Dataset):
        missing = [n for n, _ in COMPONENTS if n not in strain or f"{n}_std" not in strain]
        if missing:
            raise ArgumentError("strain", f"expected the registered strain of fusion.registered_strain; "
                                f"{missing} missing")
        e = np.stack([np.asarray(strain[n].values) for n, _ in COMPONENTS], -1).astype(np.float32)
        s = np.stack([np.asarray(strain[f"{n}_std"].values) for n, _ in COMPONENTS], -1).astype(np.float32)
        return e, s, strain[COMPONENTS[0][0]].dims
    e = np.asarray(strain, dtype=np.float32)
    if e.ndim < 1 or e.shape[-1] != 3:
        raise ArgumentError("strain", f"expected a dataset of fusion.registered_strain or a (..., 3) array of "
                            f"(delta_eps_xx, delta_eps_yy, delta_gamma_xy), got shape {e.shape!r}")
    if strain_std is None:
        raise ArgumentError("strain_std", "an array of strain ranges needs its standard deviations")
    s = np.broadcast_to(np.asarray(strain_std, dtype=np.float32), e.shape)
    dims = ("y", "x") if e.ndim == 3 else tuple(f"dim_{k}" for k in range(e.ndim - 1))
    return e, s, dims


def _pixel_axes(pixel_size, strain):
    """The specimen-frame steps (m) of one IR pixel along columns and rows, for the lateral model."""
    if pixel_size is None:
        held = strain.attrs.get("ir_pixel_axes_mm") if isinstance(strain, xr.Dataset) else None
        if held is None:
            raise ArgumentError("pixel_size", "the lateral heat model ('lateral') needs the size of an infrared "
                                "pixel on the specimen: pass pixel_size (mm), or the registered strain of "
                                "fusion.registered_strain from correlation data in mm with a 2-D transform")
        return np.asarray(held, float).reshape(2, 2) * 1e-3
    axes = np.asarray(pixel_size, float)
    if axes.ndim == 0:
        check_pixel_size(float(axes), "pixel_size")
        return np.eye(2) * float(axes) * 1e-3
    if axes.shape != (2, 2) or not np.all(np.isfinite(axes)) or abs(np.linalg.det(axes)) == 0:
        raise ArgumentError("pixel_size", f"expected mm per IR pixel, or a (2, 2) array of the specimen-frame "
                            f"steps (mm) of one IR pixel along its columns and rows, got {pixel_size!r}")
    for step in axes:
        check_pixel_size(float(np.hypot(*step)), "pixel_size")
    return axes * 1e-3


def predictions(laminate, strain, *, frequency=None, sources=None, property_uncertainty=0.05,
                strain_std=None, pixel_size=None):
    """Predicted dT/T0 of every candidate source, with standard deviations and phase lags.

    Parameters
    ----------
    laminate : Laminate
        The laminate as the cameras see it (:meth:`fusion.mechanics.Laminate.from_layup`, or
        ``Config.laminate_for(run)``).
    strain : xarray.Dataset or (..., 3) array_like
        The registered strain of :func:`fusion.registered_strain`, or strain ranges
        (delta_eps_xx, delta_eps_yy, delta_gamma_xy) per pixel: peak-to-peak, signed,
        specimen frame, dimensionless (1e-3 for 1000 microstrain).
    frequency : float, optional
        Loading frequency, Hz: needed by the through-thickness heat model (``"model"``).
    sources : sequence of str, optional
        Sources to predict, from :data:`fusion.datamodel.SOURCES`. Default: every layer
        the laminate has, and ``"model"`` when ``frequency`` is given. The lateral heat
        model (``"lateral"``, heat flowing along the surface too) only when asked for: it
        needs ``frequency``, strain maps on the IR grid and the pixel size.
    property_uncertainty : float
        Relative standard uncertainty of the material properties (0.05 for 5 %).
    strain_std : (..., 3) array_like, optional
        Standard deviations of an array ``strain`` (a dataset carries its own).
    pixel_size : float or (2, 2) array_like, optional
        For ``"lateral"``: millimetres of specimen per IR pixel (square pixels along the
        specimen axes), or the specimen-frame steps (mm) of one IR pixel along its columns
        (first row) and rows (second row). Default: the ``ir_pixel_axes_mm`` that
        :func:`fusion.registered_strain` records for correlation data in mm.

    Returns
    -------
    xarray.Dataset
        On the grid of ``strain``: ``ratio_<source>`` and ``ratio_<source>_std``
        (dimensionless dT/T0), ``phase_model`` (degree, with the heat model) and
        ``phase_lag_predicted`` (``source``, ...): the phase lag of every source in degrees
        (0 for the adiabatic layers), the convention :func:`fusion.diagnosis` takes; with
        ``"lateral"`` also ``phase_lateral`` (degree) and ``lateral_edge`` (1 within an
        in-plane diffusion length of no data, where the model cannot know the boundary).
        ``attrs``: ``sources_evaluated``, ``frequency``, the heat model's transfer
        coefficients and, with ``"lateral"``, ``lateral_edge_fraction`` and
        ``lateral_pixel_axes_mm``.

    Raises
    ------
    ArgumentError
        Strains outside the plausible range of a strain range (microstrain, percent); a
        source the laminate does not have; a heat model without a frequency; the lateral
        model without a pixel size, on strain that is no (y, x) map, or with a pixel size
        in metres.

    Notes
    -----
    The predictions of a run (``fusion run``): the adiabatic laws of
    :func:`fusion.mechanics.predict_ratios` with the first-order uncertainty of
    :func:`fusion.mechanics.prediction_std`, and the heat model's in-phase response and lag
    at the loading frequency (:func:`fusion.mechanics.transfer_coefficients`,
    :func:`fusion.mechanics.model_response`) whose standard deviation combines the strain
    noise through the in-phase coefficients with the property uncertainty.
    """
    if not isinstance(laminate, Laminate):
        raise ArgumentError("laminate", f"expected a fusion.mechanics.Laminate, got {type(laminate).__name__}")
    e, s, dims = _strain_arrays(strain, strain_std)
    check_strain([e[..., 0], e[..., 1], e[..., 2]], "strain")
    have = list(available_sources(laminate))
    if sources is None:
        sources = have + (["model"] if frequency is not None else [])
    sources = [sources] if isinstance(sources, str) else list(sources)
    heat = ["model", "lateral"]
    unknown = [x for x in sources if x not in have and x not in heat]
    if unknown:
        raise ArgumentError("sources", f"{unknown} not available for laminate {laminate.name!r}; available: "
                            f"{have + heat}")
    for model in heat:
        if model in sources and frequency is None:
            raise ArgumentError("frequency", f"the heat model ({model!r}) needs the loading frequency in Hz")
    axes = None
    if "lateral" in sources:
        if dims != ("y", "x"):
            raise ArgumentError("strain", "the lateral heat model ('lateral') needs strain maps on the IR grid "
                                f"(dims y, x), got dims {tuple(dims)}")
        axes = _pixel_axes(pixel_size, strain)
    pred, pstd, plag, info = _run_predictions(laminate, e, s, frequency, sources=sources,
                                              property_uncertainty=property_uncertainty, pixel_axes=axes)
    edge = info.pop("lateral_edge_map", None)
    maps = {}
    for src in pred:
        maps[f"ratio_{src}"] = pred[src]
        maps[f"ratio_{src}_std"] = pstd[src]
    for model in heat:
        if model in pred:
            maps[f"phase_{model}"] = plag[model]
    if edge is not None:
        maps["lateral_edge"] = edge.astype(np.int8)
    if dims == ("y", "x"):
        ds = result_dataset(maps, sources=tuple(pred))
        if isinstance(strain, xr.Dataset):
            ds = ds.assign_coords({k: strain.coords[k] for k in ("y", "x") if k in strain.coords})
    else:
        ds = xr.Dataset({k: extra(dims, v, variable_spec(k).units, variable_spec(k).long_name)
                         for k, v in maps.items()})
    lag = np.stack([np.broadcast_to(np.asarray(plag[src], np.float32), e.shape[:-1]) for src in pred])
    ds["phase_lag_predicted"] = extra(("source",) + tuple(dims), lag, "degree",
                                      "predicted phase lag of each source behind the signed in-phase axis "
                                      "(0 for adiabatic layers)")
    ds = ds.assign_coords(source=np.array(list(pred), dtype=object))
    ds.attrs.update(sources_evaluated=" ".join(pred), property_uncertainty=property_uncertainty,
                    **({"frequency": float(frequency), "frequency_units": "Hz"} if frequency is not None else {}),
                    **{k: v for k, v in info.items() if k.startswith("model_")})
    if "lateral" in info:
        ds.attrs.update(lateral_edge_fraction=info["lateral"]["edge_fraction"],
                        lateral_pixel_axes_mm=info["lateral"]["pixel_axes_mm"])
    return ds
