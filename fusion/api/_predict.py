"""The prediction step: dT/T0 of every candidate source, with standard deviations and phase lags."""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._bounds import check_strain
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


def predictions(laminate, strain, *, frequency=None, sources=None, property_uncertainty=0.05,
                strain_std=None):
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
        the laminate has, and ``"model"`` when ``frequency`` is given.
    property_uncertainty : float
        Relative standard uncertainty of the material properties (0.05 for 5 %).
    strain_std : (..., 3) array_like, optional
        Standard deviations of an array ``strain`` (a dataset carries its own).

    Returns
    -------
    xarray.Dataset
        On the grid of ``strain``: ``ratio_<source>`` and ``ratio_<source>_std``
        (dimensionless dT/T0), ``phase_model`` (degree, with the heat model) and
        ``phase_lag_predicted`` (``source``, ...): the phase lag of every source in degrees
        (0 for the adiabatic layers), the convention :func:`fusion.diagnosis` takes.
        ``attrs``: ``sources_evaluated``, ``frequency`` and the heat model's transfer
        coefficients.

    Raises
    ------
    ArgumentError
        Strains outside the plausible range of a strain range (microstrain, percent); a
        source the laminate does not have; the heat model without a frequency.

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
    unknown = [x for x in sources if x not in have and x != "model"]
    if unknown:
        raise ArgumentError("sources", f"{unknown} not available for laminate {laminate.name!r}; available: "
                            f"{have + ['model']}")
    if "model" in sources and frequency is None:
        raise ArgumentError("frequency", "the heat model ('model') needs the loading frequency in Hz")
    pred, pstd, plag, info = _run_predictions(laminate, e, s, frequency, sources=sources,
                                              property_uncertainty=property_uncertainty)
    maps = {}
    for src in pred:
        maps[f"ratio_{src}"] = pred[src]
        maps[f"ratio_{src}_std"] = pstd[src]
    if "model" in pred:
        maps["phase_model"] = plag["model"]
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
    return ds
