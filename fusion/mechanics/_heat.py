"""Through-thickness harmonic heat conduction in a layered plate at the loading frequency.

Each layer k (viewed face first) has its own adiabatic, load-synchronous source
``theta_ad,k`` (the dT/T0 the thermoelastic law gives that layer) and obeys, with the
time factor ``exp(+i omega t)``::

    rho_k c_k i omega theta = k3_k theta'' + rho_k c_k i omega theta_ad,k

so ``theta = theta_ad,k + A e^{-lambda (z - z_top)} + B e^{-lambda (z_bot - z)}`` with
``lambda = (1 + i) / mu`` and the thermal diffusion length ``mu = sqrt(2 k3 / (rho c omega))``.
Temperature and heat flux are continuous at the interfaces; each face is adiabatic or
loses heat by convection ``h theta``. The camera sees ``theta(0)``.

Two solvers share this model:

* an impedance (admittance) recursion from the back face to the viewed face, which is
  block elimination of the block-tridiagonal interface system written with bounded
  quantities only (``tanh``, ``sech`` from ``exp(-lambda d)``); it is vectorised over
  frequencies and gives the surface response as a complex weight per layer, so the
  transfer coefficients of the three strain ranges cost one pass;
* the banded interface system itself (unknowns A, B of every layer, scaled exponentials,
  :func:`scipy.linalg.solve_banded`), used for through-thickness profiles.

:func:`frequency_band` finds where a response stays within a tolerance of a source's
adiabatic value (the plan and the sweep fits use it).

Complex values follow the project's convention: peak-to-peak amplitudes relative to the
load fundamental, a delayed response has a negative angle, and the reported phase lag is
``-degrees(arctan(Im / Re))``.
"""

from __future__ import annotations

import math
from numbers import Real

import numpy as np

from ._laminate import Laminate
from ._layers import ThermalLayer
from ._predict import thermal_layers

__all__ = [
    "diffusion_length", "surface_weights", "surface_response", "transfer_coefficients",
    "model_response", "phase_lag", "frequency_band",
]


def diffusion_length(conductivity, volumetric_heat_capacity, frequency):
    """Thermal diffusion length ``mu = sqrt(2 k / (rho c omega))`` of a harmonic wave.

    Parameters
    ----------
    conductivity : float or ndarray
        Thermal conductivity k in W/(m K) (through the thickness for a ply).
    volumetric_heat_capacity : float or ndarray
        rho c in J/(m3 K).
    frequency : float or ndarray
        Loading frequency f in Hz (omega = 2 pi f); arrays broadcast.

    Returns
    -------
    float or ndarray
        mu in m: a surface thermal wave decays by 1/e and lags by one radian over one mu.

    Notes
    -----
    Equal to ``sqrt(2 kappa / omega)`` with the diffusivity ``kappa = k / (rho c)``.

    References
    ----------
    Carslaw, H. S. & Jaeger, J. C., *Conduction of Heat in Solids*, 2nd ed., Oxford, 1959,
    sec. 2.6 (periodic surface temperature of a semi-infinite solid).

    Examples
    --------
    >>> round(diffusion_length(0.6, 1.44e6, 10.0) * 1e6, 1)  # carbon/epoxy across plies, um
    115.2
    """
    k = np.asarray(conductivity, dtype=float)
    rc = np.asarray(volumetric_heat_capacity, dtype=float)
    f = np.asarray(frequency, dtype=float)
    if np.any(~(k > 0)) or np.any(~(rc > 0)) or np.any(~(f > 0)):
        raise ValueError(f"diffusion_length needs positive conductivity, heat capacity and "
                         f"frequency, got {conductivity!r}, {volumetric_heat_capacity!r}, {frequency!r}")
    mu = np.sqrt(2.0 * k / (rc * 2.0 * np.pi * f))
    return float(mu) if mu.ndim == 0 else mu


def _check_frequencies(frequencies) -> np.ndarray:
    f = np.atleast_1d(np.asarray(frequencies, dtype=float))
    if f.ndim != 1 or f.size == 0:
        raise ValueError(f"frequencies must be a 1-D sequence of Hz values, got shape {f.shape}")
    if not np.all(np.isfinite(f) & (f > 0)):
        raise ValueError(f"frequencies must be finite and positive (Hz), got {frequencies!r}")
    return f


