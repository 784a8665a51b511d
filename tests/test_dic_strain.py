"""Strain by local polynomial fits: analytic fields, the Kirsch plate, least-squares theory.

Sources (docs/references.md): the Kirsch plate [Kirsch1898] as in [TimoshenkoGoodier1970]
sec. 35, its displacements after [Barber2010] ch. 8; least-squares theory [DraperSmith1998];
the virtual strain gauge of [iDICs2018]. Each test names its own.
"""

import numpy as np
import pytest
from scipy import ndimage

from fusion.dic import DicField, strain_from_field, vsg_size

# Kirsch plate: infinite plate, hole radius A_HOLE (mm), remote stress S along x (MPa),
# plane stress. Values are our own example (an aluminium-like plate).
E_MOD, NU, S, A_HOLE = 70e3, 0.33, 100.0, 5.0
EPS0 = S / E_MOD


def kirsch_stress(x, y):
    """Kirsch (1898) stresses, as in Timoshenko & Goodier, Theory of Elasticity, 3rd ed., sec. 35
    (from memory; test_kirsch_stresses_meet_their_textbook_conditions checks them)."""
    r = np.hypot(x, y)
    t = np.arctan2(y, x)
    q = A_HOLE ** 2 / r ** 2
    srr = S / 2 * (1 - q) + S / 2 * (1 - 4 * q + 3 * q ** 2) * np.cos(2 * t)
    stt = S / 2 * (1 + q) - S / 2 * (1 + 3 * q ** 2) * np.cos(2 * t)
    srt = -S / 2 * (1 + 2 * q - 3 * q ** 2) * np.sin(2 * t)
    c, s = np.cos(t), np.sin(t)
    sxx = srr * c * c + stt * s * s - 2 * srt * s * c
    syy = srr * s * s + stt * c * c + 2 * srt * s * c
    txy = (srr - stt) * s * c + srt * (c * c - s * s)
    return sxx, syy, txy


def kirsch_strain(x, y):
    """Plane-stress Hooke's law on the Kirsch stresses; engineering shear."""
    sxx, syy, txy = kirsch_stress(x, y)
    return (sxx - NU * syy) / E_MOD, (syy - NU * sxx) / E_MOD, 2 * (1 + NU) * txy / E_MOD


def kirsch_displacement(x, y):
    """Plane-stress displacements of the Kirsch plate (kappa = (3 - nu)/(1 + nu)).

    The closed form as given in elasticity texts (e.g. Barber, Elasticity, ch. 8;
    from memory); test_kirsch_displacement_matches_the_stresses checks it
    against the stresses above, so it is not taken on trust.
    """
    mu = E_MOD / (2 * (1 + NU))
    kap = (3 - NU) / (1 + NU)
    r = np.hypot(x, y)
    t = np.arctan2(y, x)
    a2 = A_HOLE ** 2
    ur = S / (8 * mu) * (r * (kap - 1) + 2 * a2 / r
                         + (2 * r + 2 * a2 * (kap + 1) / r - 2 * a2 ** 2 / r ** 3) * np.cos(2 * t))
    ut = -S / (8 * mu) * (2 * r + 2 * a2 * (kap - 1) / r + 2 * a2 ** 2 / r ** 3) * np.sin(2 * t)
    return ur * np.cos(t) - ut * np.sin(t), ur * np.sin(t) + ut * np.cos(t)


def _gradients(x, y, h=1e-5):
    """(u_x, u_y, v_x, v_y) of the Kirsch displacement by central differences."""
    up, um = kirsch_displacement(x + h, y), kirsch_displacement(x - h, y)
    vp, vm = kirsch_displacement(x, y + h), kirsch_displacement(x, y - h)
    return ((up[0] - um[0]) / (2 * h), (vp[0] - vm[0]) / (2 * h),
            (up[1] - um[1]) / (2 * h), (vp[1] - vm[1]) / (2 * h))


