"""Lateral heat model: a layered plate at the loading frequency, heat flowing along the surface too.

The through-thickness model of :mod:`fusion.mechanics._heat` treats every infrared pixel
as an infinite plate under uniform strain. Near holes, notches and edges the strain
changes over millimetres, and at low and intermediate frequencies heat also flows
sideways: the camera sees a blurred version of the adiabatic map. Here each layer k
(viewed face first) obeys, with the time factor ``exp(+i omega t)``::

    rho_k c_k i omega (theta - theta_ad,k) = k3_k d2theta/dz2 + div(K_k grad theta)

with ``K_k`` its in-plane conductivity tensor (k1 along the fibres, k2 across, rotated to
the ply's angle in the specimen frame; ``k`` for an isotropic layer), temperature and flux
continuous between layers and the faces adiabatic or convective as in the 1-D model.

Solution
--------
The source fields ``theta_ad,k(x, y)`` are linear in the three strain-range maps, so their
2-D Fourier transforms follow from three transforms whatever the number of layers. For a
wavevector ``q`` the equation of layer k is the 1-D one with
``lambda_k**2 = (i omega rho_k c_k + q.K_k q) / k3_k`` and with the particular solution
``g_k theta_ad,k``, ``g_k = i omega rho_k c_k / (i omega rho_k c_k + q.K_k q)``; the same
admittance recursion as the 1-D model then gives the surface value. At ``q = 0`` it *is*
the 1-D model. An inverse transform gives the complex surface ratio on the grid.

Extension and padding (documented choices)
------------------------------------------
* No-data pixels (hole, background, pixels without strain) take the value of the nearest
  pixel with data (OpenCV's labelled distance transform), so the fields are continuous across a
  no-data boundary and carry no artificial step. The model cannot know the real boundary
  condition there: :func:`lateral_edge_mask` flags what lies within a diffusion length.
* The grid is enlarged to an odd FFT-friendly size (factors 3, 5, 7: no Nyquist bin, see
  the kernel) by at least ``2 * pad_lengths`` in-plane diffusion lengths along each axis;
  the added band is a raised-cosine blend from the last row (column) to the first, so the
  periodic continuation of the fields is continuous and the far side of the field, at
  least ``2 * pad_lengths`` diffusion lengths away through the band, does not wrap onto
  the near side.

:mod:`fusion.mechanics._lateral_reach` says where the model can be trusted and what it
resolves.

Geometry
--------
``pixel_size`` is the size of an infrared pixel on the specimen in m (square pixels,
columns along specimen x, rows along -y: the camera's rows run down), or a (2, 2) matrix
whose columns are the specimen-frame vectors (m) of one step along the grid's x (column
index) and y (row index). A registration's local Jacobian gives it for a rotated,
sheared or flipped view: the conductivity tensors are mapped onto the grid,
``K_grid = A^-1 K A^-T``.

Complex values follow the project's convention (peak-to-peak, relative to the load
fundamental; a delayed response has a negative angle, see :func:`fusion.mechanics.phase_lag`).

References
----------
Carslaw, H. S. & Jaeger, J. C., *Conduction of Heat in Solids*, 2nd ed., Oxford, 1959:
periodic heating (ch. 2, sec. 2.6), composite solids (ch. 3), anisotropic solids (ch. 1:
the conductivity tensor and its principal axes). Bracewell, R. N., *The Fourier Transform
and Its Applications*, 3rd ed., McGraw-Hill, 2000 (discrete transforms, wrap-around).
"""

from __future__ import annotations

import math
import os
import queue
from concurrent.futures import ThreadPoolExecutor
from numbers import Real

import numpy as np

from ._heat import _check_h, _layer_arrays

__all__ = ["lateral_weights", "lateral_response", "lateral_layer_response"]

