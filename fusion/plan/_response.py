"""Frequency response of the through-thickness heat model for one strain state (``plan.nc``)."""

from __future__ import annotations

import numpy as np

from ..mechanics._heat import diffusion_length, frequency_band, phase_lag, surface_weights
from ..mechanics._lateral_reach import contrast_wavelength
from ..mechanics._predict import source_coefficients, thermal_layers

__all__ = ["PLAN_CAUTION", "frequency_plan"]

#: Caution printed with the plan table and stored in plan.nc.
PLAN_CAUTION = ("Model estimate to support engineering judgement, not a qualification. Test rigs "
                "under cyclic load are hazardous: follow the laboratory's procedures and the "
                "applicable test standards, and have the loading programme reviewed by a "
                "qualified engineer.")


def frequency_plan(laminate, strain_range, *, frequencies=None, tolerance=0.02):
    """Frequency response of the heat model for one strain state.

    Parameters
    ----------
    laminate : Laminate
        Viewed face first, with its coating, resin layer and back layer if any.
    strain_range : (3,) array_like
        (d eps_xx, d eps_yy, d gamma_xy), specimen frame, peak-to-peak (see
        :func:`fusion.mechanics.uniaxial_strain_state`).
    frequencies : (F,) array_like, optional
        Hz, increasing; default ``np.geomspace(0.1, 200, 121)``.
    tolerance : float
        Relative tolerance of the bands (default 0.02).

    Returns
    -------
    xarray.Dataset
        dims ``frequency``, ``layer`` and ``source``. Variables (``units``, ``long_name``):
        ``ratio_in_phase``, ``ratio_quadrature``, ``ratio_magnitude`` (1), ``phase_lag``
        (degree), ``layer_contribution`` (frequency, layer; sums to ``ratio_in_phase``),
        ``diffusion_length`` (frequency, layer; m), the layer table (``layer_thickness``,
        ``layer_depth``, ``layer_conductivity``, ``layer_heat_capacity``, ``layer_ratio``),
        ``adiabatic_ratio``, ``band_low`` and ``band_high`` (source; Hz, NaN where none:
        in-phase part within tolerance), ``strict_band_low`` and ``strict_band_high``
        (the complex response within tolerance, i.e. a small phase lag as well), the
        model's limits ``limit_low_frequency`` and ``limit_high_frequency``, and the in-plane
        blur: ``blur_length_along`` and ``blur_length_across`` (frequency; m), the surface
        ply's in-plane diffusion lengths along and across its fibres, and
        ``resolved_wavelength_along`` / ``resolved_wavelength_across`` (frequency; m), the
        shortest wavelength of a variation of the strain state along / across those fibres
        whose surface response keeps half the uniform-field modulus (a feature much smaller
        is blurred out; NaN where the response never falls that far).
        Attributes: the laminate, strain range, tolerance, ``band_<source>`` = [low, high]
        in Hz, and the caution.

    Notes
    -----
    One admittance recursion per frequency gives the complex weight of every layer
    (:func:`fusion.mechanics.surface_weights`); the response is their sum with the layers'
    adiabatic values. The low-frequency limit is the rho-c weighted mean of all layers
    (coating and resin layers included, so it differs slightly from ``laminate``, which
    homogenises the plies alone); with convection on a face the response falls to 0 at
    very low frequency instead. The resolved wavelengths come from the lateral heat model
    (:func:`fusion.mechanics.contrast_wavelength`), every layer with its in-plane
    conductivities.

    References
    ----------
    Carslaw & Jaeger, *Conduction of Heat in Solids*, 1959 (harmonic conduction, diffusion
    length); Potter & Greaves 1987 and Kelvin's law for the layer sources (see
    :mod:`fusion.mechanics`).
    """
    import xarray as xr

    e = np.asarray(strain_range, dtype=float)
    if e.shape != (3,) or not np.all(np.isfinite(e)):
        raise ValueError(f"strain_range must be three finite numbers (d eps_xx, d eps_yy, d gamma_xy), "
                         f"got {strain_range!r}")
    f = np.geomspace(0.1, 200.0, 121) if frequencies is None else np.asarray(frequencies, dtype=float)
    if f.ndim != 1 or f.size < 2 or not np.all(np.diff(f) > 0):
        raise ValueError(f"frequencies must be at least 2 increasing values in Hz, got {frequencies!r}")
    layers = thermal_layers(laminate)
    w = surface_weights(layers, f, convection_front=laminate.convection_front,
                        convection_back=laminate.convection_back)
    s = np.array([la.adiabatic_ratio(e) for la in layers])
    response = w @ s
    sources = {k: float(c @ e) for k, c in source_coefficients(laminate).items()}
    bands = {k: frequency_band(f, response, v, tolerance=tolerance) for k, v in sources.items()}
    strict = {k: frequency_band(f, response, v, tolerance=tolerance, quadrature=True)
              for k, v in sources.items()}
    thick = np.array([la.thickness for la in layers])
    rhoc = np.array([la.volumetric_heat_capacity for la in layers])
    k3 = np.array([la.conductivity for la in layers])
    depth = np.concatenate([[0.0], np.cumsum(thick)[:-1]])
    first = laminate.plies[0]
    fibre = float(first.angle + laminate.zero_direction)
    rc_ply = first.material.volumetric_heat_capacity
    conv = dict(convection_front=laminate.convection_front, convection_back=laminate.convection_back)
    resolved = {side: contrast_wavelength(layers, e, f, fibre + turn, **conv)
                for side, turn in (("along", 0.0), ("across", 90.0))}

    def var(dims, data, units, long_name):
        return xr.Variable(dims, np.asarray(data), {"units": units, "long_name": long_name})

    F, L = ("frequency",), ("layer",)
    src = list(sources)
    ds = xr.Dataset(
        {
            "ratio_in_phase": var(F, response.real, "1", "heat model surface dT/T0 in phase with the load"),
            "ratio_quadrature": var(F, response.imag, "1", "heat model surface dT/T0 in quadrature"),
            "ratio_magnitude": var(F, np.abs(response), "1", "modulus of the heat model surface dT/T0"),
            "phase_lag": var(F, phase_lag(response), "degree",
                             "phase lag of the surface response behind the signed in-phase axis"),
            "layer_contribution": var(F + L, (w * s).real, "1",
                                      "contribution of each layer to the in-phase surface dT/T0"),
            "diffusion_length": var(F + L, diffusion_length(k3[None, :], rhoc[None, :], f[:, None]), "m",
                                    "thermal diffusion length sqrt(2 k / (rho c omega))"),
            "layer_thickness": var(L, thick, "m", "layer thickness"),
            "layer_depth": var(L, depth, "m", "depth of the layer's top below the viewed face"),
            "layer_conductivity": var(L, k3, "W m-1 K-1", "through-thickness thermal conductivity"),
            "layer_heat_capacity": var(L, rhoc, "J m-3 K-1", "volumetric heat capacity rho c"),
            "layer_ratio": var(L, s, "1", "adiabatic dT/T0 of each layer"),
            "adiabatic_ratio": var(("source",), [sources[k] for k in src], "1",
                                   "adiabatic dT/T0 of each candidate source"),
            "band_low": var(("source",), [bands[k][0] for k in src], "Hz",
                            "lowest frequency of the band within tolerance of the source"),
            "band_high": var(("source",), [bands[k][1] for k in src], "Hz",
                             "highest frequency of the band within tolerance of the source"),
            "strict_band_low": var(("source",), [strict[k][0] for k in src], "Hz",
                                   "lowest frequency of the band where in-phase and quadrature parts "
                                   "are both within tolerance of the source"),
            "strict_band_high": var(("source",), [strict[k][1] for k in src], "Hz",
                                    "highest frequency of the band where in-phase and quadrature parts "
                                    "are both within tolerance of the source"),
            "limit_low_frequency": var((), float(np.sum(rhoc * thick * s) / np.sum(rhoc * thick)), "1",
                                       "low-frequency limit: rho-c weighted mean of the layers (adiabatic faces)"),
            "limit_high_frequency": var((), float(s[0]), "1",
                                        "high-frequency limit: adiabatic dT/T0 of the top layer"),
            "blur_length_along": var(F, diffusion_length(first.material.k1, rc_ply, f), "m",
                                     "in-plane diffusion length of the surface ply along its fibres"),
            "blur_length_across": var(F, diffusion_length(first.material.k2, rc_ply, f), "m",
                                      "in-plane diffusion length of the surface ply across its fibres"),
            "resolved_wavelength_along": var(F, resolved["along"], "m",
                                             "shortest wavelength of a strain variation along the surface "
                                             "ply's fibres passed at half contrast"),
            "resolved_wavelength_across": var(F, resolved["across"], "m",
                                              "shortest wavelength of a strain variation across the surface "
                                              "ply's fibres passed at half contrast"),
        },
        coords={
            "frequency": var(F, f, "Hz", "loading frequency"),
            "layer": xr.Variable(L, np.array([la.name for la in layers], dtype=object),
                                 {"long_name": "layer, viewed face first"}),
            "source": xr.Variable(("source",), np.array(src, dtype=object), {"long_name": "candidate source"}),
        },
        attrs={
            "title": "fusion frequency plan: through-thickness heat model",
            "laminate": laminate.name, "layup": laminate.layup_code or "/".join(f"{a:g}" for a in laminate.angles),
            "plies": len(laminate.plies), "laminate_thickness_m": laminate.thickness,
            "zero_direction_deg": float(laminate.zero_direction),
            "strain_range": e, "tolerance": float(tolerance),
            "convection_front": float(laminate.convection_front),
            "convection_back": float(laminate.convection_back),
            "surface_fibre_angle_deg": fibre,
            "caution": PLAN_CAUTION,
        },
    )
    for k in src:
        ds.attrs[f"band_{k}"] = np.array(bands[k], dtype=float)
        ds.attrs[f"strict_band_{k}"] = np.array(strict[k], dtype=float)
    return ds