def test_kirsch_stresses_meet_their_textbook_conditions():
    # The Kirsch solution ([TimoshenkoGoodier1970] sec. 35, from memory) checked by what it must
    # satisfy: a traction-free hole, the concentration 3 S beside the hole and -S on the load
    # axis, the remote stress S, and equilibrium (central differences, h = 1e-4 mm).
    th = np.linspace(0.0, np.pi, 13)
    x, y = A_HOLE * np.cos(th) * (1 + 1e-12), A_HOLE * np.sin(th) * (1 + 1e-12)
    sxx, syy, txy = kirsch_stress(x, y)
    c, s = np.cos(th), np.sin(th)
    srr = sxx * c * c + syy * s * s + 2 * txy * s * c
    srt = (syy - sxx) * s * c + txy * (c * c - s * s)
    stt = sxx * s * s + syy * c * c - 2 * txy * s * c
    np.testing.assert_allclose(srr, 0.0, atol=1e-8 * S)
    np.testing.assert_allclose(srt, 0.0, atol=1e-8 * S)
    np.testing.assert_allclose(stt, S * (1 - 2 * np.cos(2 * th)), rtol=1e-9, atol=1e-8 * S)
    assert stt[6] == pytest.approx(3 * S) and stt[0] == pytest.approx(-S)
    far = kirsch_stress(np.array([1e5]), np.array([3e4]))
    np.testing.assert_allclose([far[0][0], far[1][0], far[2][0]], [S, 0.0, 0.0], atol=1e-6 * S)
    h, px, py = 1e-4, np.array([7.3, -6.1, 9.0]), np.array([4.1, 8.2, -11.5])
    d = lambda i, dx, dy: (kirsch_stress(px + dx, py + dy)[i] - kirsch_stress(px - dx, py - dy)[i]) / (2 * h)
    np.testing.assert_allclose(d(0, h, 0) + d(2, 0, h), 0.0, atol=1e-6 * S)
    np.testing.assert_allclose(d(2, h, 0) + d(1, 0, h), 0.0, atol=1e-6 * S)


def test_kirsch_displacement_matches_the_stresses():
    # The forward model of the next test, checked independently: differentiating the
    # displacements ([Barber2010], from memory) must give Hooke's-law strains of the Kirsch
    # stresses checked above.
    # Central differences with h = 1e-5 mm: truncation and rounding ~1e-9 relative.
    x = np.array([7.0, -6.0, 10.0, 0.5, 5.2])
    y = np.array([3.0, 8.0, -12.0, 6.0, -0.3])
    ux, uy, vx, vy = _gradients(x, y)
    exx, eyy, gxy = kirsch_strain(x, y)
    np.testing.assert_allclose(ux, exx, rtol=1e-7)
    np.testing.assert_allclose(vy, eyy, rtol=1e-7)
    np.testing.assert_allclose(uy + vx, gxy, rtol=1e-6, atol=1e-12)


@pytest.fixture(scope="module")
def kirsch_field():
    step = 0.25
    g = np.arange(-25.0, 25.0 + 1e-9, step)
    yy, xx = np.meshgrid(g[::-1], g, indexing="ij")  # first row on top
    x, y = xx.ravel(), yy.ravel()
    valid = np.hypot(x, y) >= A_HOLE
    xs, ys = np.where(valid, x, 2 * A_HOLE), np.where(valid, y, 0.0)  # no 1/r at the centre
    u, v = kirsch_displacement(xs, ys)
    u, v = np.where(valid, u, np.nan), np.where(valid, v, np.nan)
    return DicField(x, y, u, v, valid=valid, grid_shape=xx.shape, units="mm"), step


