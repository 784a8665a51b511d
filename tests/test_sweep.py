"""Frequency bands and sweep fits, checked against analytic curves and synthetic sweeps.

The synthetic sweeps come from the forward model applied to laminates built with the
"true" parameters from fresh material records (not through the fit's own parameter
substitution), with Gaussian noise of known standard deviation; the fit must recover the
truth within its reported standard errors, and those must match the scatter over many
noisy draws (the definition of a standard error; Press et al., Numerical Recipes, 3rd ed.,
sec. 15.6, [NumericalRecipes2007]).
"""

import dataclasses

import numpy as np
import pytest
import xarray as xr

from fusion.io import read_netcdf, write_netcdf
from fusion.mechanics._sweep import _default_lag_std
from fusion.mechanics import (
    IsotropicMaterial, Laminate, OrthotropicMaterial, SurfaceLayer, fit_sweep, fit_sweep_maps,
    frequency_band, phase_lag, source_coefficients, sweep_dataset, thermal_layers,
    transfer_coefficients, uniaxial_strain_state,
)

# Kaw, Mechanics of Composite Materials, 2nd ed., Table 2.1 graphite/epoxy ([Kaw2006]); thermal
# data typical (from memory, ranges in docs/references.md). Resin: the typical epoxy of
# docs/references.md (E 3.5 GPa, nu 0.35, alpha 60e-6, rho 1200, Cp 1100, k 0.2; from memory).
CFRP = OrthotropicMaterial("graphite/epoxy", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6,
                           1600.0, 900.0, 5.0, 0.6, 0.6)
RESIN = IsotropicMaterial("epoxy", 3.5e9, 0.35, 60e-6, 1200.0, 1100.0, 0.2)


def laminate(resin=None, k_scale=1.0, layup="[0/90]2s"):
    """The truth: materials rebuilt with every conductivity scaled."""
    ply = dataclasses.replace(CFRP, k3=CFRP.k3 * k_scale)
    res = dataclasses.replace(RESIN, k=RESIN.k * k_scale)
    layer = SurfaceLayer(res, resin) if resin else None
    return Laminate.from_layup(ply, layup, 0.25e-3, resin_layer=layer)


def forward(lam, f, strain):
    return transfer_coefficients(thermal_layers(lam), f) @ strain


# ---------------------------------------------------------------- bands
def test_band_of_response_linear_in_log_frequency_is_exact():
    # Independent derivation: an analytic curve written here, its band edges solved by hand.
    # r = T (1 + 0.05 log10(f / 3)): |r - T| <= 0.02 |T| exactly for f in 3 * 10**[-0.4, 0.4];
    # the edge interpolation is linear in log f, so it is exact here (round-off only).
    f = np.geomspace(0.1, 200, 121)
    target = -1e-4
    r = target * (1 + 0.05 * np.log10(f / 3)) + 0j
    lo, hi = frequency_band(f, r, target, tolerance=0.02)
    assert lo == pytest.approx(3 * 10 ** -0.4, rel=1e-12)
    assert hi == pytest.approx(3 * 10 ** 0.4, rel=1e-12)


def test_band_edge_of_response_linear_in_frequency():
    # Independent derivation: an analytic curve written here; the interpolation error bound is Taylor's
    # remainder of a linear interpolation (common practice).
    # r = T (1 + f / 500): analytic edge f* = 0.02 * 500 = 10 Hz. Linear interpolation in
    # u = ln f of g = e^u / 500 - 0.02 misplaces the root by at most du^2 / 8 relative
    # (du = ln(10) / 20 at 20 points per decade: 1.7e-3).
    f = np.geomspace(0.1, 200, int(round(np.log10(2000) * 20)) + 1)
    lo, hi = frequency_band(f, -2e-4 * (1 + f / 500), -2e-4)
    assert lo == f[0]
    assert hi == pytest.approx(10.0, rel=1.7e-3)
    assert hi != 10.0  # it really is interpolated, not snapped to a round number


