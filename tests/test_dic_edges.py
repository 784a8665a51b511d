"""Strain up to the edge of a hole: an exact Kirsch field correlated by the package.

The speckle image of a plate with a circular hole under remote uniaxial tension is rendered
at the reference positions of the exact displacement field (``fusion.dic.speckle_image``
with a displacement callable), correlated with the hole masked out, turned into strain and
resampled onto a pixel grid the way the pipeline does (no margin). Near the edge the strain
concentration is steep; the strain must be reported there, be close to the exact value and
carry a standard deviation that covers its error.

Exact solution: G. Kirsch, "Die Theorie der Elastizitaet und die Beduerfnisse der
Festigkeitslehre", Zeitschrift des VDI 42 (1898); stresses as in S. P. Timoshenko and
J. N. Goodier, Theory of Elasticity, 3rd ed., 1970, sec. 35; plane-stress displacements as in
J. R. Barber, Elasticity, ch. 8 (from memory; tests/test_dic_strain.py checks that form
against the stresses).
"""

import numpy as np
import pytest

from fusion.dic import (DEFAULT_STEP, DEFAULT_SUBSET, DEFAULT_WINDOW, correlate,
                        ranges_from_states, speckle_image)
from fusion.register import edge_distance_map, resample_to_grid

EPS0 = 1e-3   # remote strain along x (the load), 1000 microstrain: a peak of 3000 at the edge
NU = 0.3
MARGIN = 48   # px of plate around the hole that the test correlates


def _kirsch_stress(x, y, a):
    """Kirsch stresses over the remote stress (E = 1, remote stress EPS0)."""
    r = np.hypot(x, y)
    t = np.arctan2(y, x)
    q = a * a / (r * r)
    s = EPS0
    srr = s / 2 * (1 - q) + s / 2 * (1 - 4 * q + 3 * q * q) * np.cos(2 * t)
    stt = s / 2 * (1 + q) - s / 2 * (1 + 3 * q * q) * np.cos(2 * t)
    srt = -s / 2 * (1 + 2 * q - 3 * q * q) * np.sin(2 * t)
    c, n = np.cos(t), np.sin(t)
    sxx = srr * c * c + stt * n * n - 2 * srt * n * c
    syy = srr * n * n + stt * c * c + 2 * srt * n * c
    return sxx, syy


def _kirsch_exx(x, y, a):
    """Plane-stress Hooke's law (E = 1): eps_xx = sxx - nu syy."""
    sxx, syy = _kirsch_stress(x, y, a)
    return sxx - NU * syy


def _kirsch_displacement(x, y, a):
    """Plane-stress displacements (E = 1), px; inside the hole scaled toward zero at the centre
    so the rendering map stays smooth (no material there, the hole is masked)."""
    mu = 1.0 / (2 * (1 + NU))
    kap = (3 - NU) / (1 + NU)
    rr = np.hypot(x, y)
    r = np.maximum(rr, a)
    t = np.arctan2(y, x)
    a2 = a * a
    ur = EPS0 / (8 * mu) * (r * (kap - 1) + 2 * a2 / r
                            + (2 * r + 2 * a2 * (kap + 1) / r - 2 * a2 * a2 / r ** 3) * np.cos(2 * t))
    ut = -EPS0 / (8 * mu) * (2 * r + 2 * a2 * (kap - 1) / r + 2 * a2 * a2 / r ** 3) * np.sin(2 * t)
    f = np.minimum(rr / a, 1.0)
    return f * (ur * np.cos(t) - ut * np.sin(t)), f * (ur * np.sin(t) + ut * np.cos(t))


