"""Material property records (SI units), validated on construction.

These are plain immutable records. The laminate mechanics (``_clt.py``) and the
thermoelastic laws (``_predict.py``) compute with them.

Validation has two kinds of checks. Physical bounds that no real material can
break (positive moduli and heat capacity, a positive-definite stiffness) are
stated with their source. Plausibility ranges (a density between 10 and
25,000 kg/m3, a specific heat between 50 and 10,000 J/(kg K), a modulus between
0.1 MPa and 2 TPa...) are there to catch unit slips such as a modulus typed in
GPa without its unit or a density in g/cm3; they are wide enough for every
engineering solid from foams to tungsten.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from numbers import Real

from ..errors import FusionError

__all__ = ["OrthotropicMaterial", "IsotropicMaterial", "MaterialError"]


class MaterialError(FusionError, ValueError):
    """A material record breaks a physical bound; ``field`` names the property."""

    def __init__(self, field: str, message: str):
        self.field = field
        super().__init__(f"{field}: {message}")


# Plausibility ranges in SI (see the module docstring): (low, high, hint for the likely slip).
_MODULUS = (1e5, 2e12, "write the unit, e.g. '135 GPa'")
_DENSITY = (10.0, 25000.0, "write the unit, e.g. '1600 kg/m^3' (1.6 g/cm3 is 1600 kg/m3)")
_SPECIFIC_HEAT = (50.0, 10000.0, "write the unit, e.g. '900 J/kg/K' (0.9 J/g/K is 900 J/kg/K)")
_CONDUCTIVITY = (1e-3, 5000.0, "write the unit, e.g. '0.6 W/m/K'")
_EXPANSION = 1e-3  # |alpha| above 1e-3 /K is a missing 'e-6', not a solid


def _require_positive(obj, names):
    for name in names:
        value = getattr(obj, name)
        if isinstance(value, bool) or not (isinstance(value, Real) and math.isfinite(value)
                                           and value > 0):
            raise MaterialError(name, f"expected a positive finite value, got {value!r}")


def _require_finite(obj):
    for f in fields(obj):
        value = getattr(obj, f.name)
        if f.name == "name":
            if not isinstance(value, str):
                raise MaterialError("name", f"expected a string, got {value!r}")
            continue
        if isinstance(value, bool) or not isinstance(value, Real):
            raise MaterialError(f.name, f"expected a number in SI units, got {value!r}")
        if not math.isfinite(value):
            raise MaterialError(f.name, f"expected a finite value, got {value!r}")


def _require_range(obj, names, bounds, unit):
    low, high, hint = bounds
    for name in names:
        value = getattr(obj, name)
        if not low <= value <= high:
            raise MaterialError(name, f"{value!r} {unit} is outside the plausible range "
                                f"{low:g}..{high:g} {unit} ({hint})")


def _require_expansion(obj, names):
    for name in names:
        value = getattr(obj, name)
        if abs(value) > _EXPANSION:
            raise MaterialError(name, f"{value!r} 1/K is not a plausible expansion coefficient "
                                "(write e.g. '22.5e-6 / K')")


@dataclass(frozen=True)
class OrthotropicMaterial:
    """A unidirectional ply material in its material axes (1 along the fibres).

    Parameters (SI): ``E1, E2, G12`` in Pa; ``nu12`` (major Poisson ratio, -);
    ``alpha1, alpha2`` in 1/K; ``density`` in kg/m3; ``specific_heat`` in J/(kg K);
    ``k1, k2, k3`` thermal conductivities in W/(m K) (k3 through the thickness).

    Raises
    ------
    MaterialError
        For a non-finite or non-positive modulus, density, specific heat or
        conductivity, for ``|nu12| >= sqrt(E1/E2)`` (the plane-stress compliance
        would not be positive definite), and for values outside the plausible
        ranges of the module docstring (unit slips).

    Notes
    -----
    The specific heat is the one at constant pressure (stress), the value handbooks
    and calorimeters give; the adiabatic laws of ``_predict.py`` use it as the
    linearised thermoelastic theory does (the difference from the constant-strain
    value is far below property scatter for polymer composites).

    References
    ----------
    Jones, R. M., *Mechanics of Composite Materials*, 2nd ed., Taylor & Francis, 1999,
    sec. 2.4 (restrictions on elastic constants).
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
        _require_range(self, ["E1", "E2", "G12"], _MODULUS, "Pa")
        _require_range(self, ["density"], _DENSITY, "kg/m3")
        _require_range(self, ["specific_heat"], _SPECIFIC_HEAT, "J/(kg K)")
        _require_range(self, ["k1", "k2", "k3"], _CONDUCTIVITY, "W/(m K)")
        # Positive-definite compliance in plane stress: |nu12| < sqrt(E1/E2)
        # (Jones, Mechanics of Composite Materials, sec. 2.4 restrictions on elastic constants).
        if not abs(self.nu12) < math.sqrt(self.E1 / self.E2):
            raise MaterialError("nu12", f"|nu12| must be below sqrt(E1/E2) = "
                                f"{math.sqrt(self.E1 / self.E2):.3g} for a positive-definite "
                                f"stiffness, got {self.nu12!r}")
        _require_expansion(self, ["alpha1", "alpha2"])

    @property
    def nu21(self) -> float:
        """Minor Poisson ratio nu21 = nu12 E2 / E1 (reciprocity)."""
        return self.nu12 * self.E2 / self.E1

    @property
    def volumetric_heat_capacity(self) -> float:
        """rho c in J/(m3 K)."""
        return self.density * self.specific_heat

    @property
    def thermoelastic_constants(self) -> tuple[float, float]:
        """(K1, K2) = (alpha1, alpha2) / (rho c) in 1/Pa (the orthotropic law's constants)."""
        rc = self.density * self.specific_heat
        return self.alpha1 / rc, self.alpha2 / rc


@dataclass(frozen=True)
class IsotropicMaterial:
    """An isotropic layer material (resin, coating, metal).

    Parameters (SI): ``E`` in Pa; ``nu`` (-); ``alpha`` in 1/K; ``density`` in
    kg/m3; ``specific_heat`` in J/(kg K); ``k`` in W/(m K).

    Raises
    ------
    MaterialError
        For a non-positive modulus, density, specific heat or conductivity, for
        ``nu`` outside (-1, 0.5), and for values outside the plausible ranges of the
        module docstring (unit slips).
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
        _require_range(self, ["E"], _MODULUS, "Pa")
        _require_range(self, ["density"], _DENSITY, "kg/m3")
        _require_range(self, ["specific_heat"], _SPECIFIC_HEAT, "J/(kg K)")
        _require_range(self, ["k"], _CONDUCTIVITY, "W/(m K)")
        # -1 < nu < 0.5 for positive bulk and shear moduli (any elasticity text).
        if not -1.0 < self.nu < 0.5:
            raise MaterialError("nu", f"expected -1 < nu < 0.5, got {self.nu!r}")
        _require_expansion(self, ["alpha"])

    @property
    def G(self) -> float:
        """Shear modulus E / (2 (1 + nu)) in Pa."""
        return self.E / (2.0 * (1.0 + self.nu))

    @property
    def volumetric_heat_capacity(self) -> float:
        """rho c in J/(m3 K)."""
        return self.density * self.specific_heat

    @property
    def thermoelastic_constant(self) -> float:
        """K = alpha / (rho c) in 1/Pa (Kelvin's law for an isotropic solid)."""
        return self.alpha / (self.density * self.specific_heat)
