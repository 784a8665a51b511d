"""Standard deviation of the adiabatic predictions (first-order propagation).

Two independent contributions are combined in quadrature:

* strain noise: the three strain-range components of a pixel carry independent
  noise of standard deviation ``strain_std``; the law is linear, so
  var = sum_j c_j^2 std_j^2 exactly;
* material properties: each property that enters a law is given a relative
  standard uncertainty u (``property_uncertainty``). Properties are independent
  of each other; a property of one material record is *one* number shared by every
  ply and layer made of that record (fully correlated between those plies), since
  one measured record describes them all. The properties are
  E1, E2, G12, nu12, alpha1, alpha2, density, specific_heat for a ply material and
  E, nu, alpha, density, specific_heat for an isotropic layer. Thicknesses and
  ply angles are taken as exact; conductivities do not enter the adiabatic laws.

The sensitivities d c / d p are central differences of the coefficient vectors
(relative step 1e-6; the coefficients are smooth rational functions of the
properties, so the truncation error is ~1e-12 relative). Because each coefficient
vector is linear in the strain, the property part of the variance at a pixel is
the quadratic form eps^T M eps with a (3, 3) matrix M per source: the cost per
pixel is a few multiply-adds, independent of the number of properties.

References
----------
JCGM 100:2008, *Evaluation of measurement data - Guide to the expression of
uncertainty in measurement* (GUM), sec. 5.1 (law of propagation of uncertainty)
and sec. 5.2 (correlated input quantities).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from numbers import Real

import numpy as np

from ._clt import _check_laminate
from ._laminate import Laminate, Ply, SurfaceLayer
from ._materials import OrthotropicMaterial
from ._predict import _select, _strain_array, source_coefficients

__all__ = ["UNCERTAIN_PROPERTIES", "property_sensitivities", "property_covariance", "prediction_std"]

#: The properties given a relative uncertainty, per kind of material.
UNCERTAIN_PROPERTIES = {
    "orthotropic": ("E1", "E2", "G12", "nu12", "alpha1", "alpha2", "density", "specific_heat"),
    "isotropic": ("E", "nu", "alpha", "density", "specific_heat"),
}
_ALL_NAMES = sorted(set(UNCERTAIN_PROPERTIES["orthotropic"]) | set(UNCERTAIN_PROPERTIES["isotropic"]))
_STEP = 1e-6


def _relative_uncertainties(property_uncertainty) -> dict[str, float]:
    def check(name, v):
        if isinstance(v, bool) or not isinstance(v, Real) or not math.isfinite(v) or v < 0:
            raise ValueError(f"property_uncertainty{name} must be a finite relative standard "
                             f"uncertainty >= 0 (0.05 for 5 %), got {v!r}")
        return float(v)

    if isinstance(property_uncertainty, Mapping):
        unknown = sorted(set(property_uncertainty) - set(_ALL_NAMES))
        if unknown:
            raise ValueError(f"property_uncertainty has unknown properties {unknown!r}; "
                             f"valid: {_ALL_NAMES}")
        return {k: check(f"[{k!r}]", property_uncertainty.get(k, 0.0)) for k in _ALL_NAMES}
    u = check("", property_uncertainty)
    return {k: u for k in _ALL_NAMES}


def _materials(laminate) -> list:
    """Distinct material records that enter the adiabatic laws, in first-seen order."""
    seen = []
    for _, layer in laminate.surface_layers:
        if layer.material not in seen:
            seen.append(layer.material)
    for p in laminate.plies:
        if p.material not in seen:
            seen.append(p.material)
    return seen


def _swap(laminate, old, new) -> Laminate:
    plies = tuple(Ply(new, p.angle, p.thickness) if p.material == old else p for p in laminate.plies)
    layers = {}
    for key in ("coating", "resin_layer", "back_layer"):
        layer = getattr(laminate, key)
        if layer is not None and layer.material == old:
            layer = SurfaceLayer(new, layer.thickness)
        layers[key] = layer
    return dataclasses.replace(laminate, plies=plies, **layers)


def property_sensitivities(laminate, *, property_uncertainty=0.05, sources=None) -> dict[str, np.ndarray]:
    """Change of each source's coefficients for a one-standard-uncertainty change of each property.

    Parameters
    ----------
    laminate : Laminate
    property_uncertainty : float or dict
        Relative standard uncertainty of every property in
        :data:`UNCERTAIN_PROPERTIES` (0.05 = 5 %), or a dict by property name
        (missing names count as exact).
    sources : sequence of str, optional
        Default: every source the laminate has.

    Returns
    -------
    dict of str to (n_param, 3) ndarray
        Rows u_p p dc/dp (dimensionless), one per (material, property) pair, in the
        order of the materials' first appearance and of :data:`UNCERTAIN_PROPERTIES`.
    """
    _check_laminate(laminate)
    names = _select(laminate, sources)
    u = _relative_uncertainties(property_uncertainty)
    rows = {n: [] for n in names}
    for mat in _materials(laminate):
        kind = "orthotropic" if isinstance(mat, OrthotropicMaterial) else "isotropic"
        for prop in UNCERTAIN_PROPERTIES[kind]:
            if u[prop] == 0.0:
                continue
            value = getattr(mat, prop)
            if value == 0.0:
                # a relative uncertainty of an exactly zero property is zero
                continue
            up, dn = (source_coefficients(_swap(laminate, mat, dataclasses.replace(mat, **{prop: value * f})))
                      for f in (1 + _STEP, 1 - _STEP))
            for n in names:
                rows[n].append((up[n] - dn[n]) * (u[prop] / (2 * _STEP)))
    return {n: np.array(r).reshape(-1, 3) for n, r in rows.items()}


def property_covariance(laminate, *, property_uncertainty=0.05, sources=None) -> dict[str, np.ndarray]:
    """(3, 3) matrix M per source with var_property(ratio) = eps^T M eps.

    Parameters and property model as :func:`property_sensitivities`.

    Returns
    -------
    dict of str to (3, 3) ndarray
        Symmetric positive semi-definite, dimensionless.
    """
    g = property_sensitivities(laminate, property_uncertainty=property_uncertainty, sources=sources)
    return {n: rows.T @ rows for n, rows in g.items()}


def prediction_std(laminate, strain_ranges, strain_std, *, property_uncertainty=0.05,
                   sources=None) -> dict[str, np.ndarray]:
    """Standard deviation of each predicted adiabatic dT/T0 map.

    Parameters
    ----------
    laminate : Laminate
    strain_ranges : (..., 3) array_like
        (d eps_xx, d eps_yy, d gamma_xy) per pixel, specimen frame.
    strain_std : (..., 3) array_like
        Standard deviation of each strain-range component (broadcast against
        ``strain_ranges``; a (3,) vector for a uniform noise floor); components
        taken as independent.
    property_uncertainty : float or dict
        Relative standard uncertainty of the material properties (see the module
        docstring for which properties and how they are correlated); 0 gives the
        strain-noise part alone.
    sources : sequence of str, optional
        Default: every source the laminate has.

    Returns
    -------
    dict of str to (...) ndarray
        Standard deviation of dT/T0 (dimensionless) per pixel; float32 when
        ``strain_ranges`` is float32, float64 otherwise.

    Notes
    -----
    First order (GUM sec. 5): var = sum_j c_j^2 std_j^2 + eps^T M eps. The
    property term is linearised about the nominal properties; it is accurate to
    O(u^2) relative (about 1 % at u = 0.05, checked against Monte Carlo draws in
    the tests). For a property with a value near zero (alpha1 of carbon fibre plies)
    a relative uncertainty understates the real doubt; pass a larger value for that
    property in the dict form.
    """
    names = _select(laminate, sources)
    e = _strain_array(strain_ranges)
    s = _strain_array(strain_std, "strain_std")
    if np.any(s < 0):
        raise ValueError("strain_std must be >= 0 (standard deviations of the strain ranges)")
    dtype = np.float32 if e.dtype == np.float32 else np.float64
    coeffs = source_coefficients(laminate)
    cov = property_covariance(laminate, property_uncertainty=property_uncertainty, sources=names)
    shape = np.broadcast_shapes(e.shape, s.shape)[:-1]
    # accumulate in float64: squares of ~1e-6 ratios sum to ~1e-12 and lose digits in float32
    e64 = np.broadcast_to(e, shape + (3,)).reshape(-1, 3).astype(np.float64)
    var_s = np.broadcast_to(np.square(s, dtype=np.float64), shape + (3,)).reshape(-1, 3)
    out = {}
    for n in names:
        var = var_s @ np.square(coeffs[n])
        w, v = np.linalg.eigh(cov[n])
        for wi, vi in zip(np.clip(w, 0.0, None), v.T):
            if wi > 0:
                var += wi * np.square(e64 @ vi)
        out[n] = np.sqrt(var).astype(dtype).reshape(shape)
    return out
