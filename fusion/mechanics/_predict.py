"""Predicted adiabatic thermoelastic response dT/T0 of each candidate source.

Every law here is linear in the strain range, so each source reduces to three
coefficients in the specimen frame: ``ratio = strain_ranges @ coefficients``.
A whole map is then one small matrix product, whatever its number of pixels.

Sources (names as in :data:`fusion.datamodel.SOURCES`):

``coating``, ``resin_layer``
    An isotropic layer that follows the surface strain (a strain witness):
    Kelvin's law dT/T0 = -(alpha / (rho c)) E / (1 - nu) (d eps_xx + d eps_yy).
``surface_ply``
    The first ply of the layup (viewed face) at ``angle + zero_direction`` from
    specimen x: dT/T0 = -(alpha1 d sigma1 + alpha2 d sigma2) / (rho c), with the
    ply stresses from Q and the strain rotated into material axes.
``laminate``
    The plies homogenised through the thickness (heat shared by all plies):
    dT/T0 = -sum_k t_k alpha_k . d sigma_k / sum_k t_k rho_k c_k, which equals
    -alpha_lam . dN / (h <rho c>) with the laminate CTE and the resultant dN = A d eps.

All layers see the strain measured on the surface: in-plane loading without bending.

Caution: these are predictions from nominal properties to plan and interpret tests; they
support engineering judgement and do not certify a component or set a safe load. Test rigs
under cyclic load are hazardous: choose loads and run tests under the laboratory's
procedures, the applicable test standards and the responsibility of qualified engineers.

References
----------
Thomson, W. (Lord Kelvin), "On the dynamical theory of heat", Trans. R. Soc. Edinburgh
20 (1853); Harwood, N. and Cummings, W. M., *Thermoelastic Stress Analysis*, Adam Hilger,
1991 (isotropic form). Potter, R. T. and Greaves, L. J., Proc. SPIE 817 (1987); Stanley, P.
and Chan, W. K., J. Strain Anal. 23(3) (1988) (orthotropic form). Kaw, A. K., *Mechanics of
Composite Materials*, 2nd ed., CRC 2006, and Jones, R. M., *Mechanics of Composite
Materials*, 2nd ed., 1999 (lamination theory).
"""

from __future__ import annotations

import functools

import numpy as np

from ..datamodel import SOURCES
from ._clt import (
    _check_laminate, abd_matrices, laminate_cte, reduced_stiffness, strain_transformation,
)
from ._layers import ThermalLayer
from ._materials import IsotropicMaterial, OrthotropicMaterial

__all__ = [
    "isotropic_coefficients", "ply_coefficients", "laminate_coefficients", "source_coefficients",
    "available_sources", "predict_ratios", "thermal_layers", "ply_profile", "source_table",
    "REFERENCE_T0",
]

#: Mean temperature used to express dT in kelvin in tables (20 °C), K.
REFERENCE_T0 = 293.15

# Sources of this module in map order; the heat models ("model", "lateral") live elsewhere.
_LAW_SOURCES = tuple(s for s in SOURCES if s not in ("model", "lateral"))


def isotropic_coefficients(material: IsotropicMaterial) -> np.ndarray:
    """Adiabatic dT/T0 per unit strain range of an isotropic layer (Kelvin's law).

    Parameters
    ----------
    material : IsotropicMaterial

    Returns
    -------
    (3,) ndarray
        Coefficients of (d eps_xx, d eps_yy, d gamma_xy): ``-K E / (1 - nu) * (1, 1, 0)``
        with K = alpha / (rho c) in 1/Pa; dimensionless. Frame independent.

    Notes
    -----
    Plane stress: d sigma_xx + d sigma_yy = E / (1 - nu) (d eps_xx + d eps_yy), and
    dT/T0 = -K (d sigma_xx + d sigma_yy) (Thomson 1853; Harwood & Cummings 1991).

    References
    ----------
    Thomson, W., Trans. R. Soc. Edinburgh 20 (1853) 261-288; Harwood, N. and Cummings, W. M.,
    *Thermoelastic Stress Analysis*, Adam Hilger, 1991.
    """
    if not isinstance(material, IsotropicMaterial):
        raise TypeError(f"expected an IsotropicMaterial, got {type(material).__name__}")
    k = material.thermoelastic_constant * material.E / (1.0 - material.nu)
    return np.array([-k, -k, 0.0])