def test_kirsch_strain_away_from_the_hole(kirsch_field):
    # A plane fit over a symmetric window of (2h+1)^2 points, spacing s, returns the
    # gradient plus the leading Taylor truncation term
    #   s^2 [ (sum k^4 / (6 sum k^2)) d^2/dn^2 + (<k^2> / 2) d^2/dt^2 ] (gradient),
    # n along the derivative, t across it (standard least-squares algebra; for
    # h = 2 the factors are 34/60 and 1; [DraperSmith1998]). The analytic strain
    # ([TimoshenkoGoodier1970]) plus this term must
    # match our strain to 5e-4 eps0, the size of the neglected fifth-order terms at
    # r >= 1.5 a; the term itself reaches ~0.8 % of eps0 there.
    field, s = kirsch_field
    exx, eyy, gxy = strain_from_field(field, window=5, order=1)
    r = np.hypot(field.x, field.y)
    far = (r >= 1.5 * A_HOLE) & (np.abs(field.x) <= 24.0) & (np.abs(field.y) <= 24.0)
    x, y = field.x[far], field.y[far]
    c4, c2, h2 = 34.0 / 60.0, 1.0, 1e-2

    def second(comp):
        g0 = _gradients(x, y)[comp]
        dxx = (_gradients(x + h2, y)[comp] - 2 * g0 + _gradients(x - h2, y)[comp]) / h2 ** 2
        dyy = (_gradients(x, y + h2)[comp] - 2 * g0 + _gradients(x, y - h2)[comp]) / h2 ** 2
        return g0, dxx, dyy

    ux, uxx, uyy = second(0)
    uy, uyxx, uyyy = second(1)
    vx, vxxx, vxyy = second(2)
    vy, vyxx, vyyy = second(3)
    lead_exx = s ** 2 * (c4 * uxx + c2 * uyy)
    lead_eyy = s ** 2 * (c2 * vyxx + c4 * vyyy)
    lead_gxy = s ** 2 * (c2 * uyxx + c4 * uyyy) + s ** 2 * (c4 * vxxx + c2 * vxyy)
    ex_t, ey_t, g_t = kirsch_strain(x, y)
    assert np.max(np.abs(exx[far] - (ex_t + lead_exx))) <= 5e-4 * EPS0
    assert np.max(np.abs(eyy[far] - (ey_t + lead_eyy))) <= 5e-4 * EPS0
    assert np.max(np.abs(gxy[far] - (g_t + lead_gxy))) <= 5e-4 * EPS0
    # and plainly: within 1 % of the remote strain at 1.5 a, 0.1 % at 4 a
    assert np.max(np.abs(exx[far] - ex_t)) <= 0.01 * EPS0
    very_far = np.hypot(x, y) >= 4 * A_HOLE
    assert np.max(np.abs(exx[far][very_far] - ex_t[very_far])) <= 1e-3 * EPS0


def test_masked_fit_equals_a_direct_least_squares_solve(kirsch_field):
    # Independent implementation: numpy.linalg.lstsq on the valid points of each
    # window, including windows cut by the hole or the grid's border (asymmetric,
    # partial), where a plane fit takes the quadratic terms as well.
    field, s = kirsch_field
    for order in (1, 2):
        exx, eyy, gxy = strain_from_field(field, window=5, order=order)
        ny, nx = field.grid_shape
        ug, vg, ok = field.grid("u"), field.grid("v"), field.grid("valid")
        picks = [(100, 78), (100, 123), (79, 100), (120, 83), (40, 160), (2, 2)]
        for i, j in picks:
            rows = slice(max(i - 2, 0), i + 3)
            cols = slice(max(j - 2, 0), j + 3)
            ii, jj = np.mgrid[rows, cols]
            sel = ok[rows, cols]
            nterms = 6 if (order == 2 or sel.size < 25 or not sel.all()) else 3
            dx = (jj - j)[sel] * s
            dy = -(ii - i)[sel] * s
            cols_ = [np.ones_like(dx), dx, dy, dx * dx, dx * dy, dy * dy][:nterms]
            design = np.column_stack(cols_)
            cu = np.linalg.lstsq(design, ug[rows, cols][sel], rcond=None)[0]
            cv = np.linalg.lstsq(design, vg[rows, cols][sel], rcond=None)[0]
            k = i * nx + j
            assert exx[k] == pytest.approx(cu[1], abs=1e-12)
            assert eyy[k] == pytest.approx(cv[2], abs=1e-12)
            assert gxy[k] == pytest.approx(cu[2] + cv[1], abs=1e-12)


