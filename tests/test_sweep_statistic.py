"""The sweep fit's whole-field statistic on a non-uniform field: one statistic for ratio and strain.

The field is the Kirsch plate (a hole in a plate under uniaxial tension; Timoshenko & Goodier,
*Theory of Elasticity*, 3rd ed., 1970, sec. 35), written here independently in plane stress.
The predicted ratio is linear in the strain range at every pixel, ``Re(c . eps)``, so a
statistic S is consistent when ``S(Re(c . eps)) = Re(c . S(eps))`` for any coefficients c:
true of the mean (linearity of the sum), false of the median on such a field.
"""

import dataclasses

import numpy as np
import pytest
import xarray as xr

from fusion.campaign._products import sweep_points
from fusion.mechanics import (IsotropicMaterial, Laminate, OrthotropicMaterial, SurfaceLayer, fit_sweep,
                              phase_lag, thermal_layers, transfer_coefficients)

ROWS, COLS, HOLE = 48, 40, 7.0


def kirsch_strain(rows=ROWS, cols=COLS, radius=HOLE, strain=2e-3, nu=0.3):
    """(3, Y, X) engineering strain of a plate with a hole, remote uniaxial stress along y.

    Kirsch's stresses in polar coordinates with theta from the load axis, turned into the
    x-y frame and into strain by Hooke's law in plane stress (E = 1, remote stress = strain).
    """
    r_, c_ = np.mgrid[0:rows, 0:cols].astype(float)
    x, y = c_ - (cols - 1) / 2, (rows - 1) / 2 - r_
    r = np.hypot(x, y)
    th = np.arctan2(x, y)                     # from the y (load) axis
    S, a2 = strain, (radius / np.maximum(r, 1e-9)) ** 2
    srr = S / 2 * (1 - a2) + S / 2 * (1 - 4 * a2 + 3 * a2**2) * np.cos(2 * th)
    stt = S / 2 * (1 + a2) - S / 2 * (1 + 3 * a2**2) * np.cos(2 * th)
    srt = -S / 2 * (1 + 2 * a2 - 3 * a2**2) * np.sin(2 * th)
    # polar (r, theta from y) to the load frame (y' along the load, x' across): rotation by theta
    c, s = np.cos(th), np.sin(th)
    syy = srr * c * c + stt * s * s - 2 * srt * s * c
    sxx = srr * s * s + stt * c * c + 2 * srt * s * c
    sxy = (srr - stt) * s * c + srt * (c * c - s * s)
    exx, eyy, gxy = sxx - nu * syy, syy - nu * sxx, 2 * (1 + nu) * sxy
    inside = r < radius
    e = np.stack([exx, eyy, gxy])
    e[:, inside] = np.nan
    return e, ~inside


def _dataset(f, c, e, valid, rng, noise=0.0):
    """A result.nc-like dataset of a run at ``f`` Hz whose per-pixel response is c . eps."""
    resp = np.einsum("k,kyx->yx", c, np.nan_to_num(e))
    T0 = 295.0 + 0.1 * rng.standard_normal(valid.shape)
    ratio = resp.real + noise * rng.standard_normal(valid.shape)
    quad = resp.imag * T0
    with np.errstate(invalid="ignore", divide="ignore"):      # the hole: no response
        lag = -np.degrees(np.arctan(resp.imag / resp.real))
    nan = lambda a: np.where(valid, a, np.nan).astype(np.float64)   # noqa: E731
    dims = ("y", "x")
    return xr.Dataset({
        "valid": (dims, valid.astype(np.int8)), "ratio_measured": (dims, nan(ratio)),
        "ratio_measured_std": (dims, nan(np.full(valid.shape, max(noise, 1e-9)))),
        "delta_eps_xx": (dims, nan(e[0])), "delta_eps_yy": (dims, nan(e[1])), "delta_gamma_xy": (dims, nan(e[2])),
        "delta_T_quadrature": (dims, nan(quad)), "T0": (dims, T0), "phase_lag_measured": (dims, nan(lag)),
    }, attrs={"frequency": float(f)})


