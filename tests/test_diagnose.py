"""Tests of fusion.diagnose against synthetic fields from an independent forward model.

The forward model lives in this file: a smooth strain-range field, per-source
thermoelastic coefficients (Kelvin's law for the resin; the orthotropic law with Kaw's
graphite/epoxy stiffness for a 0 deg ply; the homogenised law for a [0/90]s laminate;
a coating layer on a substrate for the heat model), and Gaussian noise drawn with
numpy. Statistical checks use scipy.stats (kstest, norm, binom) as the reference;
every seed is fixed (conftest ``rng``), so each check is deterministic and its
tolerance is a stated tail probability, not luck.
"""

import math

import numpy as np
import pytest
from scipy import optimize, stats

import fusion.diagnose as fd
from fusion.datamodel import SOURCES, result_dataset, source_flags
from fusion.diagnose import (Diagnosis, apply_calibration, calibration_factor, diagnose,
                             region_mask, region_table)

Y, X = 60, 80

# --- forward model -------------------------------------------------------------------

# Resin witness, Kelvin's law -(alpha/(rho c)) E/(1-nu) (Harwood & Cummings 1991 form):
# E 3.5 GPa, nu 0.35, alpha 60e-6 /K, rho 1200, c 1100 (typical, from memory) -> -0.245 per
# (eps_xx + eps_yy) (docs/references.md; recomputed here).
_K_RESIN = -(60e-6 / (1200 * 1100)) * 3.5e9 / (1 - 0.35)
# 0 deg graphite/epoxy ply, orthotropic law -(alpha1 dsigma1 + alpha2 dsigma2)/(rho c)
# (Potter & Greaves 1987): Q11 181.8, Q12 2.897, Q22 10.35 GPa from Kaw, Mechanics of
# Composite Materials, 2nd ed., Table 2.1 data ([Kaw2006]); alpha1 0.02e-6, alpha2 22.5e-6 /K;
# rho 1600 and c 900 typical (from memory).
_RC_PLY = 1600 * 900
_C_PLY0 = -np.array([0.02e-6 * 181.8e9 + 22.5e-6 * 2.897e9,
                     0.02e-6 * 2.897e9 + 22.5e-6 * 10.35e9, 0.0]) / _RC_PLY
# A 90 deg ply swaps the material axes; the homogenised [0/90]s laminate with equal ply
# thickness and rho c is the thickness-weighted mean of the ply laws ([Kaw2006] sec. 4.5).
_C_PLY90 = _C_PLY0[[1, 0, 2]]
_C_LAM = 0.5 * (_C_PLY0 + _C_PLY90)


def _strain():
    """Uniaxial-like strain ranges, 0.8e-3 .. 1.2e-3 across the field, (Y, X, 3)."""
    exx = np.broadcast_to(np.linspace(0.8e-3, 1.2e-3, X), (Y, X))
    eyy = -0.3 * exx
    gxy = np.broadcast_to(np.linspace(-2e-5, 2e-5, Y)[:, None], (Y, X))
    return np.stack([exx, eyy, gxy], axis=-1)


def _true_predictions():
    e = _strain()
    return {
        "resin_layer": _K_RESIN * (e[..., 0] + e[..., 1]),
        "surface_ply": e @ _C_PLY0,
        "laminate": e @ _C_LAM,
    }


def _layer_on_substrate(freq, d, k_c, rc_c, k_s, rc_s):
    """Surface response of a layer (own adiabatic value 0) on a semi-infinite substrate
    (adiabatic value 1), adiabatic free face: 1 / (cosh(sigma d) + r sinh(sigma d)),
    sigma = (1+i)/mu, mu = sqrt(2 k / (rho c omega)), r = e_c / e_s, e = sqrt(k rho c).
    Derived in this test from the per-layer solution theta_ad + A e^{sigma z} + B e^{-sigma z}
    with continuous temperature and flux (Carslaw & Jaeger, Conduction of Heat in Solids,
    1959, section 2.6 for the periodic solution)."""
    mu = math.sqrt(2 * k_c / (rc_c * 2 * math.pi * freq))
    s = (1 + 1j) / mu
    r = math.sqrt(k_c * rc_c) / math.sqrt(k_s * rc_s)
    return 1.0 / (np.cosh(s * d) + r * np.sinh(s * d))


def _noisy(pred, std, rng):
    return {k: v + rng.normal(0.0, std[k], v.shape) for k, v in pred.items()}