def test_widest_band_wins_and_ties_keep_the_lowest():
    # not a physics check: which of two bands is reported
    f = np.geomspace(1, 1000, 61)
    u = np.log10(f)
    # inside for u in [0.2, 0.4] and [1.5, 2.5] (bump of 10 % elsewhere)
    inside = ((u >= 0.2) & (u <= 0.4)) | ((u >= 1.5) & (u <= 2.5))
    r = np.where(inside, 1.0, 1.1)
    lo, hi = frequency_band(f, r, 1.0, tolerance=0.05)
    assert 10 ** 1.4 < lo <= 10 ** 1.5 and 10 ** 2.5 <= hi < 10 ** 2.6
    same = ((u >= 0.5) & (u <= 1.0)) | ((u >= 2.0) & (u <= 2.5))
    lo, hi = frequency_band(f, np.where(same, 1.0, 1.1), 1.0, tolerance=0.05)
    assert lo < 10 ** 0.5 and hi < 10 ** 1.1


def test_quadrature_band_is_stricter():
    # Independent derivation: an analytic curve written here, its band edge solved by hand.
    # in-phase part exactly on target, quadrature 0.05 |T| log10(f): the complex distance is
    # within 2 % for log10(f) <= 0.4 only (analytic; exact as above)
    f = np.geomspace(1, 100, 41)
    target = -3e-4
    r = target + 1j * 0.05 * abs(target) * np.log10(f)
    assert frequency_band(f, r, target) == (1.0, 100.0)
    lo, hi = frequency_band(f, r, target, quadrature=True)
    assert lo == 1.0 and hi == pytest.approx(10 ** 0.4, rel=1e-12)


def test_no_band_gives_nan_and_bad_input_is_refused():
    # not a physics check: no band gives NaN; argument errors
    f = np.geomspace(1, 100, 11)
    lo, hi = frequency_band(f, np.full(11, 2.0), 1.0)
    assert np.isnan(lo) and np.isnan(hi)
    with pytest.raises(ValueError, match="increasing"):
        frequency_band(f[::-1], np.ones(11), 1.0)
    with pytest.raises(ValueError, match="tolerance"):
        frequency_band(f, np.ones(11), 1.0, tolerance=1.5)
    with pytest.raises(ValueError, match="shape"):
        frequency_band(f, np.ones(5), 1.0)


# ---------------------------------------------------------------- sweep fits
F_SWEEP = np.array([1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0])
TRUE = {"resin_thickness": 30e-6, "conductivity_scale": 1.2}


def _synthetic(rng, n=1):
    truth = laminate(TRUE["resin_thickness"], TRUE["conductivity_scale"])
    e = uniaxial_strain_state(truth)
    m = forward(truth, F_SWEEP, e)
    sy = np.full(F_SWEEP.size, 0.01 * np.abs(m.real).max())  # 1 % of the largest ratio
    sl = np.full(F_SWEEP.size, 0.3)                            # 0.3 degree
    draws = [(m.real + rng.normal(0, sy), phase_lag(m) + rng.normal(0, sl)) for _ in range(n)]
    return e, sy, sl, draws


def test_fit_recovers_parameters_within_standard_errors(rng):
    # Independent forward model: fresh material records with the true parameters and numpy
    # noise; chi-square and standard-error checks per Numerical Recipes ([NumericalRecipes2007]).
    nominal = laminate(15e-6)
    e, sy, sl, [(y, lag)] = _synthetic(rng)
    fit = fit_sweep(nominal, F_SWEEP, y, sy, e, measured_lag=lag, lag_std=sl)
    assert fit.success and fit.dof == 2 * F_SWEEP.size - 2
    for name, true in TRUE.items():
        # 3 standard errors: 99.7 % for a correct error estimate (seeded, so deterministic)
        assert abs(fit.params[name] - true) < 3 * fit.std_errors[name]
    assert fit.std_errors["resin_thickness"] < 0.1 * TRUE["resin_thickness"]  # informative
    # chi2 of a correct model with correct errors: dof +- sqrt(2 dof); 3 sigma bound
    assert fit.chi2 < fit.dof + 3 * np.sqrt(2 * fit.dof)
    # the ratio alone (7 points, 2 parameters) also recovers the truth
    fit_r = fit_sweep(nominal, F_SWEEP, y, sy, e)
    for name, true in TRUE.items():
        assert abs(fit_r.params[name] - true) < 3 * fit_r.std_errors[name]
    assert fit_r.std_errors["resin_thickness"] > fit.std_errors["resin_thickness"]