def ply_coefficients(material: OrthotropicMaterial, angle: float) -> np.ndarray:
    """Adiabatic dT/T0 per unit strain range of an orthotropic ply at ``angle``.

    Parameters
    ----------
    material : OrthotropicMaterial
    angle : float
        Angle of the fibres from the x axis of the strain frame, degrees CCW
        (for a laminate ply in the specimen frame: ``ply.angle + zero_direction``).

    Returns
    -------
    (3,) ndarray
        c with ``dT/T0 = c @ (d eps_xx, d eps_yy, d gamma_xy)``, dimensionless.

    Notes
    -----
    d sigma_12 = Q T_eps(angle) d eps and dT/T0 = -(alpha1 d sigma1 + alpha2 d sigma2)
    / (rho c), so c = -T_eps^T Q (alpha1, alpha2, 0) / (rho c) (Potter & Greaves 1987;
    Stanley & Chan 1988). The in-plane shear stress does not enter.

    References
    ----------
    Potter, R. T. and Greaves, L. J., Proc. SPIE 817 (1987); Stanley, P. and Chan, W. K.,
    J. Strain Anal. Eng. Des. 23(3) (1988).
    """
    if not isinstance(material, OrthotropicMaterial):
        raise TypeError(f"expected an OrthotropicMaterial, got {type(material).__name__}")
    q = reduced_stiffness(material)
    weights = np.array([material.alpha1, material.alpha2, 0.0]) / material.volumetric_heat_capacity
    return -(strain_transformation(angle).T @ (q @ weights))


def _ply_coefficient_list(laminate) -> list[np.ndarray]:
    zd = float(laminate.zero_direction)
    return [ply_coefficients(p.material, p.angle + zd) for p in laminate.plies]


def laminate_coefficients(laminate, *, form: str = "resultant") -> np.ndarray:
    """Adiabatic dT/T0 per unit strain range of the homogenised laminate, specimen frame.

    Parameters
    ----------
    laminate : Laminate
    form : {"resultant", "plies"}
        ``"resultant"``: -alpha_lam . dN / (h <rho c>) with dN = A d eps (laminate CTE
        from lamination theory); ``"plies"``: -sum_k t_k alpha_k . d sigma_k /
        sum_k t_k rho_k c_k. The two are equal in exact arithmetic (A is symmetric);
        computing both is a check of the implementation.

    Returns
    -------
    (3,) ndarray
        Dimensionless coefficients of (d eps_xx, d eps_yy, d gamma_xy), specimen frame.

    Notes
    -----
    Only the plies count; thin coatings and resin layers carry their own sources.
    Heat is assumed shared through the whole thickness (the low-frequency limit of
    the heat model); in-plane loading without bending.

    References
    ----------
    Kaw (2006), sec. 4.5; Jones (1999), sec. 4.3 (laminate CTE).
    """
    _check_laminate(laminate)
    heat = sum(p.thickness * p.material.volumetric_heat_capacity for p in laminate.plies)
    if form == "plies":
        coeffs = _ply_coefficient_list(laminate)
        return sum(p.thickness * p.material.volumetric_heat_capacity * c
                   for p, c in zip(laminate.plies, coeffs)) / heat
    if form != "resultant":
        raise ValueError(f"form must be 'resultant' or 'plies', got {form!r}")
    a, _, _ = abd_matrices(laminate)
    # ratio = -alpha_lam . (A eps_lam) / heat, with eps_lam = T_eps(zero_direction) eps_spec.
    c_lam = -(a @ laminate_cte(laminate)) / heat
    return strain_transformation(float(laminate.zero_direction)).T @ c_lam