def _check_h(value, key) -> float:
    if isinstance(value, bool) or not (isinstance(value, Real) and math.isfinite(value) and value >= 0):
        raise ValueError(f"{key} must be a heat-transfer coefficient >= 0 W/(m2 K), got {value!r}")
    return float(value)


def _stack(layers, convection_front, convection_back):
    """Thermal layers and face heat-transfer coefficients of a laminate or of a layer list.

    A laminate brings its own ``convection_front`` and ``convection_back``; an explicit value
    replaces the laminate's. A list of layers has adiabatic faces unless told otherwise.
    """
    if isinstance(layers, Laminate):
        hf = layers.convection_front if convection_front is None else convection_front
        hb = layers.convection_back if convection_back is None else convection_back
        layers = thermal_layers(layers)
    else:
        hf = 0.0 if convection_front is None else convection_front
        hb = 0.0 if convection_back is None else convection_back
    return layers, _check_h(hf, "convection_front"), _check_h(hb, "convection_back")


def _layer_arrays(layers):
    """Validated (thickness, rho c, k, coefficients) arrays of a viewed-face-first stack."""
    layers = list(layers)
    if not layers:
        raise ValueError("the heat model needs at least one layer")
    for i, layer in enumerate(layers):
        if not isinstance(layer, ThermalLayer):
            raise TypeError(f"layer {i} is {type(layer).__name__}, expected a ThermalLayer")
        # zero thickness is allowed (a layer switched off, e.g. on a thickness grid)
        if not (math.isfinite(layer.thickness) and layer.thickness >= 0):
            raise ValueError(f"layer {layer.name!r}: thickness must be >= 0 m, got {layer.thickness!r}")
        for attr in ("density", "specific_heat", "conductivity"):
            v = getattr(layer, attr)
            if not (math.isfinite(v) and v > 0):
                raise ValueError(f"layer {layer.name!r}: {attr} must be positive, got {v!r}")
    d = np.array([la.thickness for la in layers], dtype=float)
    rc = np.array([la.volumetric_heat_capacity for la in layers], dtype=float)
    k = np.array([la.conductivity for la in layers], dtype=float)
    coef = np.stack([la.coefficients for la in layers])
    if not np.all(np.isfinite(coef)):
        raise ValueError("layer coefficients must be finite")
    return d, rc, k, coef


def _layer_terms(d, rc, k, f):
    """Per frequency and layer: Z = k lambda, e = exp(-lambda d), tanh, sech (all bounded)."""
    omega = 2.0 * np.pi * f[:, None]
    lam = (1.0 + 1.0j) * np.sqrt(rc[None, :] * omega / (2.0 * k[None, :]))  # (F, N)
    x = lam * d[None, :]
    e = np.exp(-x)
    e2 = e * e
    # expm1 keeps tanh accurate for layers much thinner than their diffusion length
    tanh = -np.expm1(-2.0 * x) / (1.0 + e2)
    sech = 2.0 * e / (1.0 + e2)
    return lam, k[None, :] * lam, e, tanh, sech


def _weights(d, rc, k, f, h_front, h_back):
    """Complex weights w (F, N) with theta(0) = w @ theta_ad (see module docstring)."""
    _, Z, _, T, sech = _layer_terms(d, rc, k, f)
    F, N = Z.shape
    # Admittance recursion from the back face: the heat flux q (along +z, away from the
    # viewed face)
    # obeys q = Y theta + c at every interface, with c linear in the sources.
    Y_b = np.full(F, h_back, dtype=complex)
    D = np.empty((F, N), dtype=complex)
    own = np.empty((F, N), dtype=complex)
    for j in range(N - 1, -1, -1):
        Zj, Tj = Z[:, j], T[:, j]
        denom = Zj + Y_b * Tj
        Y_t = Zj * (Zj * Tj + Y_b) / denom
        D[:, j] = Zj * sech[:, j] / denom
        own[:, j] = D[:, j] * Y_b - Y_t
        Y_b = Y_t
    # c(0) = sum_j (prod_{i<j} D_i) own_j s_j; theta(0) = -c(0) / (Y(0) + h_front).
    prefix = np.ones((F, N), dtype=complex)
    if N > 1:
        prefix[:, 1:] = np.cumprod(D[:, :-1], axis=1)
    return -(prefix * own) / (Y_b + h_front)[:, None]