def test_holes_do_not_spread_nan_beyond_the_window(kirsch_field):
    # not a physics check: where NaN may appear around missing points
    field, _ = kirsch_field
    exx, _, _ = strain_from_field(field, window=5)
    invalid = ~field.grid("valid")
    reach = ndimage.binary_dilation(invalid, np.ones((5, 5), dtype=bool))
    nan = np.isnan(exx).reshape(field.grid_shape)
    interior = np.zeros_like(nan)
    interior[2:-2, 2:-2] = True
    # inside the grid, NaN only within half a window of a hole point
    assert not np.any(nan & interior & ~reach)
    # and the ring of lost points around the hole is thin (min_valid = 0.5)
    assert np.count_nonzero(nan & ~invalid & interior) <= 0.1 * np.count_nonzero(invalid)


def _linear(x, y):
    return 1e-3 * x + 2e-4 * y + 3.0, -3e-4 * x + 5e-4 * y - 1.0


def test_plane_fit_is_exact_for_linear_fields_grid_and_scattered(rng):
    # A linear displacement is reproduced exactly by any least-squares plane fit (common
    # practice; [DraperSmith1998]).
    g = np.arange(0, 30, 0.5)
    yy, xx = np.meshgrid(g[::-1], g, indexing="ij")
    x, y = xx.ravel(), yy.ravel()
    u, v = _linear(x, y)
    valid = rng.random(x.size) > 0.1
    u[~valid] = np.nan
    grid = DicField(x, y, u, v, valid=valid, grid_shape=xx.shape)
    xs, ys = rng.uniform(0, 30, 2000), rng.uniform(0, 30, 2000)
    scat = DicField(xs, ys, *_linear(xs, ys))
    for f in (grid, scat):
        for order in (1, 2):
            exx, eyy, gxy = strain_from_field(f, order=order)
            ok = np.isfinite(exx)
            assert ok.mean() > 0.7
            np.testing.assert_allclose(exx[ok], 1e-3, atol=1e-12)
            np.testing.assert_allclose(eyy[ok], 5e-4, atol=1e-12)
            np.testing.assert_allclose(gxy[ok], 2e-4 - 3e-4, atol=1e-12)


def test_quadratic_fit_is_exact_for_quadratic_fields(rng):
    # A quadratic least-squares fit reproduces a quadratic field exactly ([DraperSmith1998]).
    xs, ys = rng.uniform(0, 30, 2500), rng.uniform(0, 30, 2500)
    u = 1e-3 * xs + 2e-5 * xs ** 2 - 1e-5 * xs * ys
    v = 4e-4 * ys + 3e-5 * ys ** 2
    exx, eyy, gxy = strain_from_field(DicField(xs, ys, u, v), order=2)
    ok = np.isfinite(exx)
    np.testing.assert_allclose(exx[ok], 1e-3 + 4e-5 * xs[ok] - 1e-5 * ys[ok], atol=1e-12)
    np.testing.assert_allclose(eyy[ok], 4e-4 + 6e-5 * ys[ok], atol=1e-12)
    np.testing.assert_allclose(gxy[ok], -1e-5 * xs[ok], atol=1e-12)


def test_green_lagrange_matches_the_deformation_gradient():
    # Continuum mechanics (common practice): E = (F^T F - I) / 2 with F = I + grad(u),
    # computed here with numpy; engineering shear 2 E_xy. A homogeneous field has an exact
    # gradient.
    h = np.array([[0.02, 0.01], [-0.015, 0.03]])  # [[u_x, u_y], [v_x, v_y]]
    g = np.arange(0, 10, 1.0)
    yy, xx = np.meshgrid(g[::-1], g, indexing="ij")
    x, y = xx.ravel(), yy.ravel()
    field = DicField(x, y, h[0, 0] * x + h[0, 1] * y, h[1, 0] * x + h[1, 1] * y,
                     grid_shape=xx.shape)
    exx, eyy, gxy = strain_from_field(field, kind="green")
    f = np.eye(2) + h
    e = 0.5 * (f.T @ f - np.eye(2))
    ok = np.isfinite(exx)
    np.testing.assert_allclose(exx[ok], e[0, 0], atol=1e-13)
    np.testing.assert_allclose(eyy[ok], e[1, 1], atol=1e-13)
    np.testing.assert_allclose(gxy[ok], 2 * e[0, 1], atol=1e-13)