def available_sources(laminate) -> tuple[str, ...]:
    """The adiabatic sources a laminate has, in map order."""
    _check_laminate(laminate)
    return tuple(s for s in _LAW_SOURCES if s not in ("coating", "resin_layer") or getattr(laminate, s))


def source_coefficients(laminate) -> dict[str, np.ndarray]:
    """Coefficients of the predicted adiabatic dT/T0 of every source the laminate has.

    Parameters
    ----------
    laminate : Laminate

    Returns
    -------
    dict of str to (3,) ndarray
        ``coating`` (only if the laminate has one), ``resin_layer`` (likewise),
        ``surface_ply`` and ``laminate``; ``ratio = strain_ranges @ c`` with strain
        ranges (d eps_xx, d eps_yy, d gamma_xy) in the specimen frame; dimensionless.

    Examples
    --------
    >>> from fusion.mechanics import OrthotropicMaterial, Laminate
    >>> m = OrthotropicMaterial("cfrp", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6,
    ...                         1600.0, 900.0, 5.0, 0.6, 0.6)
    >>> c = source_coefficients(Laminate.from_layup(m, "[±45]s", 0.25e-3))
    >>> bool(np.allclose(c["surface_ply"][:2], c["laminate"][:2]))  # every ±45 ply alike
    True
    """
    _check_laminate(laminate)
    return {k: v.copy() for k, v in _cached_coefficients(laminate)}


@functools.lru_cache(maxsize=256)
def _cached_coefficients(laminate) -> tuple[tuple[str, np.ndarray], ...]:
    # Laminates are frozen and hashable, so a map pipeline that predicts many maps of one
    # laminate pays the lamination-theory cost once.
    out = []
    for key, layer in laminate.surface_layers:
        out.append((key, isotropic_coefficients(layer.material)))
    first = laminate.plies[0]
    zd = float(laminate.zero_direction)
    out.append(("surface_ply", ply_coefficients(first.material, first.angle + zd)))
    out.append(("laminate", laminate_coefficients(laminate)))
    for _, v in out:
        v.setflags(write=False)
    return tuple(out)


def _select(laminate, sources) -> tuple[str, ...]:
    have = available_sources(laminate)
    if sources is None:
        return have
    if isinstance(sources, str):
        sources = (sources,)
    sources = tuple(sources)
    for s in sources:
        if s not in have:
            hint = (f" (the {s!r} source comes from a heat model, not the adiabatic laws: "
                    "fusion.predictions gives the through-thickness model ('model') with its standard "
                    "deviation and phase lag at a frequency, or use transfer_coefficients with model_response)"
                    if s in ("model", "lateral") else "")
            raise ValueError(f"source {s!r} is not available for laminate {laminate.name!r}; "
                             f"available: {list(have)}{hint}")
    return sources


def _strain_array(strain_ranges, name="strain_ranges") -> np.ndarray:
    e = np.asarray(strain_ranges)
    if e.dtype.kind not in "fiu" or e.ndim < 1 or e.shape[-1] != 3:
        raise ValueError(f"{name} must be a real (..., 3) array of (d eps_xx, d eps_yy, d gamma_xy), "
                         f"got shape {e.shape} dtype {e.dtype}")
    return e