def surface_weights(layers, frequencies, *, convection_front=None, convection_back=None):
    """Complex weight of each layer's adiabatic source in the surface response.

    Parameters
    ----------
    layers : Laminate or sequence of ThermalLayer
        The laminate (its :func:`thermal_layers` and its faces' heat-transfer
        coefficients), or the layers themselves, viewed face first.
    frequencies : (F,) array_like
        Hz, positive.
    convection_front, convection_back : float, optional
        Heat-transfer coefficients of the viewed and back faces in W/(m2 K); 0 is adiabatic.
        Default: the laminate's own, or 0 for a list of layers.

    Returns
    -------
    (F, N) complex ndarray
        ``w`` with surface ``dT/T0 = w @ theta_ad`` for per-layer adiabatic values
        ``theta_ad`` (N,). With adiabatic faces each row sums to 1; ``Re(w_j theta_ad,j)``
        is layer j's contribution to the in-phase surface ratio.

    Notes
    -----
    Computed by an admittance recursion from the back face (bounded ``tanh`` and ``sech``
    only), so layers hundreds of diffusion lengths thick neither overflow nor lose the
    surface value; weights of deeply buried layers underflow to zero, as they should.

    References
    ----------
    Carslaw & Jaeger, *Conduction of Heat in Solids*, 1959, ch. 2-3 (harmonic solutions,
    composite slabs); Almond & Patel, *Photothermal Science and Techniques*, 1996
    (thermal-wave impedance of layered media).
    """
    layers, hf, hb = _stack(layers, convection_front, convection_back)
    d, rc, k, _ = _layer_arrays(layers)
    f = _check_frequencies(frequencies)
    return _weights(d, rc, k, f, hf, hb)


def transfer_coefficients(layers, frequencies, *, convection_front=None, convection_back=None):
    """Complex coefficients mapping strain ranges to the surface response, per frequency.

    Parameters
    ----------
    layers : Laminate or sequence of ThermalLayer
        The laminate, or its layers viewed face first (:func:`thermal_layers`); each
        layer's ``coefficients`` (3,) give its adiabatic dT/T0 per unit
        (d eps_xx, d eps_yy, d gamma_xy).
    frequencies : (F,) array_like
        Hz.
    convection_front, convection_back : float, optional
        W/(m2 K); 0 is an adiabatic face. Default: the laminate's ``convection_front``
        and ``convection_back``, or 0 for a list of layers (a list carries no faces).

    Returns
    -------
    (F, 3) complex ndarray
        ``coefficients[f]`` such that the complex surface dT/T0 is
        ``strain_ranges @ coefficients[f]`` for strain ranges ``(..., 3)``
        (dimensionless; peak-to-peak, relative to the load fundamental).

    Notes
    -----
    The response is linear in the layer sources and these are linear in the strain
    ranges (in-plane loading, every ply sees the surface strain), so three complex numbers
    per frequency serve a map of any size; see :func:`model_response`.

    References
    ----------
    Carslaw & Jaeger, *Conduction of Heat in Solids*, 1959, sec. 2.6 and ch. 3.

    Examples
    --------
    Uniform sources give the adiabatic value at every frequency:

    >>> import numpy as np
    >>> from fusion.mechanics import ThermalLayer
    >>> c = np.array([-1e-3, -2e-3, 0.0])
    >>> stack = [ThermalLayer("a", 50e-6, 1200, 1100, 0.2, c),
    ...          ThermalLayer("b", 2e-3, 1600, 900, 0.6, c)]
    >>> np.allclose(transfer_coefficients(stack, [1.0, 100.0]), c)
    True
    """
    layers, hf, hb = _stack(layers, convection_front, convection_back)
    d, rc, k, coef = _layer_arrays(layers)
    f = _check_frequencies(frequencies)
    return _weights(d, rc, k, f, hf, hb) @ coef