def test_standard_errors_match_the_scatter_over_repeated_draws(rng):
    # A standard error is the scatter over repeated data sets (Press et al. 2007 sec. 15.6).
    # 120 noisy draws: the sample std of a normal sample of 120 has a relative std of
    # 1/sqrt(2*119) = 6.5 %; 3 of those is 20 %, the bound used.
    nominal = laminate(15e-6)
    e, sy, sl, draws = _synthetic(rng, n=120)
    fits = [fit_sweep(nominal, F_SWEEP, y, sy, e, measured_lag=lag, lag_std=sl) for y, lag in draws]
    for name, true in TRUE.items():
        values = np.array([ft.params[name] for ft in fits])
        reported = np.mean([ft.std_errors[name] for ft in fits])
        assert values.std(ddof=1) == pytest.approx(reported, rel=0.2)
        assert abs(values.mean() - true) < 0.3 * reported  # no bias beyond a small fraction


def test_sources_at_the_ends_and_recommended_band():
    # Carbon/epoxy cross-ply without a resin layer (common practice: laminate value at low
    # frequency, surface ply at high frequency); a noise-free sweep.
    lam = laminate(None)
    e = uniaxial_strain_state(lam)
    f = np.array([0.2, 1.0, 5.0, 20.0, 100.0])
    m = forward(lam, f, e)
    fit = fit_sweep(laminate(None, 0.8), f, m.real, np.full(5, 1e-7), e, parameters=("conductivity_scale",),
                    frequency_range=(0.02, 200.0))
    # the nominal laminate's conductivities are 0.8 of the truth
    assert fit.params["conductivity_scale"] == pytest.approx(1 / 0.8, rel=1e-6)
    assert fit.low_frequency_source == "laminate"
    assert fit.high_frequency_source == "surface_ply"
    assert fit.band_source == "surface_ply"
    assert fit.band[1] == pytest.approx(200.0)
    # the band agrees with the band of the independent forward model on the same grid
    curve = forward(lam, fit.model_frequencies, e)
    target = float(source_coefficients(lam)["surface_ply"] @ e)
    expected = frequency_band(fit.model_frequencies, curve, target, quadrature=True)
    assert fit.band == pytest.approx(expected, rel=1e-5)


def test_default_lag_std_is_the_phasor_phase_noise(rng):
    # Common practice (phasor noise): with the same std sigma on the in-phase and quadrature
    # parts of an amplitude A, the phase has std sigma / A rad. Checked by simulation with
    # numpy's generator, then used by the fit when lag_std is not given.
    a, sigma = -2e-4, 2e-6
    z = a + rng.normal(0, sigma, 20000) + 1j * rng.normal(0, sigma, 20000)
    simulated = np.std(phase_lag(z))
    assert _default_lag_std(sigma, a) == pytest.approx(simulated, rel=0.03)  # 20000 draws: 0.5 %
    nominal = laminate(15e-6)
    e, sy, sl, [(y, lag)] = _synthetic(rng)
    fit = fit_sweep(nominal, F_SWEEP, y, sy, e, measured_lag=lag)
    np.testing.assert_allclose(fit.lag_std, np.degrees(sy / np.abs(y)))
    assert fit.dof == 2 * F_SWEEP.size - 2