# An infrared pixel on a specimen: a micrometre (microscope) to a centimetre (a far view of a
# large part); outside, a unit slip (mm given as m).
_PIXEL_RANGE = (1e-7, 0.05)
# Padded grids beyond this many points are a frequency far below what the field can resolve.
_MAX_PADDED = 1 << 26


def _check_frequency(frequency) -> float:
    if isinstance(frequency, bool) or not (isinstance(frequency, Real) and math.isfinite(frequency)
                                           and frequency > 0):
        raise ValueError(f"frequency must be one positive loading frequency in Hz, got {frequency!r}")
    return float(frequency)


def _in_plane(layers):
    """(N, 2, 2) in-plane conductivity tensors, specimen frame, checked positive definite."""
    out = []
    for layer in layers:
        for attr in ("conductivity_along", "conductivity_across"):
            v = getattr(layer, attr)
            if v is not None and not (isinstance(v, Real) and not isinstance(v, bool)
                                      and math.isfinite(v) and v > 0):
                raise ValueError(f"layer {layer.name!r}: {attr} must be a positive W/(m K), got {v!r}")
        if not (isinstance(layer.fibre_angle, Real) and math.isfinite(layer.fibre_angle)):
            raise ValueError(f"layer {layer.name!r}: fibre_angle must be finite degrees, got "
                             f"{layer.fibre_angle!r}")
        out.append(layer.in_plane_conductivity)
    return np.stack(out)


def _layer_data(layers):
    layers = list(layers)
    d, rc, k3, coef = _layer_arrays(layers)
    return layers, d, rc, k3, coef, _in_plane(layers)


def _pixel_axes(pixel_size) -> np.ndarray:
    """(2, 2) matrix A, specimen metres per grid step: columns for the x and y grid axes."""
    if isinstance(pixel_size, Real) and not isinstance(pixel_size, bool):
        p = float(pixel_size)
        if not (math.isfinite(p) and _PIXEL_RANGE[0] <= p <= _PIXEL_RANGE[1]):
            raise ValueError(f"pixel_size {pixel_size!r} m is not an infrared pixel on a specimen "
                             f"({_PIXEL_RANGE[0]:g} to {_PIXEL_RANGE[1]:g} m); give metres, e.g. 0.2e-3")
        return np.array([[p, 0.0], [0.0, -p]])
    a = np.asarray(pixel_size, dtype=float)
    if a.shape != (2, 2) or not np.all(np.isfinite(a)):
        raise ValueError(f"pixel_size must be a size in m or a finite (2, 2) matrix of m per grid "
                         f"step, got {pixel_size!r}")
    lengths = np.hypot(a[0], a[1])
    det = abs(np.linalg.det(a))
    if not (np.all((lengths >= _PIXEL_RANGE[0]) & (lengths <= _PIXEL_RANGE[1]))
            and det > 1e-3 * lengths.prod()):
        raise ValueError(f"pixel_size matrix {a.tolist()!r}: its columns must be the specimen-frame "
                         f"steps (m) of the grid axes, {_PIXEL_RANGE[0]:g} to {_PIXEL_RANGE[1]:g} m "
                         "long and not parallel")
    return a


def _grid_tensors(k_spec, axes):
    """In-plane tensors on the grid, ``A^-1 K A^-T`` (W/(m K) px2/m2)."""
    inv = np.linalg.inv(axes)
    return np.einsum("ab,nbc,dc->nad", inv, k_spec, inv)