def _banded_solution(d, rc, k, s, f, hf, hb):
    """A, B (F, N) of the scaled-exponential form from the banded interface system."""
    from scipy.linalg import solve_banded

    _, Z, e, _, _ = _layer_terms(d, rc, k, f)
    F, N = Z.shape
    n = 2 * N
    A = np.empty((F, N), dtype=complex)
    B = np.empty((F, N), dtype=complex)
    for i in range(F):
        Zi, Ei = Z[i], e[i]
        ab = np.zeros((5, n), dtype=complex)  # ab[2 + r - c, c] = M[r, c]
        rhs = np.zeros(n, dtype=complex)

        def put(r, c, v):
            ab[2 + r - c, c] = v

        # viewed face: k theta' = h theta at z = 0
        put(0, 0, -Zi[0] - hf)
        put(0, 1, Ei[0] * (Zi[0] - hf))
        rhs[0] = hf * s[0]
        for j in range(N - 1):
            r = 2 * j + 1  # temperature continuity, then flux continuity
            put(r, 2 * j, Ei[j])
            put(r, 2 * j + 1, 1.0)
            put(r, 2 * j + 2, -1.0)
            put(r, 2 * j + 3, -Ei[j + 1])
            rhs[r] = s[j + 1] - s[j]
            put(r + 1, 2 * j, -Zi[j] * Ei[j])
            put(r + 1, 2 * j + 1, Zi[j])
            put(r + 1, 2 * j + 2, Zi[j + 1])
            put(r + 1, 2 * j + 3, -Zi[j + 1] * Ei[j + 1])
        # back face: -k theta' = h theta at z = H
        put(n - 1, n - 2, Ei[-1] * (Zi[-1] - hb))
        put(n - 1, n - 1, -Zi[-1] - hb)
        rhs[n - 1] = hb * s[-1]
        x = solve_banded((2, 2), ab, rhs)
        A[i], B[i] = x[0::2], x[1::2]
    return A, B


def _default_depths(d, points_per_layer):
    z_top = np.concatenate([[0.0], np.cumsum(d)[:-1]])
    parts = []
    for j, (zt, dj) in enumerate(zip(z_top, d)):
        if dj == 0:
            continue
        last = j == len(d) - 1
        parts.append(np.linspace(zt, zt + dj, points_per_layer + int(last), endpoint=last))
    return np.concatenate(parts)


def surface_response(layers, frequencies, *, sources=None, convection_front=None,
                     convection_back=None, profile=False, depths=None, points_per_layer=16):
    """Complex surface dT/T0 of a layered plate with given per-layer adiabatic values.

    Parameters
    ----------
    layers : Laminate or sequence of ThermalLayer
        The laminate (its :func:`thermal_layers`), or the layers, viewed face first.
    frequencies : (F,) array_like
        Hz.
    sources : (N,) array_like
        Adiabatic dT/T0 of each layer (dimensionless). Required: for strain ranges use
        :func:`transfer_coefficients` (or pass ``[la.adiabatic_ratio(strain) for la in layers]``).
    convection_front, convection_back : float, optional
        W/(m2 K); 0 is adiabatic. Default: the laminate's own, or 0 for a list of layers.
    profile : bool
        Also return the through-thickness profile.
    depths : (Z,) array_like, optional
        Depths in m from the viewed face for the profile (within the plate); default
        ``points_per_layer`` evenly spaced points per layer, interfaces included.

    Returns
    -------
    response : (F,) complex ndarray
        Surface dT/T0 (peak-to-peak, relative to the load fundamental); its phase lag is
        :func:`phase_lag`.
    z : (Z,) ndarray
        Depths in m (only with ``profile=True``).
    theta : (F, Z) complex ndarray
        dT/T0 through the thickness (only with ``profile=True``).

    Notes
    -----
    The surface value comes from the recursion of :func:`surface_weights`; the profile
    from the banded interface system with each layer written as
    ``A e^{-lambda (z - z_top)} + B e^{-lambda (z_bot - z)}`` so every term stays bounded,
    solved per frequency with :func:`scipy.linalg.solve_banded` (partial pivoting).

    References
    ----------
    Carslaw & Jaeger, *Conduction of Heat in Solids*, 1959, sec. 2.6 and ch. 3.
    """
    if sources is None:
        raise TypeError("surface_response needs the per-layer adiabatic values `sources`; for "
                        "strain ranges use transfer_coefficients(layers, frequencies)")
    layers, hf, hb = _stack(layers, convection_front, convection_back)
    d, rc, k, _ = _layer_arrays(layers)
    f = _check_frequencies(frequencies)
    s = np.asarray(sources, dtype=float)
    if s.shape != d.shape or not np.all(np.isfinite(s)):
        raise ValueError(f"sources must be {d.size} finite values (one per layer), got {sources!r}")
    response = _weights(d, rc, k, f, hf, hb) @ s
    if not profile:
        return response
    if isinstance(points_per_layer, bool) or not isinstance(points_per_layer, int) or points_per_layer < 1:
        raise ValueError(f"points_per_layer must be a positive integer, got {points_per_layer!r}")
    total = float(d.sum())
    z = _default_depths(d, points_per_layer) if depths is None else np.asarray(depths, dtype=float).ravel()
    if z.size == 0 or not np.all(np.isfinite(z)) or z.min() < 0 or z.max() > total * (1 + 1e-12):
        raise ValueError(f"depths must lie within the plate, 0..{total!r} m, got {depths!r}")
    A, B = _banded_solution(d, rc, k, s, f, hf, hb)
    lam, _, _, _, _ = _layer_terms(d, rc, k, f)
    z_edges = np.concatenate([[0.0], np.cumsum(d)])
    # layer of each depth: the first layer whose bottom is at or below z (non-empty layers)
    j = np.searchsorted(z_edges[1:], z, side="left")
    j = np.minimum(j, d.size - 1)
    while np.any((d[j] == 0) & (j < d.size - 1)):
        j = np.where((d[j] == 0) & (j < d.size - 1), j + 1, j)
    zt, zb = z_edges[j], z_edges[j + 1]
    lz = lam[:, j]
    theta = (s[j][None, :] + A[:, j] * np.exp(-lz * (z - zt)[None, :])
             + B[:, j] * np.exp(-lz * (zb - z)[None, :]))
    return response, z, theta