def predict_ratios(laminate, strain_ranges, *, sources=None) -> dict[str, np.ndarray]:
    """Predicted adiabatic dT/T0 maps of each source from strain-range maps.

    Parameters
    ----------
    laminate : Laminate
    strain_ranges : (..., 3) array_like
        (d eps_xx, d eps_yy, d gamma_xy) per pixel, specimen frame, peak-to-peak and
        signed (max load minus min load).
    sources : sequence of str, optional
        Subset of :func:`available_sources` (default: all of them).

    Returns
    -------
    dict of str to (...) ndarray
        Dimensionless dT/T0 per pixel for each source; float32 in gives float32
        out, anything else float64. NaN strains give NaN.

    Notes
    -----
    The (n_source, 3) coefficients are applied to every pixel in one compiled
    pass over the strain maps (numba), so the cost is that of reading the
    strains and writing the outputs. The laws assume an
    adiabatic response (loading fast enough that no heat flows during a cycle)
    and in-plane loading without bending; see the heat model for finite
    frequencies.

    References
    ----------
    The laws of :func:`isotropic_coefficients`, :func:`ply_coefficients` and
    :func:`laminate_coefficients` (module docstring).

    Examples
    --------
    >>> from fusion.mechanics import IsotropicMaterial, Laminate, OrthotropicMaterial, SurfaceLayer
    >>> ply = OrthotropicMaterial("cfrp", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6,
    ...                           1600.0, 900.0, 5.0, 0.6, 0.6)
    >>> lam = Laminate.from_layup(ply, "[0/90]s", 0.25e-3)
    >>> maps = np.zeros((2, 2, 3), dtype=np.float32); maps[..., 0] = 1e-3
    >>> r = predict_ratios(lam, maps)
    >>> r["laminate"].dtype, bool(np.all(r["laminate"] < 0))   # tension cools
    (dtype('float32'), True)
    """
    names = _select(laminate, sources)
    e = _strain_array(strain_ranges)
    dtype = np.float32 if e.dtype == np.float32 else np.float64
    from ._predict_kernel import apply_coefficients

    coeffs = dict(_cached_coefficients(laminate))
    c = np.ascontiguousarray(np.stack([coeffs[n] for n in names]), dtype=dtype)
    flat = np.ascontiguousarray(e.reshape(-1, 3), dtype=dtype)
    out = np.empty((len(names), flat.shape[0]), dtype=dtype)
    apply_coefficients(flat, c, out)
    shape = e.shape[:-1]
    return {n: out[i].reshape(shape) for i, n in enumerate(names)}


def _ply_name(index: int, ply) -> str:
    return f"ply {index} ({ply.angle:g}°)"


def thermal_layers(laminate) -> list[ThermalLayer]:
    """The through-thickness layers of the heat problem, viewed face first.

    Parameters
    ----------
    laminate : Laminate

    Returns
    -------
    list of ThermalLayer
        ``coating``, ``resin_layer``, ``ply 1 (angle°)`` ... ``ply n``, ``back_layer``
        (the surface layers only where the laminate has them), each with rho, c,
        through-thickness conductivity (k3 of a ply, k of an isotropic layer), its
        adiabatic coefficients (3,) in the specimen frame and, for a ply, its in-plane
        conductivities k1, k2 with the fibre angle in the specimen frame
        (``angle + zero_direction``).

    Notes
    -----
    Isotropic layers follow the surface strain (in-plane loading, no bending), so
    the back layer has the same coefficients as a resin layer of its material.
    """
    _check_laminate(laminate)
    layers = []
    for key, layer in laminate.surface_layers:
        m = layer.material
        layers.append(ThermalLayer(key, layer.thickness, m.density, m.specific_heat, m.k,
                                   isotropic_coefficients(m)))
    zd = float(laminate.zero_direction)
    for i, (ply, c) in enumerate(zip(laminate.plies, _ply_coefficient_list(laminate)), start=1):
        m = ply.material
        layers.append(ThermalLayer(_ply_name(i, ply), ply.thickness, m.density, m.specific_heat, m.k3, c,
                                   conductivity_along=m.k1, conductivity_across=m.k2,
                                   fibre_angle=ply.angle + zd))
    if laminate.back_layer is not None:
        m = laminate.back_layer.material
        layers.append(ThermalLayer("back_layer", laminate.back_layer.thickness, m.density,
                                   m.specific_heat, m.k, isotropic_coefficients(m)))
    return layers