def test_reported_std_follows_least_squares_theory(rng):
    # Textbook least squares ([DraperSmith1998]): the slope of a plane fit to white noise sigma over a
    # full 5 x 5 window of spacing s has variance sigma^2 / (s^2 sum k^2), sum k^2 =
    # 50. The residual-based estimate (22 degrees of freedom) scatters by ~15 % per
    # point, so its median is tested to 5 %; the spread of the strain over ~3,000
    # points (correlated by overlapping windows) to 10 %.
    g = np.arange(0, 60, 1.0)
    yy, xx = np.meshgrid(g[::-1], g, indexing="ij")
    x, y = xx.ravel(), yy.ravel()
    sigma = 1e-3
    u, v = _linear(x, y)
    field = DicField(x, y, u + rng.normal(0, sigma, x.size), v + rng.normal(0, sigma, x.size),
                     grid_shape=xx.shape)
    exx, eyy, gxy, sxx, syy, sxy = strain_from_field(field, return_std=True)
    theory = sigma / np.sqrt(50.0)
    interior = np.isfinite(exx) & (x >= 2) & (x <= 57) & (y >= 2) & (y <= 57)
    assert np.median(sxx[interior]) == pytest.approx(theory, rel=0.05)
    assert np.median(syy[interior]) == pytest.approx(theory, rel=0.05)
    assert np.median(sxy[interior]) == pytest.approx(np.sqrt(2) * theory, rel=0.05)
    assert np.std(exx[interior]) == pytest.approx(theory, rel=0.1)
    assert np.std(gxy[interior]) == pytest.approx(np.sqrt(2) * theory, rel=0.1)


def test_vsg_size_follows_the_good_practices_guide():
    # iDICs Good Practices Guide (2018), [iDICs2018]: VSG = (strain window - 1) x step + subset
    # (from memory).
    assert vsg_size(5, 10, 21) == 61
    assert vsg_size(9, 7, 29) == 85
    with pytest.raises(ValueError, match="step"):
        vsg_size(5, 0, 21)


@pytest.mark.parametrize("kwargs, match", [
    (dict(window=4), "odd"), (dict(window=3, order=2), "quadratic"),
    (dict(order=3), "order"), (dict(kind="log"), "kind"), (dict(min_valid=0.0), "min_valid"),
])
def test_bad_arguments(kwargs, match):
    g = np.arange(0, 10, 1.0)
    yy, xx = np.meshgrid(g[::-1], g, indexing="ij")
    field = DicField(xx.ravel(), yy.ravel(), xx.ravel() * 0, yy.ravel() * 0, grid_shape=xx.shape)
    with pytest.raises(ValueError, match=match):
        strain_from_field(field, **kwargs)
    with pytest.raises(TypeError, match="DicField"):
        strain_from_field({"u": 1})


def test_window_moments_match_scipy_correlate_with_the_monomial_kernel(rng):
    # the grid fit's window sums of x^p y^q times the field, taken as two 1-D passes, against
    # SciPy's 2-D ndimage.correlate with the whole monomial kernel (reference library); x is the
    # column offset, y = -row offset, zero outside the grid
    from scipy import ndimage

    from fusion.dic._gridfit import _moments

    img = rng.standard_normal((23, 31))
    img[rng.random(img.shape) < 0.1] = 0.0
    half = 3
    k = np.arange(-half, half + 1, dtype=np.float64)
    rows, cols = np.meshgrid(k, k, indexing="ij")
    got = _moments(img, half, 4)           # every monomial of degree <= 4
    assert sorted(got) == sorted((p, q) for p in range(5) for q in range(5 - p))
    for (p, q), m in got.items():
        want = ndimage.correlate(img, cols ** p * (-rows) ** q, mode="constant").ravel()
        np.testing.assert_allclose(m, want, rtol=1e-12, atol=1e-9 * np.abs(want).max())