def phase_lag(response):
    """Phase lag in degrees of a signed complex response, in [-90, 90].

    ``lag = -degrees(arctan(Im / Re))``: the delay behind the signed in-phase axis,
    positive when the response is delayed, 0 for an adiabatic response (project
    convention). ``Re = 0`` gives +-90 (0 when the response is 0); NaN stays NaN.
    """
    r = np.asarray(response)
    return _lag(np.real(r), np.imag(r))


def _lag(re, im):
    # arctan2 with a non-negative second argument is arctan(Im/Re) without dividing by 0
    return -np.degrees(np.arctan2(im * np.sign(re) + (re == 0) * im, np.abs(re)))


def model_response(coefficients, strain_ranges):
    """In-phase ratio and phase lag of the heat model for strain-range maps.

    Parameters
    ----------
    coefficients : (3,) complex array_like
        One row of :func:`transfer_coefficients` (the run's frequency).
    strain_ranges : (..., 3) ndarray
        (d eps_xx, d eps_yy, d gamma_xy), specimen frame, peak-to-peak.

    Returns
    -------
    ratio_in_phase : (...) ndarray
        ``Re`` of the complex surface dT/T0: what the lock-in's signed dT/T0 measures.
    lag_deg : (...) ndarray
        Phase lag in degrees (see :func:`phase_lag`).
        Both float32 for float32 strains (accumulated in float64), else float64.

    Examples
    --------
    >>> import numpy as np
    >>> r, lag = model_response([1 - 1j, 0, 0], np.array([[2.0, 0, 0]]))
    >>> float(r[0]), float(lag[0])
    (2.0, 45.0)
    """
    c = np.asarray(coefficients, dtype=complex).reshape(-1)
    if c.shape != (3,) or not np.all(np.isfinite(c)):
        raise ValueError(f"coefficients must be 3 finite complex values, got {coefficients!r}")
    e = np.asarray(strain_ranges)
    if e.ndim < 1 or e.shape[-1] != 3:
        raise ValueError(f"strain_ranges must have shape (..., 3), got {e.shape}")
    out = np.float32 if e.dtype == np.float32 else np.float64
    # component by component: never a complex (..., 3) copy of a large map
    re = np.zeros(e.shape[:-1], dtype=np.float64)
    im = np.zeros(e.shape[:-1], dtype=np.float64)
    for i in range(3):
        ei = e[..., i].astype(np.float64, copy=False)
        re += ei * c[i].real
        im += ei * c[i].imag
    return re.astype(out, copy=False), _lag(re, im).astype(out, copy=False)


