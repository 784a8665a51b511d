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
"""

from ._layers import ThermalLayer
from ._laminate import Laminate, Ply, SurfaceLayer
from ._layup import LayupError, parse_layup
from ._materials import IsotropicMaterial, MaterialError, OrthotropicMaterial

__all__ = [
    "IsotropicMaterial", "Laminate", "LayupError", "MaterialError", "OrthotropicMaterial",
    "Ply", "SurfaceLayer", "ThermalLayer", "parse_layup",
]
