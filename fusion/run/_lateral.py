"""The lateral heat model in a run: the infrared pixel on the specimen, the prediction, its reach.

Switched on by ``lateral_heat`` (``[diagnosis]`` or per ``[[run]]``): the candidate source
``lateral`` is the layered plate with heat flowing along the surface as well, driven by the
registered strain maps (:func:`fusion.mechanics.lateral_response`).
"""

from __future__ import annotations

import numpy as np

from ..errors import ConfigError
from ..mechanics import (lateral_edge_mask, lateral_response, model_response, phase_lag, thermal_layers,
                         transfer_coefficients)

__all__ = ["ir_pixel_axes", "lateral_prediction"]


def ir_pixel_axes(transform, units, inside) -> np.ndarray:
    """Specimen-frame steps (m) of one infrared pixel along the grid's columns and rows, (2, 2).

    From the registration's local Jacobian at the centre of the area with strain data: the
    inverse of ``d(col, row) / d(x, y)``, in metres. A homography's perspective makes the
    pixel size vary over the field; the lateral model takes it as uniform (its value at the
    centre).
    """
    if transform is None:
        raise ConfigError("registration.method", "the lateral heat model (lateral_heat) needs a 2-D "
                          "registration of the correlation data onto the infrared grid (homography, "
                          "affine, similarity, identity or fiducials), not 'camera'; or set lateral_heat "
                          "= \"off\"")
    if units != "mm":
        raise ConfigError("dic.coordinates", "the lateral heat model (lateral_heat) needs the size of an "
                          "infrared pixel on the specimen: give the correlation coordinates in mm "
                          "(dic.coordinates = \"mm\", or dic.pixel_size for speckle images); they are "
                          f"in {units!r}")
    rows, cols = np.nonzero(inside)
    centre = np.array([[cols.mean(), rows.mean()]]) if rows.size else np.zeros((1, 2))
    source = transform.inverse_apply(centre)
    jac = np.asarray(transform.jacobian(source), dtype=float)[0]          # IR px per mm
    return np.linalg.inv(jac) * 1e-3


def lateral_prediction(lam, strain, strain_std, frequency, pixel_axes, *, property_uncertainty):
    """In-phase ratio, its std, phase lag and edge flag of the lateral heat model on the IR grid.

    Parameters
    ----------
    lam : Laminate
    strain, strain_std : (Y, X, 3) ndarray
        Registered strain ranges and their standard deviations; NaN where there is no data.
    frequency : float
        Hz.
    pixel_axes : (2, 2) ndarray
        From :func:`ir_pixel_axes`, m.
    property_uncertainty : float
        Relative standard uncertainty of the material properties.

    Returns
    -------
    ratio, std, lag : (Y, X) float32 ndarray
        In-phase dT/T0, its standard deviation (dimensionless) and the phase lag (degree).
    edge : (Y, X) bool ndarray
        Where the model cannot know the boundary (:func:`fusion.mechanics.lateral_edge_mask`).
    info : dict
        ``edge_fraction`` of the pixels with strain data, ``pixel_axes_mm``.

    Notes
    -----
    The std propagates the strain noise through the uniform-field coefficients, as for the
    through-thickness model: exact for noise correlated over the blur (the strain of a
    correlation is smooth over its subsets and virtual gauges) and an upper bound for
    uncorrelated noise, which the in-plane averaging reduces. Near an edge the boundary is
    unknown: there the whole in-plane correction (lateral minus through-thickness) is added
    to the std in quadrature.
    """
    if frequency is None or not np.isfinite(frequency):
        raise ConfigError("run.frequency", "the lateral heat model needs the loading frequency")
    layers = thermal_layers(lam)
    conv = {"convection_front": lam.convection_front, "convection_back": lam.convection_back}
    ok = np.all(np.isfinite(strain), axis=-1)
    response = lateral_response(layers, strain, float(frequency), pixel_size=pixel_axes, valid=ok, **conv)
    edge = lateral_edge_mask(layers, float(frequency), ok, pixel_size=pixel_axes)
    coef = transfer_coefficients(layers, np.array([frequency]), **conv)[0]
    one_d, _ = model_response(coef, np.where(ok[..., None], strain, 0.0).astype(np.float64))
    ratio = np.where(ok, response.real, np.nan)
    var = sum((np.real(coef[j]) * strain_std[..., j].astype(np.float64)) ** 2 for j in range(3))
    var = var + (property_uncertainty * ratio) ** 2 + np.where(edge, (ratio - one_d) ** 2, 0.0)
    lag = np.where(ok, phase_lag(response), np.nan)
    info = {"edge_fraction": float(edge[ok].mean()) if ok.any() else float("nan"),
            "pixel_axes_mm": (np.asarray(pixel_axes) * 1e3).round(6).tolist()}
    return (ratio.astype(np.float32), np.sqrt(var).astype(np.float32), lag.astype(np.float32), edge, info)