# ---------------------------------------------------------------- per wavevector
def _weights(d, rc, k3, quad, omega, hf, hb):
    """Weights (P, N) of each layer's source spectrum in the surface spectrum.

    ``quad`` (P, N): ``q.K_k q`` of every wavevector and layer in W/(m3 K). The recursion of
    :func:`fusion.mechanics._heat._weights` with the generalised exponent, times ``g_k``.
    """
    cap = omega * rc[None, :]
    a = quad + 1j * cap
    lam = np.sqrt(a / k3[None, :])
    Z = k3[None, :] * lam
    x = lam * d[None, :]
    e = np.exp(-x)
    e2 = e * e
    small = np.abs(x) < 0.25
    T = np.where(small, np.tanh(np.where(small, x, 0.0)), (1.0 - e2) / (1.0 + e2))
    S = 2.0 * e / (1.0 + e2)
    g = 1j * cap / a
    P, N = Z.shape
    Y_b = np.full(P, hb, dtype=complex)
    D = np.empty((P, N), dtype=complex)
    own = np.empty((P, N), dtype=complex)
    for j in range(N - 1, -1, -1):
        inv = 1.0 / (Z[:, j] + Y_b * T[:, j])
        Y_t = Z[:, j] * (Z[:, j] * T[:, j] + Y_b) * inv
        D[:, j] = Z[:, j] * S[:, j] * inv
        own[:, j] = D[:, j] * Y_b - Y_t
        Y_b = Y_t
    prefix = np.ones((P, N), dtype=complex)
    if N > 1:
        prefix[:, 1:] = np.cumprod(D[:, :-1], axis=1)
    return -(prefix * own) * g / (Y_b + hf)[:, None]


def lateral_weights(layers, frequency, wavevectors, *, convection_front=0.0, convection_back=0.0):
    """Complex weight of each layer's source in the surface response, per wavevector.

    Parameters
    ----------
    layers : sequence of ThermalLayer
        Viewed face first, with their in-plane conductivities.
    frequency : float
        Loading frequency in Hz.
    wavevectors : (P, 2) array_like
        ``(q_x, q_y)`` in rad/m in the specimen frame (a source field ``cos(q . r)``).
    convection_front, convection_back : float
        Heat-transfer coefficients of the faces in W/(m2 K); 0 is adiabatic.

    Returns
    -------
    (P, N) complex ndarray
        ``W`` with surface spectrum ``sum_k W[p, k] theta_ad,k(q_p)`` (dimensionless). At
        ``q = 0`` the weights of the 1-D model (:func:`fusion.mechanics.surface_weights`);
        ``W(q) = W(-q)``.

    Notes
    -----
    For one isotropic layer with adiabatic faces and a source uniform through the
    thickness the weight is ``i omega / (i omega + kappa |q|**2)`` (kappa = k / rho c), the
    periodic solution of Carslaw & Jaeger (1959), ch. 2.

    Examples
    --------
    >>> import numpy as np
    >>> from fusion.mechanics import ThermalLayer
    >>> slab = [ThermalLayer("resin", 1e-3, 1200.0, 1000.0, 0.2, [1.0, 0.0, 0.0])]
    >>> w = lateral_weights(slab, 1.0, [[0.0, 0.0], [1e3, 0.0]])
    >>> kappa = 0.2 / 1.2e6
    >>> bool(np.allclose(w[:, 0], [1.0, 2j * np.pi / (2j * np.pi + kappa * 1e6)]))
    True
    """
    _, d, rc, k3, _, k_in = _layer_data(layers)
    omega = 2.0 * math.pi * _check_frequency(frequency)
    hf = _check_h(convection_front, "convection_front")
    hb = _check_h(convection_back, "convection_back")
    q = np.asarray(wavevectors, dtype=float)
    if q.ndim != 2 or q.shape[1] != 2 or not np.all(np.isfinite(q)):
        raise ValueError(f"wavevectors must be a finite (P, 2) array of (q_x, q_y) in rad/m, got shape {q.shape}")
    quad = np.einsum("pa,nab,pb->pn", q, k_in, q)
    return _weights(d, rc, k3, quad, omega, hf, hb)