@pytest.fixture(scope="module", params=[40.0, 80.0], ids=["radius40", "radius80"])
def hole(request):
    a = request.param
    n = int(2 * (a + MARGIN)) + 8
    c0 = n / 2 + 0.37                      # hole centre off the pixel lattice
    noise = 0.001                          # grey-level noise, 0.1 % of full scale

    def disp(x, y):
        return _kirsch_displacement(x - c0, y - c0, a)

    ref = speckle_image((n, n), seed=5, bits=None, noise=noise, noise_seed=1)
    moved = speckle_image((n, n), seed=5, bits=None, displacement=disp, noise=noise, noise_seed=2)
    rows, cols = np.mgrid[0:n, 0:n]
    rad = np.hypot(rows - c0, cols - c0)
    mask = (rad > a) & (rad < a + MARGIN)
    res = correlate(ref, moved, region=mask)
    field = res.to_field()
    zero = res.to_field()
    zero.u[:] = 0.0
    zero.v[:] = 0.0
    zero.u_std = zero.v_std = None
    r = ranges_from_states(zero, field, window=DEFAULT_WINDOW)
    # the pipeline's resampling onto a camera grid, here the image's own pixels
    pts = np.column_stack([r.x, -r.y])
    maps, inside = resample_to_grid(pts, np.column_stack([r.exx, r.exx_std]), (n, n),
                                    grid_shape=r.grid_shape, valid=r.valid)
    return a, c0, rad, maps, inside, r


def test_defaults_are_the_ones_tested():
    # not a physics check: the edge tests below are meant for the package's defaults
    assert (DEFAULT_SUBSET, DEFAULT_STEP, DEFAULT_WINDOW) == (25, 3, 7)


def test_strain_reaches_the_hole_edge(hole):
    # truth: the exact open-hole field ([Kirsch1898], [TimoshenkoGoodier1970]) rendered analytically
    a, c0, rad, maps, inside, r = hole
    near = inside & (rad - a <= 6.0)
    rows, cols = np.nonzero(near)
    # in the concentration zone (within 30 degrees of the axis across the load) the strain is
    # reported within 6 px of the edge all along it, not only at a few pixels
    ang = np.degrees(np.arctan2(np.abs(rows - c0), np.abs(cols - c0)))
    zone = ang >= 60
    assert zone.sum() >= 0.5 * (2 * np.pi * a / 6) * 6 * 0.5   # half the 6-px ring of the zone
    exact = _kirsch_exx(cols - c0, rows - c0, a)
    got, std = maps[0][near], maps[1][near]
    err = got - exact
    # within 15 % of the exact value there (requirement): the root-mean-square relative error
    # over the zone, since each pixel also carries noise (here about 8 % of the value); the
    # reported std covers each pixel's error: none beyond 3 std, and about as many beyond
    # 2 std as a normal distribution puts there (4.6 %)
    rel = err[zone] / exact[zone]
    assert np.sqrt(np.mean(rel ** 2)) <= 0.15
    assert np.median(np.abs(rel)) <= 0.10
    z = np.abs(err) / std
    assert np.all(z <= 3.0)
    assert np.mean(z > 2.0) <= 0.10
    # the peak is no longer cut away: the largest strain reported comes near the true 3000
    # microstrain at the edge (the nearest pixels lie about 2 px out, where it is ~2650)
    assert np.nanmax(maps[0]) >= 0.8 * 3 * EPS0


def test_edge_distance_is_reported(hole):
    # independent computation: the exact distance of a pixel centre to the circular hole
    a, c0, rad, maps, inside, r = hole
    d = edge_distance_map(inside)
    # on the pixel grid the nearest data edge of a pixel next to the hole is the hole
    ring = inside & (rad - a <= 10.0)
    assert np.all(d[ring] <= rad[ring] - a + 0.5)
    # in the strain ranges: each point's distance to the nearest invalid point, less half a step
    e = r.edge_distance
    x, y = r.x, -r.y
    near = r.valid & (np.hypot(y - c0, x - c0) - a < 8)
    assert np.all(np.isfinite(e[r.valid]))
    assert np.all(e[near] <= np.hypot(y[near] - c0, x[near] - c0) - a + DEFAULT_STEP)
