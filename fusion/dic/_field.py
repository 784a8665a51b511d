"""Records of displacement fields and cyclic strain ranges in the specimen frame."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .._conventions import short_repr
__all__ = ["DicField", "StrainRanges", "UNITS"]

#: Coordinate units a field may carry (displacements share them).
UNITS = ("mm", "px")


def _vector(name, value, n, *, dtype=np.float64):
    a = np.asarray(value, dtype=dtype)
    if a.ndim != 1 or (n is not None and a.shape[0] != n):
        raise ValueError(f"{name}: expected a 1-D array of {n} values, got shape {a.shape!r}")
    return a


def _check_grid(grid_shape, n):
    if grid_shape is None:
        return None
    try:
        ny, nx = (int(s) for s in grid_shape)
    except (TypeError, ValueError):
        raise ValueError(f"grid_shape: expected (ny, nx) or None, got {grid_shape!r}") from None
    if ny < 1 or nx < 1 or ny * nx != n:
        raise ValueError(f"grid_shape: {grid_shape!r} does not hold the {n} points")
    return (ny, nx)


@dataclass
class DicField:
    """A displacement field measured by correlation, in the specimen frame.

    Parameters
    ----------
    x, y : (N,) ndarray
        Point positions in the reference state, specimen frame (x right, y up),
        in ``units``.
    u, v : (N,) ndarray
        Displacements along x and y, in ``units``; NaN where not measured.
    exx, eyy, gxy : (N,) ndarray, optional
        Strains given with the field (engineering shear ``gxy = 2 eps_xy``),
        specimen frame; for an imported strain-range table these are ranges.
    z : (N,) ndarray, optional
        Out-of-plane position (stereo data), in ``units``.
    valid : (N,) bool ndarray, optional
        Points of usable quality; default: where u and v are finite.
    grid_shape : (ny, nx) or None
        Set when the points form a regular grid; the arrays are then in
        row-major grid order with y descending (first row at the top, as image
        rows run down) and x ascending. ``None`` for scattered points.
    units : {"mm", "px"}
        Unit of coordinates and displacements.
    attrs : dict
        Provenance and reporting quantities (``subset``, ``step`` in pixels,
        ``pixel_size`` in mm per pixel, ``source``...).
    zncc : (N,) ndarray, optional
        Zero-normalised correlation coefficient per point, when known.
    u_std, v_std : (N,) ndarray, optional
        Standard deviations of u and v from image noise, in ``units``, when
        known (from :func:`fusion.dic.correlate`); the strain fit then
        propagates them instead of estimating the noise from its residuals.
    """

    __repr__ = short_repr  # shapes, not values

    x: np.ndarray
    y: np.ndarray
    u: np.ndarray
    v: np.ndarray
    exx: np.ndarray | None = None
    eyy: np.ndarray | None = None
    gxy: np.ndarray | None = None
    z: np.ndarray | None = None
    valid: np.ndarray | None = None
    grid_shape: tuple[int, int] | None = None
    units: str = "mm"
    attrs: dict = field(default_factory=dict)
    zncc: np.ndarray | None = None
    u_std: np.ndarray | None = None
    v_std: np.ndarray | None = None

    def __post_init__(self):
        self.x = _vector("x", self.x, None)
        n = self.x.shape[0]
        self.y = _vector("y", self.y, n)
        self.u = _vector("u", self.u, n)
        self.v = _vector("v", self.v, n)
        for name in ("exx", "eyy", "gxy", "z", "zncc", "u_std", "v_std"):
            value = getattr(self, name)
            if value is not None:
                setattr(self, name, _vector(name, value, n))
        if self.valid is None:
            self.valid = np.isfinite(self.u) & np.isfinite(self.v)
        else:
            self.valid = _vector("valid", self.valid, n, dtype=bool)
        if self.units not in UNITS:
            raise ValueError(f"units: expected one of {UNITS!r}, got {self.units!r}")
        self.grid_shape = _check_grid(self.grid_shape, n)
        self.attrs = dict(self.attrs)

    @property
    def size(self) -> int:
        """Number of points N."""
        return self.x.shape[0]

    def grid(self, name: str) -> np.ndarray:
        """The named per-point array reshaped to ``grid_shape`` (ValueError when scattered)."""
        if self.grid_shape is None:
            raise ValueError("this field holds scattered points; it has no grid to reshape to")
        value = getattr(self, name)
        if value is None:
            raise ValueError(f"{name!r} is not set on this field")
        return np.asarray(value).reshape(self.grid_shape)


@dataclass
class StrainRanges:
    """Cyclic strain ranges (peak-to-peak, signed, max load minus min load).

    Parameters
    ----------
    x, y : (N,) ndarray
        Point positions, specimen frame, in ``units``.
    units : {"mm", "px"}
        Unit of the positions.
    exx, eyy, gxy : (N,) ndarray
        Ranges of eps_xx, eps_yy and the engineering shear gamma_xy (1): the short names of
        strain-table columns; :func:`fusion.strain_ranges` and result.nc call them
        ``delta_eps_xx``, ``delta_eps_yy``, ``delta_gamma_xy``.
    exx_std, eyy_std, gxy_std : (N,) ndarray
        Standard deviation of each range (1), per point or a broadcast scalar.
    valid : (N,) bool ndarray
        Points with a usable range.
    grid_shape : (ny, nx) or None
        As in :class:`DicField`.
    attrs : dict
        Reporting quantities of the Good Practices Guide and provenance:
        ``subset`` and ``step`` (px, ``None`` when unknown), ``strain_window``
        (points), ``vsg_px``, ``vsg_mm``, ``noise_floor`` (median standard
        deviation of eps_xx, eps_yy, gamma_xy, as a 3-tuple), ``method``;
        the modelled spatial resolution (``transfer_wavelength_px``,
        ``transfer_gain``, ``wavelength_gain50_px``, ``wavelength_gain90_px``
        and their ``_mm`` forms, see :func:`fusion.dic.strain_transfer`);
        ``noise_model`` and ``edge_fit`` (how the standard deviations and the
        fits near edges were made).
    exx_quadrature, eyy_quadrature, gxy_quadrature : (N,) ndarray, optional
        Quadrature ranges (only from a lock-in on a strain time series).
    edge_distance : (N,) ndarray, optional
        Distance of each point to the nearest edge of the valid data (a hole,
        a mask, the border of the measured region), in ``units``; NaN where
        not valid.
    """

    __repr__ = short_repr  # shapes, not values

    x: np.ndarray
    y: np.ndarray
    units: str
    exx: np.ndarray
    eyy: np.ndarray
    gxy: np.ndarray
    exx_std: np.ndarray
    eyy_std: np.ndarray
    gxy_std: np.ndarray
    valid: np.ndarray
    grid_shape: tuple[int, int] | None = None
    attrs: dict = field(default_factory=dict)
    exx_quadrature: np.ndarray | None = None
    eyy_quadrature: np.ndarray | None = None
    gxy_quadrature: np.ndarray | None = None
    edge_distance: np.ndarray | None = None

    def __post_init__(self):
        self.x = _vector("x", self.x, None)
        n = self.x.shape[0]
        self.y = _vector("y", self.y, n)
        for name in ("exx", "eyy", "gxy"):
            setattr(self, name, _vector(name, getattr(self, name), n))
        for name in ("exx_std", "eyy_std", "gxy_std"):
            a = np.asarray(getattr(self, name), dtype=np.float64)
            setattr(self, name, _vector(name, np.broadcast_to(a, (n,)).copy(), n))
        for name in ("exx_quadrature", "eyy_quadrature", "gxy_quadrature", "edge_distance"):
            value = getattr(self, name)
            if value is not None:
                setattr(self, name, _vector(name, value, n))
        self.valid = _vector("valid", self.valid, n, dtype=bool)
        if self.units not in UNITS:
            raise ValueError(f"units: expected one of {UNITS!r}, got {self.units!r}")
        self.grid_shape = _check_grid(self.grid_shape, n)
        self.attrs = dict(self.attrs)

    @property
    def size(self) -> int:
        """Number of points N."""
        return self.x.shape[0]

    # the names of result.nc (fusion.datamodel) for the same quantities
    @property
    def delta_eps_xx(self) -> np.ndarray:
        """Range of eps_xx (1); the same array as ``exx``."""
        return self.exx

    @property
    def delta_eps_yy(self) -> np.ndarray:
        """Range of eps_yy (1); the same array as ``eyy``."""
        return self.eyy

    @property
    def delta_gamma_xy(self) -> np.ndarray:
        """Range of the engineering shear gamma_xy (1); the same array as ``gxy``."""
        return self.gxy

    def map_attrs(self, component: int) -> dict:
        """Metrology attributes of one strain map (0: eps_xx, 1: eps_yy, 2: gamma_xy).

        Returns
        -------
        dict
            netCDF-ready: ``subset_px``, ``step_px``, ``strain_window``, ``vsg_px``,
            ``vsg_mm``, ``transfer_wavelength_px`` (array) with ``transfer_gain``,
            ``wavelength_gain50_px``, ``wavelength_gain90_px`` (and ``_mm`` forms),
            ``noise_floor`` (this component's, 1), ``noise_model``, ``edge_fit``; keys
            whose value is unknown are left out.
        """
        if component not in (0, 1, 2):
            raise ValueError(f"component: expected 0, 1 or 2, got {component!r}")
        a = self.attrs
        out = {"subset_px": a.get("subset"), "step_px": a.get("step"),
               "strain_window": a.get("strain_window"), "vsg_px": a.get("vsg_px"),
               "vsg_mm": a.get("vsg_mm"), "wavelength_gain50_px": a.get("wavelength_gain50_px"),
               "wavelength_gain90_px": a.get("wavelength_gain90_px"),
               "wavelength_gain50_mm": a.get("wavelength_gain50_mm"),
               "wavelength_gain90_mm": a.get("wavelength_gain90_mm"),
               "transfer_model": a.get("transfer_model"), "noise_model": a.get("noise_model"),
               "edge_fit": a.get("edge_fit")}
        for key in ("transfer_wavelength_px", "transfer_wavelength_mm", "transfer_gain"):
            if a.get(key) is not None:
                out[key] = np.asarray(a[key], dtype=np.float64)
        floor = a.get("noise_floor")
        if floor is not None:
            out["noise_floor"] = float(floor[component])
        return {k: (float(v) if isinstance(v, (int, float, np.integer, np.floating))
                    and not isinstance(v, bool) else v)
                for k, v in out.items() if v is not None}

    def grid(self, name: str) -> np.ndarray:
        """The named per-point array reshaped to ``grid_shape`` (ValueError when scattered)."""
        if self.grid_shape is None:
            raise ValueError("these ranges are on scattered points; there is no grid")
        value = getattr(self, name)
        if value is None:
            raise ValueError(f"{name!r} is not set")
        return np.asarray(value).reshape(self.grid_shape)
