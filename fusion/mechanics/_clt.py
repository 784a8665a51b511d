"""Classical lamination theory: ply stiffness, rotations, A B D, laminate constants and CTE.

Conventions: plane stress; Voigt order (1, 2, 6) with engineering shear strain
gamma = 2 eps; angles in degrees, counter-clockwise. Ply angles are measured from
the laminate 0° axis; the laminate 0° axis is at ``laminate.zero_direction`` from
specimen x, so a ply's angle from specimen x is ``angle + zero_direction``.
The through-thickness coordinate z of :func:`abd_matrices` runs from -h/2 at the
viewed face to +h/2 at the back face (plies listed viewed face first), as in
Kaw's ply numbering from the top face.

References
----------
Kaw, A. K., *Mechanics of Composite Materials*, 2nd ed., CRC Press, 2006, ch. 2 and 4
(eqs. 2.93-2.103 for Q and Qbar, 4.29 for A B D, 4.6 for laminate constants).
Jones, R. M., *Mechanics of Composite Materials*, 2nd ed., Taylor & Francis, 1999.
Daniel, I. M. and Ishai, O., *Engineering Mechanics of Composite Materials*, 2nd ed.,
Oxford University Press, 2006.
"""

from __future__ import annotations

import math

import numpy as np

from ._laminate import Laminate
from ._materials import IsotropicMaterial, OrthotropicMaterial

__all__ = [
    "reduced_stiffness", "transformed_stiffness", "stress_transformation", "strain_transformation",
    "strain_to_material", "stress_to_material", "material_cte", "abd_matrices",
    "engineering_constants", "laminate_cte", "ply_stresses", "ply_interfaces", "uniaxial_strain_state",
]


def _check_angle(angle) -> float:
    if isinstance(angle, bool):
        raise TypeError(f"angle must be a number of degrees, got {angle!r}")
    try:
        a = float(angle)
    except (TypeError, ValueError) as e:
        raise TypeError(f"angle must be a number of degrees, got {angle!r}") from e
    if not math.isfinite(a):
        raise ValueError(f"angle must be finite, got {angle!r}")
    return a


def _cs(angle: float) -> tuple[float, float]:
    r = math.radians(_check_angle(angle))
    c, s = math.cos(r), math.sin(r)
    # Snap round-off at multiples of 90° so that e.g. a 90° ply has no spurious 1e-16 coupling.
    c = 0.0 if abs(c) < 1e-15 else c
    s = 0.0 if abs(s) < 1e-15 else s
    return c, s


def stress_transformation(angle) -> np.ndarray:
    """Stress rotation [T]: ``sigma_12 = T @ sigma_xy`` for axes rotated by ``angle`` (deg, CCW).

    Returns
    -------
    (3, 3) ndarray
        Acts on (sigma_x, sigma_y, tau_xy).

    References
    ----------
    Kaw (2006), eq. 2.95.
    """
    c, s = _cs(angle)
    return np.array([[c * c, s * s, 2 * s * c],
                     [s * s, c * c, -2 * s * c],
                     [-s * c, s * c, c * c - s * s]])


def strain_transformation(angle) -> np.ndarray:
    """Strain rotation for engineering shear: ``eps_12 = T_eps @ eps_xy`` (= R T R^-1).

    Returns
    -------
    (3, 3) ndarray
        Acts on (eps_x, eps_y, gamma_xy).

    References
    ----------
    Kaw (2006), eqs. 2.96-2.97 (Reuter matrix R = diag(1, 1, 2)).
    """
    c, s = _cs(angle)
    return np.array([[c * c, s * s, s * c],
                     [s * s, c * c, -s * c],
                     [-2 * s * c, 2 * s * c, c * c - s * s]])


def _vectors(values, name) -> np.ndarray:
    a = np.asarray(values)
    if a.dtype.kind not in "fiu" or a.ndim < 1 or a.shape[-1] != 3:
        raise ValueError(f"{name} must be a real (..., 3) array (xx, yy, engineering xy), got "
                         f"shape {a.shape} dtype {a.dtype}")
    return a


