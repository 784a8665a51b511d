"""Frequency sweeps: adiabatic bands and fits of the uncertain layer parameters.

A specimen tested at several loading frequencies gives, for one region, the measured
ratio dT/T0 (and its phase lag) at each frequency. The heat model of ``_heat.py`` with a
few uncertain parameters (resin-rich layer and coating thickness, a scale on every
layer's through-thickness conductivity) is fitted to those points by weighted least
squares, which also tells which source the response tends to at the low and high ends
of the frequency range and the band in which it stays within a tolerance of one source.
Where the runs share the infrared grid, the same one-parameter fit (resin thickness) is
made for every pixel at once on a precomputed thickness grid.

A recommended band is a statement of the heat model only. The loading frequency must also
respect the limits of the rig, the specimen (self-heating under fast cycling) and the
applicable test standard; follow the laboratory's procedures and have the programme
reviewed by a qualified engineer, since rigs under cyclic load are hazardous.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from numbers import Real

import numpy as np

from .._conventions import short_repr
from ._heat import (
    _bands, _check_frequencies, _check_tolerance, _lag, frequency_band, phase_lag,
    transfer_coefficients,
)
from ._predict import source_coefficients, thermal_layers

__all__ = ["FIT_PARAMETERS", "SweepFit", "fit_sweep", "fit_sweep_maps", "sweep_dataset"]

#: Parameters :func:`fit_sweep` can fit: unit, meaning, layer it acts on, lower and upper bound.
FIT_PARAMETERS = {
    "resin_thickness": ("m", "thickness of the resin-rich surface layer", "resin_layer", 0.0, 2e-3),
    "coating_thickness": ("m", "thickness of the coating", "coating", 0.0, 2e-3),
    "conductivity_scale": ("1", "factor on the through-thickness conductivity of every layer", None, 0.05, 20.0),
}
# internal units of the optimiser: micrometres for thicknesses keep the Jacobian balanced
_INTERNAL = {"m": 1e-6, "1": 1.0}


# ---------------------------------------------------------------- model with parameters
def _check_parameters(parameters, layers):
    if isinstance(parameters, str):
        parameters = (parameters,)
    names = tuple(parameters)
    if not names or len(set(names)) != len(names):
        raise ValueError(f"parameters must be distinct names from {sorted(FIT_PARAMETERS)}, got {parameters!r}")
    have = {la.name for la in layers}
    for n in names:
        if n not in FIT_PARAMETERS:
            raise ValueError(f"unknown fit parameter {n!r}; choose from {sorted(FIT_PARAMETERS)}")
        target = FIT_PARAMETERS[n][2]
        if target is not None and target not in have:
            raise ValueError(f"cannot fit {n!r}: the laminate has no {target} (configure one, or "
                             f"drop {n!r} from parameters)")
    return names


def _nominal(name, layers) -> float:
    target = FIT_PARAMETERS[name][2]
    if target is None:
        return 1.0
    return next(la.thickness for la in layers if la.name == target)


def _with_values(layers, values: dict):
    """Layers with thicknesses replaced and conductivities scaled."""
    scale = values.get("conductivity_scale", 1.0)
    out = []
    for la in layers:
        thickness = la.thickness
        for n, v in values.items():
            if FIT_PARAMETERS[n][2] == la.name:
                thickness = v
        out.append(dataclasses.replace(la, thickness=thickness, conductivity=la.conductivity * scale))
    return out


def _vector(value, n, name, *, positive=False):
    v = np.asarray(value, dtype=float)
    if v.shape != (n,) or not np.all(np.isfinite(v)) or (positive and not np.all(v > 0)):
        what = "positive finite" if positive else "finite"
        raise ValueError(f"{name} must be {n} {what} values (one per frequency), got {value!r}")
    return v


@dataclass(frozen=True)
class SweepFit:
    """Result of :func:`fit_sweep` (SI units; thicknesses in m).

    Attributes
    ----------
    params, std_errors : dict of str to float
        Fitted values and standard errors (from the Jacobian at the solution, taking the
        stated measurement standard deviations as right).
    covariance : (P, P) ndarray
        In the units of the parameters, ordered as ``parameters``.
    chi2, dof : float, int
        Weighted sum of squared residuals and degrees of freedom; ``chi2 / dof`` near 1
        says the stated uncertainties and the model fit the data.
    low_frequency_source, high_frequency_source : str
        Source whose adiabatic value the fitted response is nearest to at the lower and
        upper end of ``frequency_range``.
    band, band_source : (float, float), str or None
        Recommended band in Hz and its source: the widest of ``strict_bands``, or of
        ``bands`` where no strict band exists.
    bands : dict of str to (float, float)
        For every source, the band where the in-phase response stays within ``tolerance``
        of it (:func:`frequency_band`).
    strict_bands : dict of str to (float, float)
        The same with the complex response (small phase lag as well).
    model_frequencies, model_response : (M,) ndarray
        The fitted model curve (Hz; complex dT/T0 at the mean strain range).
    """

    __repr__ = short_repr  # shapes, not values

    parameters: tuple
    params: dict
    std_errors: dict
    covariance: np.ndarray
    chi2: float
    dof: int
    low_frequency_source: str
    high_frequency_source: str
    band: tuple
    band_source: str | None
    bands: dict
    strict_bands: dict
    source_ratios: dict
    model_frequencies: np.ndarray
    model_response: np.ndarray
    frequencies: np.ndarray
    measured_ratio: np.ndarray
    measured_std: np.ndarray
    measured_lag: np.ndarray | None
    lag_std: np.ndarray | None
    fitted_ratio: np.ndarray
    fitted_lag: np.ndarray
    tolerance: float
    success: bool
    message: str
    at_bound: tuple = ()

    @property
    def model_curve(self):
        """``(model_frequencies, model_response)``: Hz and complex dT/T0."""
        return self.model_frequencies, self.model_response

    @property
    def reduced_chi2(self) -> float:
        """chi2 / dof (NaN for dof = 0)."""
        return self.chi2 / self.dof if self.dof > 0 else math.nan

    def to_dataset(self):
        """The fit as an :class:`xarray.Dataset` (see :func:`sweep_dataset`)."""
        return sweep_dataset(self)


def fit_sweep(laminate, frequencies, measured_ratio, measured_std, strain_range, *,
              measured_lag=None, lag_std=None, parameters=("resin_thickness", "conductivity_scale"),
              initial=None, tolerance=0.02, frequency_range=(0.1, 200.0), model_points=121):
    """Fit the heat model's uncertain parameters to one region's ratio at several frequencies.

    Parameters
    ----------
    laminate : Laminate
        Nominal laminate; its layer thicknesses are the starting values.
    frequencies : (R,) array_like
        Loading frequency of each run, Hz.
    measured_ratio, measured_std : (R,) array_like
        Measured in-phase dT/T0 of the region and its standard deviation (dimensionless).
    strain_range : (3,) or (R, 3) array_like
        (d eps_xx, d eps_yy, d gamma_xy) of the region, specimen frame, per run or shared,
        taken with the same statistic over the same pixels as ``measured_ratio``. The
        model is linear in the strain, so field means of both agree exactly; a median of
        either (or a mean of one and a median of the other) does not on a non-uniform field.
    measured_lag : (R,) array_like, optional
        Measured phase lag in degrees (project convention); fitted with the ratio when given.
    lag_std : (R,) array_like, optional
        Its standard deviation in degrees. Default ``degrees(measured_std / |measured_ratio|)``:
        the phase noise of a phasor with the same noise on its in-phase and quadrature
        parts, as a least-squares lock-in gives.
    parameters : sequence of str
        Names from :data:`FIT_PARAMETERS`.
    initial : dict, optional
        Starting values (default: the laminate's thicknesses, conductivity scale 1).
    tolerance : float
        Relative tolerance of the bands (default 2 %).
    frequency_range : (float, float)
        Hz range of the model curve, the bands and the low/high-frequency sources.
    model_points : int
        Log-spaced points of the model curve.

    Returns
    -------
    SweepFit

    Notes
    -----
    Weighted least squares (:func:`scipy.optimize.least_squares`, trust-region reflective
    with bounds) of ``(model - measured) / std`` over the ratios and, when given, the
    lags. The covariance is ``(J^T J)^-1`` with J the central-difference Jacobian of the
    weighted residuals at the solution; it is not rescaled by chi2/dof, so it is right when
    the stated standard deviations are. Parameters that correlate strongly (a thicker
    resin layer and a lower conductivity act alike at high frequency) show it in the
    covariance; fit fewer parameters if the standard errors are large. Near a bound the
    linearisation fails; those parameters are listed in ``at_bound``. The lag jumps by
    180 degrees where the in-phase part changes sign: leave out the lag of runs whose
    ratio is near zero.

    References
    ----------
    Press, Teukolsky, Vetterling & Flannery, *Numerical Recipes*, 3rd ed., 2007, sec. 15.5
    (nonlinear least squares, covariance from the curvature matrix); Carslaw & Jaeger,
    *Conduction of Heat in Solids*, 1959 (the forward model).
    """
    from scipy.optimize import least_squares

    layers = thermal_layers(laminate)
    names = _check_parameters(parameters, layers)
    f = _check_frequencies(frequencies)
    R = f.size
    y = _vector(measured_ratio, R, "measured_ratio")
    sy = _vector(measured_std, R, "measured_std", positive=True)
    e = np.asarray(strain_range, dtype=float)
    if e.shape == (3,):
        e = np.broadcast_to(e, (R, 3))
    if e.shape != (R, 3) or not np.all(np.isfinite(e)):
        raise ValueError(f"strain_range must be (3,) or ({R}, 3) finite strain ranges, got shape {e.shape}")
    if measured_lag is None and lag_std is not None:
        raise ValueError("lag_std was given without measured_lag")
    use_lag = measured_lag is not None
    lag = _vector(measured_lag, R, "measured_lag") if use_lag else None
    if use_lag:
        slag = _vector(_default_lag_std(sy, y) if lag_std is None else lag_std, R, "lag_std", positive=True)
    else:
        slag = None
    n_res = R * (2 if use_lag else 1)
    if n_res < len(names):
        raise ValueError(f"{n_res} measurements cannot determine {len(names)} parameters {names}")
    lo_f, hi_f = (float(v) for v in frequency_range)
    if not 0 < lo_f < hi_f:
        raise ValueError(f"frequency_range must be (low, high) Hz with 0 < low < high, got {frequency_range!r}")
    tol = _check_tolerance(tolerance)
    hf, hb = laminate.convection_front, laminate.convection_back

    units = np.array([_INTERNAL[FIT_PARAMETERS[n][0]] for n in names])
    start = {n: _nominal(n, layers) for n in names}
    for n, v in (initial or {}).items():
        if n not in names:
            raise ValueError(f"initial value for {n!r}, which is not fitted; fitted: {names}")
        start[n] = float(v)
    lower = np.array([FIT_PARAMETERS[n][3] for n in names]) / units
    upper = np.array([FIT_PARAMETERS[n][4] for n in names]) / units
    x0 = np.clip(np.array([start[n] for n in names]) / units, lower, upper)

    def response(x, freqs, strains):
        stack = _with_values(layers, dict(zip(names, x * units)))
        return np.einsum("rc,rc->r", transfer_coefficients(stack, freqs, convection_front=hf,
                                                           convection_back=hb), strains)

    def residuals(x):
        m = response(x, f, e)
        res = (m.real - y) / sy
        if use_lag:
            res = np.concatenate([res, (phase_lag(m) - lag) / slag])
        return res

    sol = least_squares(residuals, x0, bounds=(lower, upper), x_scale="jac", method="trf",
                        xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=200 * (len(names) + 1))
    x = sol.x
    jac = _central_jacobian(residuals, x, lower, upper)
    cov_internal = np.linalg.pinv(jac.T @ jac)
    cov = cov_internal * np.outer(units, units)
    std = np.sqrt(np.clip(np.diag(cov), 0, None))
    at_bound = tuple(n for n, xi, lo, hi in zip(names, x, lower, upper)
                     if min(xi - lo, hi - xi) <= 1e-6 * (hi - lo))
    chi2 = float(np.sum(residuals(x) ** 2))

    values = dict(zip(names, (float(v) for v in x * units)))
    fitted = response(x, f, e)
    e_mean = e.mean(axis=0)
    fm = np.geomspace(lo_f, hi_f, int(model_points))
    curve = response(x, fm, np.broadcast_to(e_mean, (fm.size, 3)))
    sources = {k: float(c @ e_mean) for k, c in source_coefficients(laminate).items()}
    bands = {k: frequency_band(fm, curve, v, tolerance=tol) for k, v in sources.items()}
    strict = {k: frequency_band(fm, curve, v, tolerance=tol, quadrature=True) for k, v in sources.items()}
    # recommend a band where the phase lag is small too, if there is one: an in-phase
    # part that merely crosses a source's value on its way is no adiabatic plateau
    pick = strict if any(math.isfinite(b[0]) for b in strict.values()) else bands
    widths = {k: math.log(b[1] / b[0]) for k, b in pick.items() if math.isfinite(b[0])}
    band_source = max(widths, key=widths.get) if widths else None
    return SweepFit(
        parameters=names, params=values, std_errors=dict(zip(names, (float(s) for s in std))),
        covariance=cov, chi2=chi2, dof=n_res - len(names),
        low_frequency_source=_nearest(curve[0].real, sources),
        high_frequency_source=_nearest(curve[-1].real, sources),
        band=pick[band_source] if band_source else (math.nan, math.nan), band_source=band_source,
        bands=bands, strict_bands=strict, source_ratios=sources, model_frequencies=fm, model_response=curve,
        frequencies=f, measured_ratio=y, measured_std=sy, measured_lag=lag, lag_std=slag,
        fitted_ratio=fitted.real, fitted_lag=phase_lag(fitted), tolerance=tol,
        success=bool(sol.success), message=str(sol.message), at_bound=at_bound)


def _default_lag_std(ratio_std, ratio):
    """Phase std in degrees of a phasor with std ``ratio_std`` on each quadrature part."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.degrees(np.asarray(ratio_std, dtype=float) / np.abs(np.asarray(ratio, dtype=float)))


def _central_jacobian(fun, x, lower, upper):
    cols = []
    for i in range(x.size):
        h = 1e-4 * max(abs(x[i]), 1e-2 * (upper[i] - lower[i]) if np.isfinite(upper[i]) else 1.0, 1e-3)
        xp, xm = x.copy(), x.copy()
        xp[i] = min(x[i] + h, upper[i])
        xm[i] = max(x[i] - h, lower[i])
        cols.append((fun(xp) - fun(xm)) / (xp[i] - xm[i]))
    return np.stack(cols, axis=1)


def _nearest(value, sources: dict) -> str:
    return min(sources, key=lambda k: abs(value - sources[k]) / max(abs(sources[k]), 1e-300))


def sweep_dataset(fit: SweepFit):
    """The content of ``frequency.nc`` for one specimen's sweep.

    Parameters
    ----------
    fit : SweepFit

    Returns
    -------
    xarray.Dataset
        dims ``run`` (the measured points), ``frequency`` (model curve), ``source`` and
        ``parameter``; every variable has ``units`` and ``long_name``; the fit summary
        (chi2, dof, sources at the ends of the range, recommended band) is in the attributes.
    """
    import xarray as xr

    def var(dims, data, units, long_name):
        attrs = {"long_name": long_name}
        if units is not None:
            attrs["units"] = units
        return xr.Variable(dims, np.asarray(data), attrs)

    names = list(fit.parameters)
    src = list(fit.source_ratios)
    std = np.sqrt(np.diag(fit.covariance))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = fit.covariance / np.outer(std, std)
    dv = {
        "measured_ratio": var("run", fit.measured_ratio, "1", "measured in-phase dT/T0 of the region"),
        "measured_ratio_std": var("run", fit.measured_std, "1", "standard deviation of measured_ratio"),
        "fitted_ratio": var("run", fit.fitted_ratio, "1", "fitted heat model, in-phase dT/T0"),
        "fitted_phase_lag": var("run", fit.fitted_lag, "degree", "fitted heat model, phase lag"),
        "model_ratio_in_phase": var("frequency", fit.model_response.real, "1",
                                    "fitted heat model, in-phase surface dT/T0"),
        "model_ratio_magnitude": var("frequency", np.abs(fit.model_response), "1",
                                     "fitted heat model, modulus of the surface dT/T0"),
        "model_phase_lag": var("frequency", phase_lag(fit.model_response), "degree",
                               "fitted heat model, phase lag behind the signed in-phase axis"),
        "adiabatic_ratio": var("source", [fit.source_ratios[s] for s in src], "1",
                               "adiabatic dT/T0 of each source at the mean strain range"),
        "band_low": var("source", [fit.bands[s][0] for s in src], "Hz",
                        "lowest frequency of the band within tolerance of the source"),
        "band_high": var("source", [fit.bands[s][1] for s in src], "Hz",
                         "highest frequency of the band within tolerance of the source"),
        "strict_band_low": var("source", [fit.strict_bands[s][0] for s in src], "Hz",
                               "lowest frequency where in-phase and quadrature parts are within tolerance"),
        "strict_band_high": var("source", [fit.strict_bands[s][1] for s in src], "Hz",
                                "highest frequency where in-phase and quadrature parts are within tolerance"),
        "parameter_correlation": var(("parameter", "parameter_b"), corr, "1",
                                     "correlation of the fitted parameters"),
    }
    if fit.measured_lag is not None:
        dv["measured_phase_lag"] = var("run", fit.measured_lag, "degree", "measured phase lag of the region")
        dv["measured_phase_lag_std"] = var("run", fit.lag_std, "degree", "standard deviation of measured_phase_lag")
    for n in names:
        unit, meaning = FIT_PARAMETERS[n][:2]
        dv[f"fit_{n}"] = var((), fit.params[n], unit, f"fitted {meaning}")
        dv[f"fit_{n}_std"] = var((), fit.std_errors[n], unit, f"standard error of the fitted {meaning}")
    coords = {
        "measured_frequency": var("run", fit.frequencies, "Hz", "loading frequency of each run"),
        "frequency": var("frequency", fit.model_frequencies, "Hz", "loading frequency"),
        "source": xr.Variable("source", np.array(src, dtype=object), {"long_name": "candidate source"}),
        "parameter": xr.Variable("parameter", np.array(names, dtype=object), {"long_name": "fitted parameter"}),
        "parameter_b": xr.Variable("parameter_b", np.array(names, dtype=object), {"long_name": "fitted parameter"}),
    }
    attrs = {
        "title": "frequency sweep: heat-model fit of one region",
        "chi2": fit.chi2, "dof": fit.dof, "reduced_chi2": fit.reduced_chi2,
        "low_frequency_source": fit.low_frequency_source,
        "high_frequency_source": fit.high_frequency_source,
        "band_source": fit.band_source or "", "band_low": fit.band[0], "band_high": fit.band[1],
        "band_tolerance": fit.tolerance, "fit_success": int(fit.success), "fit_message": fit.message,
        "parameters_at_bound": " ".join(fit.at_bound),
    }
    return xr.Dataset(dv, coords=coords, attrs=attrs)


# ---------------------------------------------------------------- per-pixel fit
def _maps_array(value, shape, name, ndim):
    a = np.asarray(value, dtype=float)
    if a.ndim != ndim or a.shape[: len(shape)] != shape:
        raise ValueError(f"{name} must have shape {shape + ('Y', 'X')[: ndim - len(shape)]}, got {a.shape}")
    return a


def _pixel_residuals(spline, t, e, y, w, lag=None, wl=None):
    """Weighted residuals and their derivative in t, (M, P), for thicknesses t (P,)."""
    R = y.shape[0]
    k = spline(t).reshape(t.size, 2, R, 3)
    dk = spline(t, 1).reshape(t.size, 2, R, 3)
    re = np.einsum("prc,rcp->rp", k[:, 0], e)
    im = np.einsum("prc,rcp->rp", k[:, 1], e)
    dre = np.einsum("prc,rcp->rp", dk[:, 0], e)
    res, jac = (re - y) * w, dre * w
    if lag is not None:
        dim = np.einsum("prc,rcp->rp", dk[:, 1], e)
        with np.errstate(invalid="ignore", divide="ignore"):
            # d/dt of -degrees(arctan(im / re))
            dlag = np.where(wl > 0, -np.degrees((dim * re - im * dre) / (re * re + im * im)), 0.0)
        res = np.concatenate([res, (_lag(re, im) - lag) * wl])
        jac = np.concatenate([jac, dlag * wl])
    return res, jac


def fit_sweep_maps(laminate, frequencies, ratio_maps, std_maps, strain_maps, *, lag_maps=None,
                   lag_std_maps=None, thickness_grid=None, conductivity_scale=1.0, tolerance=0.02,
                   frequency_range=(0.1, 200.0), frequency_points=121, chunk=32768):
    """Per-pixel fit of the resin-layer thickness from runs on a shared infrared grid.

    Parameters
    ----------
    laminate : Laminate
        Must have a ``resin_layer`` (its thickness sets the default grid).
    frequencies : (R,) array_like
        Hz.
    ratio_maps, std_maps : (R, Y, X) array_like
        Measured in-phase dT/T0 and its standard deviation per run and pixel.
    strain_maps : (R, 3, Y, X) or (3, Y, X) array_like
        Strain ranges (d eps_xx, d eps_yy, d gamma_xy), specimen frame.
    lag_maps, lag_std_maps : (R, Y, X) array_like, optional
        Measured phase lag and its standard deviation, degrees; the std defaults to
        ``degrees(std_maps / |ratio_maps|)`` as in :func:`fit_sweep`.
    thickness_grid : (G,) array_like, optional
        Increasing resin thicknesses in m (default 81 values from 0 to 4x the nominal,
        at least 20 um).
    conductivity_scale : float
        Fixed factor on every layer's through-thickness conductivity (e.g. from
        :func:`fit_sweep` on a region).
    tolerance, frequency_range, frequency_points
        Band tolerance and the log-spaced frequency grid of the adiabatic onset.
    chunk : int
        Pixels per block (bounds the memory).

    Returns
    -------
    dict of str to (Y, X) ndarray
        float32: ``resin_thickness`` (m), ``resin_thickness_std`` (m),
        ``adiabatic_onset_frequency`` (Hz: lower edge of the band in which the in-phase
        model response at the fitted thickness stays within ``tolerance`` of the surface
        ply's adiabatic value; NaN where there is none) and ``chi2``; int16 ``runs``
        (runs used) and int8 ``at_bound`` (1 where the best thickness is an end of the
        grid; its std is then NaN). NaN where fewer than two runs are valid.

    Notes
    -----
    The transfer coefficients are computed once per grid thickness and frequency; chi2 of
    every pixel is then evaluated on the whole grid in vectorised passes and its minimum
    refined by the parabola through the three grid points around it. A few Gauss-Newton
    steps on a cubic spline of the coefficients through the grid (vectorised over pixels)
    then polish the optimum; the standard error is ``1 / sqrt(J^T J)`` of the weighted
    residuals there (chi2 rises by 1 at one standard error), as :func:`fit_sweep` gives
    for one parameter. No heat solve runs per pixel. The onset uses the mean strain range
    of the runs at each pixel and the spline of the coefficients at the fitted thickness.

    References
    ----------
    Press et al., *Numerical Recipes*, 3rd ed., 2007, sec. 15.6 (confidence limits from
    delta chi2 = 1); Carslaw & Jaeger, *Conduction of Heat in Solids*, 1959.
    """
    layers = thermal_layers(laminate)
    _check_parameters(("resin_thickness",), layers)
    f = _check_frequencies(frequencies)
    R = f.size
    y = _maps_array(ratio_maps, (R,), "ratio_maps", 3)
    shape = y.shape[1:]
    sy = _maps_array(std_maps, (R,) + shape, "std_maps", 3)
    e = np.asarray(strain_maps, dtype=float)
    if e.shape == (3,) + shape:
        e = np.broadcast_to(e, (R, 3) + shape)
    if e.shape != (R, 3) + shape:
        raise ValueError(f"strain_maps must have shape ({R}, 3, Y, X) or (3, Y, X) with (Y, X) = {shape}, "
                         f"got {e.shape}")
    if lag_maps is None and lag_std_maps is not None:
        raise ValueError("lag_std_maps was given without lag_maps")
    use_lag = lag_maps is not None
    if use_lag:
        lag = _maps_array(lag_maps, (R,) + shape, "lag_maps", 3).reshape(R, -1)
        slag = (_default_lag_std(sy, y) if lag_std_maps is None else
                _maps_array(lag_std_maps, (R,) + shape, "lag_std_maps", 3)).reshape(R, -1)
    if isinstance(conductivity_scale, bool) or not (isinstance(conductivity_scale, Real) and conductivity_scale > 0):
        raise ValueError(f"conductivity_scale must be a positive number, got {conductivity_scale!r}")
    tol = _check_tolerance(tolerance)
    nominal = _nominal("resin_thickness", layers)
    grid = (np.linspace(0.0, max(4 * nominal, 20e-6), 81) if thickness_grid is None
            else np.asarray(thickness_grid, dtype=float))
    if grid.ndim != 1 or grid.size < 3 or not np.all(np.isfinite(grid)) or grid[0] < 0 \
            or not np.all(np.diff(grid) > 0):
        raise ValueError(f"thickness_grid must be >= 3 increasing thicknesses >= 0 m, got {thickness_grid!r}")
    hf, hb = laminate.convection_front, laminate.convection_back
    stacks = [_with_values(layers, {"resin_thickness": t, "conductivity_scale": float(conductivity_scale)})
              for t in grid]
    K = np.stack([transfer_coefficients(s, f, convection_front=hf, convection_back=hb) for s in stacks])

    P = int(np.prod(shape))
    y = y.reshape(R, P)
    sy = sy.reshape(R, P)
    e = e.reshape(R, 3, P)
    valid = np.isfinite(y) & np.isfinite(sy) & (sy > 0) & np.all(np.isfinite(e), axis=1)
    # a run's lag counts where it is usable; its ratio counts regardless
    vlag = valid & np.isfinite(lag) & np.isfinite(slag) & (slag > 0) if use_lag else None

    def block(sl):
        """Strains, measurements and weights of pixels ``sl``; zero weight where unusable."""
        v = valid[:, sl]
        out = [np.where(v[:, None, :], e[:, :, sl], 0.0), np.where(v, y[:, sl], 0.0),
               np.where(v, 1.0 / np.where(v, sy[:, sl], 1.0), 0.0)]
        if use_lag:
            vl = vlag[:, sl]
            out += [np.where(vl, lag[:, sl], 0.0), np.where(vl, 1.0 / np.where(vl, slag[:, sl], 1.0), 0.0)]
        return out

    G = grid.size
    chi2 = np.empty((G, P))
    for start in range(0, P, chunk):
        sl = slice(start, min(start + chunk, P))
        ec, yc, wc, *lagw = block(sl)
        for g in range(G):
            re = np.einsum("rc,rcp->rp", K[g].real, ec)
            total = np.sum(((re - yc) * wc) ** 2, axis=0)
            if use_lag:
                im = np.einsum("rc,rcp->rp", K[g].imag, ec)
                total += np.sum(((_lag(re, im) - lagw[0]) * lagw[1]) ** 2, axis=0)
            chi2[g, sl] = total

    runs = valid.sum(axis=0)
    ok = runs >= 2
    best = np.argmin(chi2, axis=0)
    inner = np.clip(best, 1, G - 2)
    cols = np.arange(P)
    x0, x1, x2 = grid[inner - 1], grid[inner], grid[inner + 1]
    c0, c1, c2 = chi2[inner - 1, cols], chi2[inner, cols], chi2[inner + 1, cols]
    h0, h2 = x0 - x1, x2 - x1
    with np.errstate(invalid="ignore", divide="ignore"):
        a = ((c2 - c1) / h2 - (c0 - c1) / h0) / (h2 - h0)
        b = (c2 - c1) / h2 - a * h2
        t_fit = np.where(a > 0, np.clip(x1 - b / (2 * a), x0, x2), x1)
    t_fit = np.where((best == 0) | (best == G - 1), grid[best], t_fit)

    # Gauss-Newton polish on the cubic spline of the coefficients through the grid: the
    # grid search finds the basin, the spline makes the optimum and its curvature exact
    # to interpolation accuracy (the coefficients vary on the scale of the diffusion length).
    from scipy.interpolate import CubicSpline

    spline = CubicSpline(grid, np.stack([K.real, K.imag], axis=1).reshape(G, -1), axis=0)
    t_std = np.full(P, np.nan)
    chi2_min = np.full(P, np.nan)
    for start in range(0, P, chunk):
        sl = slice(start, min(start + chunk, P))
        ec, *args = block(sl)
        t = t_fit[sl].copy()
        for _ in range(6):
            res, jac = _pixel_residuals(spline, t, ec, *args)
            jj = np.sum(jac * jac, axis=0)
            with np.errstate(invalid="ignore", divide="ignore"):
                step = np.where(jj > 0, -np.sum(jac * res, axis=0) / jj, 0.0)
            step = np.clip(np.where(np.isfinite(step), step, 0.0), -(grid[1] - grid[0]), grid[1] - grid[0])
            t = np.clip(t + step, grid[0], grid[-1])
        res, jac = _pixel_residuals(spline, t, ec, *args)
        jj = np.sum(jac * jac, axis=0)
        t_fit[sl] = t
        chi2_min[sl] = np.sum(res * res, axis=0)
        with np.errstate(divide="ignore"):
            t_std[sl] = np.where(jj > 0, 1.0 / np.sqrt(jj), np.nan)
    span = grid[-1] - grid[0]
    edge = (t_fit - grid[0] <= 1e-9 * span) | (grid[-1] - t_fit <= 1e-9 * span)
    t_std = np.where(edge, np.nan, t_std)

    # adiabatic onset at the fitted thickness, from the spline of the coefficients on the
    # frequency grid of the band
    fp = np.geomspace(float(frequency_range[0]), float(frequency_range[1]), int(frequency_points))
    Kp = np.stack([transfer_coefficients(s, fp, convection_front=hf, convection_back=hb).real for s in stacks])
    spline_p = CubicSpline(grid, Kp.reshape(G, -1), axis=0)
    c_surface = source_coefficients(laminate)["surface_ply"]
    count = np.maximum(valid.sum(axis=0), 1)
    e_mean = np.where(valid[:, None, :], e, 0.0).sum(axis=0) / count  # (3, P), mean of the valid runs
    onset = np.full(P, np.nan)
    todo = np.nonzero(ok)[0]
    block = max(1, chunk // 8)
    for start in range(0, todo.size, block):
        sub = todo[start:start + block]
        es = e_mean[:, sub]
        kp = spline_p(t_fit[sub]).reshape(sub.size, fp.size, 3)
        onset[sub], _ = _bands(fp, np.einsum("pfc,cp->fp", kp, es), c_surface @ es, tol)

    def out(a):
        return np.where(ok, a, np.nan).astype(np.float32).reshape(shape)

    return {
        "resin_thickness": out(t_fit),
        "resin_thickness_std": out(t_std),
        "adiabatic_onset_frequency": out(onset),
        "chi2": out(chi2_min),
        "runs": runs.astype(np.int16).reshape(shape),
        "at_bound": (edge & ok).astype(np.int8).reshape(shape),
    }
