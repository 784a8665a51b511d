"""The laminate record: plies and optional surface layers, viewed face first."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from numbers import Real

from .._bounds import length_problem
from ._materials import IsotropicMaterial, MaterialError, OrthotropicMaterial

__all__ = ["Ply", "SurfaceLayer", "Laminate"]


def _require_thickness(value, key, bound):
    if isinstance(value, bool) or not (isinstance(value, Real) and math.isfinite(value) and value > 0):
        raise MaterialError(key, f"expected a positive thickness, got {value!r} m")
    # a thickness typed in mm or um reads as metres without error: refuse it by its size
    problem = length_problem(value, bound)
    if problem:
        raise MaterialError(key, problem)


@dataclass(frozen=True)
class Ply:
    """One ply: ``material``, ``angle`` in degrees CCW from the laminate 0° axis,
    ``thickness`` in m (5 um to 10 mm; a value in mm such as 0.25 is refused)."""

    material: OrthotropicMaterial
    angle: float
    thickness: float

    def __post_init__(self):
        if not isinstance(self.material, OrthotropicMaterial):
            raise MaterialError("ply_material", f"a ply needs an OrthotropicMaterial, got "
                                f"{type(self.material).__name__} {getattr(self.material, 'name', '')!r}")
        if isinstance(self.angle, bool) or not (isinstance(self.angle, Real) and math.isfinite(self.angle)):
            raise MaterialError("ply_angle", f"expected a finite angle in degrees, got {self.angle!r}")
        _require_thickness(self.thickness, "ply_thickness", "ply_thickness")


@dataclass(frozen=True)
class SurfaceLayer:
    """An isotropic layer on a face (coating, resin-rich layer): ``thickness`` in m
    (0.1 um to 5 mm; a value in um or mm is refused)."""

    material: IsotropicMaterial
    thickness: float

    def __post_init__(self):
        if not isinstance(self.material, IsotropicMaterial):
            raise MaterialError("material", f"a surface layer needs an IsotropicMaterial, got "
                                f"{type(self.material).__name__} {getattr(self.material, 'name', '')!r}")
        _require_thickness(self.thickness, "thickness", "layer_thickness")


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
    layup_code : str, optional
        The compact code the plies came from (for reports; not compared).
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
        for i, p in enumerate(self.plies):
            if not isinstance(p, Ply):
                raise MaterialError("layup", f"entry {i} of plies is {type(p).__name__}, expected a Ply")
        for key in ("coating", "resin_layer", "back_layer"):
            layer = getattr(self, key)
            if layer is not None and not isinstance(layer, SurfaceLayer):
                raise MaterialError(key, f"expected a SurfaceLayer or None, got {type(layer).__name__}")
        z = self.zero_direction
        if isinstance(z, bool) or not (isinstance(z, Real) and math.isfinite(z)):
            raise MaterialError("zero_direction", f"expected a finite angle in degrees, got {z!r}")
        for key in ("convection_front", "convection_back"):
            h = getattr(self, key)
            if isinstance(h, bool) or not (isinstance(h, Real) and math.isfinite(h) and h >= 0):
                raise MaterialError(key, f"expected a heat-transfer coefficient >= 0 W/(m2 K), got {h!r}")

    @classmethod
    def from_layup(cls, material: OrthotropicMaterial, layup, ply_thickness: float, **options) -> Laminate:
        """A laminate of one ply material from a layup code or list of angles.

        Parameters
        ----------
        material : OrthotropicMaterial
            The ply material of every ply.
        layup : str or sequence of float
            ``"[0/90]s"`` style code (see :func:`parse_layup`) or angles in degrees,
            viewed face first.
        ply_thickness : float
            Cured ply thickness in m (0.25e-3 for 0.25 mm; 0.25 is refused as a length
            in millimetres).
        **options
            Any other :class:`Laminate` field (``zero_direction``, ``coating``...).

        Returns
        -------
        Laminate
        """
        from ._layup import parse_layup

        angles = parse_layup(layup)
        if isinstance(layup, str):
            options.setdefault("layup_code", layup)
        plies = tuple(Ply(material, a, ply_thickness) for a in angles)
        return cls(plies, **options)

    @property
    def angles(self) -> tuple[float, ...]:
        """Ply angles in degrees from the laminate 0° direction, viewed face first."""
        return tuple(p.angle for p in self.plies)

    @property
    def thickness(self) -> float:
        """Thickness of the plies alone (the structural laminate) in m."""
        return sum(p.thickness for p in self.plies)

    @property
    def surface_layers(self) -> tuple[tuple[str, SurfaceLayer], ...]:
        """The viewed-face layers present, outermost first: ``(("coating", layer), ...)``."""
        return tuple((k, getattr(self, k)) for k in ("coating", "resin_layer") if getattr(self, k))
