"""Forward models of the demo scenario: an open-hole coupon under cyclic tension.

Everything here generates *synthetic* data for the demo and its end-to-end test
from the project's own models; nothing is measured. The in-plane field is the
Kirsch solution of an infinite plate with a circular hole under remote uniaxial
stress (Timoshenko & Goodier, *Theory of Elasticity*, 3rd ed., sec. 35),
written for a load along specimen y, with effective in-plane moduli of the
laminate. The thermal signal is the project's through-thickness heat model at
the run's frequency applied to the strain ranges of that field.
"""

from __future__ import annotations

import numpy as np

__all__ = ["kirsch_displacement", "kirsch_strain", "coupon_mask", "fiducial_centres", "demo_homography",
           "apply_homography"]


def kirsch_displacement(x, y, *, stress, modulus, poisson, radius):
    """Displacement (u, v) in m of a plate with a hole of ``radius`` (m) at the origin under a
    remote uniaxial ``stress`` (Pa) along y; plane stress, isotropic ``modulus``, ``poisson``.

    Timoshenko & Goodier, sec. 35 (Kirsch 1898), with the load axis rotated onto y. Rigid-body
    terms are chosen so that the hole centre does not move.
    """
    # Work in a frame whose X axis is the load axis (specimen y): X = y, Y = -x.
    X, Y = np.asarray(y, float), -np.asarray(x, float)
    # inside the hole there is no material; continue the boundary values along rays so that
    # the field stays smooth there (image rendering needs a smooth map everywhere)
    r = np.maximum(np.hypot(X, Y), radius)
    th = np.arctan2(Y, X)
    G = modulus / (2.0 * (1.0 + poisson))
    kappa = (3.0 - poisson) / (1.0 + poisson)           # plane stress
    a2, a4 = radius ** 2, radius ** 4
    c2, s2 = np.cos(2 * th), np.sin(2 * th)
    ur = stress / (4 * G) * (r * ((kappa - 1) / 2 + c2) + a2 / r * (1 + (1 + kappa) * c2) - a4 / r ** 3 * c2)
    ut = stress / (4 * G) * ((1 - kappa) * a2 / r - r - a4 / r ** 3) * s2
    uX = ur * np.cos(th) - ut * np.sin(th)
    uY = ur * np.sin(th) + ut * np.cos(th)
    # back to specimen axes: x = -Y, y = X
    return -uY, uX


def kirsch_strain(x, y, *, h=1e-7, **kw):
    """Strain (exx, eyy, gxy) of :func:`kirsch_displacement` by central differences (step h, m).

    Differencing the displacement the correlation side is given keeps the demo's strain and
    displacement exactly consistent.
    """
    ux1, vx1 = kirsch_displacement(x + h, y, **kw)
    ux0, vx0 = kirsch_displacement(x - h, y, **kw)
    uy1, vy1 = kirsch_displacement(x, y + h, **kw)
    uy0, vy0 = kirsch_displacement(x, y - h, **kw)
    exx = (ux1 - ux0) / (2 * h)
    eyy = (vy1 - vy0) / (2 * h)
    gxy = (uy1 - uy0) / (2 * h) + (vx1 - vx0) / (2 * h)
    return exx, eyy, gxy


def coupon_mask(x, y, *, half_width, radius):
    """True on material: inside the coupon width and outside the hole (coordinates in m)."""
    return (np.abs(x) <= half_width) & (np.hypot(x, y) > radius)


def fiducial_centres(half_width, half_height):
    """Four marker centres (m), inset from the corners of the correlation region."""
    fx, fy = 0.7 * half_width, 0.75 * half_height
    return np.array([[-fx, fy], [fx, fy], [fx, -fy], [-fx, -fy]])


def demo_homography(*, scale_px_per_mm, centre_px, angle_deg, perspective=2e-4):
    """A homography from specimen mm (x right, y up) to IR (col, row) px with a small rotation,
    offset and perspective, as a camera slightly off the surface normal would give."""
    c, s = np.cos(np.radians(angle_deg)), np.sin(np.radians(angle_deg))
    S = scale_px_per_mm
    A = np.array([[S * c, -S * s, centre_px[0]],
                  [-S * s, -S * c, centre_px[1]],        # y up -> rows down
                  [perspective, 0.5 * perspective, 1.0]])
    return A


def apply_homography(H, pts):
    p = np.column_stack([pts, np.ones(len(pts))]) @ H.T
    return p[:, :2] / p[:, 2:3]
