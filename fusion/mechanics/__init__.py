"""Laminate mechanics, thermoelastic laws and the through-thickness heat model.

Public names
------------
OrthotropicMaterial, IsotropicMaterial, MaterialError
    Material records (SI units), validated on construction.
Ply, SurfaceLayer, Laminate
    The laminate as the cameras see it, viewed face first.
ThermalLayer
    One layer of the through-thickness heat problem.
parse_layup, LayupError
    The trade's compact layup codes.
reduced_stiffness, transformed_stiffness, strain_to_material, stress_to_material,
stress_transformation, strain_transformation, material_cte, abd_matrices,
engineering_constants, laminate_cte, ply_stresses, ply_interfaces, uniaxial_strain_state
    Classical lamination theory (Pa, m, 1/K; engineering shear; degrees CCW).
source_coefficients, available_sources, predict_ratios, isotropic_coefficients,
ply_coefficients, laminate_coefficients, thermal_layers, ply_profile, source_table
    Predicted adiabatic dT/T0 of each source (coating, resin_layer, surface_ply, laminate).
prediction_std, property_covariance, property_sensitivities, UNCERTAIN_PROPERTIES
    First-order standard deviation of the predictions.
diffusion_length, surface_weights, surface_response, transfer_coefficients, model_response,
phase_lag, frequency_band
    Through-thickness harmonic heat model at the loading frequency.
lateral_response, lateral_layer_response, lateral_weights, lateral_edge_mask, contrast_wavelength
    Lateral heat model: the layered plate with heat flowing along the surface as well,
    driven by strain-range maps (2-D FFT over the infrared grid); where it cannot know the
    boundary; the shortest strain wavelength the surface response passes.
fit_sweep, fit_sweep_maps, SweepFit, sweep_dataset, FIT_PARAMETERS
    Fits of the heat model's uncertain parameters to frequency sweeps.
"""

from ._layers import ThermalLayer
from ._laminate import Laminate, Ply, SurfaceLayer
from ._layup import LayupError, parse_layup
from ._materials import IsotropicMaterial, MaterialError, OrthotropicMaterial
from ._clt import (
    abd_matrices, engineering_constants, laminate_cte, material_cte, ply_interfaces, ply_stresses,
    reduced_stiffness, strain_to_material, strain_transformation, stress_to_material,
    stress_transformation, transformed_stiffness, uniaxial_strain_state,
)
from ._predict import (
    available_sources, isotropic_coefficients, laminate_coefficients, ply_coefficients, ply_profile,
    predict_ratios, source_coefficients, source_table, thermal_layers,
)
from ._uncertainty import (
    UNCERTAIN_PROPERTIES, prediction_std, property_covariance, property_sensitivities,
)
from ._heat import (
    diffusion_length, frequency_band, model_response, phase_lag, surface_response, surface_weights,
    transfer_coefficients,
)
from ._lateral import lateral_layer_response, lateral_response, lateral_weights
from ._lateral_reach import contrast_wavelength, lateral_edge_mask
from ._sweep import FIT_PARAMETERS, SweepFit, fit_sweep, fit_sweep_maps, sweep_dataset

__all__ = [
    "IsotropicMaterial", "Laminate", "LayupError", "MaterialError", "OrthotropicMaterial",
    "Ply", "SurfaceLayer", "ThermalLayer", "parse_layup",
    # lamination theory, adiabatic laws and their uncertainty
    "abd_matrices", "engineering_constants", "laminate_cte", "material_cte", "ply_interfaces",
    "ply_stresses", "reduced_stiffness", "strain_to_material", "strain_transformation",
    "stress_to_material", "stress_transformation", "transformed_stiffness", "uniaxial_strain_state",
    "available_sources", "isotropic_coefficients", "laminate_coefficients", "ply_coefficients",
    "ply_profile", "predict_ratios", "source_coefficients", "source_table", "thermal_layers",
    "UNCERTAIN_PROPERTIES", "prediction_std", "property_covariance", "property_sensitivities",
    # heat model and frequency sweeps
    "diffusion_length", "frequency_band", "model_response", "phase_lag", "surface_response",
    "surface_weights", "transfer_coefficients",
    "contrast_wavelength", "lateral_edge_mask", "lateral_layer_response", "lateral_response",
    "lateral_weights",
    "FIT_PARAMETERS", "SweepFit", "fit_sweep", "fit_sweep_maps", "sweep_dataset",
]