def test_the_field_is_kirsch():
    # [Kirsch1898], [TimoshenkoGoodier1970]: hoop stress 3S across the load axis, -S on it
    # hoop stress at the hole's edge: 3 S across the load axis, -S on it (Timoshenko & Goodier)
    e, _ = kirsch_strain(rows=201, cols=201, radius=40.0)
    syy = (e[1] + 0.3 * e[0]) / (1 - 0.3**2)
    sxx = (e[0] + 0.3 * e[1]) / (1 - 0.3**2)
    assert syy[100, 100 + 40] == pytest.approx(3 * 2e-3, rel=1e-9)      # r = a, theta = 90 deg
    assert sxx[100 - 40, 100] == pytest.approx(-2e-3, rel=1e-9)         # r = a, theta = 0
    assert syy[0, 0] == pytest.approx(2e-3, rel=0.1)                    # towards the remote field


def test_field_means_are_consistent_and_medians_are_not(rng):
    # independent computation: linearity of the mean (and not of the median) on a [Kirsch1898] field
    e, valid = kirsch_strain()
    freqs = [0.5, 5.0, 50.0]
    # arbitrary complex coefficients per frequency: any linear law of the strain
    coefs = [np.array([-0.3 + 0.02j, -1.0 + 0.1j, 0.05 - 0.3j]) * k for k in (1.0, 0.8, 0.5)]
    dss = [_dataset(f, c, e, valid, rng) for f, c in zip(freqs, coefs)]
    f, r, s, lag, lag_std, strain = sweep_points(dss[::-1])       # any order in, sorted out
    assert np.allclose(f, freqs)
    for k, c in enumerate(coefs):
        model = c @ strain[k]
        assert r[k] == pytest.approx(model.real, rel=1e-10)
        assert lag[k] == pytest.approx(float(phase_lag(np.array([model]))[0]), abs=1e-8)
        # the pairing of the mean ratio with the median strain, as it was: several % off here
        median_strain = np.array([np.nanmedian(e[i][valid]) for i in range(3)])
        assert abs((c @ median_strain).real / r[k] - 1) > 0.02


def _laminate(resin):
    ply = OrthotropicMaterial("graphite/epoxy", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6, 1600.0, 900.0,
                              5.0, 0.6, 0.6)
    epoxy = IsotropicMaterial("epoxy", 3.5e9, 0.35, 60e-6, 1200.0, 1100.0, 0.2)
    return Laminate.from_layup(ply, "[0/90]2s", 0.25e-3, resin_layer=SurfaceLayer(epoxy, resin))


def test_sweep_fit_on_an_open_hole_recovers_the_resin_layer(rng):
    # Kaw, Mechanics of Composite Materials (2006), Table 2.1 graphite/epoxy; the epoxy
    # witness of the thermoelastic tests (E 3.5 GPa, nu 0.35, alpha 60e-6, rho 1200, c 1100)
    truth = _laminate(60e-6)
    e, valid = kirsch_strain()
    freqs = np.array([0.2, 2.0, 10.0, 40.0, 150.0])
    coefs = transfer_coefficients(thermal_layers(truth), freqs)
    dss = [_dataset(fk, ck, e, valid, rng, noise=2e-6) for fk, ck in zip(freqs, coefs)]
    f, r, s, lag, lag_std, strain = sweep_points(dss)
    nominal = dataclasses.replace(truth, resin_layer=SurfaceLayer(truth.resin_layer.material, 30e-6))
    fit = fit_sweep(nominal, f, r, s, strain, parameters=("resin_thickness",))
    err = fit.params["resin_thickness"] - 60e-6
    assert abs(err) < 3 * fit.std_errors["resin_thickness"] + 0.2e-6
    # the same points with the median strain, as before: the fit lands well away
    median_strain = np.array([[np.nanmedian(d[k].values[valid]) for k in ("delta_eps_xx", "delta_eps_yy",
                                                                          "delta_gamma_xy")] for d in dss])
    old = fit_sweep(nominal, f, r, s, median_strain, parameters=("resin_thickness",))
    assert abs(old.params["resin_thickness"] - 60e-6) > 10 * abs(err) + 1e-6