def test_sweep_dataset_round_trip(tmp_path, rng):
    # not a physics check: NetCDF round trip with attributes
    nominal = laminate(15e-6)
    e, sy, sl, [(y, lag)] = _synthetic(rng)
    fit = fit_sweep(nominal, F_SWEEP, y, sy, e, measured_lag=lag, lag_std=sl)
    ds = sweep_dataset(fit)
    for name, v in ds.variables.items():
        assert "long_name" in v.attrs, name
        if name not in ("source", "parameter", "parameter_b"):
            assert "units" in v.attrs, name
    assert ds["fit_resin_thickness"].attrs["units"] == "m"
    assert float(ds["fit_resin_thickness"]) == fit.params["resin_thickness"]
    path = write_netcdf(ds, tmp_path / "frequency.nc")
    back = read_netcdf(path)
    xr.testing.assert_allclose(back.drop_vars(["source", "parameter", "parameter_b"]),
                               ds.drop_vars(["source", "parameter", "parameter_b"]))
    assert list(back["source"].values) == list(ds["source"].values)
    for name in ds.variables:
        assert back[name].attrs == ds[name].attrs, name
    assert back.attrs["band_source"] == fit.band_source
    assert back.attrs["chi2"] == pytest.approx(fit.chi2)


def test_fit_bad_arguments():
    lam = laminate(None)
    e = uniaxial_strain_state(lam)
    f = np.array([1.0, 10.0, 100.0])
    y, s = np.full(3, -5e-5), np.full(3, 1e-6)
    with pytest.raises(ValueError, match="no resin_layer"):
        fit_sweep(lam, f, y, s, e)
    with pytest.raises(ValueError, match="unknown fit parameter"):
        fit_sweep(lam, f, y, s, e, parameters=("ply_angle",))
    with pytest.raises(ValueError, match="without measured_lag"):
        fit_sweep(lam, f, y, s, e, lag_std=np.ones(3), parameters=("conductivity_scale",))
    with pytest.raises(ValueError, match="measured_std"):
        fit_sweep(lam, f, y, np.zeros(3), e, parameters=("conductivity_scale",))
    with pytest.raises(ValueError, match="cannot determine"):
        fit_sweep(laminate(10e-6), f[:1], y[:1], s[:1], e)


# ---------------------------------------------------------------- per-pixel fit
def _maps(rng, shape=(6, 8)):
    f = np.array([2.0, 5.0, 10.0, 20.0, 50.0, 100.0])
    ny, nx = shape
    true = np.linspace(2e-6, 20e-6, nx)[None, :] * np.ones((ny, 1))
    e0 = uniaxial_strain_state(laminate(10e-6))
    strain = e0[:, None, None] * (1 + 0.3 * rng.random(shape))[None]
    ratio = np.empty((f.size,) + shape)
    lag = np.empty_like(ratio)
    for i in range(ny):  # the truth, pixel by pixel, through fresh laminates
        for j in range(nx):
            r = forward(laminate(true[i, j]), f, strain[:, i, j])
            ratio[:, i, j], lag[:, i, j] = r.real, phase_lag(r)
    sy = np.full_like(ratio, 0.01 * np.abs(ratio).mean())
    sl = np.full_like(ratio, 0.3)
    noisy = ratio + rng.normal(0, 1, ratio.shape) * sy
    noisy_lag = lag + rng.normal(0, 1, ratio.shape) * sl
    return f, true, strain, noisy, sy, noisy_lag, sl