# ---------------------------------------------------------------- maps
def _valid_mask(valid, finite):
    """The pixels with data: ``valid`` checked against the finite values, or the finite ones."""
    if valid is None:
        ok = finite
    else:
        ok = np.asarray(valid)
        if ok.shape != finite.shape:
            raise ValueError(f"valid must have the map shape {finite.shape}, got {ok.shape}")
        if ok.dtype != bool:
            raise ValueError(f"valid must be a boolean map, got dtype {ok.dtype}")
        bad = ok & ~finite
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise ValueError(f"{int(bad.sum())} valid pixel(s) hold NaN or infinite values (first at "
                             f"row {r}, column {c}); mark them invalid or fill them")
    if not ok.any():
        raise ValueError("no pixel holds data: the lateral model needs at least one valid pixel")
    return ok


def _fill_nearest(data, valid):
    """No-data pixels of ``data`` (C, Y, X) take the value of the nearest valid pixel, in place.

    The nearest pixel comes from OpenCV's labelled distance transform (5 x 5 chamfer
    metric: within a pixel of the exact Euclidean nearest, at a tenth of its cost), run on
    the box around the no-data pixels and two pixels more: the 5 x 5 mask reaches no
    further, so the box gives the whole image's answer at a fraction of its cost.
    """
    import cv2

    rows = np.flatnonzero(~valid.all(axis=1))
    cols = np.flatnonzero(~valid.all(axis=0))
    y0, x0 = max(rows[0] - 2, 0), max(cols[0] - 2, 0)
    box = valid[y0:rows[-1] + 3, x0:cols[-1] + 3]
    _, labels = cv2.distanceTransformWithLabels((~box).astype(np.uint8), cv2.DIST_L2, 5,
                                                labelType=cv2.DIST_LABEL_PIXEL)
    hole = np.flatnonzero(~box)
    lab = labels.ravel()[hole]
    # OpenCV numbers the valid pixels from 1 in raster order; checked, else mapped one by one
    src = np.flatnonzero(box)[lab - 1]
    if not np.array_equal(labels.ravel()[src], lab):
        order = np.empty(int(labels.max()) + 1, dtype=np.intp)
        every = np.flatnonzero(box)
        order[labels.ravel()[every]] = every
        src = order[lab]
    nx = box.shape[1]
    hy, hx = np.divmod(hole, nx)
    sy, sx = np.divmod(src, nx)
    data[:, y0 + hy, x0 + hx] = data[:, y0 + sy, x0 + sx]


def _blend(n_pad):
    t = (np.arange(n_pad) + 1.0) / (n_pad + 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * t))      # 1 at the last data line -> 0 at the first


def _padded_fields(fields, valid, shape, buffer=None):
    """Fields (C, Y, X) on the (NY, NX) grid, filled and blended, and the mask of data.

    Data at the origin, no-data pixels filled from the nearest valid pixel, then a
    raised-cosine band from the last row (column) to the first. ``buffer``: float64 memory
    of at least C NY NX values to hold them (default: new).
    """
    from ._lateral_kernel import blend_margins, place_fields

    C, ny, nx = fields.shape
    NY, NX = shape
    out = np.empty((C, NY, NX)) if buffer is None else buffer[:C * NY * NX].reshape(C, NY, NX)
    data = out[:, :ny, :nx]
    ok = _valid_mask(valid, place_fields(fields if fields.dtype == np.float64 else fields.astype(float), out))
    if not ok.all():
        _fill_nearest(data, ok)
    blend_margins(out, ny, nx, _blend(NX - nx), _blend(NY - ny))
    return out, ok


def _odd_fast_len(n):
    """Smallest odd length >= n with factors 3, 5, 7 only: fast transforms, no Nyquist bin."""
    best = None
    p3 = 1
    while p3 < 3 * n:
        p5 = p3
        while p5 < 3 * n:
            p7 = p5
            while p7 < 3 * n:
                if p7 >= n and (best is None or p7 < best):
                    best = p7
                p7 *= 7
            p5 *= 5
        p3 *= 3
    return best


