"""Through-thickness layer records shared by the laws and the heat model."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ThermalLayer"]


@dataclass(frozen=True)
class ThermalLayer:
    """One layer of the through-thickness heat problem, viewed face first.

    Parameters
    ----------
    name : str
        ``"coating"``, ``"resin_layer"``, ``"ply 1 (45°)"``, ``"back_layer"``...
    thickness : float
        m.
    density : float
        kg/m3.
    specific_heat : float
        J/(kg K).
    conductivity : float
        Through-thickness thermal conductivity k3 in W/(m K).
    coefficients : (3,) ndarray
        Adiabatic dT/T0 of this layer per unit strain range, in the specimen frame:
        ``ratio = coefficients @ [d eps_xx, d eps_yy, d gamma_xy]`` (dimensionless).
    conductivity_along, conductivity_across : float, optional
        In-plane conductivities in W/(m K) along and across ``fibre_angle`` (k1 and k2 of a
        ply); None (the default) for an in-plane isotropic layer with ``conductivity``.
        Only the in-plane (lateral) heat model uses them.
    fibre_angle : float
        Direction of ``conductivity_along`` in degrees CCW from specimen x.
    """

    name: str
    thickness: float
    density: float
    specific_heat: float
    conductivity: float
    coefficients: np.ndarray
    conductivity_along: float | None = None
    conductivity_across: float | None = None
    fibre_angle: float = 0.0

    def __post_init__(self):
        c = np.asarray(self.coefficients, dtype=float).reshape(3)
        object.__setattr__(self, "coefficients", c)

    @property
    def volumetric_heat_capacity(self) -> float:
        """rho c in J/(m3 K)."""
        return self.density * self.specific_heat

    @property
    def diffusivity(self) -> float:
        """Through-thickness thermal diffusivity k / (rho c) in m2/s."""
        return self.conductivity / (self.density * self.specific_heat)

    @property
    def in_plane_conductivity(self) -> np.ndarray:
        """(2, 2) in-plane conductivity tensor in the specimen frame (x, y), W/(m K).

        ``R diag(k_along, k_across) R^T`` with R the rotation by ``fibre_angle``; the
        through-thickness ``conductivity`` on the diagonal for an isotropic layer.
        """
        along = self.conductivity if self.conductivity_along is None else self.conductivity_along
        across = self.conductivity if self.conductivity_across is None else self.conductivity_across
        c, s = np.cos(np.radians(self.fibre_angle)), np.sin(np.radians(self.fibre_angle))
        rot = np.array([[c, -s], [s, c]])
        return rot @ np.diag([float(along), float(across)]) @ rot.T

    def adiabatic_ratio(self, strain_ranges) -> np.ndarray:
        """Adiabatic dT/T0 for strain ranges ``(..., 3)`` (d eps_xx, d eps_yy, d gamma_xy)."""
        return np.asarray(strain_ranges) @ self.coefficients
