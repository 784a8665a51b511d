"""frequency.nc: the sweep fits of a campaign, a flat summary first, one group per specimen.

The root group opens with plain ``xarray.open_dataset``: one row per specimen with the
recommended loading-frequency band (its edges and whether they are edges or the end of the
range tried), the measured points and the fitted model curve. Each specimen's full fit, and
its per-pixel maps where the runs share the infrared grid, sit in a group of its own.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from .. import __version__
from ..io._netcdf import _clean_attrs
from ..mechanics import FIT_PARAMETERS, sweep_dataset
from ..report import band_sentence

__all__ = ["write_frequency", "band_info", "band_label", "band_pair"]


def write_frequency(fits: dict, path: Path) -> Path:
    """frequency.nc: a flat summary of every specimen's sweep in the root group (opens with
    plain ``xarray.open_dataset``), and one NetCDF group per specimen with the full sweep fit
    and, where the runs share the infrared grid, the per-pixel maps. Written at ``path`` as it
    is: the caller publishes it (:func:`fusion.campaign._folders.product_path`)."""
    tmp = Path(path)
    root = _flat_summary(fits)
    root.to_netcdf(tmp, engine="netcdf4", mode="w")
    for spec, f in fits.items():
        ds = sweep_dataset(f["fit"])
        ds.attrs.update(specimen=spec, runs=" ".join(f["runs"]), laminate=f["laminate"].name,
                        band_text=band_sentence(band_info(f), frequencies=f["frequencies"]))
        if f.get("in_plane_flow_removed"):
            ds.attrs["in_plane_flow_removed"] = ("measured ratios, quadratures and lags less the lateral heat "
                                                 "model's in-plane part at nominal properties")
        for name, arr in (f["maps"] or {}).items():
            a = np.asarray(arr)
            if a.ndim != 2:
                continue
            units = "m" if "thickness" in name else "Hz" if "frequency" in name else "1"
            ds[f"map_{name}"] = (("y", "x"), a.astype(np.float32),
                                 {"units": units, "long_name": f"per-pixel sweep fit: {name.replace('_', ' ')}"})
        _clean(ds)
        ds.to_netcdf(tmp, engine="netcdf4", mode="a", group=_group_name(spec))
    return path


def _clean(ds):
    ds.attrs = _clean_attrs(ds.attrs)
    for v in ds.variables:
        ds[v].attrs = _clean_attrs(ds[v].attrs)
        if ds[v].dtype == object:
            ds[v] = ds[v].astype(str)


def _padded(rows, n):
    out = np.full((len(rows), n), np.nan)
    for i, r in enumerate(rows):
        r = np.asarray(r, dtype=float).ravel()
        out[i, :r.size] = r
    return out


def _flat_summary(fits: dict):
    """The root group of frequency.nc: one row per specimen (dim ``specimen``), measured points
    and model curves padded with NaN to the longest (dims ``point``, ``model_point``)."""
    import xarray as xr

    specs = list(fits)
    fit = {s: fits[s]["fit"] for s in specs}
    bands = {s: band_info(fits[s]) for s in specs}
    S, P, M = ("specimen",), ("specimen", "point"), ("specimen", "model_point")
    n_point = max(f["frequencies"].size for f in fits.values())
    n_model = max(np.asarray(fit[s].model_frequencies).size for s in specs)

    def var(dims, data, units, long_name, **extra):
        attrs = {"long_name": long_name, **extra}
        if units is not None:
            attrs["units"] = units
        return xr.Variable(dims, np.asarray(data), attrs)

    edge_flags = {"flag_values": np.array([0, 1], np.int8),
                  "flag_meanings": "edge_of_the_band end_of_the_range_tried"}
    dv = {
        "group": var(S, [_group_name(s) for s in specs], None,
                     "NetCDF group holding the full sweep fit of the specimen"),
        "runs": var(S, [" ".join(fits[s]["runs"]) for s in specs], None, "runs of the sweep"),
        "laminate": var(S, [fits[s]["laminate"].name for s in specs], None, "laminate of the fit"),
        "band_low": var(S, [bands[s]["low"] for s in specs], "Hz",
                        "lower edge of the recommended loading-frequency band (NaN: no band)"),
        "band_high": var(S, [bands[s]["high"] for s in specs], "Hz",
                         "upper edge of the recommended loading-frequency band (NaN: no band)"),
        "band_low_open": var(S, np.array([bands[s]["low_open"] for s in specs], np.int8), None,
                             "1 where the lower edge is the lowest frequency tried: the band may "
                             "extend below it", **edge_flags),
        "band_high_open": var(S, np.array([bands[s]["high_open"] for s in specs], np.int8), None,
                              "1 where the upper edge is the highest frequency tried: the band may "
                              "extend above it", **edge_flags),
        "band_source": var(S, [bands[s]["source"] or "" for s in specs], None,
                           "source whose adiabatic dT/T0 the heat model stays near in the band"),
        "band_tolerance": var(S, [bands[s]["tolerance"] for s in specs], "1",
                              "relative tolerance of the band"),
        "band_text": var(S, [band_sentence(bands[s], frequencies=fits[s]["frequencies"]) for s in specs],
                         None, "the recommended band in words"),
        "frequency_tried_low": var(S, [bands[s]["tried"][0] for s in specs], "Hz",
                                   "lowest frequency at which the heat model was evaluated"),
        "frequency_tried_high": var(S, [bands[s]["tried"][1] for s in specs], "Hz",
                                    "highest frequency at which the heat model was evaluated"),
        "low_frequency_source": var(S, [str(fit[s].low_frequency_source) for s in specs], None,
                                    "source nearest to the fitted response at the lowest frequency tried"),
        "high_frequency_source": var(S, [str(fit[s].high_frequency_source) for s in specs], None,
                                     "source nearest to the fitted response at the highest frequency tried"),
        "reduced_chi2": var(S, [fit[s].reduced_chi2 for s in specs], "1", "chi2 / dof of the sweep fit"),
        "measured_frequency": var(P, _padded([fits[s]["frequencies"] for s in specs], n_point), "Hz",
                                  "loading frequency of each run (NaN: padding)"),
        "measured_ratio": var(P, _padded([fits[s]["ratio"] for s in specs], n_point), "1",
                              "measured in-phase dT/T0 of each run"),
        "measured_ratio_std": var(P, _padded([fits[s]["ratio_std"] for s in specs], n_point), "1",
                                  "standard deviation of measured_ratio"),
        "fitted_ratio": var(P, _padded([fit[s].fitted_ratio for s in specs], n_point), "1",
                            "fitted heat model, in-phase dT/T0 at each run's frequency"),
        "model_frequency": var(M, _padded([fit[s].model_frequencies for s in specs], n_model), "Hz",
                               "frequencies of the fitted model curve"),
        "model_ratio_in_phase": var(M, _padded([np.real(fit[s].model_response) for s in specs], n_model), "1",
                                    "fitted heat model, in-phase surface dT/T0"),
    }
    for name, (unit, meaning, *_rest) in FIT_PARAMETERS.items():
        if any(name in fit[s].params for s in specs):
            dv[f"fit_{name}"] = var(S, [fit[s].params.get(name, np.nan) for s in specs], unit,
                                    f"fitted {meaning} (NaN: not fitted)")
            dv[f"fit_{name}_std"] = var(S, [fit[s].std_errors.get(name, np.nan) for s in specs], unit,
                                        f"standard error of the fitted {meaning}")
    ds = xr.Dataset(dv, coords={"specimen": xr.Variable(S, np.array(specs, dtype=object),
                                                        {"long_name": "specimen"})},
                    attrs={"title": "frequency-sweep fits of the campaign", "Conventions": "CF-1.10",
                           "fusion_version": __version__, "specimens": " ".join(fits),
                           "groups": "one group per specimen (variable 'group'): open with "
                                     "xarray.open_dataset(path, group=NAME) or xarray.open_datatree(path)"})
    _clean(ds)
    return ds


def band_info(f) -> dict:
    """The recommended band of one sweep fit, with the range the heat model was tried over."""
    fit = f["fit"]
    fm = np.asarray(fit.model_frequencies, dtype=float)
    lo, hi = band_pair(fit)
    source = fit.band_source
    strict = bool(source) and tuple(fit.strict_bands.get(source, ())) == tuple(fit.band)
    tried = (float(fm[0]), float(fm[-1]))
    ok = np.isfinite(lo) and np.isfinite(hi)
    return {"low": lo, "high": hi, "source": source if ok else None, "tolerance": float(fit.tolerance),
            "strict": strict, "tried": tried,
            "low_open": bool(ok and lo <= tried[0] * (1 + 1e-6)),
            "high_open": bool(ok and hi >= tried[1] * (1 - 1e-6))}


def _group_name(spec: str) -> str:
    return re.sub(r"[^A-Za-z0-9_]", "_", spec) or "specimen"


def band_pair(fit):
    """(low, high) of a fit's recommended band in Hz; NaN, NaN where it has none."""
    b = getattr(fit, "band", None) or (np.nan, np.nan)
    if isinstance(b, dict):
        b = b.get("surface_ply", b.get("laminate", (np.nan, np.nan)))
    return (float(b[0]), float(b[1]))


def band_label(b) -> str | None:
    """Legend text of the band in the frequency figure (edges in Hz, open edges said)."""
    if b["source"] is None:
        return None
    lo = f"below {b['tried'][0]:.3g}" if b["low_open"] else f"{b['low']:.3g}"
    hi = f"above {b['tried'][1]:.3g}" if b["high_open"] else f"{b['high']:.3g}"
    return f"recommended band:\n{lo} to {hi} Hz"