def _padded_shape(shape, k_grid, rc, omega, pad_lengths):
    if isinstance(pad_lengths, bool) or not (isinstance(pad_lengths, Real) and 0 <= pad_lengths < 1e3):
        raise ValueError(f"pad_lengths must be a number of diffusion lengths >= 0, got {pad_lengths!r}")
    if pad_lengths == 0:
        return tuple(shape)
    out = []
    for axis, n in zip((1, 0), shape):          # grid rows are y (axis index 1 of K_grid)
        mu = float(np.max(np.sqrt(2.0 * k_grid[:, axis, axis] / (rc * omega))))
        width = max(2 * math.ceil(pad_lengths * mu), 8)
        out.append(_odd_fast_len(n + width))
    if out[0] * out[1] > _MAX_PADDED:
        raise ValueError(f"the lateral model at this frequency needs a padded grid of {out[0]} x {out[1]} "
                         "points: the in-plane diffusion length is far larger than the field; use a higher "
                         "frequency or the through-thickness model")
    return tuple(out)


def _types(d, rc, k3, k_grid):
    """Distinct layer types: index of each layer, the mirror of each type and the per-type arrays.

    The types are closed under ``kxy -> -kxy`` (a type at ``(qx, -qy)`` is its mirror at
    ``(qx, qy)``): a mirror no layer has is added.
    """
    keys, kind = {}, []
    for j in range(d.size):
        kxy = k_grid[j, 0, 1]
        # a cross term at rounding level (cos 90 deg is not 0 in floating point) is none: the
        # layer is then its own mirror and the rows ky and -ky share all its work
        if abs(kxy) <= 1e-14 * math.sqrt(k_grid[j, 0, 0] * k_grid[j, 1, 1]):
            kxy = 0.0
        key = (d[j], rc[j], k3[j], k_grid[j, 0, 0], kxy, k_grid[j, 1, 1])
        kind.append(keys.setdefault(key, len(keys)))
    mirror = []
    for key in list(keys):
        mirror.append(keys.setdefault(key[:4] + (-key[4],) + key[5:], len(keys)))
    for key in list(keys)[len(mirror):]:
        mirror.append(keys[key[:4] + (-key[4],) + key[5:]])
    arr = np.array(list(keys), dtype=float).reshape(-1, 6)
    return (np.array(kind, dtype=np.int64), np.array(mirror, dtype=np.int64),
            [np.ascontiguousarray(arr[:, i]) for i in range(6)])


# Helper threads of the compiled kernel, made on first use and kept (a forked child has none).
_HELPERS: ThreadPoolExecutor | None = None


def _forget_helpers():
    global _HELPERS
    _HELPERS = None


os.register_at_fork(after_in_child=_forget_helpers)


def _run_blocks(work, n_items, threads, per_block):
    """``work(start, stop)`` over ``range(n_items)`` in blocks, on this thread and ``threads - 1`` helpers.

    Blocks are handed out one at a time and this thread takes its share; a helper that has
    not started when the blocks run out is cancelled, so a core busy with other work holds
    the result up by a block at most (a fixed split would wait for its whole share).
    """
    global _HELPERS
    blocks = queue.SimpleQueue()
    for start in range(0, n_items, per_block):
        blocks.put(start)

    def run():
        while True:
            try:
                start = blocks.get_nowait()
            except queue.Empty:
                return
            work(start, min(start + per_block, n_items))

    futures = []
    if threads > 1:
        if _HELPERS is None:
            _HELPERS = ThreadPoolExecutor(max(1, (os.cpu_count() or 2) - 1), thread_name_prefix="fusion-lateral")
        futures = [_HELPERS.submit(run) for _ in range(threads - 1)]
    run()
    for future in futures:
        if not future.cancel():
            future.result()


