"""Predictions of a run: dT/T0 of every candidate source from the registered strain, with std and lag."""

from __future__ import annotations

import numpy as np

from ..datamodel import SOURCES
from ..errors import ConfigError
from ..mechanics import (model_response, predict_ratios, prediction_std, source_coefficients, thermal_layers,
                         transfer_coefficients)
from ._lateral import lateral_prediction

__all__ = ["predictions"]


def predictions(lam, strain, strain_std, frequency, *, sources, property_uncertainty, pixel_axes=None):
    """Predicted ratio, its std and (heat model) phase lag maps for every source asked for.

    ``pixel_axes`` (the infrared pixel on the specimen, m) is needed for ``"lateral"``; its
    edge flag comes back in ``info["lateral_edge_map"]``.
    """
    have = set(source_coefficients(lam))
    adiabatic = [s for s in sources if s in have]
    pred, std = {}, {}
    if adiabatic:
        pred = predict_ratios(lam, strain, sources=adiabatic)
        std = prediction_std(lam, strain, strain_std, property_uncertainty=property_uncertainty,
                             sources=adiabatic)
    lags = {s: 0.0 for s in adiabatic}
    info = {}
    if "model" in sources:
        if frequency is None or not np.isfinite(frequency):
            raise ConfigError("run.frequency", "the heat model needs the loading frequency")
        coef = transfer_coefficients(thermal_layers(lam), np.array([frequency]),
                                     convection_front=lam.convection_front,
                                     convection_back=lam.convection_back)[0]
        ratio, lag = model_response(coef, strain)
        pred["model"] = np.asarray(ratio, np.float32)
        # first-order: strain noise through the in-phase coefficients, plus the property share
        var = sum((np.real(coef[j]) * strain_std[..., j]) ** 2 for j in range(3))
        std["model"] = np.sqrt(var + (property_uncertainty * pred["model"]) ** 2).astype(np.float32)
        lags["model"] = np.asarray(lag, np.float32)
        info["model_coefficients_re"] = [float(c.real) for c in coef]
        info["model_coefficients_im"] = [float(c.imag) for c in coef]
    if "lateral" in sources:
        ratio, s_lat, lag, edge, linfo = lateral_prediction(lam, strain, strain_std, frequency, pixel_axes,
                                                            property_uncertainty=property_uncertainty)
        pred["lateral"], std["lateral"], lags["lateral"] = ratio, s_lat, lag
        info["lateral"] = linfo
        info["lateral_edge_map"] = edge
    order = [s for s in SOURCES if s in pred]
    return {s: pred[s] for s in order}, {s: std[s] for s in order}, {s: lags[s] for s in order}, info