def _single_strain(strain_range) -> np.ndarray:
    e = np.asarray(strain_range, dtype=float)
    if e.shape != (3,) or not np.all(np.isfinite(e)):
        raise ValueError(f"strain_range must be three finite numbers (d eps_xx, d eps_yy, d gamma_xy), "
                         f"got {strain_range!r}")
    return e


def ply_profile(laminate, strain_range) -> list[dict]:
    """Adiabatic dT/T0 of every layer through the thickness (the step profile).

    Parameters
    ----------
    laminate : Laminate
    strain_range : (3,) array_like
        (d eps_xx, d eps_yy, d gamma_xy), specimen frame.

    Returns
    -------
    list of dict
        One dict per layer of :func:`thermal_layers`, viewed face first, with
        ``layer`` (its name; also under ``name`` for the report figures),
        ``z_top`` and ``z_bottom`` (depth below the viewed face of
        the outermost layer, m, increasing inward) and ``ratio`` (adiabatic dT/T0,
        dimensionless).
    """
    e = _single_strain(strain_range)
    rows = []
    depth = 0.0
    for layer in thermal_layers(laminate):
        rows.append({"layer": layer.name, "name": layer.name, "z_top": depth,
                     "z_bottom": depth + layer.thickness, "ratio": float(layer.coefficients @ e)})
        depth += layer.thickness
    return rows


def source_table(laminate, strain_range, *, T0: float = REFERENCE_T0) -> str:
    """Plain-text table of the adiabatic dT/T0 of every source and every layer.

    Parameters
    ----------
    laminate : Laminate
    strain_range : (3,) array_like
        (d eps_xx, d eps_yy, d gamma_xy), specimen frame.
    T0 : float
        Mean temperature in K for the dT column (default 293.15 K).

    Returns
    -------
    str
        Lines of text: the strain state, the sources (``coating``...``laminate``)
        and then every layer with its depth range in mm; dT/T0 in units of 1e-6
        and dT in mK.
    """
    e = _single_strain(strain_range)
    if not (isinstance(T0, (int, float)) and T0 > 0):
        raise ValueError(f"T0 must be a positive temperature in K, got {T0!r}")
    code = f" {laminate.layup_code}" if laminate.layup_code else ""
    lines = [
        f"Laminate {laminate.name!r}{code}: {len(laminate.plies)} plies, "
        f"{laminate.thickness * 1e3:.3f} mm, 0° axis at {float(laminate.zero_direction):g}° from specimen x",
        "Strain range (specimen frame, microstrain): "
        f"d eps_xx = {e[0] * 1e6:.1f}, d eps_yy = {e[1] * 1e6:.1f}, d gamma_xy = {e[2] * 1e6:.1f}",
        f"Adiabatic response (dT at T0 = {T0:.2f} K):",
        f"  {'source / layer':<24}{'depth (mm)':>18}{'dT/T0 (1e-6)':>15}{'dT (mK)':>11}",
    ]
    ratios = {k: float(c @ e) for k, c in source_coefficients(laminate).items()}
    for k, r in ratios.items():
        lines.append(f"  {k:<24}{'':>18}{r * 1e6:>15.3f}{r * T0 * 1e3:>11.3f}")
    lines.append("  " + "-" * 68)
    for row in ply_profile(laminate, e):
        depth = f"{row['z_top'] * 1e3:.3f}-{row['z_bottom'] * 1e3:.3f}"
        r = row["ratio"]
        lines.append(f"  {row['layer']:<24}{depth:>18}{r * 1e6:>15.3f}{r * T0 * 1e3:>11.3f}")
    lines.append("Predictions from nominal properties support planning and judgement only; loads and "
                 "test conduct follow the laboratory's procedures and the applicable test standards.")
    return "\n".join(lines)

