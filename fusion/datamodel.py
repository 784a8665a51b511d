"""Names, dims, units and long names of every variable of ``result.nc``.

One table defines the output data model of a run (the contract of
``result.nc``); :func:`result_dataset` builds an :class:`xarray.Dataset` from maps
and stamps the attributes, and :func:`fusion.io.write_netcdf` writes it.
The IR grid has dims ``(y, x)``: ``y`` is the IR pixel row (increasing
downward, as the camera delivers it), ``x`` the IR pixel column. Strain
components are always in the specimen frame (x right, y up).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "SOURCES", "SOURCE_LONG_NAMES", "VariableSpec", "RESULT_VARIABLES", "variable_spec",
    "result_dataset", "source_flags", "tie_flags",
]

#: Candidate sources of the thermoelastic signal, in the order of the source map.
#: ``lateral`` (the heat model with in-plane conduction) is evaluated only where a config
#: switches it on (``lateral_heat``); it comes last so that the other codes keep their values.
SOURCES = ("coating", "resin_layer", "surface_ply", "laminate", "model", "lateral")

SOURCE_LONG_NAMES = {
    "coating": "coating (paint) layer, adiabatic",
    "resin_layer": "resin-rich surface layer, adiabatic",
    "surface_ply": "surface ply, adiabatic",
    "laminate": "whole laminate, homogenised",
    "model": "through-thickness heat-conduction model at the run frequency",
    "lateral": "heat-conduction model with heat flowing along the surface too (lateral), at the run frequency",
}


@dataclass(frozen=True)
class VariableSpec:
    """Name, dims, UDUNITS unit string and long name of one output variable."""

    name: str
    dims: tuple[str, ...]
    units: str
    long_name: str
    dtype: str = "float32"


def _maps():
    yx = ("y", "x")
    specs = [
        VariableSpec("T0", yx, "K", "mean absolute temperature"),
        VariableSpec("delta_T", yx, "K", "temperature range in phase with the load (T at max load minus T at min load)"),
        VariableSpec("delta_T_std", yx, "K", "standard deviation of delta_T"),
        VariableSpec("delta_T_quadrature", yx, "K", "temperature range in quadrature with the load"),
        VariableSpec("phase", yx, "degree", "phase of the temperature fundamental relative to the load"),
        VariableSpec("ratio_measured", yx, "1", "measured thermoelastic ratio delta_T / T0"),
        VariableSpec("ratio_measured_std", yx, "1", "standard deviation of the measured ratio"),
        VariableSpec("phase_lag_measured", yx, "degree", "phase lag of the measured response behind the signed in-phase axis"),
        VariableSpec("delta_eps_xx", yx, "1", "strain range eps_xx, specimen frame"),
        VariableSpec("delta_eps_yy", yx, "1", "strain range eps_yy, specimen frame"),
        VariableSpec("delta_gamma_xy", yx, "1", "engineering shear strain range gamma_xy, specimen frame"),
        VariableSpec("delta_eps_xx_std", yx, "1", "standard deviation of delta_eps_xx"),
        VariableSpec("delta_eps_yy_std", yx, "1", "standard deviation of delta_eps_yy"),
        VariableSpec("delta_gamma_xy_std", yx, "1", "standard deviation of delta_gamma_xy"),
        VariableSpec("strain_edge_distance", yx, "pixel",
                     "distance to the nearest edge of the strain data (hole, mask, edge of the "
                     "correlated region), IR pixels"),
        VariableSpec("phase_model", yx, "degree", "phase lag of the heat-model surface response"),
        VariableSpec("phase_lateral", yx, "degree", "phase lag of the lateral heat model's surface response"),
        VariableSpec("lateral_edge", yx, "1", "pixel within an in-plane diffusion length of no data or of the "
                     "grid's border, where the lateral heat model cannot know the boundary", dtype="int8"),
        VariableSpec("surface_fraction", yx, "1", "fraction beta of the surface-ply response in measured = beta*surface_ply + (1-beta)*laminate"),
        VariableSpec("source_probability", ("source", "y", "x"), "1", "relative support of each source"),
        VariableSpec("source_layer", yx, "1", "best-supported source of the thermoelastic signal", dtype="int8"),
        VariableSpec("source_tie", yx, "1", "sources that cannot be told apart where source_layer is "
                     "indistinguishable (one bit per source)", dtype="int8"),
        VariableSpec("valid", yx, "1", "pixel has thermal and strain data of usable quality", dtype="int8"),
        VariableSpec("snr", yx, "1", "signal-to-noise ratio |delta_T| / delta_T_std"),
        VariableSpec("motion_amplitude", yx, "pixel", "peak-to-peak in-plane motion of the surface under the load range, IR pixels"),
    ]
    for s in SOURCES:
        specs.append(VariableSpec(f"ratio_{s}", yx, "1", f"predicted delta_T / T0: {SOURCE_LONG_NAMES[s]}"))
        specs.append(VariableSpec(f"ratio_{s}_std", yx, "1", f"standard deviation of ratio_{s}"))
        specs.append(VariableSpec(f"residual_{s}", yx, "1", f"measured minus predicted ratio: {s}"))
        specs.append(VariableSpec(f"zscore_{s}", yx, "1", f"residual over its combined standard deviation: {s}"))
    return {s.name: s for s in specs}


#: The data model of result.nc, by variable name.
RESULT_VARIABLES: dict[str, VariableSpec] = _maps()

#: Flag meanings of the 0/1 maps.
_BINARY_FLAGS = {"valid": "invalid valid", "lateral_edge": "interior near_edge"}

#: Source-map categories beyond the sources themselves.
EXTRA_FLAGS = {"indistinguishable": 100, "no_source_fits": 101, "no_data": -1}


def variable_spec(name: str) -> VariableSpec:
    """The :class:`VariableSpec` of a result variable (KeyError names the valid ones)."""
    try:
        return RESULT_VARIABLES[name]
    except KeyError:
        raise KeyError(f"{name!r} is not a result variable; known: {sorted(RESULT_VARIABLES)}") from None


def source_flags(sources=SOURCES) -> tuple[list[int], list[str]]:
    """CF ``flag_values`` and ``flag_meanings`` of the source map for ``sources``.

    Each source keeps its index in :data:`SOURCES`; ``indistinguishable`` is 100,
    ``no_source_fits`` 101 and ``no_data`` -1.
    """
    values = [SOURCES.index(s) for s in sources]
    meanings = list(sources)
    for k, v in EXTRA_FLAGS.items():
        values.append(v)
        meanings.append(k)
    return values, meanings


def tie_flags(sources=SOURCES) -> tuple[list[int], list[str]]:
    """CF ``flag_masks`` and ``flag_meanings`` of ``source_tie`` for ``sources``.

    Each source owns the bit ``1 << SOURCES.index(source)``; a pixel where the surface
    ply and the laminate tie holds ``4 | 8 = 12``.
    """
    return [1 << SOURCES.index(s) for s in sources], list(sources)


def result_dataset(maps: dict, *, attrs: dict | None = None, sources=None, coords: dict | None = None):
    """Build the result :class:`xarray.Dataset` of a run from arrays.

    Parameters
    ----------
    maps : dict of str to ndarray
        Arrays named as in :data:`RESULT_VARIABLES`; ``(y, x)`` maps, and
        ``source_probability`` as ``(source, y, x)``.
    attrs : dict, optional
        Global attributes (config text, version, SHA-256s, frequency...).
    sources : sequence of str, optional
        The sources evaluated (coordinate of ``source_probability``).
    coords : dict, optional
        Extra coordinates (e.g. ``x_mm``, ``y_mm``).

    Returns
    -------
    xarray.Dataset
        float32 maps with ``units`` and ``long_name`` on every variable; NaN
        outside the valid mask is the caller's job (the pipeline does it).
    """
    import xarray as xr

    data_vars = {}
    for name, arr in maps.items():
        spec = variable_spec(name)
        a = np.asarray(arr)
        if a.ndim != len(spec.dims):
            raise ValueError(f"{name}: expected {len(spec.dims)} dims {spec.dims}, got shape {a.shape}")
        a = a.astype(spec.dtype, copy=False)
        var_attrs = {"units": spec.units, "long_name": spec.long_name}
        if name == "source_layer":
            values, meanings = source_flags(tuple(sources or SOURCES))
            var_attrs["flag_values"] = np.array(values, dtype="int8")
            var_attrs["flag_meanings"] = " ".join(meanings)
            var_attrs.pop("units")
        if name == "source_tie":
            masks, meanings = tie_flags(tuple(sources or SOURCES))
            var_attrs["flag_masks"] = np.array(masks, dtype="int8")
            var_attrs["flag_meanings"] = " ".join(meanings)
            var_attrs.pop("units")
        if name in _BINARY_FLAGS:
            var_attrs["flag_values"] = np.array([0, 1], dtype="int8")
            var_attrs["flag_meanings"] = _BINARY_FLAGS[name]
            var_attrs.pop("units")
        data_vars[name] = xr.Variable(spec.dims, a, attrs=var_attrs)
    ds = xr.Dataset(data_vars)
    some = next((v for v in data_vars.values() if v.dims[-2:] == ("y", "x")), None)
    if some is not None:
        ny, nx = some.shape[-2:]
        ds = ds.assign_coords(
            y=xr.Variable("y", np.arange(ny, dtype="int32"), {"units": "pixel", "long_name": "IR pixel row (downward)"}),
            x=xr.Variable("x", np.arange(nx, dtype="int32"), {"units": "pixel", "long_name": "IR pixel column"}),
        )
    if "source_probability" in data_vars:
        ds = ds.assign_coords(source=xr.Variable("source", np.array(list(sources or SOURCES), dtype=object),
                                                 {"long_name": "candidate source of the signal"}))
    if coords:
        ds = ds.assign_coords(coords)
    ds.attrs.update(attrs or {})
    return ds
