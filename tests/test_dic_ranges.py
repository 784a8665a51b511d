"""Cyclic strain ranges from two states, a load series, a time series, or a table.

Fields are homogeneous strain states of our own (exact for a plane fit); noise checks use
least-squares theory ([DraperSmith1998], [Kay1993]) and SciPy's linregress (docs/references.md).
"""

import numpy as np
import pytest
from scipy import stats

from fusion.dic import (DicField, correlate, ranges_from_series, ranges_from_states,
                        ranges_from_strain_table, ranges_from_time_series, speckle_image,
                        strain_from_field)

# A homogeneous strain state per unit load (our own example), specimen frame.
GRAD = np.array([[1.2e-3, 0.3e-3], [0.1e-3, -0.4e-3]])  # [[u_x, u_y], [v_x, v_y]] per kN


def _grid(n=40, step=1.0):
    g = np.arange(n) * step
    yy, xx = np.meshgrid(g[::-1], g, indexing="ij")
    return xx.ravel(), yy.ravel(), xx.shape


def _field(load, rng=None, sigma=0.0, n=40, step=1.0, offset=0.0, attrs=None):
    x, y, shape = _grid(n, step)
    u = load * (GRAD[0, 0] * x + GRAD[0, 1] * y) + offset
    v = load * (GRAD[1, 0] * x + GRAD[1, 1] * y) - offset
    if sigma:
        u = u + rng.normal(0, sigma, u.size)
        v = v + rng.normal(0, sigma, v.size)
    return DicField(x, y, u, v, grid_shape=shape, units="mm",
                    attrs={"subset": 21, "step": 10, "pixel_size": 0.1} if attrs is None else attrs)


EXX, EYY, GXY = GRAD[0, 0], GRAD[1, 1], GRAD[0, 1] + GRAD[1, 0]


def test_two_states_give_max_minus_min():
    # Linear field: the plane fit is exact (common practice); d eps = eps(max) - eps(min),
    # signed (DEVELOPERS.md); Green-Lagrange from (F^T F - I)/2 written here with numpy.
    r = ranges_from_states(_field(1.0, offset=0.2), _field(9.0, offset=-0.4))
    ok = r.valid
    assert ok.mean() > 0.95
    np.testing.assert_allclose(r.exx[ok], 8.0 * EXX, atol=1e-12)
    np.testing.assert_allclose(r.eyy[ok], 8.0 * EYY, atol=1e-12)
    np.testing.assert_allclose(r.gxy[ok], 8.0 * GXY, atol=1e-12)
    reverse = ranges_from_states(_field(9.0), _field(1.0))
    np.testing.assert_allclose(reverse.exx[ok], -8.0 * EXX, atol=1e-12)
    green = ranges_from_states(_field(1.0), _field(9.0), kind="green")
    # Green-Lagrange is not linear: E(9) - E(1) from E = (F^T F - I) / 2 per state
    def e_xx(load):
        h = load * GRAD
        f = np.eye(2) + h
        return 0.5 * (f.T @ f - np.eye(2))[0, 0]
    np.testing.assert_allclose(green.exx[ok], e_xx(9.0) - e_xx(1.0), atol=1e-12)


def test_two_state_noise_follows_least_squares_theory(rng):
    # White displacement noise sigma in each state: the difference has sqrt(2) sigma,
    # and a 5 x 5 plane fit (sum k^2 = 50, spacing 1) gives a slope std of
    # sqrt(2) sigma / sqrt(50) (textbook least squares, [DraperSmith1998]); see
    # test_dic_strain for the tolerance reasoning.
    # No subset size is given: the points are independent measurements.
    sigma = 2e-4
    white = {"step": 10, "pixel_size": 0.1}
    r = ranges_from_states(_field(1.0, rng, sigma, attrs=white), _field(9.0, rng, sigma, attrs=white))
    theory = np.sqrt(2) * sigma / np.sqrt(50.0)
    x, y = r.x, r.y
    interior = r.valid & (x >= 2) & (x <= 37) & (y >= 2) & (y <= 37)
    assert np.median(r.exx_std[interior]) == pytest.approx(theory, rel=0.06)
    assert np.std(r.exx[interior] - 8.0 * EXX) == pytest.approx(theory, rel=0.12)
    assert r.attrs["noise_floor"][0] == pytest.approx(np.median(r.exx_std[r.valid]))
    assert len(r.attrs["noise_floor"]) == 3


