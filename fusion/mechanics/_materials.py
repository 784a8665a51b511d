"""Material property records (SI units), validated on construction.

These are plain immutable records. The laminate mechanics (``_clt.py``) and the
thermoelastic laws (``_predict.py``) compute with them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

__all__ = ["OrthotropicMaterial", "IsotropicMaterial", "MaterialError"]


class MaterialError(ValueError):
    """A material record breaks a physical bound; ``field`` names the property."""

    def __init__(self, field: str, message: str):
        self.field = field
        super().__init__(f"{field}: {message}")


def _require_positive(obj, names):
    for name in names:
        value = getattr(obj, name)
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
            raise MaterialError(name, f"expected a positive finite value, got {value!r}")


def _require_finite(obj):
    for f in fields(obj):
        value = getattr(obj, f.name)
        if isinstance(value, float) and not math.isfinite(value):
            raise MaterialError(f.name, f"expected a finite value, got {value!r}")


@dataclass(frozen=True)
class OrthotropicMaterial:
    """A unidirectional ply material in its material axes (1 along the fibres).

    Parameters (SI): ``E1, E2, G12`` in Pa; ``nu12`` (major Poisson ratio, -);
    ``alpha1, alpha2`` in 1/K; ``density`` in kg/m3; ``specific_heat`` in J/(kg K);
    ``k1, k2, k3`` thermal conductivities in W/(m K) (k3 through the thickness).
    """

    name: str
    E1: float
    E2: float
    G12: float
    nu12: float
    alpha1: float
    alpha2: float
    density: float
    specific_heat: float
    k1: float
    k2: float
    k3: float

    kind = "orthotropic"

    def __post_init__(self):
        _require_finite(self)
        _require_positive(self, ["E1", "E2", "G12", "density", "specific_heat", "k1", "k2", "k3"])
        # Positive-definite compliance in plane stress: |nu12| < sqrt(E1/E2)
        # (Jones, Mechanics of Composite Materials, sec. 2.4 restrictions on elastic constants).
        if not abs(self.nu12) < math.sqrt(self.E1 / self.E2):
            raise MaterialError("nu12", f"|nu12| must be below sqrt(E1/E2) = "
                                f"{math.sqrt(self.E1 / self.E2):.3g} for a positive-definite "
                                f"stiffness, got {self.nu12!r}")
        for name in ("alpha1", "alpha2"):
            if abs(getattr(self, name)) > 1e-3:
                raise MaterialError(name, f"{getattr(self, name)!r} 1/K is not a plausible "
                                    "expansion coefficient (write e.g. '22.5e-6 / K')")

    @property
    def nu21(self) -> float:
        """Minor Poisson ratio nu21 = nu12 E2 / E1 (reciprocity)."""
        return self.nu12 * self.E2 / self.E1

    @property
    def volumetric_heat_capacity(self) -> float:
        """rho c in J/(m3 K)."""
        return self.density * self.specific_heat


@dataclass(frozen=True)
class IsotropicMaterial:
    """An isotropic layer material (resin, coating, metal).

    Parameters (SI): ``E`` in Pa; ``nu`` (-); ``alpha`` in 1/K; ``density`` in
    kg/m3; ``specific_heat`` in J/(kg K); ``k`` in W/(m K).
    """

    name: str
    E: float
    nu: float
    alpha: float
    density: float
    specific_heat: float
    k: float

    kind = "isotropic"

    def __post_init__(self):
        _require_finite(self)
        _require_positive(self, ["E", "density", "specific_heat", "k"])
        # -1 < nu < 0.5 for positive bulk and shear moduli (any elasticity text).
        if not -1.0 < self.nu < 0.5:
            raise MaterialError("nu", f"expected -1 < nu < 0.5, got {self.nu!r}")
        if abs(self.alpha) > 1e-3:
            raise MaterialError("alpha", f"{self.alpha!r} 1/K is not a plausible expansion "
                                "coefficient (write e.g. '60e-6 / K')")

    @property
    def volumetric_heat_capacity(self) -> float:
        """rho c in J/(m3 K)."""
        return self.density * self.specific_heat

    @property
    def thermoelastic_constant(self) -> float:
        """K = alpha / (rho c) in 1/Pa (Kelvin's law for an isotropic solid)."""
        return self.alpha / (self.density * self.specific_heat)