def _solve(layers, fields, coef_fields, frequency, *, pixel_size, valid, convection_front,
           convection_back, pad_lengths):
    """Complex surface response (Y, X) for source fields (C, Y, X) and coefficients (N, C).

    ``coef_fields`` None: the layers' own adiabatic coefficients (the fields are the strains).
    """
    import numba
    from scipy import fft

    from ._lateral_kernel import surface_spectrum

    layers, d, rc, k3, coef, k_in = _layer_data(layers)
    if coef_fields is None:
        coef_fields = coef
    omega = 2.0 * math.pi * _check_frequency(frequency)
    hf = _check_h(convection_front, "convection_front")
    hb = _check_h(convection_back, "convection_back")
    axes = _pixel_axes(pixel_size)
    k_grid = _grid_tensors(k_in, axes)
    shape = fields.shape[1:]
    NY, NX = _padded_shape(shape, k_grid, rc, omega, pad_lengths)
    # One buffer holds the padded fields, their half spectra, then (over the fields, no
    # longer needed) the full spectrum of the response and the response: fresh memory costs
    # a page fault per page on first touch, and separate large arrays freed together are
    # handed back to the system, to fault again on the next call. The transforms along x
    # write into it (NumPy's take an output; rows shared among the threads), those along y
    # work in place.
    C = fields.shape[0]
    n_real = max(C, 2) * NY * NX
    buffer = np.empty(n_real + 2 * C * NY * (NX // 2 + 1))
    padded, _ = _padded_fields(fields, valid, (NY, NX), buffer)
    spec = buffer[n_real:].view(complex).reshape(C, NY, NX // 2 + 1)
    workers = max(1, numba.get_num_threads())

    def along_x(first, end):
        np.fft.rfft(padded[:, first:end], axis=2, out=spec[:, first:end])

    _run_blocks(along_x, NY, workers, max(1, NY // (4 * workers)))
    spec = fft.fft(spec, axis=1, workers=workers, overwrite_x=True)
    full = buffer[:2 * NY * NX].view(complex).reshape(NY, NX)
    qy = 2.0 * np.pi * np.fft.fftfreq(NY)
    qx = 2.0 * np.pi * np.fft.rfftfreq(NX)
    kind, mirror, (td, trc, tk3, kxx, kxy, kyy) = _types(d, rc, k3, k_grid)
    sources, source_of = np.unique(np.asarray(coef_fields, dtype=float), axis=0, return_inverse=True)
    source_of = source_of.ravel().astype(np.int64)
    sources = np.ascontiguousarray(sources)

    def rows(first, end):                         # the rows p and NY - p of pairs first:end
        surface_spectrum(qx, qy, kind, mirror, td, trc, tk3, kxx, kxy, kyy, source_of, sources, omega, hf, hb,
                         NX % 2 == 0, spec, full, first, end)

    n_pairs = NY // 2 + 1
    _run_blocks(rows, n_pairs, workers, max(1, n_pairs // (16 * workers)))
    ny, nx = shape
    return fft.ifft2(full, workers=workers, overwrite_x=True)[:ny, :nx]


def lateral_response(layers, strain_ranges, frequency, *, pixel_size, valid=None, convection_front=0.0,
                     convection_back=0.0, pad_lengths=3.0):
    """Complex surface dT/T0 of the layered plate with heat flowing along the surface too.

    Parameters
    ----------
    layers : sequence of ThermalLayer
        Viewed face first (:func:`fusion.mechanics.thermal_layers`); each layer's adiabatic
        coefficients and in-plane conductivities.
    strain_ranges : (Y, X, 3) ndarray
        (d eps_xx, d eps_yy, d gamma_xy) on the infrared grid, specimen frame, peak-to-peak;
        membrane strain, the same in every layer. NaN where there is no data.
    frequency : float
        Loading frequency in Hz.
    pixel_size : float or (2, 2) array_like
        Infrared pixel on the specimen in m, or the grid steps as specimen-frame vectors
        (module docstring, Geometry).
    valid : (Y, X) bool ndarray, optional
        Pixels with data (default: where the three strains are finite). The others are
        filled from the nearest valid pixel (module docstring).
    convection_front, convection_back : float
        W/(m2 K); 0 (default) is an adiabatic face.
    pad_lengths : float
        Padding in in-plane diffusion lengths (default 3; the band added to each axis is
        twice that). 0 treats the fields as periodic over the grid (no padding).

    Returns
    -------
    (Y, X) complex ndarray
        Surface dT/T0: ``Re`` is the in-phase ratio the lock-in's signed dT/T0 measures,
        the phase lag is :func:`fusion.mechanics.phase_lag`. Values at no-data pixels are
        those of the extended fields (mask them).

    Notes
    -----
    Three real 2-D transforms of the strain maps, the layered solution at every
    wavevector (compiled, parallel over rows, layers of one kind computed once), one
    complex inverse transform. A uniform field gives :func:`fusion.mechanics.model_response`
    exactly (the ``q = 0`` term); near a no-data boundary see :func:`lateral_edge_mask`.

    References
    ----------
    Carslaw & Jaeger, *Conduction of Heat in Solids*, 1959, ch. 1-3.

    Examples
    --------
    A uniform strain gives the through-thickness model's value everywhere:

    >>> import numpy as np
    >>> from fusion.mechanics import ThermalLayer, model_response, transfer_coefficients
    >>> ply = ThermalLayer("ply", 0.25e-3, 1600.0, 900.0, 0.6, [-2e-3, -9e-3, 0.0],
    ...                    conductivity_along=7.0, conductivity_across=0.6, fibre_angle=30.0)
    >>> resin = ThermalLayer("resin", 50e-6, 1200.0, 1100.0, 0.2, [-0.25, -0.25, 0.0])
    >>> e = np.zeros((20, 24, 3)); e[..., 1] = 2e-3
    >>> r = lateral_response([resin, ply], e, 5.0, pixel_size=0.2e-3)
    >>> ref, _ = model_response(transfer_coefficients([resin, ply], [5.0])[0], e[0, 0])
    >>> bool(np.allclose(r.real, ref, rtol=1e-12, atol=0))
    True
    """
    e = np.asarray(strain_ranges)
    if e.ndim != 3 or e.shape[-1] != 3 or e.dtype.kind not in "fiu":
        raise ValueError(f"strain_ranges must be a real (Y, X, 3) array of (d eps_xx, d eps_yy, d gamma_xy), "
                         f"got shape {e.shape} dtype {e.dtype}")
    return _solve(layers, np.moveaxis(e, -1, 0), None, frequency, pixel_size=pixel_size, valid=valid,
                  convection_front=convection_front, convection_back=convection_back,
                  pad_lengths=pad_lengths)


def lateral_layer_response(layers, sources, frequency, *, pixel_size, valid=None, convection_front=0.0,
                           convection_back=0.0, pad_lengths=3.0):
    """Complex surface dT/T0 for given adiabatic maps of every layer.

    Parameters
    ----------
    layers : sequence of ThermalLayer
        Viewed face first (their ``coefficients`` are not used).
    sources : (N, Y, X) ndarray
        Adiabatic dT/T0 of each layer on the grid (dimensionless); NaN where there is no data.
    frequency, pixel_size, valid, convection_front, convection_back, pad_lengths
        As :func:`lateral_response` (``valid`` defaults to where every layer's map is finite).

    Returns
    -------
    (Y, X) complex ndarray
        Surface dT/T0, as :func:`lateral_response`.

    Notes
    -----
    One transform per layer instead of three for the strains: for sources that are not
    linear in one strain field (a layer-wise load, a through-thickness gradient).
    """
    layers = list(layers)
    s = np.asarray(sources)
    if s.ndim != 3 or s.shape[0] != len(layers) or s.dtype.kind not in "fiu":
        raise ValueError(f"sources must be a real (N, Y, X) array with one map per layer ({len(layers)}), "
                         f"got shape {s.shape}")
    return _solve(layers, s, np.eye(len(layers)), frequency, pixel_size=pixel_size,
                  valid=valid, convection_front=convection_front, convection_back=convection_back,
                  pad_lengths=pad_lengths)