# ---------------------------------------------------------------- bands
def _bands(f, values, target, tolerance):
    """Widest contiguous band per column: (lo, hi) in Hz, NaN where none.

    ``f`` (F,) increasing Hz; ``values`` (F, P) real (the in-phase part is compared) or
    complex (the complex distance is compared); ``target`` (P,). Band edges are
    interpolated linearly in log f where the deviation crosses the tolerance between two
    grid points; edges on the ends of the grid are the grid values themselves.
    """
    target = np.asarray(target, dtype=float)
    logf = np.log(f)
    # abs of a complex difference is the distance in the complex plane (both parts)
    dev = np.abs(values - target[None, :]) - tolerance * np.abs(target)[None, :]
    inside = dev <= 0  # NaN compares False: outside
    F, P = inside.shape
    pad = np.zeros((1, P), dtype=np.int8)
    step = np.diff(np.concatenate([pad, inside.astype(np.int8), pad]), axis=0).T  # (P, F+1)
    sp, si = np.nonzero(step == 1)    # run starts, sorted by pixel then frequency
    ep, ej = np.nonzero(step == -1)   # one past each run's end, same order
    ej = ej - 1
    lo, hi = f[si].astype(float), f[ej].astype(float)
    m = si > 0
    if np.any(m):
        a, b = dev[si[m] - 1, sp[m]], dev[si[m], sp[m]]
        t = a / (a - b)
        x0, x1 = logf[si[m] - 1], logf[si[m]]
        lo[m] = np.where(np.isfinite(t), np.exp(x0 + t * (x1 - x0)), f[si[m]])
    m = ej < F - 1
    if np.any(m):
        a, b = dev[ej[m], ep[m]], dev[ej[m] + 1, ep[m]]
        t = a / (a - b)
        x0, x1 = logf[ej[m]], logf[ej[m] + 1]
        hi[m] = np.where(np.isfinite(t), np.exp(x0 + t * (x1 - x0)), f[ej[m]])
    out_lo = np.full(P, np.nan)
    out_hi = np.full(P, np.nan)
    if sp.size:
        # widest run (in log f) per pixel; lexsort is stable, so ties keep the lowest band
        order = np.lexsort((-(np.log(hi) - np.log(lo)), sp))
        pix, first = np.unique(sp[order], return_index=True)
        out_lo[pix] = lo[order][first]
        out_hi[pix] = hi[order][first]
    return out_lo, out_hi


def _check_tolerance(tolerance) -> float:
    if isinstance(tolerance, bool) or not (isinstance(tolerance, Real) and 0 < tolerance < 1):
        raise ValueError(f"tolerance must be a fraction between 0 and 1 (e.g. 0.02), got {tolerance!r}")
    return float(tolerance)


def frequency_band(frequencies, response, target, *, tolerance=0.02, quadrature=False):
    """Contiguous frequency band in which a response stays within tolerance of a target.

    Parameters
    ----------
    frequencies : (F,) array_like
        Hz, strictly increasing.
    response : (F,) array_like
        Complex (or real) surface dT/T0; its real part (what the lock-in's signed dT/T0
        measures) is compared.
    target : float
        The adiabatic dT/T0 of one source.
    tolerance : float
        Relative tolerance: inside where ``|Re response - target| <= tolerance * |target|``.
    quadrature : bool
        Stricter test: inside where ``|response - target| <= tolerance * |target|`` for
        the complex response, so the quadrature part (a phase lag) must be small too. A
        response that only crosses a source's value on its way between two others passes
        the in-phase test over a narrow band but not this one.

    Returns
    -------
    (f_low, f_high) : tuple of float
        Hz; NaN, NaN where no frequency qualifies. Where several bands qualify the widest
        (in log frequency) is returned, the lowest of equal ones.

    Notes
    -----
    Edges are interpolated linearly in log frequency between the grid points on either
    side of the tolerance crossing; a band that reaches the end of the grid ends there
    (it may extend further). The grid must resolve the response: 20 points per decade
    resolve the transitions of layered laminates (one decade wide or more).

    Examples
    --------
    A response rising by 2 % per decade leaves a 3 % band at 10**1.5 Hz:

    >>> import numpy as np
    >>> f = np.geomspace(1, 100, 41)
    >>> lo, hi = frequency_band(f, 1 + 0.02 * np.log10(f), 1.0, tolerance=0.03)
    >>> round(lo, 6), round(hi, 4)
    (1.0, 31.6228)
    """
    f = _check_frequencies(frequencies)
    if f.size > 1 and not np.all(np.diff(f) > 0):
        raise ValueError("frequencies must be strictly increasing")
    r = np.asarray(response)
    if r.shape != f.shape:
        raise ValueError(f"response must have the shape of frequencies {f.shape}, got {r.shape}")
    if isinstance(target, bool) or not (isinstance(target, Real) and math.isfinite(target)):
        raise ValueError(f"target must be a finite dT/T0, got {target!r}")
    values = r.astype(complex) if quadrature else np.real(r)
    lo, hi = _bands(f, values[:, None], np.array([float(target)]), _check_tolerance(tolerance))
    return float(lo[0]), float(hi[0])