def _scenario(rng, sigma_m=3e-6, sigma_p=2e-6):
    """Thirds of the field: resin | surface ply | laminate as the true source."""
    truth = _true_predictions()
    cols = np.arange(X)
    region = np.where(cols < X // 3, 0, np.where(cols < 2 * X // 3, 1, 2))
    region = np.broadcast_to(region, (Y, X))
    names = ("resin_layer", "surface_ply", "laminate")
    true_map = np.choose(region, [truth[n] for n in names])
    measured = true_map + rng.normal(0.0, sigma_m, (Y, X))
    pstd = {k: np.full((Y, X), sigma_p) for k in truth}
    preds = _noisy(truth, pstd, rng)
    true_code = np.choose(region, [SOURCES.index(n) for n in names]).astype(np.int8)
    return measured, preds, pstd, true_code, region, names


# --- the main job ---------------------------------------------------------------------


def test_true_source_wins_when_separated(rng):
    sm, sp = 3e-6, 2e-6
    measured, preds, pstd, true_code, _, _ = _scenario(rng, sm, sp)
    d = diagnose(measured, sm, preds, pstd)
    # The scenario really separates the sources by > 5 combined sigma everywhere.
    vals = np.stack(list(_true_predictions().values()))
    gaps = np.abs(vals[:, None] - vals[None])[~np.eye(3, dtype=bool)]
    assert gaps.min() > 5 * math.sqrt(sm**2 + 2 * sp**2)
    right = np.mean(d.source_layer == true_code)
    assert right >= 0.95
    # The only expected failure is the true source's own |z| > 3: probability 2 sf(3)
    # (scipy.stats.norm); bound the count by the binomial 1e-4 two-sided interval.
    n = Y * X
    nofit = np.count_nonzero(d.source_layer == 101)
    lo, hi = stats.binom.interval(1 - 1e-4, n, 2 * stats.norm.sf(3.0))
    assert lo <= nofit <= hi
    wrong = (d.source_layer != true_code) & (d.source_layer != 101)
    assert not wrong.any()  # at > 20 sigma a wrong source winning has probability ~1e-90
    assert d.area_fraction["indistinguishable"] == 0.0
    assert math.isclose(sum(d.area_fraction.values()), 1.0, rel_tol=1e-12)


def test_true_source_zscores_are_standard_normal(rng):
    sm, sp = 3e-6, 2e-6
    measured, preds, pstd, true_code, region, names = _scenario(rng, sm, sp)
    d = diagnose(measured, sm, preds, pstd)
    z = np.choose(region, [d.zscore[s] for s in names]).astype(np.float64).ravel()
    n = z.size
    # Reference distribution: scipy.stats.kstest against N(0, 1); p > 1e-3 by design.
    assert stats.kstest(z, "norm").pvalue > 1e-3
    # Sample mean and std within 4 standard errors (1/sqrt(n); 1/sqrt(2(n-1)) for the std).
    assert abs(z.mean()) < 4 / math.sqrt(n)
    assert abs(z.std(ddof=1) - 1) < 4 / math.sqrt(2 * (n - 1))
    # Mean |z| of N(0,1) is sqrt(2/pi) (half-normal mean; any statistics text), std of |z|
    # sqrt(1 - 2/pi); the region table reports it per region.
    rows = region_table(measured, d, preds, regions={
        "resin": region_mask((Y, X), rect=(0, 0, X // 3, Y))})
    got = rows[1]["abs_z_mean"]["resin_layer"]
    n_r = rows[1]["n_pixels"]
    assert abs(got - math.sqrt(2 / math.pi)) < 4 * math.sqrt(1 - 2 / math.pi) / math.sqrt(n_r)


def test_probability_matches_scipy_gaussian_likelihoods(rng):
    # Two overlapping sources with different uncertainties so the 1/sigma factor matters.
    base = np.full((Y, X), -1e-4)
    preds = {"resin_layer": base, "laminate": base + 4e-6}
    pstd = {"resin_layer": np.full((Y, X), 1e-6), "laminate": np.full((Y, X), 3e-6)}
    sm = 2e-6
    measured = base + rng.normal(0.0, 3e-6, (Y, X))
    d = diagnose(measured, sm, preds, pstd, distinguish=0.0)
    s = {k: math.sqrt(sm**2 + 1e-6**2 * (k == "resin_layer") + 9e-12 * (k == "laminate"))
         for k in preds}
    order = ("resin_layer", "laminate")
    # Reference: scipy.stats.norm.pdf, zero where |z| > 3, normalised over the sources.
    pdf = np.stack([stats.norm.pdf(measured, preds[k], s[k])
                    * (np.abs(measured - preds[k]) <= 3 * s[k]) for k in order])
    tot = pdf.sum(0)
    fit = tot > 0
    assert fit.mean() > 0.9
    want = pdf[:, fit] / tot[fit]
    # float32 output: 1e-6 absolute covers its rounding (2^-24 relative) with margin.
    np.testing.assert_allclose(d.probability[:, fit], want, atol=1e-6)
    assert np.all(d.probability[:, ~fit] == 0)
    best = np.array([SOURCES.index(k) for k in order])[np.argmax(want, 0)]
    np.testing.assert_array_equal(d.source_layer[fit], best)


def test_best_source_is_taken_among_fitting_ones():
    # A narrow source at 3.5 sigma has the higher Gaussian density (scipy.stats.norm) than a
    # broad one at 2.9 sigma, but does not fit; the map names the broad one.
    sm = 1e-7
    s_narrow, s_broad = 1e-6, 10e-6
    sig_n, sig_b = math.hypot(sm, s_narrow), math.hypot(sm, s_broad)
    m = np.zeros((1, 1))
    preds = {"surface_ply": np.full((1, 1), -3.5 * sig_n), "laminate": np.full((1, 1), 2.9 * sig_b)}
    pstd = {"surface_ply": s_narrow, "laminate": s_broad}
    assert stats.norm.logpdf(0, preds["surface_ply"][0, 0], sig_n) > \
        stats.norm.logpdf(0, preds["laminate"][0, 0], sig_b)
    d = diagnose(m, sm, preds, pstd)
    assert d.source_layer[0, 0] == SOURCES.index("laminate")
    assert d.probability[d.sources.index("laminate"), 0, 0] == 1.0
    assert abs(d.zscore["surface_ply"][0, 0] - 3.5) < 1e-5


def test_coinciding_predictions_are_indistinguishable(rng):
    # Independent forward model (this file): equal predictions; their likelihoods are equal
    # (scipy.stats.norm gives the same density), so each has probability 1/2.
    # A unidirectional [0]4 laminate: the homogenised law of identical plies equals the
    # ply's own law (thickness-weighted mean of equal terms), so surface ply == laminate.
    e = _strain()
    ply = e @ _C_PLY0
    lam = e @ (0.25 * (_C_PLY0 + _C_PLY0 + _C_PLY0 + _C_PLY0))
    assert np.allclose(ply, lam, rtol=1e-14, atol=0)
    sm, sp = 2e-6, 1e-6
    preds = {"surface_ply": ply, "laminate": lam, "resin_layer": _K_RESIN * (e[..., 0] + e[..., 1])}
    measured = ply + rng.normal(0.0, sm, (Y, X))
    d = diagnose(measured, sm, preds, {k: sp for k in preds})
    fits = d.source_layer != 101
    assert fits.mean() > 0.99
    assert np.all(d.source_layer[fits] == 100)
    i_sp, i_lam = d.sources.index("surface_ply"), d.sources.index("laminate")
    # Equal predictions and sigmas: equal likelihoods, 1/2 each (float32 rounding).
    np.testing.assert_allclose(d.probability[i_sp][fits], 0.5, atol=1e-6)
    np.testing.assert_allclose(d.probability[i_lam][fits], 0.5, atol=1e-6)
    assert np.all(np.isnan(d.surface_fraction))  # the two do not differ: beta undefined


def test_distinguish_threshold_in_combined_sigma(rng):
    # Independent forward model (this file): two predictions a known number of sigmas apart;
    # which pixels fit is computed here from |z| <= 3.
    sm, sp = 2e-6, 0.0
    base = np.full((Y, X), -1e-4)
    measured = base + rng.normal(0.0, sm, (Y, X))
    for gap, expect_indist in ((0.5, True), (1.5, False)):
        preds = {"surface_ply": base, "laminate": base + gap * sm}
        d = diagnose(measured, sm, preds, {k: sp for k in preds}, distinguish=1.0)
        # Where both fit (|z| <= 3 for each, computed here) the gap alone decides.
        both = np.all([np.abs(measured - v) <= 3 * sm for v in preds.values()], axis=0)
        assert both.mean() > 0.9
        cats = set(np.unique(d.source_layer[both]).tolist())
        if expect_indist:
            assert cats == {100}
        else:
            assert 100 not in cats and cats <= {SOURCES.index("surface_ply"), SOURCES.index("laminate")}


def test_distinguish_threshold_in_lag(rng):
    # Independent forward model (this file): equal ratios, lags a known number of sigmas apart.
    # Equal ratios; lags 0 and gap deg apart with a measured lag std of 1 deg and no floor,
    # so the pair's combined lag sigma is 1 deg.
    base = np.full((Y, X), -1e-4)
    measured = base + rng.normal(0.0, 2e-6, (Y, X))
    lag = rng.normal(0.0, 1.0, (Y, X))
    preds = {"resin_layer": base, "model": base}
    for gap, expect_indist in ((0.5, True), (1.5, False)):
        d = diagnose(measured, 2e-6, preds, {k: 0.0 for k in preds}, measured_lag=lag,
                     measured_lag_std=1.0, predicted_lag={"model": gap}, lag_std_floor=0.0,
                     secondary=())
        both = (np.abs(measured - base) <= 6e-6) & (np.abs(lag) <= 3) & (np.abs(lag - gap) <= 3)
        assert both.mean() > 0.9
        cats = set(np.unique(d.source_layer[both]).tolist())
        assert (cats == {100}) if expect_indist else (100 not in cats)


def test_no_source_fits_far_from_every_prediction(rng):
    # Independent forward model (this file): the measurement is built 40 sigma below every
    # prediction; a N(0, 1) z beyond 3 is expected everywhere (scipy.stats.norm tails).
    sm, sp = 3e-6, 2e-6
    truth = _true_predictions()
    measured = truth["resin_layer"] - 40 * sm + rng.normal(0, sm, (Y, X))  # below them all
    d = diagnose(measured, sm, truth, {k: sp for k in truth})
    assert np.all(d.source_layer == 101)
    assert d.area_fraction["no_source_fits"] == 1.0
    assert np.all(d.probability == 0)
    assert np.all(np.abs(d.zscore["resin_layer"]) > 3)


def test_lag_separates_two_sources_of_equal_amplitude(rng):
    # Heat model: a 50 um epoxy-like coating (k 0.2, rho c 1.4e6) on CFRP (k3 0.6,
    # rho c 1.44e6) at 10 Hz; the substrate's adiabatic ratio is the laminate's.
    h = _layer_on_substrate(10.0, 50e-6, 0.2, 1.4e6, 0.6, 1.44e6)
    assert abs(h) < 1 and np.angle(h) < 0  # damped and delayed (Carslaw & Jaeger)
    c_model = _true_predictions()["laminate"] * h              # complex range, (Y, X)
    ratio_model = c_model.real
    lag_model = -np.degrees(np.arctan(c_model.imag / c_model.real))
    assert np.all(lag_model > 30)
    # An adiabatic source with the same in-phase ratio (contrived scenario: equal amplitude).
    preds = {"resin_layer": ratio_model, "model": ratio_model}
    pstd = {k: 0.0 for k in preds}
    truth_is_model = np.broadcast_to(np.arange(X) < X // 2, (Y, X))
    c_true = np.where(truth_is_model, c_model, ratio_model + 0j)
    sigma = 0.02 * np.abs(c_model)                       # per lock-in quadrature
    c_meas = c_true + sigma * (rng.normal(size=(Y, X)) + 1j * rng.normal(size=(Y, X)))
    measured = c_meas.real
    lag = -np.degrees(np.arctan(c_meas.imag / c_meas.real))

    without = diagnose(measured, sigma, preds, pstd, secondary=())
    assert np.mean(without.source_layer[without.source_layer != 101] == 100) > 0.99
    # With the heat model secondary (the default), an adiabatic layer that fits is named
    # instead of the model mixture wherever the ratio alone cannot tell them apart.
    named = diagnose(measured, sigma, preds, pstd)
    fitting = named.source_layer != 101
    assert np.mean(named.source_layer[fitting] == SOURCES.index("resin_layer")) > 0.99

    d = diagnose(measured, sigma, preds, pstd, measured_lag=lag,
                 predicted_lag={"model": lag_model, "resin_layer": 0.0})
    want = np.where(truth_is_model, SOURCES.index("model"), SOURCES.index("resin_layer"))
    assert np.mean(d.source_layer == want) >= 0.95
    # With no lag floor, the lag z-scores of the true source follow N(0, 1) when the lag
    # std is propagated from the quadrature noise (scipy.stats.kstest reference).
    d0 = diagnose(measured, sigma, preds, pstd, measured_lag=lag,
                  predicted_lag={"model": lag_model}, lag_std_floor=0.0)
    zl = np.where(truth_is_model, d0.lag_zscore["model"], d0.lag_zscore["resin_layer"]).ravel()
    assert stats.kstest(zl.astype(np.float64), "norm").pvalue > 1e-3


def test_lag_difference_wraps_modulo_180():
    # The signed lag -degrees(arctan(Im C / Re C)) has numpy.arctan's period of 180 deg: two
    # complex responses 2 deg apart across the Re C = 0 axis have lags near +89 and -89.
    c_meas = np.exp(-1j * np.radians(89.0))
    c_pred = np.exp(-1j * np.radians(91.0))
    lag_m = -np.degrees(np.arctan(c_meas.imag / c_meas.real))
    lag_p = -np.degrees(np.arctan(c_pred.imag / c_pred.real))
    assert lag_m > 88 and lag_p < -88
    one = np.ones((1, 1))
    d = diagnose(one, 0.01, {"model": one}, {"model": 0.0}, measured_lag=np.full((1, 1), lag_m),
                 measured_lag_std=0.5, predicted_lag={"model": lag_p})
    assert abs(d.lag_residual["model"][0, 0] - (-2.0)) < 1e-4
    assert d.source_layer[0, 0] == SOURCES.index("model")


def test_surface_fraction_recovers_known_mixture(rng):
    # Independent forward model (this file): a known mixture beta of two sources plus numpy
    # noise; the pulls of beta are checked against N(0, 1) with scipy.stats.kstest.
    sm, sp = 1e-6, 1e-6
    truth = _true_predictions()
    beta = np.broadcast_to(np.linspace(0.2, 0.9, X), (Y, X))
    lam = truth["laminate"].copy()
    ply = truth["surface_ply"].copy()
    # Bottom rows: make the two sources coincide within noise -> beta must be NaN there.
    ply[-10:] = lam[-10:] + 0.3 * sm
    measured = beta * ply + (1 - beta) * lam + rng.normal(0, sm, (Y, X))
    pstd = {"surface_ply": sp, "laminate": sp}
    preds = _noisy({"surface_ply": ply, "laminate": lam}, pstd, rng)
    d = diagnose(measured, sm, preds, pstd)
    # beta is undefined exactly where the given predictions differ by less than the pair's
    # combined sigma sqrt(sm^2 + 2 sp^2) (the documented rule, evaluated here).
    undefined = np.abs(preds["surface_ply"] - preds["laminate"]) < math.sqrt(sm**2 + 2 * sp**2)
    np.testing.assert_array_equal(np.isnan(d.surface_fraction), undefined)
    assert undefined[-10:].mean() > 0.5 and not undefined[:-10].any()
    b, bs = d.surface_fraction[:-10].astype(float), d.surface_fraction_std[:-10].astype(float)
    assert np.all(np.isfinite(b))
    pull = ((b - beta[:-10]) / bs).ravel()
    # First-order std; the gap is ~70 sigma so the ratio's non-linearity is negligible.
    assert stats.kstest(pull, "norm").pvalue > 1e-3
    assert abs(pull.std(ddof=1) - 1) < 4 / math.sqrt(2 * (pull.size - 1))
    assert abs(np.mean(b - beta[:-10])) < 4 * np.sqrt(np.mean(bs**2) / b.size)


def test_nan_pixels_become_no_data_without_affecting_neighbours(rng):
    # not a physics check: bad pixels become no-data and leave their neighbours bit for bit
    sm, sp = 3e-6, 2e-6
    measured, preds, pstd, _, _, _ = _scenario(rng, sm, sp)
    lag = rng.normal(0, 1.0, (Y, X))
    kw = dict(measured_lag=lag, predicted_lag={"laminate": 0.5})
    clean = diagnose(measured, sm, preds, pstd, **kw)
    m2, p2, s2, lag2 = measured.copy(), {k: v.copy() for k, v in preds.items()}, \
        {k: v.copy() for k, v in pstd.items()}, lag.copy()
    valid = np.ones((Y, X), bool)
    bad = [(3, 4), (10, 40), (30, 70), (59, 79), (0, 0), (20, 20)]
    m2[3, 4] = np.nan
    p2["laminate"][10, 40] = np.inf
    s2["surface_ply"][30, 70] = np.nan
    lag2[59, 79] = np.nan
    m2[0, 0] = np.nan
    valid[20, 20] = False
    d = diagnose(m2, sm, p2, s2, valid=valid, measured_lag=lag2, predicted_lag={"laminate": 0.5})
    badmask = np.zeros((Y, X), bool)
    for ij in bad:
        badmask[ij] = True
    assert np.all(d.source_layer[badmask] == -1)
    assert np.all(np.isnan(d.probability[:, badmask]))
    assert np.all(np.isnan(d.zscore["laminate"][badmask]))
    assert d.n_valid == Y * X - len(bad)
    np.testing.assert_array_equal(d.source_layer[~badmask], clean.source_layer[~badmask])
    np.testing.assert_array_equal(d.probability[:, ~badmask], clean.probability[:, ~badmask])
    for s in d.sources:
        np.testing.assert_array_equal(d.zscore[s][~badmask], clean.zscore[s][~badmask])
        np.testing.assert_array_equal(d.lag_zscore[s][~badmask], clean.lag_zscore[s][~badmask])


def test_zero_combined_sigma_is_no_data():
    # not a physics check: a zero combined sigma is no-data, not a division by zero
    m = np.array([[1.0, 1.0]])
    d = diagnose(m, np.array([[0.0, 0.1]]), {"laminate": np.ones((1, 2))}, {"laminate": 0.0})
    assert d.source_layer.tolist() == [[-1, SOURCES.index("laminate")]]


# --- calibration ----------------------------------------------------------------------


def _calibration_case(rng, n, gain, sm, sp):
    truth = np.linspace(-2e-4, -1e-4, n).reshape(1, n)
    measured = truth / gain + rng.normal(0, sm, truth.shape)
    predicted = truth + rng.normal(0, sp, truth.shape)
    return measured, predicted, np.ones(truth.shape, bool)


def test_calibration_matches_full_errors_in_variables_fit(rng):
    gain, sm, sp = 1.15, 3e-6, 2e-6
    m, p, mask = _calibration_case(rng, 400, gain, sm, sp)
    k, std, n = calibration_factor(m, p, mask, measured_std=sm, predicted_std=sp)
    assert n == 400
    assert abs(k - gain) < 3 * std
    # Reference: scipy.optimize.least_squares on the full problem over (k, true measured
    # values), no profiling: residuals (p - k t)/sp and (m - t)/sm.
    mv, pv = m.ravel(), p.ravel()

    def resid(q):
        kk, t = q[0], q[1:]
        return np.concatenate([(pv - kk * t) / sp, (mv - t) / sm])

    sol = optimize.least_squares(resid, np.concatenate([[1.0], mv]), xtol=1e-15, ftol=1e-15,
                                 gtol=1e-15, x_scale="jac")
    assert math.isclose(k, sol.x[0], rel_tol=1e-8)
    cov = np.linalg.inv(sol.jac.T @ sol.jac)
    # Gauss-Newton covariance of the full fit vs the profile curvature: equal to first
    # order in the residuals, which are ~1e-2 of the signal here.
    assert math.isclose(std, math.sqrt(cov[0, 0]), rel_tol=2e-2)


def test_calibration_std_is_honest_over_repeats(rng):
    gain, sm, sp = 0.9, 4e-6, 3e-6
    pulls = []
    for _ in range(300):
        m, p, mask = _calibration_case(rng, 100, gain, sm, sp)
        k, std, _ = calibration_factor(m, p, mask, measured_std=sm, predicted_std=sp)
        pulls.append((k - gain) / std)
    pulls = np.array(pulls)
    # Pulls of a correct estimator with a correct std follow N(0, 1): scipy.stats.kstest.
    assert stats.kstest(pulls, "norm").pvalue > 1e-3
    assert abs(pulls.mean()) < 4 / math.sqrt(pulls.size)


def test_calibration_weighted_and_unweighted_match_curve_fit(rng):
    m, p, mask = _calibration_case(rng, 200, 1.05, 0.0, 2e-6)
    sp = np.linspace(1e-6, 3e-6, 200).reshape(1, 200)
    k, std, _ = calibration_factor(m, p, mask, predicted_std=sp)
    # Reference: scipy.optimize.curve_fit, model k*m, sigma=sp, absolute_sigma=True.
    popt, pcov = optimize.curve_fit(lambda x, kk: kk * x, m.ravel(), p.ravel(), p0=[1.0],
                                    sigma=sp.ravel(), absolute_sigma=True)
    assert math.isclose(k, popt[0], rel_tol=1e-9)
    assert math.isclose(std, math.sqrt(pcov[0, 0]), rel_tol=1e-6)
    k0, std0, _ = calibration_factor(m, p, mask)
    popt, pcov = optimize.curve_fit(lambda x, kk: kk * x, m.ravel(), p.ravel(), p0=[1.0])
    assert math.isclose(k0, popt[0], rel_tol=1e-9)
    assert math.isclose(std0, math.sqrt(pcov[0, 0]), rel_tol=1e-6)


def test_calibration_refusals(rng):
    # not a physics check: the calibration range and its error text
    m, p, mask = _calibration_case(rng, 50, 3.0, 1e-7, 1e-7)
    with pytest.raises(ValueError, match=r"outside 0\.5\.\.2"):
        calibration_factor(m, p, mask, measured_std=1e-7, predicted_std=1e-7)
    k, _, _ = calibration_factor(m, p, mask, measured_std=1e-7, predicted_std=1e-7,
                                 allow_large=True)
    assert abs(k - 3.0) < 0.01
    with pytest.raises(ValueError, match="0 usable pixel"):
        calibration_factor(np.full_like(m, np.nan), p, mask)
    with pytest.raises(ValueError, match="0 usable pixel"):
        calibration_factor(m, p, np.zeros_like(mask))


def test_apply_calibration_propagates_first_order():
    m = np.array([[-1e-4, -2e-4]], np.float32)
    out, std = apply_calibration(m, 1.1, measured_std=1e-6, factor_std=0.01)
    assert out.dtype == np.float32 and std.dtype == np.float32
    np.testing.assert_allclose(out, 1.1 * m.astype(float), rtol=1e-6)
    # Taylor (1997) eq. 3.18 for a product ([Taylor1997]): relative errors add in quadrature.
    np.testing.assert_allclose(std, np.hypot(1.1e-6, m.astype(float) * 0.01), rtol=1e-6)


# --- regions ---------------------------------------------------------------------------


def test_region_mask_rect_and_circle_against_skimage():
    from skimage.draw import disk

    r = region_mask((Y, X), rect=(5, 10, 25, 12))
    want = np.zeros((Y, X), bool)
    want[10:12, 5:25] = True
    np.testing.assert_array_equal(r, want)
    c = region_mask((Y, X), circle=(40.3, 20.7, 7.5))
    rr, cc = disk((20.7, 40.3), 7.5, shape=(Y, X))   # reference: scikit-image
    want = np.zeros((Y, X), bool)
    want[rr, cc] = True
    np.testing.assert_array_equal(c, want)


@pytest.mark.parametrize("kw, msg", [
    (dict(rect=(5, 5, 5, 9)), "is empty"),
    (dict(rect=(0, 0, X + 1, 5)), "outside the 80 x 60 px frame"),
    (dict(rect=(-1, 0, 3, 5)), "outside"),
    (dict(rect=(0.5, 0, 3, 5)), "integer pixel index"),
    (dict(circle=(3, 30, 5)), "outside"),
    (dict(circle=(10.5, 10.5, 0.2)), "no pixel centre"),
    (dict(mask=np.zeros((Y, X), bool)), "selects no pixel"),
    (dict(mask=np.ones((Y, X + 1), bool)), "does not match"),
    (dict(rect=(0, 0, 2, 2), circle=(5, 5, 1)), "exactly one"),
    (dict(), "exactly one"),
])
def test_region_mask_errors(kw, msg):
    with pytest.raises(ValueError, match=msg):
        region_mask((Y, X), **kw)


def test_region_table_rows(rng):
    sm, sp = 3e-6, 2e-6
    measured, preds, pstd, _, _, _ = _scenario(rng, sm, sp)
    valid = np.ones((Y, X), bool)
    valid[:, -5:] = False
    d = diagnose(measured, sm, preds, pstd, valid=valid)
    regions = {"left": region_mask((Y, X), rect=(0, 0, 20, Y)),
               "right edge": region_mask((Y, X), rect=(X - 5, 0, X, Y))}
    rows = region_table(measured, d, preds, regions=regions)
    assert [r["name"] for r in rows] == ["whole field", "left", "right edge"]
    whole, left, edge = rows
    assert whole["n_pixels"] == d.n_valid == Y * (X - 5)
    sel = regions["left"]
    assert left["n_pixels"] == sel.sum()
    # Reference: numpy statistics on the same pixels.
    assert math.isclose(left["measured_mean"], measured[sel].mean(), rel_tol=1e-12)
    assert math.isclose(left["measured_std"], measured[sel].std(ddof=1), rel_tol=1e-12)
    assert math.isclose(left["predicted_mean"]["laminate"], preds["laminate"][sel].mean(),
                        rel_tol=1e-12)
    assert left["winner"] == "resin_layer" and left["winner_share"] >= 0.95
    assert math.isclose(sum(left["category_fraction"].values()), 1.0, rel_tol=1e-12)
    assert edge["n_pixels"] == 0 and edge["winner"] is None and math.isnan(edge["measured_mean"])
    with pytest.raises(ValueError, match="reserved"):
        region_table(measured, d, preds, regions={"whole field": sel})
    with pytest.raises(ValueError, match="boolean mask"):
        region_table(measured, d, preds, regions={"bad": sel[:, :10]})


# --- contract ---------------------------------------------------------------------------


def test_dtypes_flags_and_result_dataset(rng):
    # not a physics check: dtypes, CF flags and the result dataset
    sm, sp = 3e-6, 2e-6
    measured, preds, pstd, _, _, _ = _scenario(rng, sm, sp)
    d = diagnose(measured.astype(np.float32), sm, preds, pstd)
    assert isinstance(d, Diagnosis)
    assert d.sources == ("resin_layer", "surface_ply", "laminate")  # SOURCES order
    assert d.source_layer.dtype == np.int8
    assert d.probability.dtype == np.float32 and d.probability.shape == (3, Y, X)
    assert all(v.dtype == np.float32 for v in d.zscore.values())
    assert d.surface_fraction.dtype == np.float32
    values, meanings = source_flags(d.sources)
    assert list(d.flag_values) == values and list(d.flag_meanings) == meanings
    assert set(np.unique(d.source_layer)) <= set(values)
    ds = result_dataset(d.to_maps(), sources=d.sources)
    assert ds["source_layer"].attrs["flag_meanings"].split() == meanings
    assert ds["source_probability"].dims == ("source", "y", "x")
    np.testing.assert_array_equal(d.category("laminate"), d.source_layer == SOURCES.index("laminate"))


def test_bad_arguments():
    # not a physics check: argument errors
    m = np.zeros((2, 3))
    ok = {"laminate": np.zeros((2, 3))}
    with pytest.raises(ValueError, match="unknown source"):
        diagnose(m, 1.0, {"paint": m}, {"paint": 1.0})
    with pytest.raises(ValueError, match="one entry per source"):
        diagnose(m, 1.0, ok, {})
    with pytest.raises(ValueError, match="must be >= 0"):
        diagnose(m, -1.0, ok, {"laminate": 1.0})
    with pytest.raises(ValueError, match="does not match"):
        diagnose(m, 1.0, {"laminate": np.zeros((3, 3))}, {"laminate": 1.0})
    with pytest.raises(ValueError, match="heat model's phase lag"):
        diagnose(m, 1.0, {"model": m}, {"model": 1.0}, measured_lag=m)
    with pytest.raises(ValueError, match="without measured_lag"):
        diagnose(m, 1.0, ok, {"laminate": 1.0}, measured_lag_std=1.0)
    # Predicted lags without a measured lag have nothing to compare with: not used, recorded.
    d = diagnose(m, 1.0, {"model": m}, {"model": 1.0}, predicted_lag={"model": 10.0})
    assert not d.uses_lag and d.lag_zscore == {}
    with pytest.raises(ValueError, match="fit_threshold must be"):
        diagnose(m, 1.0, ok, {"laminate": 1.0}, fit_threshold=0)
    with pytest.raises(TypeError, match="boolean mask"):
        diagnose(m, 1.0, ok, {"laminate": 1.0}, valid=np.full((2, 3), 0.5))
    with pytest.raises(ValueError, match="not a category"):
        diagnose(m, 1.0, ok, {"laminate": 1.0}).category("paint")


def test_public_api_is_pinned():
    # not a physics check: public-API guard in the manner of SciPy's test_public_api
    assert set(fd.__all__) == {
        "CALIBRATION_RANGE", "Diagnosis", "WHOLE_FIELD", "apply_calibration",
        "calibration_factor", "diagnose", "measured_ratio", "region_mask", "region_table"}


def test_heat_model_is_named_only_where_no_layer_fits(rng):
    # Independent forward model (this file): layer sources and a heat-model map that agrees
    # with one layer on the left and with none on the right; numpy noise of a known sigma.
    # Layer sources at -1e-4 (laminate) and -3e-4 (resin layer); the heat model predicts
    # -1e-4 on the left half (it agrees with the laminate) and -2e-4 on the right half,
    # where heat flows between layers and no single layer explains the signal.
    base = np.full((Y, X), -1e-4)
    model = np.where(np.arange(X) < X // 2, -1e-4, -2e-4) * np.ones((Y, X))
    preds = {"resin_layer": base * 3, "laminate": base, "model": model}
    sm = 2e-6
    measured = model + rng.normal(0, sm, (Y, X))
    d = diagnose(measured, sm, preds, {k: 0.0 for k in preds})
    left, right = d.source_layer[:, : X // 2], d.source_layer[:, X // 2:]
    assert np.mean(left == SOURCES.index("laminate")) > 0.99       # not "indistinguishable"
    assert np.mean(right == SOURCES.index("model")) > 0.99


def _tie_rule_by_hand(m, sm, preds, pstd, fit_threshold=3.0, distinguish=1.0, secondary=("model",)):
    """The decision rule of diagnose() (its Notes, steps 1-3) written pixel by pixel in plain Python:
    an independent implementation for the set of sources that tie at each pixel."""
    names = [s for s in SOURCES if s in preds]
    ties = {}
    for idx in np.ndindex(m.shape):
        mi, si = float(m[idx]), float(sm)
        p = {s: float(np.broadcast_to(preds[s], m.shape)[idx]) for s in names}
        sp = {s: float(np.broadcast_to(pstd[s], m.shape)[idx]) for s in names}
        sig = {s: math.hypot(si, sp[s]) for s in names}
        fits = [s for s in names if abs(mi - p[s]) / sig[s] <= fit_threshold]
        if not fits:
            continue
        primary = [s for s in fits if s not in secondary]
        cand = primary or fits
        loglik = {s: -0.5 * ((mi - p[s]) / sig[s]) ** 2 - math.log(sig[s]) for s in cand}
        best = max(cand, key=loglik.get)
        close = [s for s in cand if s != best
                 and abs(p[s] - p[best]) < distinguish * math.sqrt(si ** 2 + sp[s] ** 2 + sp[best] ** 2)]
        if close:
            ties[idx] = {best, *close}
    return ties


def test_tied_sources_match_the_rule_written_by_hand(rng):
    # independent implementation: the decision rule of diagnose's Notes written pixel by pixel in plain Python
    # four layer sources and the heat model, with spacings that give ties of two and of three,
    # and a secondary source (the heat model) that only ties where no layer fits
    shape = (12, 40)
    sm = 1e-6
    base = rng.uniform(-6e-6, -4e-6, shape)
    preds = {"coating": base - 40e-6, "resin_layer": base + 30e-6,
             "surface_ply": base + rng.normal(0, 0.6e-6, shape),
             "laminate": base + rng.normal(0, 1.5e-6, shape),
             "model": base + rng.normal(0, 1.0e-6, shape)}
    pstd = {s: 0.5e-6 for s in preds}
    preds["coating"][:, 10:20] = base[:, 10:20] + rng.normal(0, 0.8e-6, (shape[0], 10))   # three may tie
    preds["laminate"][:, 20:28] += 6e-6                                                  # one may stand out
    m = base + rng.normal(0, 1.0e-6, shape)
    m[:, -4:] = base[:, -4:] + 25e-6       # only the resin layer can come near here: no source fits
    d = diagnose(m, sm, preds, pstd)
    want = _tie_rule_by_hand(m, sm, preds, pstd)
    got = {}
    for idx in zip(*np.nonzero(d.tied)):
        got[idx] = {s for s in SOURCES if int(d.tied[idx]) & (1 << SOURCES.index(s))}
    assert got == {tuple(int(i) for i in k): v for k, v in want.items()}
    # a tie exactly where the map says indistinguishable, never elsewhere
    np.testing.assert_array_equal(d.tied != 0, d.category("indistinguishable"))
    assert {frozenset(v) for v in want.values()} >= {frozenset({"surface_ply", "laminate"}),
                                                      frozenset({"coating", "surface_ply", "laminate"})}
    assert d.category("surface_ply").any() and d.category("no_source_fits").any()
    # CF flag_masks through the result dataset: one bit per source
    ds = result_dataset(d.to_maps(), sources=d.sources)
    assert list(ds["source_tie"].attrs["flag_masks"]) == [1 << SOURCES.index(s) for s in d.sources]
    assert ds["source_tie"].attrs["flag_meanings"].split() == list(d.sources)


def test_a_measurement_fitting_only_turned_over_predictions_is_told_apart(rng):
    # common practice (thermoelastic stress analysis): measured and predicted dT/T0 carry one
    # sign convention, so a measurement that every prediction explains only turned over points
    # at a strain or temperature range of the wrong sign (images in the wrong order, say).
    # The fits are checked against numpy's least squares.
    from fusion.diagnose._sign import REVERSED_SHARE, sign_reversal

    y, x = np.mgrid[0:40, 0:50]
    ply = -1e-4 * (1.0 + 0.5 * np.cos(x / 8.0))            # a pattern, as around a hole
    lam = 0.6 * ply + 2e-5 * np.sin(y / 6.0)
    valid = np.ones(ply.shape, bool)
    noise = 3e-6 * rng.standard_normal(ply.shape)
    preds = {"surface_ply": ply, "laminate": lam}
    source, factor, share, as_given = sign_reversal(-ply + noise, preds, valid)
    k_ref = np.linalg.lstsq(ply.reshape(-1, 1), (-ply + noise).ravel(), rcond=None)[0][0]
    assert source == "surface_ply" and factor == pytest.approx(k_ref, rel=1e-9) and factor < 0
    assert REVERSED_SHARE < share <= 1.0 and as_given == 0.0     # both predictions have the other sign
    # the sign given: nothing to say; a source of the right sign that fits as well: nothing either
    assert sign_reversal(ply + noise, preds, valid) is None
    assert sign_reversal(-ply + noise, {"surface_ply": ply, "coating": -ply}, valid) is None
    # a uniform source with the measurement's sign explains most of it (its mean): the check
    # stays quiet rather than call a reversal a right-signed source nearly matches
    assert sign_reversal(-ply + noise, {"surface_ply": ply, "coating": np.full(ply.shape, 1e-4)}, valid) is None
    # pure noise turned over is no reversal: the fit must explain the measurement
    assert sign_reversal(noise, preds, valid) is None