def test_maps_recover_the_thickness_map(rng):
    # Independent forward model: a known thickness map through fresh laminates pixel by pixel;
    # the pulls must follow N(0, 1) ([NumericalRecipes2007] sec. 15.6).
    f, true, strain, y, sy, lag, sl = _maps(rng)
    out = fit_sweep_maps(laminate(10e-6), f, y, sy, strain, lag_maps=lag, lag_std_maps=sl)
    assert out["resin_thickness"].dtype == np.float32 and out["resin_thickness"].shape == true.shape
    z = (out["resin_thickness"] - true) / out["resin_thickness_std"]
    # 48 pixels: every |z| below 4 and the spread of z near 1 (sample std of 48 normals
    # has a relative std of 10 %; 3 of those)
    assert np.all(np.abs(z) < 4)
    assert np.std(z) == pytest.approx(1.0, abs=0.3)
    assert np.all(out["runs"] == f.size) and not np.any(out["at_bound"])
    # same optimum and standard error as the one-parameter least-squares fit of one region
    for j in (0, 3, 7):
        fit = fit_sweep(laminate(10e-6), f, y[:, 2, j], sy[:, 2, j], strain[:, 2, j],
                        measured_lag=lag[:, 2, j], lag_std=sl[:, 2, j], parameters=("resin_thickness",))
        std = fit.std_errors["resin_thickness"]
        assert out["resin_thickness"][2, j] == pytest.approx(fit.params["resin_thickness"], abs=0.01 * std)
        assert out["resin_thickness_std"][2, j] == pytest.approx(std, rel=0.01)
        assert out["chi2"][2, j] == pytest.approx(fit.chi2, rel=1e-3)


def test_maps_adiabatic_onset_matches_the_band_at_the_fitted_thickness(rng):
    # not a physics check: the per-pixel onset equals the band of the package's own model at
    # the fitted thickness (two code paths of the package)
    f, true, strain, y, sy, lag, sl = _maps(rng, shape=(2, 8))
    out = fit_sweep_maps(laminate(10e-6), f, y, sy, strain, lag_maps=lag, lag_std_maps=sl)
    fp = np.geomspace(0.1, 200, 121)
    finite = 0
    for j in range(8):
        lam = laminate(float(out["resin_thickness"][0, j]))
        r = forward(lam, fp, strain[:, 0, j])
        lo, _ = frequency_band(fp, r, float(source_coefficients(lam)["surface_ply"] @ strain[:, 0, j]))
        if np.isnan(lo):
            assert np.isnan(out["adiabatic_onset_frequency"][0, j])
        else:
            finite += 1
            # float32 thickness and the spline of the coefficients: 0.5 % on the edge
            assert out["adiabatic_onset_frequency"][0, j] == pytest.approx(lo, rel=5e-3)
    assert finite >= 2  # thin resin layers leave a surface-ply band (see the plan)


def test_maps_missing_runs_shared_strain_and_bad_input(rng):
    # not a physics check: missing runs, shared strain maps and argument errors
    f, true, strain, y, sy, lag, sl = _maps(rng, shape=(2, 3))
    # lag std by default from the ratio std (phasor noise): same answer as stating it
    stated = fit_sweep_maps(laminate(10e-6), f, y, sy, strain, lag_maps=lag,
                            lag_std_maps=np.degrees(sy / np.abs(y)))
    default = fit_sweep_maps(laminate(10e-6), f, y, sy, strain, lag_maps=lag)
    np.testing.assert_allclose(default["resin_thickness"], stated["resin_thickness"], rtol=1e-6)
    y = y.copy()
    y[0, 0, 0] = np.nan          # one run missing: fitted from the other five
    y[:, 1, 2] = np.nan          # no data at all
    out = fit_sweep_maps(laminate(10e-6), f, y, sy, strain[:, None].repeat(f.size, axis=1).swapaxes(0, 1))
    assert out["runs"][0, 0] == f.size - 1 and np.isfinite(out["resin_thickness"][0, 0])
    assert np.isnan(out["resin_thickness"][1, 2]) and out["runs"][1, 2] == 0
    shared = fit_sweep_maps(laminate(10e-6), f, y, sy, strain)  # (3, Y, X) strain
    np.testing.assert_allclose(shared["resin_thickness"], out["resin_thickness"], rtol=1e-6, equal_nan=True)
    with pytest.raises(ValueError, match="strain_maps"):
        fit_sweep_maps(laminate(10e-6), f, y, sy, strain[:2])
    with pytest.raises(ValueError, match="no resin_layer"):
        fit_sweep_maps(laminate(None), f, y, sy, strain)
    with pytest.raises(ValueError, match="thickness_grid"):
        fit_sweep_maps(laminate(10e-6), f, y, sy, strain, thickness_grid=[1e-6, 0.5e-6, 2e-6])
