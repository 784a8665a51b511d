"""The metrology of the strain maps in the summary and the report: resolution and noise floor."""

from __future__ import annotations

import numpy as np

__all__ = ["strain_resolution"]

_MAPS = (("eps_xx", "delta_eps_xx"), ("eps_yy", "delta_eps_yy"), ("gamma_xy", "delta_gamma_xy"))


def _num(value):
    try:
        f = float(value)
    except (TypeError, ValueError):
        return None
    return f if np.isfinite(f) else None


def strain_resolution(ds) -> dict | None:
    """VSG, modelled transfer function and noise floor of the strain maps of a result.

    Parameters
    ----------
    ds : xarray.Dataset
        A result with ``delta_eps_xx`` (and the other strain maps) carrying the attributes
        of :meth:`fusion.dic.StrainRanges.map_attrs`.

    Returns
    -------
    dict or None
        ``vsg_px``, ``vsg_mm``, ``subset_px``, ``step_px``, ``strain_window``,
        ``wavelength_gain50_px``/``_mm``, ``wavelength_gain90_px``/``_mm``, ``transfer``
        (list of ``{"wavelength_px", "wavelength_mm", "gain"}``), ``noise_floor``
        (``eps_xx``, ``eps_yy``, ``gamma_xy``; 1), ``noise_model``, ``edge_fit`` and
        ``nearest_edge_px`` (the least distance to a data edge among valid pixels, IR px);
        None when the result carries no strain metrology.
    """
    if "delta_eps_xx" not in ds.data_vars:
        return None
    a = ds["delta_eps_xx"].attrs
    if "vsg_px" not in a and "noise_floor" not in a:
        return None
    lam = np.atleast_1d(a.get("transfer_wavelength_px", []))
    lam_mm = np.atleast_1d(a.get("transfer_wavelength_mm", [np.nan] * lam.size))
    gain = np.atleast_1d(a.get("transfer_gain", []))
    # a length of zero (an imported table whose window and subset are unknown) is not known
    out = {key: (v if v is not None and v > 0 else None) for key, v in (
        (k, _num(a.get(k))) for k in (
            "vsg_px", "vsg_mm", "subset_px", "step_px", "strain_window", "wavelength_gain50_px",
            "wavelength_gain50_mm", "wavelength_gain90_px", "wavelength_gain90_mm"))}
    out["transfer"] = [{"wavelength_px": _num(x), "wavelength_mm": _num(y), "gain": _num(g)}
                       for x, y, g in zip(lam, lam_mm, gain)]
    out["noise_floor"] = {short: (_num(ds[name].attrs.get("noise_floor"))
                                  if name in ds.data_vars else None) for short, name in _MAPS}
    out["noise_model"] = str(a.get("noise_model") or "") or None
    out["edge_fit"] = str(a.get("edge_fit") or "") or None
    near = None
    if "strain_edge_distance" in ds.data_vars:
        d = np.asarray(ds["strain_edge_distance"].values, dtype=np.float64)
        if "valid" in ds.data_vars:
            d = np.where(np.asarray(ds["valid"].values) == 1, d, np.nan)
        if np.isfinite(d).any():
            near = float(np.nanmin(d))
    out["nearest_edge_px"] = near
    return out
