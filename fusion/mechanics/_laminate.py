"""The laminate record: plies and optional surface layers, viewed face first."""

from __future__ import annotations

from dataclasses import dataclass, field

from ._materials import IsotropicMaterial, MaterialError, OrthotropicMaterial

__all__ = ["Ply", "SurfaceLayer", "Laminate"]


@dataclass(frozen=True)
class Ply:
    """One ply: ``material``, ``angle`` in degrees CCW from the laminate 0° axis,
    ``thickness`` in m."""

    material: OrthotropicMaterial
    angle: float
    thickness: float

    def __post_init__(self):
        if not self.thickness > 0:
            raise MaterialError("ply_thickness", f"expected a positive thickness, got {self.thickness!r} m")


@dataclass(frozen=True)
class SurfaceLayer:
    """An isotropic layer on a face (coating, resin-rich layer): ``thickness`` in m."""

    material: IsotropicMaterial
    thickness: float

    def __post_init__(self):
        if not self.thickness > 0:
            raise MaterialError("thickness", f"expected a positive thickness, got {self.thickness!r} m")


@dataclass(frozen=True)
class Laminate:
    """A laminate as the cameras see it.

    Parameters
    ----------
    plies : tuple of Ply
        From the viewed face inward.
    zero_direction : float
        Angle in degrees of the laminate 0° direction from specimen x (CCW).
    coating : SurfaceLayer, optional
        Paint or coating on the viewed face (outermost).
    resin_layer : SurfaceLayer, optional
        Resin-rich layer between the coating (if any) and the first ply.
    back_layer : SurfaceLayer, optional
        Resin-rich layer on the back face (after the last ply); heat model only.
    convection_front, convection_back : float
        Heat-transfer coefficients of the faces in W/(m2 K); 0 means adiabatic.
    name : str
        Label for reports.
    """

    plies: tuple[Ply, ...]
    zero_direction: float = 0.0
    coating: SurfaceLayer | None = None
    resin_layer: SurfaceLayer | None = None
    back_layer: SurfaceLayer | None = None
    convection_front: float = 0.0
    convection_back: float = 0.0
    name: str = "laminate"
    layup_code: str | None = field(default=None, compare=False)

    def __post_init__(self):
        if not self.plies:
            raise MaterialError("layup", "the laminate has no plies")
        object.__setattr__(self, "plies", tuple(self.plies))

    @property
    def angles(self) -> tuple[float, ...]:
        """Ply angles in degrees from the laminate 0° direction, viewed face first."""
        return tuple(p.angle for p in self.plies)

    @property
    def thickness(self) -> float:
        """Thickness of the plies alone (the structural laminate) in m."""
        return sum(p.thickness for p in self.plies)