def strain_to_material(strain, angle) -> np.ndarray:
    """Rotate strain vectors into the axes of a ply at ``angle`` (deg CCW).

    Parameters
    ----------
    strain : (..., 3) array_like
        (eps_xx, eps_yy, gamma_xy) in the frame the angle is measured from.
    angle : float
        Angle of the material 1 axis from that frame's x axis, degrees CCW.

    Returns
    -------
    (..., 3) ndarray
        (eps_1, eps_2, gamma_12); float32 stays float32.
    """
    e = _vectors(strain, "strain")
    t = strain_transformation(angle)
    if e.dtype == np.float32:
        t = t.astype(np.float32)
    return e @ t.T


def stress_to_material(stress, angle) -> np.ndarray:
    """Rotate stress vectors into the axes of a ply at ``angle`` (deg CCW).

    Parameters
    ----------
    stress : (..., 3) array_like
        (sigma_xx, sigma_yy, tau_xy) in Pa.
    angle : float
        Angle of the material 1 axis from the frame's x axis, degrees CCW.

    Returns
    -------
    (..., 3) ndarray
        (sigma_1, sigma_2, tau_12) in Pa; float32 stays float32.
    """
    s = _vectors(stress, "stress")
    t = stress_transformation(angle)
    if s.dtype == np.float32:
        t = t.astype(np.float32)
    return s @ t.T


def reduced_stiffness(material) -> np.ndarray:
    """Plane-stress reduced stiffness [Q] of a ply (or an isotropic layer) in its own axes.

    Parameters
    ----------
    material : OrthotropicMaterial or IsotropicMaterial

    Returns
    -------
    (3, 3) ndarray
        Q in Pa, Voigt order (1, 2, 6), engineering shear.

    References
    ----------
    Kaw (2006), eq. 2.93: Q11 = E1/(1 - nu12 nu21), Q12 = nu12 E2/(1 - nu12 nu21),
    Q22 = E2/(1 - nu12 nu21), Q66 = G12.
    """
    if isinstance(material, OrthotropicMaterial):
        e1, e2, g12, nu12 = material.E1, material.E2, material.G12, material.nu12
    elif isinstance(material, IsotropicMaterial):
        e1 = e2 = material.E
        nu12 = material.nu
        g12 = material.G
    else:
        raise TypeError(f"expected an OrthotropicMaterial or IsotropicMaterial, got {material!r}")
    nu21 = nu12 * e2 / e1
    d = 1.0 - nu12 * nu21
    return np.array([[e1 / d, nu12 * e2 / d, 0.0],
                     [nu12 * e2 / d, e2 / d, 0.0],
                     [0.0, 0.0, g12]])


def transformed_stiffness(material, angle) -> np.ndarray:
    """Transformed reduced stiffness [Qbar] of a ply at ``angle`` (deg CCW).

    Returns
    -------
    (3, 3) ndarray
        Qbar in Pa with ``sigma_xy = Qbar @ eps_xy`` (engineering shear).

    References
    ----------
    Kaw (2006), eq. 2.103: Qbar = T^-1 Q R T R^-1 = T^-1 Q T_eps.
    """
    q = reduced_stiffness(material)
    # T^-1 is T at -angle; T_eps = R T R^-1.
    return stress_transformation(-_check_angle(angle)) @ q @ strain_transformation(angle)


def material_cte(material) -> np.ndarray:
    """(alpha_1, alpha_2, 0) of a material in its own axes, 1/K (engineering shear)."""
    if isinstance(material, OrthotropicMaterial):
        return np.array([material.alpha1, material.alpha2, 0.0])
    if isinstance(material, IsotropicMaterial):
        return np.array([material.alpha, material.alpha, 0.0])
    raise TypeError(f"expected an OrthotropicMaterial or IsotropicMaterial, got {material!r}")