def test_reporting_attributes_from_a_correlated_pair():
    # Good Practices Guide reporting ([iDICs2018]): subset, step, VSG (px and mm), noise floor;
    # the imposed strains are exact Fourier-space warps ([Reu2011]).
    ref = speckle_image((160, 160), seed=4)
    moved = speckle_image((160, 160), seed=4,
                          displacement=lambda x, y: (1e-3 * (x - 80), -5e-4 * (y - 80)))
    res = correlate(ref, moved)
    r = ranges_from_states(correlate(ref, ref).to_field(pixel_size=0.02),
                           res.to_field(pixel_size=0.02), window=5)
    a = r.attrs
    assert (a["subset"], a["step"], a["strain_window"]) == (25, 3, 5)   # correlate's defaults
    assert a["vsg_px"] == 37 and a["vsg_mm"] == pytest.approx(37 * 0.02)
    assert all(np.isfinite(a["noise_floor"])) and "two states" in a["method"]
    # y up in the specimen frame: eps_yy keeps its sign, the imposed -500 microstrain
    assert np.nanmean(r.eyy) == pytest.approx(-5e-4, abs=30e-6)
    assert np.nanmean(r.exx) == pytest.approx(1e-3, abs=30e-6)


def test_series_slope_matches_scipy_linregress(rng):
    # Reference library: scipy.stats.linregress gives the slope and its standard
    # error for one point's strain-versus-load series; ours must match them times
    # the load range.
    loads = np.array([1.0, 3.0, 5.0, 7.0, 9.0, 4.0])
    fields = [_field(L, rng, 3e-4) for L in loads]
    r = ranges_from_series(fields, loads, load_range=8.0)
    per_state = np.array([strain_from_field(f)[0] for f in fields])
    for k in (41, 500, 987, 1234):
        fit = stats.linregress(loads, per_state[:, k])
        assert r.exx[k] == pytest.approx(fit.slope * 8.0, rel=1e-9)
        assert r.exx_std[k] == pytest.approx(fit.stderr * 8.0, rel=1e-9)
    ok = r.valid
    assert abs(np.mean(r.exx[ok]) - 8.0 * EXX) < 5 * np.median(r.exx_std[ok]) / np.sqrt(ok.sum())
    clean = ranges_from_series([_field(L) for L in loads], loads, load_range=8.0)
    np.testing.assert_allclose(clean.gxy[clean.valid], 8.0 * GXY, atol=1e-12)
    assert clean.attrs["load_range"] == 8.0


def test_series_fit_scatter_is_the_residual_std_of_the_state_strains(rng):
    # The reported scatter of the slope fit is, per point, the residual standard deviation of
    # a straight line through the state strains (K - 2 degrees of freedom), computed here
    # with scipy.stats.linregress on each point's states; the field's median is reported.
    loads = np.array([0.0, 2.0, 4.0, 6.0, 8.0])
    fields = [_field(L, rng, 3e-4) for L in loads]
    r = ranges_from_series(fields, loads, load_range=8.0)
    per_state = np.array([strain_from_field(f)[0] for f in fields])
    sd = []
    for k in np.flatnonzero(r.valid):
        fit = stats.linregress(loads, per_state[:, k])
        resid = per_state[:, k] - (fit.intercept + fit.slope * loads)
        sd.append(np.sqrt(np.sum(resid ** 2) / (loads.size - 2)))
    assert r.attrs["fit_scatter_exx"] == pytest.approx(np.median(sd), rel=1e-9)
    assert r.attrs["states"] == 5
    # a linear response without noise has no scatter
    clean = ranges_from_series([_field(L) for L in loads], loads, load_range=8.0)
    assert clean.attrs["fit_scatter_eyy"] < 1e-12


def _cyclic_fields(rng, times, freq, delta, lag_deg, phase0, sigma, drift=0.0):
    theta = 2 * np.pi * freq * times + phase0
    # strain response delayed by lag: (delta/2) cos(theta - lag); load (dL/2) cos(theta)
    amp = 0.5 * delta * np.cos(theta - np.radians(lag_deg)) + drift * times
    return [_field(a, rng, sigma) for a in amp], 5.0 + 2.0 * np.cos(theta)


def test_time_series_lock_in_convention(rng):
    # Project convention (DEVELOPERS.md): q = q0 + Re(C/2 exp(i theta)), load L0 + (dL/2)
    # cos theta, so a response (delta/2) cos(theta - lag) has C = delta exp(-i lag):
    # Re C = delta cos(lag), Im C = -delta sin(lag), written here with numpy (independent
    # forward model). Exact for noise-free data.
    freq, times = 5.0, np.arange(40) / 50.0  # 4 whole cycles, 10 frames each
    fields, load = _cyclic_fields(rng, times, freq, 8.0, 20.0, 0.7, 0.0, drift=0.3)
    r = ranges_from_time_series(fields, times, freq, load=load)
    ok = r.valid
    np.testing.assert_allclose(r.exx[ok], 8.0 * EXX * np.cos(np.radians(20)), rtol=1e-9)
    np.testing.assert_allclose(r.exx_quadrature[ok], -8.0 * EXX * np.sin(np.radians(20)),
                               rtol=1e-9)
    lag = -np.degrees(np.arctan(r.eyy_quadrature[ok] / r.eyy[ok]))
    np.testing.assert_allclose(lag, 20.0, atol=1e-6)
    assert r.attrs["load_phase_deg"] == pytest.approx(np.degrees(0.7), abs=1e-9)
    # without a load signal the load is taken as a cosine with its maximum at t = 0
    fields0, _ = _cyclic_fields(rng, times, freq, 8.0, 0.0, 0.0, 0.0)
    r0 = ranges_from_time_series(fields0, times, freq)
    np.testing.assert_allclose(r0.eyy[r0.valid], 8.0 * EYY, rtol=1e-9)