def _check_laminate(laminate):
    if not isinstance(laminate, Laminate):
        raise TypeError(f"expected a Laminate, got {type(laminate).__name__}")


def ply_interfaces(laminate) -> np.ndarray:
    """z of the ply interfaces, (n_ply + 1,) in m, from -h/2 (viewed face) to +h/2."""
    _check_laminate(laminate)
    t = np.array([p.thickness for p in laminate.plies])
    z = np.concatenate([[0.0], np.cumsum(t)])
    return z - z[-1] / 2.0


def _abd(laminate, offset: float):
    z = ply_interfaces(laminate)
    a = np.zeros((3, 3))
    b = np.zeros((3, 3))
    d = np.zeros((3, 3))
    for k, ply in enumerate(laminate.plies):
        qb = transformed_stiffness(ply.material, ply.angle + offset)
        z0, z1 = z[k], z[k + 1]
        a += qb * (z1 - z0)
        b += qb * (z1 ** 2 - z0 ** 2) / 2.0
        d += qb * (z1 ** 3 - z0 ** 3) / 3.0
    return a, b, d


def abd_matrices(laminate) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Extensional, coupling and bending stiffness of the plies, laminate frame.

    Parameters
    ----------
    laminate : Laminate
        Only the plies count (coatings and resin layers are left out).

    Returns
    -------
    A : (3, 3) ndarray
        Pa m.
    B : (3, 3) ndarray
        Pa m2.
    D : (3, 3) ndarray
        Pa m3.

    Notes
    -----
    z is measured from the mid-plane of the plies, negative towards the viewed
    face (ply 1 lies between -h/2 and -h/2 + t1). Reversing the layup changes the
    sign of B and leaves A and D unchanged.

    References
    ----------
    Kaw (2006), eq. 4.29; Jones (1999), sec. 4.2.
    """
    _check_laminate(laminate)
    return _abd(laminate, 0.0)


def _specimen_a(laminate) -> np.ndarray:
    """A in the specimen frame (plies rotated by zero_direction)."""
    return _abd(laminate, float(laminate.zero_direction))[0]


def engineering_constants(laminate) -> dict[str, float]:
    """In-plane engineering constants of the laminate, laminate frame.

    Returns
    -------
    dict
        ``Ex``, ``Ey``, ``Gxy`` in Pa, ``nu_xy`` and ``nu_yx`` (-), from
        a = A^-1: Ex = 1/(h a11), Ey = 1/(h a22), Gxy = 1/(h a66), nu_xy = -a12/a11.

    Notes
    -----
    These are the membrane constants with the curvature held at zero (in-plane
    loading, no bending, as the thermoelastic laws assume). For an unsymmetric
    laminate free to bend the apparent constants are lower.

    References
    ----------
    Kaw (2006), sec. 4.6, eqs. 4.36-4.39.
    """
    _check_laminate(laminate)
    a, _, _ = abd_matrices(laminate)
    inv = np.linalg.inv(a)
    h = laminate.thickness
    return {"Ex": float(1.0 / (h * inv[0, 0])), "Ey": float(1.0 / (h * inv[1, 1])),
            "Gxy": float(1.0 / (h * inv[2, 2])), "nu_xy": float(-inv[0, 1] / inv[0, 0]),
            "nu_yx": float(-inv[0, 1] / inv[1, 1])}


def _thermal_resultant(laminate, *, offset: float = 0.0) -> np.ndarray:
    """sum_k Qbar_k alphabar_k t_k in Pa m / K, in the frame rotated by ``offset`` degrees."""
    nt = np.zeros(3)
    for ply in laminate.plies:
        ang = ply.angle + offset
        alpha_bar = strain_transformation(-ang) @ material_cte(ply.material)
        nt += transformed_stiffness(ply.material, ang) @ alpha_bar * ply.thickness
    return nt


def laminate_cte(laminate, *, frame: str = "laminate") -> np.ndarray:
    """Laminate coefficients of thermal expansion (mid-plane, no bending).

    Parameters
    ----------
    laminate : Laminate
    frame : {"laminate", "specimen"}
        Axes of the result: the laminate 0° axis, or the specimen frame (rotated by
        ``laminate.zero_direction``).

    Returns
    -------
    (3,) ndarray
        (alpha_x, alpha_y, alpha_xy) in 1/K, engineering shear.

    Notes
    -----
    alpha_lam = A^-1 sum_k Qbar_k alphabar_k t_k, the free mid-plane strain per
    kelvin with the curvature held at zero; exact for symmetric laminates.

    References
    ----------
    Kaw (2006), sec. 4.5 (thermal loads) and eqs. 2.226-2.227 for the lamina case;
    Daniel & Ishai (2006), sec. 8.4.
    """
    _check_laminate(laminate)
    if frame not in ("laminate", "specimen"):
        raise ValueError(f"frame must be 'laminate' or 'specimen', got {frame!r}")
    a, _, _ = abd_matrices(laminate)
    alpha = np.linalg.solve(a, _thermal_resultant(laminate))
    if frame == "specimen":
        # alpha is a strain-like vector; expressing it in axes at -zero_direction from the laminate axes.
        alpha = strain_transformation(-float(laminate.zero_direction)) @ alpha
    return alpha


def ply_stresses(laminate, strain_ranges) -> np.ndarray:
    """Stress ranges of every ply in its material axes from mid-plane strain ranges.

    Parameters
    ----------
    laminate : Laminate
    strain_ranges : (..., 3) array_like
        (d eps_xx, d eps_yy, d gamma_xy) in the SPECIMEN frame (no bending, so every
        ply sees these strains).

    Returns
    -------
    (n_ply, ..., 3) ndarray
        (d sigma_1, d sigma_2, d tau_12) in Pa for each ply, viewed face first;
        float32 in gives float32 out.

    Notes
    -----
    A ply at ``angle`` sits at ``angle + zero_direction`` from specimen x. The strain
    ranges are mechanical (the adiabatic temperature swing of a few mK adds no
    meaningful thermal strain).
    """
    _check_laminate(laminate)
    e = _vectors(strain_ranges, "strain_ranges")
    dtype = np.float32 if e.dtype == np.float32 else np.float64
    mats = np.stack([reduced_stiffness(p.material)
                     @ strain_transformation(p.angle + float(laminate.zero_direction))
                     for p in laminate.plies]).astype(dtype)
    e = e.astype(dtype, copy=False)
    return np.einsum("kij,...j->k...i", mats, e)


def uniaxial_strain_state(laminate, *, strain: float = 1e-3, direction: float = 0.0) -> np.ndarray:
    """Specimen-frame strain range of the laminate under a uniaxial in-plane load.

    Parameters
    ----------
    laminate : Laminate
    strain : float
        Normal strain range along ``direction`` (dimensionless; 1e-3 is 1000
        microstrain; negative for a compressive range).
    direction : float
        Load axis in degrees CCW from specimen x.

    Returns
    -------
    (3,) ndarray
        (d eps_xx, d eps_yy, d gamma_xy) in the specimen frame: the strain along
        ``direction`` equals ``strain``, with the laminate's own Poisson contraction
        and, for an unbalanced layup, its shear coupling.

    Notes
    -----
    The load is a stress resultant N = n (cos^2, sin^2, sin cos) along
    ``direction``; the strain is A^-1 N with A in the specimen frame (no bending),
    scaled so that its normal component along ``direction`` is ``strain``.
    """
    _check_laminate(laminate)
    for name, v in (("strain", strain), ("direction", direction)):
        if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)) \
                or not math.isfinite(v):
            raise ValueError(f"{name} must be a finite number, got {v!r}")
    c, s = _cs(direction)
    load = np.array([c * c, s * s, s * c])
    eps = np.linalg.solve(_specimen_a(laminate), load)
    along = c * c * eps[0] + s * s * eps[1] + s * c * eps[2]
    return eps * (float(strain) / along)