def test_time_series_noise_falls_as_one_over_root_n(rng):
    # Least squares on N samples of white noise sigma (whole cycles): each
    # quadrature coefficient has std sigma sqrt(2/N), so Re C = 2 c has 2 sigma
    # sqrt(2/N) (standard least-squares result, [Kay1993]). Here sigma is the strain
    # noise per frame of the 5 x 5 plane fit, sigma_u / sqrt(50).
    freq, times = 2.0, np.arange(60) / 20.0  # 6 cycles, 10 frames each
    sigma_u = 2e-4
    fields, load = _cyclic_fields(rng, times, freq, 8.0, 0.0, 0.0, sigma_u)
    r = ranges_from_time_series(fields, times, freq, load=load)
    theory = 2 * (sigma_u / np.sqrt(50.0)) * np.sqrt(2.0 / times.size)
    interior = r.valid & (r.x >= 2) & (r.x <= 37) & (r.y >= 2) & (r.y <= 37)
    # residual std with 56 degrees of freedom: ~10 % scatter per point, median to 5 %
    assert np.median(r.exx_std[interior]) == pytest.approx(theory, rel=0.05)
    assert np.std(r.exx[interior] - 8.0 * EXX) == pytest.approx(theory, rel=0.12)


def test_strain_table_noise_estimate(rng):
    # White noise on a smooth strain map: the departure from the 3 x 3 mean has
    # variance sigma^2 (1 - 1/9); the robust estimate recovers sigma (1,600 points:
    # ~3 % scatter of a MAD estimate, 8 % tolerance). The noise is numpy's normal draws of a
    # known sigma (independent forward model).
    x, y, shape = _grid()
    sigma = 20e-6
    smooth = 1e-3 + 1e-6 * x - 2e-6 * y
    f = DicField(x, y, np.full(x.size, np.nan), np.full(x.size, np.nan),
                 exx=smooth + rng.normal(0, sigma, x.size), eyy=-0.3 * smooth,
                 gxy=rng.normal(0, 2 * sigma, x.size), valid=np.ones(x.size, bool),
                 grid_shape=shape)
    r = ranges_from_strain_table(f)
    assert r.exx_std[0] == pytest.approx(sigma, rel=0.08)
    assert r.gxy_std[0] == pytest.approx(2 * sigma, rel=0.08)
    assert r.eyy_std[0] < 1e-9  # the smooth map carries no noise
    np.testing.assert_allclose(r.exx, f.exx)
    given = ranges_from_strain_table(f, noise=[1e-5, 2e-5, 3e-5])
    assert np.all(given.gxy_std == 3e-5) and "given" in given.attrs["method"]
    scattered = DicField(x + rng.uniform(-0.2, 0.2, x.size), y, f.u, f.v, exx=f.exx, eyy=f.eyy,
                         gxy=f.gxy, valid=f.valid)
    assert ranges_from_strain_table(scattered).exx_std[0] == pytest.approx(sigma, rel=0.12)


def test_bad_inputs(rng):
    a = _field(1.0)
    small = _field(1.0, n=30)
    with pytest.raises(ValueError, match="differ in size"):
        ranges_from_states(a, small)
    shifted = DicField(a.x + 0.5, a.y, a.u, a.v, grid_shape=a.grid_shape, units="mm")
    with pytest.raises(ValueError, match="different x"):
        ranges_from_states(a, shifted)
    with pytest.raises(TypeError, match="DicField"):
        ranges_from_states(a, "max.csv")
    with pytest.raises(ValueError, match="three or more"):
        ranges_from_series([a, a], [1, 2], load_range=1.0)
    with pytest.raises(ValueError, match="different loads"):
        ranges_from_series([a, a, a], [1, 1, 1], load_range=1.0)
    with pytest.raises(ValueError, match="load_range"):
        ranges_from_series([a, a, a], [1, 2, 3], load_range=-1.0)
    with pytest.raises(ValueError, match="frequency"):
        ranges_from_time_series([a] * 6, np.arange(6.0), 0.0)
    with pytest.raises(ValueError, match="five or more"):
        ranges_from_time_series([a] * 3, np.arange(3.0), 1.0)
    with pytest.raises(ValueError, match="exx, eyy and gxy"):
        ranges_from_strain_table(a)
    with pytest.raises(ValueError, match="noise"):
        ranges_from_strain_table(DicField(a.x, a.y, a.u, a.v, exx=a.u, eyy=a.u, gxy=a.u),
                                 noise=[1.0, 2.0])
